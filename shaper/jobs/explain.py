"""Why a result missed its targets and what to try next, read from its report.

One explanation layer for every command that judges a file (optimize, export, check, sweep,
gate sets, chips): :func:`explain` reads the figures a report already holds (the
optimiser's own in its model, the exported file's in the rotating frame, with more levels,
in the lab frame, every ensemble member, the run's own rate against an export's, a chip
gate's figures beside its neighbours, a check's scans) and names the first place, in that
order, where the targets were lost, with the concrete next step: commands that run as
printed where the user stands (:mod:`shaper.jobs.next_steps`) and the recipe keys to
change (README, "When a result misses its targets"). Nothing is simulated here.
"""

from __future__ import annotations

from shaper.jobs import next_steps as steps
from shaper.jobs.explain_files import export_reasons, scan_reasons
from shaper.jobs.next_steps import Step, Where
from shaper.jobs.reasons import (  # noqa: F401 (Reason, reason: the explanation's parts)
    Context,
    Reason,
    duration,
    figures,
    joined,
    levels_text,
    nominal,
    over,
    pair,
    reason,
    report_levels_key,
)

BUDGET_STOPS = ("iteration limit", "time limit")


def explain(report: dict, *, where: Where | dict | str | None = None,
            recipe: str | None = None, shortest_s: float | None = None) -> list[Reason]:
    """The reasons a report's targets were missed (empty when met), first cause first.

    ``where``: where the user stands (:class:`~shaper.jobs.next_steps.Where`; ``recipe``, a
    recipe path, is the older way to say an ``optimize`` of it). ``shortest_s``: the speed
    limit's shortest duration, below which no longer pulse is suggested.
    """
    targets = report.get("targets") or {}
    if targets.get("met", True):
        return []
    where = Where.of(where if where is not None else recipe)
    limits = (targets.get("infidelity", 1.0), targets.get("leakage", 1.0))
    context = Context(report, where, limits, shortest_s)
    if "at_run_rate" in report:  # an export: lost between the run and the new file?
        found = export_reasons(context)
        if found:
            return found
    own = report.get("before_quantisation")
    optimizer = report.get("optimizer")
    if optimizer is not None and optimizer.get("stop_reason") == "interrupted":
        return [reason("interrupted", f"the run was stopped (a signal) after "
                                      f"{optimizer.get('iterations', 0)} iterations, at "
                                      f"{pair(own or figures(report))} in the optimiser's "
                                      f"model", steps.resume(where))]
    for first in (_neighbours_reason, _beside_reason):
        found = first(context)
        if found is not None:
            return [found]
    if own is not None and optimizer is not None and over(own, limits):
        return [_optimiser_reason(context, own, optimizer)]
    scans = scan_reasons(context)  # a check's own scans name the cause where they can
    found = scans + [r for r in _model_reasons(context, own)
                     if not (scans and r.cause == "other")]
    if optimizer is not None and optimizer.get("stop_reason") in BUDGET_STOPS:
        # the optimiser's figures pass, but it ran out before reaching its margin: more
        # iterations buy some of the headroom the judged model takes away
        budget = _optimiser_reason(context, own or figures(report), optimizer)
        found = [r for r in found if r.cause != "other"] + [budget]
    return found


ROTATIONS = {"X": 0.5, "Y": 0.5, "-X": 0.5, "-Y": 0.5, "X/2": 0.25, "Y/2": 0.25,
             "-X/2": 0.25, "-Y/2": 0.25}  # rotation angle / 2 pi of a one-qubit gate


def shortest_duration(recipe) -> float | None:
    """The shortest a one-qubit rotation can be at the recipe's Rabi limit: theta / (2 pi
    Omega) (Rabi's resonant solution, the fastest rotation of a driven two-level system);
    None where no such bound applies."""
    label = recipe.target.label.upper()
    channels = recipe.system.channels
    if label not in ROTATIONS or len(channels) != 1 or channels[0].kind != "iq" \
            or not recipe.target.is_gate:
        return None
    limit = recipe.limits_hz[channels[0].name]
    return ROTATIONS[label] / limit if limit > 0 else float("inf")


def speed_limit(recipe, where: Where | None = None) -> Reason | None:
    """Said before the night, where a cheap bound exists (:func:`shortest_duration`): a
    pulse shorter than that cannot reach the targets, whatever the optimiser does."""
    shortest = shortest_duration(recipe)
    if shortest is None or recipe.duration_s >= shortest:
        return None
    where = where or Where(file=recipe.path or "RECIPE")
    label, limit = recipe.target.label.upper(), recipe.limits_hz[recipe.system.channels[0].name]
    longer = steps.longer(where, recipe.duration_s, shortest,
                          recipe.duration_s if where.command == "sweep" else None)
    return reason("speed limit",
                  f"the {label} rotation at most {limit / 1e6:g} MHz of Rabi frequency takes "
                  f"at least {shortest * 1e9:.3g} ns; this pulse is "
                  f"{recipe.duration_s * 1e9:.3g} ns, so the targets are out of reach",
                  joined(Step(f"a pulse of at least {shortest * 1e9:.3g} ns "
                              f"(pulse.duration)"), longer,
                         "a higher pulse.max_rabi if the line allows it"))


