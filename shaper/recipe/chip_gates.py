"""A chip file's ``[gates]`` table: the gates of every qubit and pair, their duration
sweeps and what a single-qubit gate does with its neighbours (README, "Chips").
Nothing here imports JAX."""

from __future__ import annotations

from shaper.errors import InputError
from shaper.physics.targets import gate
from shaper.recipe.neighbours import MODES, NEIGHBOUR_LEVELS
from shaper.recipe.schema import _Reader
from shaper.recipe.units import parse_durations

MAX_NEIGHBOUR_LEVELS = 6  # a neighbourhood of 4 transmons at 6 levels is already d = 1296

DURATIONS = {"single_durations": "12ns:24ns:4ns", "pair_durations": "40ns:80ns:10ns",
             "fixed_pair_durations": "120ns:200ns:40ns"}
PAIR_GATES = {"pair": "CZ", "fixed_pair": "CNOT"}
NO_GATE = "none"


def read_gates(r: _Reader, gates: dict, keys: dict) -> dict:
    """``[gates]`` with its defaults, every key checked whether or not a pair uses it."""
    r.check_keys(gates, "gates", "gates", keys=keys)
    single = gates.get("single", ["X", "X/2", "Y", "Y/2", "-X/2"])
    if not isinstance(single, list) or not single or not all(isinstance(g, str)
                                                             for g in single):
        r.fail("gates.single", f"expected a non-empty list of one-qubit gate names, got "
                               f"{str(single)[:60]!r}")
    seen = set()
    for i, label in enumerate(single):
        _gate_name(r, label, 1, f"gates.single[{i}]")
        if label.strip().upper() in seen:
            r.fail(f"gates.single[{i}]", f"{label!r} is listed twice")
        seen.add(label.strip().upper())
    out = {"single": single}
    for key, default in PAIR_GATES.items():
        out[key] = gates.get(key, default)
        if out[key] != NO_GATE:  # "none": no two-qubit gate of that kind (singles only)
            _gate_name(r, out[key], 2, f"gates.{key}")
    for key, default in DURATIONS.items():
        out[key] = gates.get(key, default)
        parse_durations(out[key], key=f"gates.{key}", path=r.path)
    out["neighbours"] = r.choice(gates, "neighbours", "gates.neighbours", MODES, "check")
    out["neighbour_levels"] = r.number(gates, "neighbour_levels", "gates.neighbour_levels",
                                       NEIGHBOUR_LEVELS, integer=True)
    if not 2 <= out["neighbour_levels"] <= MAX_NEIGHBOUR_LEVELS:
        r.fail("gates.neighbour_levels", f"must be from 2 to {MAX_NEIGHBOUR_LEVELS}, got "
                                         f"{out['neighbour_levels']}")
    out["simultaneous"] = r.flag(gates, "simultaneous", "gates.simultaneous", False)
    if "cross_resonance_rabi" in gates:
        out["cross_resonance_rabi"] = gates["cross_resonance_rabi"]
        r.number(gates, "cross_resonance_rabi", "gates.cross_resonance_rabi",
                 kind="frequency", positive=True)
    return out


def _gate_name(r: _Reader, label, qubits: int, where: str) -> None:
    if not isinstance(label, str):
        r.fail(where, f"expected a gate name (text), got {str(label)[:60]!r}")
    try:
        gate(label, qubits=qubits)
    except InputError as exc:
        r.fail(where, str(exc))
