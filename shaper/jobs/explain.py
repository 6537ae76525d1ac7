"""Why a result missed its targets and what to try next, read from its report.

One explanation layer for every command that judges a file (optimize, export, check, sweep,
gate sets, chips): :func:`explain` reads the figures a report already holds (the
optimiser's own, the exported file's in the optimiser's model, with more levels, in the lab
frame, every ensemble member, the run's own rate against an export's) and names the first
place, in that order, where the targets were lost, with the concrete next step: a command
or a recipe key (README, "When a result misses its targets"). Nothing is simulated here.
"""

from __future__ import annotations

from typing import NamedTuple

from shaper.recipe.models import levels_key

BUDGET_STOPS = ("iteration limit", "time limit")


class Reason(NamedTuple):
    cause: str  # a short name: budget, converged above the target, ensemble spread, ...
    why: str  # one sentence from the run's own numbers
    next: str  # what to run or change

    def line(self) -> str:
        return f"why: {self.why}. next: {self.next}"


def explain(report: dict, *, recipe: str = "RECIPE") -> list[Reason]:
    """The reasons a report's targets were missed (empty when met), first cause first.

    ``recipe``: how to name the recipe in a suggested command (its path).
    """
    targets = report.get("targets") or {}
    if targets.get("met", True):
        return []
    limits = (targets.get("infidelity", 1.0), targets.get("leakage", 1.0))
    out = []
    if "at_run_rate" in report:  # an export: lost between the run and the new file?
        out += _export_reasons(report, limits, recipe)
        if out:
            return out
    own = report.get("before_quantisation")
    optimizer = report.get("optimizer")
    zz = _neighbours_reason(report, limits, recipe)
    if zz is not None:
        return [zz]
    if own is not None and optimizer is not None and _over(own, limits):
        return [_optimiser_reason(report, own, optimizer, limits, recipe)]
    found = _model_reasons(report, own, limits, recipe)
    if optimizer is not None and optimizer.get("stop_reason") in BUDGET_STOPS:
        # the optimiser's figures pass, but it ran out before reaching its margin: more
        # iterations buy some of the headroom the judged model takes away
        budget = _optimiser_reason(report, own or _figures(report), optimizer, limits, recipe)
        found = [r for r in found if r.cause != "other"] + [budget]
    return out + found


ROTATIONS = {"X": 0.5, "Y": 0.5, "-X": 0.5, "-Y": 0.5, "X/2": 0.25, "Y/2": 0.25,
             "-X/2": 0.25, "-Y/2": 0.25}  # rotation angle / 2 pi of a one-qubit gate


def speed_limit(recipe) -> Reason | None:
    """Said before the night, where a cheap bound exists: a one-qubit rotation by theta
    driven at Rabi frequency at most Omega takes at least theta / (2 pi Omega) (Rabi's
    resonant solution, the fastest rotation of a driven two-level system); a pulse
    shorter than that cannot reach the targets, whatever the optimiser does."""
    label = recipe.target.label.upper()
    channels = recipe.system.channels
    if label not in ROTATIONS or len(channels) != 1 or channels[0].kind != "iq" \
            or not recipe.target.is_gate:
        return None
    limit = recipe.limits_hz[channels[0].name]
    shortest = ROTATIONS[label] / limit if limit > 0 else float("inf")
    if recipe.duration_s >= shortest:
        return None
    return Reason("speed limit",
                  f"the {label} rotation at most {limit / 1e6:g} MHz of Rabi frequency takes at "
                  f"least {shortest * 1e9:.3g} ns; this pulse is {recipe.duration_s * 1e9:.3g} "
                  f"ns, so the targets are out of reach",
                  f"a pulse of at least {shortest * 1e9:.3g} ns (pulse.duration), or a higher "
                  f"pulse.max_rabi if the line allows it")


# the idle conditional phase explains a miss when it is at least this share of the error
IDLE_SHARE = 0.5


