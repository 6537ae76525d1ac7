"""The ``[gate]`` section: the target (a named gate, a matrix, a state transfer), the qubits
it acts on (``on``: the identity on the spectators) and a gate set (``targets``), each
checked against the recipe's system."""

from __future__ import annotations

import numpy as np

from shaper.errors import InputError
from shaper.physics.systems import System
from shaper.physics.targets import Target, gate, on_qubits, state_transfer
from shaper.recipe.schema import _Reader


def read_gate_set(r: _Reader, t: dict, system: System) -> tuple[str, ...]:
    """``[gate] targets``: the gates of a set, each checked as a target of this system."""
    if "targets" not in t:
        return ()
    if "target" in t:
        r.fail("gate.targets", "give either target (one gate) or targets (a set), not both")
    names = t["targets"]
    if not isinstance(names, list) or not names or not all(isinstance(n, str) for n in names):
        r.fail("gate.targets", f"expected a list of gate names, e.g. [\"X\", \"X/2\", "
                               f"\"Y\"], got {str(names)[:60]!r}")
    if len(set(names)) != len(names):
        r.fail("gate.targets", f"names a gate twice: {names}")
    positions = _acts_on(r, t, system)
    qubits = len(positions) if positions else int(np.log2(len(system.computational)))
    for i, name in enumerate(names):
        try:
            gate(name, qubits=qubits)
        except InputError as exc:
            r.fail(f"gate.targets[{i}]", str(exc))
    return tuple(names)


def read_gate(r: _Reader, t: dict, system: System) -> tuple[Target, bool]:
    """``[gate]``: the target (a named gate, a matrix or a state transfer), on the qubits
    ``on`` names (the identity on the others), and whether frame updates are free."""
    r.check_keys(t, "gate")
    spec = t.get("target")
    if spec is None and isinstance(t.get("targets"), list) and t["targets"]:
        spec = t["targets"][0]  # a gate set: the recipe's own target is its first gate
    if spec is None:
        r.fail("gate.target", "missing required key (or targets, for a set of gates)")
    virtual_z = r.flag(t, "virtual_z", "gate.virtual_z", False)
    positions = _acts_on(r, t, system)
    if positions and spec == "state":
        r.fail("gate.on", "names the qubits a gate acts on; a state target has none")
    target, virtual_z = _gate_on(r, t, system, spec, virtual_z,
                                 len(positions) if positions else None)
    if positions:
        target = on_qubits(target, positions, len(system.dims))
    return target, virtual_z


def _acts_on(r: _Reader, t: dict, system: System) -> list[int] | None:
    """``[gate] on``: the qubits (names) a gate acts on, the identity on the others
    (spectators, README, "Chips"); None without it."""
    if "on" not in t:
        return None
    names = t["on"]
    if not (isinstance(names, list) and names and all(isinstance(n, str) for n in names)
            and len(set(names)) == len(names)):
        r.fail("gate.on", f"expected a list of different qubit names, got {str(names)[:60]!r}")
    if 2 ** len(system.dims) != len(system.computational):
        r.fail("gate.on", "needs a system of qubits (2^n computational states)")
    for i, name in enumerate(names):
        if name not in system.qubit_names:
            r.fail(f"gate.on[{i}]", f"no qubit named {name!r}; qubits: "
                                    f"{', '.join(system.qubit_names)}")
    return [system.qubit_names.index(n) for n in names]


def _gate_on(r: _Reader, t: dict, system: System, spec, virtual_z: bool,
             acting: int | None) -> tuple[Target, bool]:
    """The target as written, on ``acting`` qubits (None: all of the system's)."""
    qubits = acting or int(np.log2(len(system.computational)))
    size = 2 ** acting if acting else len(system.computational)
    try:
        if spec == "state":
            for key in ("initial_state", "final_state"):
                if not isinstance(t.get(key), list):
                    r.fail(f"gate.{key}", "expected a list of amplitudes on the "
                                          "computational states (target = \"state\")")
            if len(t["initial_state"]) != len(system.computational):
                r.fail("gate.initial_state", f"expected {len(system.computational)} "
                                             f"amplitudes, got {len(t['initial_state'])}")
            if virtual_z:
                r.fail("gate.virtual_z", "frame updates apply to gates, not to a state target")
            return state_transfer(t["initial_state"], t["final_state"]), False
        if spec == "matrix":
            if "matrix" not in t:
                r.fail("gate.matrix", "missing required key (target = \"matrix\")")
            m = r.matrix(t, "matrix", "gate.matrix", size=size, imag_key="matrix_imag")
            return gate(m), virtual_z
        if 2 ** qubits != size and virtual_z:
            r.fail("gate.virtual_z", "frame updates need 2^n computational states")
        return gate(spec, qubits=qubits if 2 ** qubits == size else None), virtual_z
    except InputError as exc:
        r.fail("gate.target" if spec not in ("matrix", "state") else f"gate.{spec}", str(exc))
