"""Every recipe a chip needs beyond its gate tasks, built from the chip's own tables
(README, "Chips"): a qubit's transmon table as its gate recipe holds it alone, a pair's
static system (for its ZZ at rest: no pulse), and a pair's recipe for playing both qubits'
files together (``[gates] simultaneous``). The tasks' recipes (a qubit alone, its
neighbourhood, a pair's gate) are made by :mod:`shaper.recipe.chip` and
:mod:`shaper.recipe.neighbours`; nothing in the jobs stage writes a recipe by hand.
"""

from __future__ import annotations

from shaper.recipe.models import level_tables


def alone_recipe(chip, subject: str) -> dict:
    """A qubit's single-qubit gate recipe alone (the chip's own tables for it)."""
    return next(t.alone_recipe for t in chip.tasks if t.subject == subject)


def qubit_table(chip, name: str) -> dict:
    """A qubit's ``[[system.transmon]]`` table as the chip's single-qubit gate recipe of it
    holds it alone (its levels, spectrum; no coherence times)."""
    system = alone_recipe(chip, name)["system"]
    tables = level_tables(system) or []
    table = next((t for t in tables if t.get("name", name) == name), None)
    if table is None:
        raise ValueError(f"qubit {name!r} has no transmon table in its gate recipe")
    keys = ("name", "levels", "qubit_frequency", "anharmonicity", "spectrum",
            "offset_charge", "flux", "driven")
    out = {k: table[k] for k in keys if k in table}
    out.setdefault("name", name)
    return out


def static_pair(chip, a: str, b: str, strength) -> dict:
    """The ``[system]`` table of a coupled pair at rest (flux at its idle point, drives
    off): both transmons as the chip holds them, their charge coupling."""
    return {"model": "transmons",
            "transmon": [{k: v for k, v in qubit_table(chip, q).items()
                          if k not in ("flux", "driven")} for q in (a, b)],
            "coupling": [{"between": [a, b], "strength": strength}]}


def together_recipe(chip, a: str, b: str, label: str) -> dict:
    """The recipe of ``a`` and ``b`` playing ``label`` together (README, "Chips:
    simultaneous gates"): both transmons without drive lines of their own, their coupling,
    the dressed basis, each qubit's own drive at its own carrier and each line's leak into
    the other at the leaking line's carrier; the chip's instrument (``[template.awg]``)."""
    transmons = [{**qubit_table(chip, name), "driven": False} for name in (a, b)]
    fa, fb = (t["qubit_frequency"] for t in transmons)
    couplings = [{"between": [x, y], "strength": c} for x, y, c in chip.couplings
                 if {x, y} == {a, b}]
    limits = {q: alone_recipe(chip, q)["pulse"]["max_rabi"] for q in (a, b)}
    base = alone_recipe(chip, a)
    drives = [{"name": a, "transmon": a, "frequency": fa},
              {"name": b, "transmon": b, "frequency": fb},
              {"name": f"{a}_to_{b}", "transmon": b, "frequency": fa},
              {"name": f"{b}_to_{a}", "transmon": a, "frequency": fb}]
    pulse = {k: v for k, v in base["pulse"].items() if k in ("duration", "sample_rate")}
    return {"name": f"{chip.name}-{a}-{b}-together", "system": {
                "model": "transmons", "basis": "dressed", "transmon": transmons,
                "coupling": couplings, "drive": drives},
            "gate": {"target": [label, label], "virtual_z": True},
            "pulse": {**pulse, "max_rabi": {**limits, f"{a}_to_{b}": 0, f"{b}_to_{a}": 0}},
            "verdict": {"lab_frame": "off", "extra_levels": 0},
            **({"awg": base["awg"]} if "awg" in base else {})}
