"""A chip's coupled pairs as they sit idle: the static ZZ of each (exact diagonalisation of
the pair's own static Hamiltonian), written to ``chip-pairs.csv``, ``chip.md`` and the page
(README, "Chips")."""

from __future__ import annotations

from pathlib import Path

from shaper.io import atomic
from shaper.recipe.chip import Chip


def pair_zz(chip: Chip) -> list[dict]:
    """The static ZZ of every coupled pair at rest (flux at its idle point, drives off), by
    exact diagonalisation of the pair's own static Hamiltonian as its gate task builds it
    (:func:`shaper.physics.transmons.static_zz`; README, "Chips")."""
    from shaper.errors import InputError
    from shaper.physics.transmons import static_zz
    from shaper.recipe import load_recipe

    out = []
    for task in chip.tasks:
        system = task.recipe.get("system", {})
        if system.get("model") != "transmons" or len(system.get("transmon", [])) != 2:
            continue
        recipe = load_recipe(task.recipe)
        coupling = system["coupling"][0]
        try:
            zz = static_zz(recipe.system.lab.static, recipe.system.dims)
        except InputError:
            zz = None  # hybridised at rest: no ZZ to speak of (said in the table)
        out.append({"pair": task.subject, "strength": str(coupling["strength"]),
                    "levels": "x".join(map(str, recipe.system.dims)), "static_zz_hz": zz})
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