# the idle conditional phase explains a miss when it is at least this share of the error
IDLE_SHARE = 0.5


def _neighbours_reason(c: Context) -> Reason | None:
    """Beside spectators (``trust.idle``): the static ZZ's conditional phase over the
    pulse's duration, which virtual Z cannot undo, is most of the miss."""
    report = c.report
    trust = report.get("trust") or {}
    idle = trust.get("idle")
    judged = figures(trust if "infidelity" in trust else report)
    if not idle or judged.get("infidelity") is None or judged["infidelity"] <= c.limits[0] \
            or idle["infidelity"] < IDLE_SHARE * judged["infidelity"]:
        return None
    return reason(
        "neighbours' ZZ",
        f"left idle for the same {idle['duration_s'] * 1e9:.3g} ns beside its neighbours, "
        f"the qubit loses infidelity {idle['infidelity']:.2e} to the static ZZ's "
        f"conditional phase (no frame update undoes it; the drive can refocus it, given "
        f"time); the gate reaches {pair(judged)}",
        joined(Step(f"room for the drive to refocus the conditional phase, {c.longer().text}",
                    c.longer().commands),
               "less ZZ on the chip (a weaker coupling, a larger detuning)"))


def _beside_reason(c: Context) -> Reason | None:
    """A chip's single-qubit gate that meets its targets alone but not beside its
    coupled neighbours (``beside_neighbours``: the rotating and lab-frame figures there
    and whether it was optimised with them; README, "Chips: neighbours")."""
    beside = c.report.get("beside_neighbours")
    if not beside:
        return None
    missed = [(name, fig) for name, fig in (("rotating frame", beside.get("rotating")),
                                            ("lab frame, worst carrier phase",
                                             beside.get("lab_frame"))) if over(fig, c.limits)]
    if not missed:
        return None
    said = "; ".join(f"{name}: {pair(fig)}" for name, fig in missed)
    if beside.get("mode") == "check":
        return reason("beside its neighbours",
                      f"optimised alone it meets the targets alone, but beside its coupled "
                      f"neighbours (dressed basis) it reaches {said}",
                      joined(steps.edit_then(c.where, "set gates.neighbours = \"optimise\" "
                                                      "(optimise each gate beside them)",
                                             "beside"), c.longer()))
    lab_only = [name for name, _ in missed] == ["lab frame, worst carrier phase"]
    if lab_only:
        return reason("lab frame beside its neighbours",
                      f"made beside its neighbours in the rotating frame, it reaches {said} "
                      f"there with the drive's counter-rotating terms",
                      joined(c.longer(), _lab_model_step(c, "off")))
    return reason("beside its neighbours", f"beside its coupled neighbours it reaches {said}",
                  joined(c.longer(), "less ZZ on the chip (a weaker coupling, a larger "
                                     "detuning)"))


def _lab_model_step(c: Context, used: str | None) -> Step | str:
    """The optimiser's lab-frame model one step more faithful than ``used`` (none left
    after "exact": "")."""
    tried = {s.get("lab_frame") for s in c.report.get("escalation") or []}
    trust = c.report.get("trust") or {}
    if used == "off" and "corrected" not in tried and ("second_order" in trust
                                                        or c.where.command == "chip"):
        mode, words = "corrected", "the lab frame to second order, at about the rotating " \
                                   "frame's cost"
    elif used in ("off", "corrected") and "exact" not in tried:
        mode, words = "exact", "the exact lab frame in the loop (tens of times slower)"
    else:
        return ""
    return steps.edit_then(c.where, f"optimise in {words}: set "
                                    f"{c.key('optimizer.lab_frame')} = \"{mode}\"",
                           f"lab-{mode}")


