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


def with_neighbours(task, row, root: Path) -> None:
    """Give a single-qubit gate row of ``task`` both figures, alone and with its
    neighbours: its own verdict is one of them, its file played on the task's other
    recipe the other (each the verdict's most faithful figure there), and the lab frame
    beside its neighbours (:func:`near_lab`). A gate made beside its neighbours that
    misses there in the lab frame is not met, and says why. Runs in the task's worker
    (:func:`shaper.jobs.chip.run_task`): the chip's summary only reads the rows."""
    found = played_elsewhere(task, row, root)
    if found is None:
        return
    where, playback = found
    infidelity, leakage, _ = playback.trusted()
    if where == "near":
        row.neighbours_infidelity, row.neighbours_leakage = infidelity, leakage
    else:
        row.neighbours_infidelity, row.neighbours_leakage = row.infidelity, row.leakage
        row.alone_infidelity, row.alone_leakage = infidelity, leakage
        budget = playback.open_system  # T1/T2 of the qubit alone (closed neighbourhood)
        if budget is not None:
            row.coherent_error = budget["coherent_error"]
            row.incoherent_error = budget["incoherent_error"]
    near = near_lab(task, row, root)
    lab = near.lab
    row.neighbours_lab_infidelity, row.neighbours_lab_leakage = lab.infidelity, lab.leakage
    if where == "alone":
        _judge_lab(row, near)


def near_lab(task, row, root: Path):
    """The row's file beside its neighbours in the lab frame (worst carrier phase), at the
    neighbourhood's own levels: the chip's neighbourhood verdict stays in the rotating
    frame (one level more), since the lab frame of every sweep point would cost 15-45 s
    each (README, "Chips: neighbours"); this is that figure for the file kept."""
    raw = task.near if task.near is not None else task.recipe
    return _playback(raw, row, root, lab_frame="on", extra_levels=0)


def _judge_lab(row, near) -> None:
    """A gate made beside its neighbours judged again on its lab-frame figure there."""
    from shaper.jobs.explain import explain

    recipe, lab = near.recipe, near.lab
    limits = (recipe.optimizer.target_infidelity, recipe.optimizer.target_leakage)
    missed = [{"name": name, "value": value, "limit": limit} for name, value, limit in
              (("infidelity", lab.infidelity, limits[0]), ("leakage", lab.leakage, limits[1]))
              if value > limit]
    if not missed or not row.met:
        return
    rotating = {"infidelity": row.infidelity, "leakage": row.leakage}
    report = {"targets": {"met": False, "infidelity": limits[0], "leakage": limits[1],
                          "missed": missed}, **rotating, "duration_s": row.duration_s,
              "trust": {"rotating_frame": rotating, "lab_frame": lab.figures()}}
    row.met = False
    row.missed = "; ".join(f"{m['name']} beside neighbours, lab frame" for m in missed)
    row.why = " ".join(r.line() for r in explain(report, recipe=recipe.name))
