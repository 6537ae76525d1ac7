"""A chip's coupled pairs as they sit idle: the static ZZ of each (exact diagonalisation of
the pair's own static Hamiltonian), written to ``chip-pairs.csv``, ``chip.md`` and the page
(README, "Chips")."""

from __future__ import annotations

from pathlib import Path

from shaper.io import atomic
from shaper.recipe.chip import Chip


def pair_zz(chip: Chip) -> list[dict]:
    """The static ZZ of every coupled pair at rest (flux at its idle point, drives off), by
    exact diagonalisation of the pair's static Hamiltonian with its charge coupling and
    the chip's levels (:func:`shaper.physics.transmons.static_zz`; README, "Chips"): the
    pair's system straight from the chip's tables, no pulse."""
    from shaper.errors import InputError
    from shaper.physics.transmons import static_zz
    from shaper.recipe.chip_recipes import static_pair
    from shaper.recipe.models import read_system
    from shaper.recipe.schema import _Reader

    out = []
    for a, b, strength in chip.couplings:
        table = static_pair(chip, a, b, strength)
        system = read_system(_Reader({"system": table}, chip.path), table)
        try:
            zz = static_zz(system.lab.static, system.dims)
        except InputError:
            zz = None  # hybridised at rest: no ZZ to speak of (said in the table)
        out.append({"pair": f"{a}-{b}", "strength": strength,
                    "levels": "x".join(map(str, system.dims)), "static_zz_hz": zz})
    return out


def _khz(zz_hz: float | None) -> str:
    return "hybridised" if zz_hz is None else f"{zz_hz / 1e3:.1f} kHz"


def write_pairs(out: Path, pairs: list[dict]) -> Path:
    """``chip-pairs.csv`` and a section of ``chip.md``: every coupled pair's static ZZ."""
    lines = ["pair,coupling,levels,static_zz_hz"] + [
        f"{p['pair']},{p['strength']},{p['levels']},"
        f"{'' if p['static_zz_hz'] is None else format(p['static_zz_hz'], '.6e')}"
        for p in pairs]
    path = out / "chip-pairs.csv"
    atomic.write_text(path, "\n".join(lines) + "\n")
    table = ["", "## Static ZZ of each coupled pair", "",
             "At rest (flux at its idle point, drives off), by exact diagonalisation of the "
             "pair's static Hamiltonian (charge coupling, the chip's levels); no other "
             "neighbour is modelled.", "", "| pair | coupling | levels | static ZZ |",
             "|---|---|---|---|"] + [
        f"| {p['pair']} | {p['strength']} | {p['levels']} | {_khz(p['static_zz_hz'])} |"
        for p in pairs]
    atomic.write_text(out / "chip.md", (out / "chip.md").read_text() + "\n".join(table) + "\n")
    return path


def task_of(chip: Chip, row):
    """The chip task a gate row comes from (its subject and its optimised parent)."""
    parent = row.derived_from or row.gate
    for task in chip.tasks:
        if task.subject == row.subject and task.parent.upper() == parent.upper():
            return task
    return None


def played_elsewhere(task, row, root: Path):
    """A single-qubit gate's exported file played on the other recipe of its task
    (README, "Chips: neighbours"): in its neighbourhood if it was optimised alone, alone
    if it was optimised in its neighbourhood. ``(where, Playback)`` with ``where`` one of
    ``"near"``, ``"alone"``; None for a pair's gate or a qubit without neighbours."""
    if task is None or (task.near is None and task.alone is None):
        return None
    where, raw = ("near", task.near) if task.near is not None else ("alone", task.alone)
    return where, _playback(raw, row, root)


def _playback(raw: dict, row, root: Path, **verdict):
    """The row's file on ``raw`` (its target the row's gate; ``verdict`` keys over the
    recipe's own)."""
    from shaper.io.waveio import read_waveform
    from shaper.jobs.playback import Playback
    from shaper.recipe import load_recipe

    raw = {**raw, "gate": {**raw["gate"], "target": row.gate}}
    if verdict:
        raw["verdict"] = {**raw.get("verdict", {}), **verdict}
    return Playback(load_recipe(raw), read_waveform(root / row.waveform))