def _model_reasons(c: Context, own) -> list[Reason]:
    """Where the file loses its targets between the optimiser's model and the judged one:
    every cause that applies, the one furthest over the targets first."""
    report, limits = c.report, c.limits
    targets = report.get("targets") or {}
    trust = report.get("trust") or {}
    rotating = trust.get("rotating_frame") or figures(report)
    more, lab = trust.get("more_levels"), trust.get("lab_frame")
    found: list[tuple[float, Reason]] = []
    members = _ensemble_reason(c)
    if members is not None:
        found.append((_excess(_worst(report["ensemble"]), limits), members))
    unquantised = rotating.get("unquantised") or own
    if over(rotating, limits) and unquantised is not None and not over(unquantised, limits):
        found.append((_excess(rotating, limits), reason(
            "quantisation", f"the optimiser's samples reach {pair(unquantised)} in the "
                            f"rotating frame but the exported file reaches {pair(rotating)}",
            _more_bits(c))))
    if more and over(more, limits) and not over(rotating, limits):
        levels, kept = more.get("levels", []), rotating.get("levels", [])
        found.append((_excess(more, limits), reason(
            "levels", f"with {levels_text(levels)} levels the same file reaches {pair(more)} "
                      f"(with {levels_text(kept)}: {pair(rotating)}): the pulse leans on levels "
                      f"the model truncates",
            _more_levels(c, max(levels or [2])))))
    if lab and over(lab, limits) and not over(more or rotating, limits):
        used = (own or {}).get("lab_frame") or (report.get("optimizer") or {}).get(
            "lab_frame") or c.where.lab_frame or "off"  # an older report: the rotating frame
        found.append((_excess(lab, limits), reason(
            "lab frame", f"with the drive's counter-rotating terms (lab frame, worst carrier "
                         f"phase) the file reaches {pair(lab)}, in the rotating frame "
                         f"{pair(more or rotating)}"
                         + (f" (the optimiser worked in {own['model']})"
                            if own and own.get("model") else ""),
            joined(c.longer(), _lab_model_step(c, used),
                   _more_levels(c, max(lab.get("levels") or [2]) + 1)
                   if used == "exact" else ""))))
    if found:
        return [r for _, r in sorted(found, key=lambda item: -item[0])]
    return [reason("other", "the judged figures miss the targets ("
                   + ", ".join(f"{m['name']} {m['value']:.2e} > {m['limit']:.2e}"
                               for m in targets.get("missed", [])) + ")",
                   steps.check_plots(c.where))]


def _more_levels(c: Context, levels: int) -> Step:
    key = c.key(report_levels_key(c.report))
    return steps.edit_then(c.where, f"keep more levels: set {key} = {levels}",
                           f"{levels}-levels")


def _more_bits(c: Context) -> Step:
    """More DAC bits: the run exported again (no optimising) where there is a run."""
    bits = ((((c.report.get("recipe") or {}).get("content") or {}).get("export") or {})
            .get("dac_bits") or c.report.get("dac_bits") or 16)
    wanted = min(32, int(bits) + 4)
    text = f"more DAC bits (export.dac_bits = {wanted})"
    if c.where.run and c.where.command != "export" and wanted > bits:
        return steps.step(f"{text}: the same pulse exported again, {{0}}",
                          steps.shaper("export", c.where.run, "--out",
                                       steps.fresh(c.where, f"{wanted}bit"), "--bits", wanted))
    return Step(text + ", or check the export.granularity padding")


def _worst(ensemble: dict) -> dict:
    return {"infidelity": max(ensemble["infidelity"]), "leakage": max(ensemble["leakage"])}


def _excess(fig: dict, limits) -> float:
    """How far over the targets: the larger of value / limit."""
    return max(fig["infidelity"] / max(limits[0], 1e-300), fig["leakage"] / max(limits[1],
                                                                                1e-300))


def _optimiser_reason(c: Context, own, optimizer) -> Reason:
    """The optimiser itself did not get there: its budget, or where it converged."""
    stop = optimizer.get("stop_reason", "")
    iterations = optimizer.get("iterations", 0)
    if stop in BUDGET_STOPS:
        return reason("budget",
                      f"the optimiser stopped at its {stop} after {iterations} iterations, "
                      f"at {pair(own)} in its own model",
                      steps.budget(c.where, stop, iterations, c.report.get("wall_time_s")))
    members = _ensemble_reason(c)
    if members is not None and not over(nominal(c.report), c.limits):
        return members
    starts = len(optimizer.get("starts") or []) or 1
    more_starts = steps.again(c.where, "--force", "--starts", max(4, 2 * starts)) \
        if c.where.command == "optimize" else None
    return reason("converged above the target",
                  f"the optimiser stopped ({stop}) at {pair(own)} after {iterations} "
                  f"iterations from {starts} start(s): the targets may be out of reach at "
                  f"{duration(c.report)}",
                  joined(c.longer(), steps.step("more starts: {0}", more_starts)
                         if more_starts else f"more starts ({c.key('optimizer.starts')})",
                         "looser targets"))


def _ensemble_reason(c: Context) -> Reason | None:
    report = c.report
    ensemble = report.get("ensemble")
    if not ensemble:
        return None
    worst = _worst(ensemble)
    if not over(worst, c.limits):
        return None
    rule = (report.get("targets") or {}).get("ensemble_targets") or "every"
    mean = {"infidelity": sum(ensemble["infidelity"]) / len(ensemble["infidelity"]),
            "leakage": sum(ensemble["leakage"]) / len(ensemble["leakage"])}
    hint = "" if rule == "mean" or over(mean, c.limits) else \
        " or judge the members' mean (optimizer.ensemble_targets = \"mean\", met here)"
    return reason("ensemble spread",
                  f"the worst ensemble member reaches {pair(worst)} at {duration(report)} "
                  f"(nominal {pair(nominal(report))})",
                  joined(c.longer(), f"a narrower ensemble (cost.ensemble_detunings / "
                                     f"ensemble_scales){hint}"))