def _neighbours_reason(report, limits, recipe) -> Reason | None:
    """Beside spectators (``trust.idle``): the static ZZ's conditional phase over the
    pulse's duration, which virtual Z cannot undo, is most of the miss."""
    trust = report.get("trust") or {}
    idle = trust.get("idle")
    judged = _figures(trust if "infidelity" in trust else report)
    if not idle or judged.get("infidelity") is None or judged["infidelity"] <= limits[0] \
            or idle["infidelity"] < IDLE_SHARE * judged["infidelity"]:
        return None
    return Reason(
        "neighbours' ZZ",
        f"left idle for the same {idle['duration_s'] * 1e9:.3g} ns beside its neighbours, "
        f"the qubit loses infidelity {idle['infidelity']:.2e} to the static ZZ's "
        f"conditional phase (no frame update undoes it; the drive can refocus it, given "
        f"time); the gate reaches {_pair(judged)}",
        f"a longer pulse, room for the drive to refocus the conditional phase (shaper "
        f"sweep {recipe} --durations {_longer(report)}), or less ZZ on the chip (a weaker "
        f"coupling, a larger detuning)")


def _model_reasons(report, own, limits, recipe) -> list[Reason]:
    """Where the file loses its targets between the optimiser's model and the judged one:
    every cause that applies, the one furthest over the targets first."""
    targets = report.get("targets") or {}
    trust = report.get("trust") or {}
    rotating = trust.get("rotating_frame") or _figures(report)
    more, lab = trust.get("more_levels"), trust.get("lab_frame")
    found: list[tuple[float, Reason]] = []
    members = _ensemble_reason(report, limits, recipe)
    if members is not None:
        found.append((_excess(_worst(report["ensemble"]), limits), members))
    if _over(rotating, limits) and own is not None and not _over(own, limits):
        found.append((_excess(rotating, limits), Reason(
            "quantisation", f"the optimiser's samples reach {_pair(own)} but the exported "
                            f"file reaches {_pair(rotating)}",
            "more DAC bits (export.dac_bits), or check the export.granularity padding")))
    if more and _over(more, limits) and not _over(rotating, limits):
        levels, kept = more.get("levels", []), rotating.get("levels", [])
        found.append((_excess(more, limits), Reason(
            "levels", f"with {_levels(levels)} levels the same file reaches {_pair(more)} "
                      f"(with {_levels(kept)}: {_pair(rotating)}): the pulse leans on levels "
                      f"the model truncates",
            f"keep more levels ({_levels_key(report)} = {max(levels or [2])}) and optimise "
            f"again")))
    if lab and _over(lab, limits) and not _over(more or rotating, limits):
        found.append((_excess(lab, limits), Reason(
            "lab frame", f"with the drive's counter-rotating terms (lab frame, worst carrier "
                         f"phase) the file reaches {_pair(lab)}, in the rotating frame "
                         f"{_pair(more or rotating)}",
            f"a longer pulse (the error falls with duration: shaper sweep {recipe} "
            f"--durations {_longer(report)}), or optimise in the lab frame "
            f"(optimizer.lab_frame = true)")))
    if found:
        return [r for _, r in sorted(found, key=lambda item: -item[0])]
    return [Reason("other", "the judged figures miss the targets ("
                   + ", ".join(f"{m['name']} {m['value']:.2e} > {m['limit']:.2e}"
                               for m in targets.get("missed", [])) + ")",
                   f"shaper check {recipe} FILE --plots DIR shows where")]


def _worst(ensemble: dict) -> dict:
    return {"infidelity": max(ensemble["infidelity"]), "leakage": max(ensemble["leakage"])}


def _excess(fig: dict, limits) -> float:
    """How far over the targets: the larger of value / limit."""
    return max(fig["infidelity"] / max(limits[0], 1e-300), fig["leakage"] / max(limits[1],
                                                                                1e-300))


def _optimiser_reason(report, own, optimizer, limits, recipe) -> Reason:
    """The optimiser itself did not get there: its budget, or where it converged."""
    stop = optimizer.get("stop_reason", "")
    iterations = optimizer.get("iterations", 0)
    if stop in BUDGET_STOPS:
        more = f"--iterations {2 * iterations}" if stop == "iteration limit" else "--hours ..."
        return Reason("budget",
                      f"the optimiser stopped at its {stop} after {iterations} iterations, "
                      f"at {_pair(own)}",
                      f"a larger budget, going on from where it stopped: shaper optimize "
                      f"{recipe} --resume {more} (the same --out; or optimizer.max_iterations "
                      f"/ max_time)")
    members = _ensemble_reason(report, limits, recipe)
    if members is not None and not _over(_nominal(report), limits):
        return members
    starts = len(optimizer.get("starts") or []) or 1
    return Reason("converged above the target",
                  f"the optimiser stopped ({stop}) at {_pair(own)} after {iterations} "
                  f"iterations from {starts} start(s): the targets may be out of reach at "
                  f"{_duration(report)}",
                  f"a longer pulse (shaper sweep {recipe} --durations {_longer(report)} "
                  f"finds the shortest that passes), more starts (--starts 4), or looser "
                  f"targets")