def with_neighbours(task, row, root: Path, where=None) -> None:
    """Give a single-qubit gate row of ``task`` both figures, alone and with its
    neighbours: its own verdict is one of them, its file played on the task's other
    recipe the other (each the verdict's most faithful figure there), and the lab frame
    beside its neighbours (:func:`near_lab`). The figures beside its neighbours, rotating
    and lab frame, are judged figures in either ``[gates] neighbours`` mode (with the
    alone verdict when it was optimised alone): the row's ``infidelity`` and ``leakage``
    become the worst of them, ``judged_on`` says which, and a miss among them is a miss
    (:func:`judge_beside`). Runs in the task's worker (:func:`shaper.jobs.chip.run_task`):
    the chip's summary only reads the rows. ``where``: where a miss's next steps run."""
    found = played_elsewhere(task, row, root)
    if found is None:
        return
    where_played, playback = found
    infidelity, leakage, basis = playback.trusted()
    own = {"infidelity": row.infidelity, "leakage": row.leakage, "basis": row.judged_on}
    if where_played == "near":  # optimised alone: its own verdict is the alone figure
        row.alone_infidelity, row.alone_leakage = row.infidelity, row.leakage
        row.neighbours_infidelity, row.neighbours_leakage = infidelity, leakage
        near_rotating = {"infidelity": infidelity, "leakage": leakage, "basis": basis}
        idle = playback.idle
    else:  # optimised beside them: its own verdict is there, alone is for information
        row.neighbours_infidelity, row.neighbours_leakage = row.infidelity, row.leakage
        row.alone_infidelity, row.alone_leakage = infidelity, leakage
        near_rotating, idle = own, None
        budget = playback.open_system  # T1/T2 of the qubit alone (closed neighbourhood)
        if budget is not None:
            row.coherent_error = budget["coherent_error"]
            row.incoherent_error = budget["incoherent_error"]
    near = near_lab(task, row, root)
    lab = near.lab
    row.neighbours_lab_infidelity, row.neighbours_lab_leakage = lab.infidelity, lab.leakage
    judged = ([("alone", own)] if where_played == "near" else []) + [
        ("beside its neighbours, " + near_rotating["basis"], near_rotating),
        ("beside its neighbours, " + near.trusted()[2],
         {"infidelity": lab.infidelity, "leakage": lab.leakage})]
    judge_beside(row, near.recipe, judged, {
        "mode": "check" if where_played == "near" else "optimise",
        "rotating": {k: near_rotating[k] for k in ("infidelity", "leakage")},
        "lab_frame": {"infidelity": lab.infidelity, "leakage": lab.leakage},
        "idle": idle}, where)


def near_lab(task, row, root: Path):
    """The row's file beside its neighbours in the lab frame (worst carrier phase), at the
    neighbourhood's own levels: the chip's neighbourhood verdict stays in the rotating
    frame (one level more), since the lab frame of every sweep point would cost 15-45 s
    each (README, "Chips: neighbours"); this is that figure for the file kept."""
    raw = task.near if task.near is not None else task.recipe
    return _playback(raw, row, root, lab_frame="on", extra_levels=0)


def judge_beside(row, recipe, judged: list, beside: dict, where=None) -> None:
    """A single-qubit chip gate judged on every figure it has (``judged``: ``(what,
    {"infidelity", "leakage"})``, ``what`` its model in words): the row's figures become
    the worst of them (``judged_on`` names where each comes from), and any figure over a
    target is a miss, said in ``missed`` with the model and explained in ``why`` from the
    ``beside`` block (:func:`shaper.jobs.explain.explain`)."""
    from shaper.jobs.explain import explain

    limits = (recipe.optimizer.target_infidelity, recipe.optimizer.target_leakage)
    worst_i = max(judged, key=lambda item: item[1]["infidelity"])
    worst_l = max(judged, key=lambda item: item[1]["leakage"])
    row.infidelity, row.leakage = worst_i[1]["infidelity"], worst_l[1]["leakage"]
    row.judged_on = (f"infidelity {worst_i[0]}; leakage {worst_l[0]}"
                     if worst_i[0] != worst_l[0] else worst_i[0])
    missed = [f"{name} {what}" for what, fig in judged
              for name, limit in zip(("infidelity", "leakage"), limits, strict=True)
              if fig[name] > limit]
    if not missed:
        return
    report = {"targets": {"met": False, "infidelity": limits[0], "leakage": limits[1],
                          "missed": []}, "infidelity": row.infidelity,
              "leakage": row.leakage, "duration_s": row.duration_s,
              "beside_neighbours": beside,
              "trust": {"rotating_frame": beside["rotating"], "idle": beside["idle"],
                        "infidelity": row.infidelity, "leakage": row.leakage}}
    alone_missed = not row.met
    row.met = False
    row.missed = "; ".join(([row.missed] if alone_missed and row.missed else [])
                           + [m for m in missed if not m.startswith(("infidelity alone",
                                                                     "leakage alone"))])
    if not alone_missed:  # the alone verdict's explanation stays where it missed alone
        row.why = " ".join(r.line() for r in explain(report, where=where))
