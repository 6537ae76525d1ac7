"""The single-qubit Clifford group and its compilation into physical gates and virtual Z.

The 24 elements are 2 x 2 unitaries up to a global phase, in a fixed order (the identity
first), with their multiplication table ``product[i, j]`` = the index of ``U_i U_j`` (j
played first) and the inverses. Physical gates are rotations about x or y (``X``, ``Y``,
``X/2``, ``Y/2``, ``-X/2``, ``-Y/2``, ``-X``, ``-Y``; ``R(theta) = exp(-i theta sigma / 2)``,
the matrices of :mod:`shaper.physics.targets` up to a phase). A compiled Clifford is a tuple
of operations in the order they are played: physical gate names, virtual Z frame updates
(``"Z/2"``, ``"Z"``, ``"-Z/2"``: rotations by pi/2, pi, -pi/2 about z, free and exact,
:func:`shaper.physics.gate_maps.frame_unitary`) and ``"I"``, an idle slot of one gate's
length.

Two compilations (:func:`compile_cliffords`):

- ``"shortest"`` (default): for each Clifford, the fewest physical gates from those the gate
  set has, with virtual Z free (a breadth-first search over the group); ties go to fewer
  frame updates, then to the gate set's order. ``{X/2}`` with virtual Z makes every
  Clifford (McKay et al., Phys. Rev. A 96, 022330 (2017)); its average is 1 pulse.
- ``"table"``: the usual table of products of I, X, Y, +-X/2, +-Y/2 (Epstein et al., Phys.
  Rev. A 89, 062321 (2014), Table I; entries from memory, each checked here to give a
  distinct Clifford): 1.875 gates per Clifford when every entry is played (the identity as
  an idle slot, Z as Y then X), 1.75 physical pulses when Z is virtual.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from functools import cache

import numpy as np

from shaper.errors import InputError

# physical gates: name -> (axis, angle in radians)
ROTATIONS = {"X": ("x", np.pi), "Y": ("y", np.pi), "X/2": ("x", np.pi / 2),
             "Y/2": ("y", np.pi / 2), "-X/2": ("x", -np.pi / 2), "-Y/2": ("y", -np.pi / 2),
             "-X": ("x", -np.pi), "-Y": ("y", -np.pi)}
# virtual Z frame updates: name -> angle in radians
VIRTUAL_Z = {"Z/2": np.pi / 2, "Z": np.pi, "-Z/2": -np.pi / 2}
IDLE = "I"
_PAULI = {"x": np.array([[0, 1], [1, 0]], complex), "y": np.array([[0, -1j], [1j, 0]]),
          "z": np.diag([1.0 + 0j, -1.0])}

# Epstein et al. (2014), Table I, in playing order (from memory): Paulis, 2pi/3 rotations,
# pi/2 rotations, Hadamard-like.
TABLE = (("I",), ("X",), ("Y",), ("Y", "X"),
         ("X/2", "Y/2"), ("X/2", "-Y/2"), ("-X/2", "Y/2"), ("-X/2", "-Y/2"),
         ("Y/2", "X/2"), ("Y/2", "-X/2"), ("-Y/2", "X/2"), ("-Y/2", "-X/2"),
         ("X/2",), ("-X/2",), ("Y/2",), ("-Y/2",), ("-X/2", "Y/2", "X/2"),
         ("-X/2", "-Y/2", "X/2"),
         ("X", "Y/2"), ("X", "-Y/2"), ("Y", "X/2"), ("Y", "-X/2"), ("X/2", "Y/2", "X/2"),
         ("-X/2", "Y/2", "-X/2"))
TABLE_GATES = ("X", "Y", "X/2", "-X/2", "Y/2", "-Y/2")


def rotation(axis: str, angle_rad: float) -> np.ndarray:
    """``exp(-i angle sigma_axis / 2)`` on one qubit, ``(2, 2)`` complex."""
    return (np.cos(angle_rad / 2) * np.eye(2)
            - 1j * np.sin(angle_rad / 2) * _PAULI[axis])


def op_unitary(name: str) -> np.ndarray:
    """The ideal 2 x 2 unitary of a physical gate, a virtual Z or an idle slot.

    Raises:
        InputError: a name that is none of these; the message lists the valid ones.
    """
    if name in ROTATIONS:
        return rotation(*ROTATIONS[name])
    if name in VIRTUAL_Z:
        return rotation("z", VIRTUAL_Z[name])
    if name == IDLE:
        return np.eye(2, dtype=complex)
    raise InputError(f"unknown single-qubit gate {name!r} for a Clifford compilation; "
                     f"physical gates: {', '.join(ROTATIONS)}")


def unitary_keys(unitaries: np.ndarray) -> list[bytes]:
    """A hashable key per unitary ``(n, k, k)`` that ignores the global phase.

    The phase of the first entry larger than 0.3 in modulus is divided out (every non-zero
    entry of a one- or two-qubit Clifford is at least 1/2), then the entries are rounded to
    1e-6 (signed zeros made positive, so equal matrices give equal bytes).
    """
    flat = np.asarray(unitaries, complex).reshape(len(unitaries), -1)
    first = np.argmax(np.abs(flat) > 0.3, axis=1)
    pivot = flat[np.arange(len(flat)), first]
    canon = np.round(flat * (np.abs(pivot) / pivot)[:, None], 6) + (0.0 + 0.0j)
    return [row.tobytes() for row in canon]


@dataclass(frozen=True)
class Group:
    """A finite group of unitaries up to phase: elements, lookup, products, inverses."""

    unitaries: np.ndarray  # (n, k, k) complex, element 0 the identity
    index: dict            # unitary_keys(u) -> element index
    product: np.ndarray    # (n, n) int: product[i, j] = index of U_i U_j (j played first)
    inverse: np.ndarray    # (n,) int

    def find(self, unitaries: np.ndarray) -> np.ndarray:
        """Indices of ``(m, k, k)`` unitaries; KeyError if one is not in the group."""
        return np.array([self.index[key] for key in unitary_keys(unitaries)], int)


@cache
def single_qubit_cliffords() -> Group:
    """The 24 single-qubit Cliffords, generated from X/2 and Y/2 by closure.

    Examples:
        >>> g = single_qubit_cliffords()
        >>> len(g.unitaries), int(g.product[3, g.inverse[3]])
        (24, 0)
    """
    generators = [op_unitary("X/2"), op_unitary("Y/2")]
    elements = [np.eye(2, dtype=complex)]
    index = {unitary_keys(elements[0][None])[0]: 0}
    frontier = [0]
    while frontier:
        nxt = []
        for i in frontier:
            for g in generators:
                u = g @ elements[i]
                key = unitary_keys(u[None])[0]
                if key not in index:
                    index[key] = len(elements)
                    elements.append(u)
                    nxt.append(index[key])
        frontier = nxt
    us = np.array(elements)
    products = np.einsum("iab,jbc->ijac", us, us).reshape(-1, 2, 2)
    product = np.array([index[k] for k in unitary_keys(products)]).reshape(len(us), len(us))
    inverse = np.argmax(product == 0, axis=1)
    return Group(us, index, product, inverse)


@dataclass(frozen=True)
class Compilation:
    """How each single-qubit Clifford is played.

    ``sequences[c]`` are the operations of Clifford ``c`` (the index of
    :func:`single_qubit_cliffords`) in playing order.
    """

    method: str                             # "shortest" or "table"
    gates: tuple[str, ...]                  # the physical gates available
    virtual_z: bool                         # whether Z is a free frame update
    sequences: tuple[tuple[str, ...], ...]  # (24,) operations per Clifford

    @property
    def physical_counts(self) -> np.ndarray:
        """Physical pulses per Clifford (no virtual Z, no idle slot), ``(24,)`` int."""
        return np.array([sum(op in ROTATIONS for op in s) for s in self.sequences])

    @property
    def slot_counts(self) -> np.ndarray:
        """Gate slots per Clifford: physical pulses plus idle slots, ``(24,)`` int."""
        return np.array([sum(op in ROTATIONS or op == IDLE for op in s)
                         for s in self.sequences])

    @property
    def mean_physical(self) -> float:
        return float(self.physical_counts.mean())

    @property
    def mean_slots(self) -> float:
        return float(self.slot_counts.mean())

    def summary(self) -> dict:
        """JSON-ready description: method, gates, the averages and every sequence."""
        return {"method": self.method, "gates": list(self.gates),
                "virtual_z": self.virtual_z,
                "mean_physical_per_clifford": self.mean_physical,
                "mean_slots_per_clifford": self.mean_slots,
                "sequences": [list(s) for s in self.sequences]}


def _reach(gates: tuple[str, ...], virtual_z: bool) -> dict[int, tuple[str, ...]]:
    """Breadth-first search: the shortest operation tuple of every reachable Clifford."""
    group = single_qubit_cliffords()
    zs = {name: int(group.find(op_unitary(name)[None])[0]) for name in VIRTUAL_Z} \
        if virtual_z else {}
    gate_index = {g: int(group.find(op_unitary(g)[None])[0]) for g in gates}
    order = {name: i for i, name in enumerate((*gates, *VIRTUAL_Z))}

    def rank(ops):  # ties: fewer frame updates, then the gate set's order
        return (sum(op in VIRTUAL_Z for op in ops), [order[op] for op in ops])

    best: dict[int, tuple[str, ...]] = {0: ()}
    best.update({z: (name,) for name, z in zs.items()})
    frontier = dict(best)
    while frontier and len(best) < len(group.unitaries):
        new: dict[int, tuple[str, ...]] = {}
        for c in sorted(frontier):
            for g in gates:
                after_gate = int(group.product[gate_index[g], c])
                options = [(after_gate, (g,))] + [
                    (int(group.product[z, after_gate]), (g, name)) for name, z in zs.items()]
                for element, tail in options:
                    ops = frontier[c] + tail
                    if element not in best and (element not in new
                                                or rank(ops) < rank(new[element])):
                        new[element] = ops
        best.update(new)
        frontier = new
    return best


def _refuse_incomplete(gates: tuple[str, ...], virtual_z: bool, made: int) -> None:
    helpers = [g for g in ROTATIONS if g not in gates
               and len(_reach((*gates, g), virtual_z)) == 24]
    fixes = []
    if helpers:
        fixes.append(f"add one of {', '.join(helpers)}")
    if not virtual_z and len(_reach(gates, True)) == 24:
        fixes.append("allow virtual Z")
    raise InputError(f"the physical gates {list(gates)} {'with' if virtual_z else 'without'} "
                     f"virtual Z make only {made} of the 24 single-qubit Cliffords; "
                     f"{' or '.join(fixes) or 'add a quarter turn about x and one about y'}")


def compile_cliffords(gates: Iterable[str], *, virtual_z: bool = True,
                      method: str = "shortest") -> Compilation:
    """Compile the 24 single-qubit Cliffords from a gate set's physical gates.

    Args:
        gates: names of the physical gates the set provides (see :data:`ROTATIONS`); an
            ``"I"`` in the list is ignored (the identity needs no pulse).
        virtual_z: Z rotations by multiples of pi/2 are free frame updates.
        method: ``"shortest"`` (fewest physical pulses per Clifford) or ``"table"`` (the
            usual table of Epstein et al.; needs X, Y, +-X/2, +-Y/2).

    Returns:
        The :class:`Compilation`.

    Raises:
        InputError: an unknown gate or method, or gates that cannot make every Clifford
            (the message names the gates that would complete the set).

    References:
        T. Epstein et al., Phys. Rev. A 89, 062321 (2014); D. C. McKay et al., Phys. Rev.
        A 96, 022330 (2017).

    Examples:
        >>> compile_cliffords(["X/2"]).mean_physical
        1.0
        >>> compile_cliffords(["X", "Y", "X/2", "-X/2", "Y/2", "-Y/2"], method="table",
        ...                   virtual_z=False).mean_slots
        1.875
    """
    names = tuple(dict.fromkeys(str(g).strip().upper() for g in gates))
    names = tuple(g for g in names if g != IDLE)
    for g in names:
        if g not in ROTATIONS:
            op_unitary(g)  # raises with the list of valid names
            raise InputError(f"{g!r} is a frame update, not a physical gate: "
                             f"give virtual_z=True instead")
    if method == "table":
        return _table(names, virtual_z)
    if method != "shortest":
        raise InputError(f"unknown compilation method {method!r}; use 'shortest' or 'table'")
    best = _reach(names, virtual_z)
    if len(best) < 24:
        _refuse_incomplete(names, virtual_z, len(best))
    return Compilation("shortest", names, virtual_z, tuple(best[c] for c in range(24)))


def _table(names: tuple[str, ...], virtual_z: bool) -> Compilation:
    missing = [g for g in TABLE_GATES if g not in names]
    if missing:
        raise InputError(f"the table compilation plays {', '.join(TABLE_GATES)}; the gate "
                         f"set lacks {', '.join(missing)} (or use method='shortest')")
    group = single_qubit_cliffords()
    sequences: list[tuple[str, ...] | None] = [None] * 24
    for entry in TABLE:
        u = np.eye(2, dtype=complex)
        for op in entry:
            u = op_unitary(op) @ u
        c = int(group.find(u[None])[0])
        if sequences[c] is not None:
            raise AssertionError(f"table entries {sequences[c]} and {entry} are one Clifford")
        sequences[c] = ("Z",) if virtual_z and entry == ("Y", "X") else entry
    return Compilation("table", names, virtual_z, tuple(sequences))