def _ensemble_reason(report, limits, recipe) -> Reason | None:
    ensemble = report.get("ensemble")
    if not ensemble:
        return None
    worst = _worst(ensemble)
    if not _over(worst, limits):
        return None
    rule = (report.get("targets") or {}).get("ensemble_targets") or "every"
    mean = {"infidelity": sum(ensemble["infidelity"]) / len(ensemble["infidelity"]),
            "leakage": sum(ensemble["leakage"]) / len(ensemble["leakage"])}
    hint = "" if rule == "mean" or _over(mean, limits) else \
        " or judge the members' mean (optimizer.ensemble_targets = \"mean\", met here)"
    return Reason("ensemble spread",
                  f"the worst ensemble member reaches {_pair(worst)} at {_duration(report)} "
                  f"(nominal {_pair(_nominal(report))})",
                  f"a longer pulse (shaper sweep {recipe} --durations {_longer(report)}), "
                  f"a narrower ensemble (cost.ensemble_detunings / ensemble_scales){hint}")


def _export_reasons(report, limits, recipe) -> list[Reason]:
    """An export that misses where its run met: the resampling or the new instrument."""
    run, new = report["at_run_rate"], _figures(report)
    if _over(run, limits) or not _over((report.get("trust") or {}).get("rotating_frame")
                                       or new, limits):
        return []
    if report.get("resampling", "none") != "none" and not report["resampling"].startswith(
            "hold"):
        rate = report.get("sample_rate_hz", 0)
        return [Reason("resampling",
                       f"the run meets the targets at its own rate ({_pair(run)}); resampled "
                       f"({report['resampling']}) to {rate / 1e9:g} GS/s it reaches "
                       f"{_pair(new)}",
                       f"optimise at that rate, starting from this file: in a copy of "
                       f"{recipe}, pulse.sample_rate = \"{rate / 1e9:g} GS/s\" and "
                       f"optimizer.initial = the new {report.get('waveform', 'waveform')} "
                       f"(its path), then shaper optimize")]
    return [Reason("the new instrument",
                   f"the run meets the targets ({_pair(run)}); the new file reaches "
                   f"{_pair(new)} ({report.get('dac_bits')}-bit, IF "
                   f"{report.get('if_frequency_hz', 0) / 1e6:g} MHz)",
                   "more DAC bits (--bits), or optimise with the instrument's settings in "
                   "the recipe's [export]")]


def _figures(report: dict) -> dict:
    return {"infidelity": report.get("infidelity", 0.0), "leakage": report.get("leakage", 0.0)}


def _nominal(report: dict) -> dict:
    return report.get("before_quantisation") or _figures(report)


def _over(fig: dict | None, limits) -> bool:
    return bool(fig) and (fig["infidelity"] > limits[0] or fig["leakage"] > limits[1])


def _pair(fig: dict) -> str:
    return f"infidelity {fig['infidelity']:.2e}, leakage {fig['leakage']:.2e}"


def _levels(levels) -> str:
    return "x".join(str(n) for n in levels) or "?"


def _levels_key(report: dict) -> str:
    source = report.get("recipe")  # a run's report: the recipe; check's verdict: its name
    content = source.get("content") if isinstance(source, dict) else None
    return levels_key((content or {}).get("system") or {})


def _longer(report: dict) -> str:
    """A sweep from this duration to twice it, in whole nanoseconds."""
    seconds = report.get("duration_s")
    if not seconds:
        return "START:STOP:STEP"
    start = max(1, round(seconds * 1e9))
    step = max(1, round(start / 4))
    return f"{start}ns:{2 * start}ns:{step}ns"


def _duration(report: dict) -> str:
    seconds = report.get("duration_s")
    return f"{seconds * 1e9:.3g} ns" if seconds else "this duration"
