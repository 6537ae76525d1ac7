"""The two-qubit Clifford group (11,520 elements) compiled from a pair gate and local layers.

Elements are 4 x 4 unitaries up to a global phase (q0 most significant; README,
"Conventions"), found by a phase-free hash (:func:`shaper.physics.clifford.unitary_keys`).
The group is the union of four double cosets of the local group ``C1 x C1`` (576
elements): the local Cliffords themselves, and those needing one, two or three pair gates
(for CNOT: the CNOT-, iSWAP- and SWAP-like classes of 576, 5184, 5184 and 576 elements;
Barends et al., Nature 508, 500 (2014), supplement, from memory). Every element is compiled
as

    left . G . inner_1 . G ... G . right     (right played first)

with G the pair gate, ``left`` any local Clifford, fixed ``inner`` layers per class and
``right`` a representative of the class's right cosets, each chosen with the fewest
single-qubit gate slots. A local layer plays both qubits' single-qubit compilations at
once (:mod:`shaper.physics.clifford`), the shorter padded with idle slots. With any of
CZ, CNOT or iSWAP this averages (0 x 576 + 1 x 5184 + 2 x 5184 + 3 x 576) / 11520 = 1.5
pair gates per Clifford.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from shaper.errors import InputError
from shaper.physics.clifford import Compilation, single_qubit_cliffords, unitary_keys
from shaper.physics.targets import gate

PAIR_GATES = ("CZ", "CNOT", "ISWAP")


@dataclass(frozen=True)
class PairCliffords:
    """The 11,520 two-qubit Cliffords and the compilation of each."""

    pair_gate: str                 # CZ, CNOT or ISWAP
    unitaries: np.ndarray          # (11520, 4, 4), element 0 the identity
    index: dict                    # unitary_keys -> element
    left: np.ndarray               # (11520,) local index a * 24 + b of the last layer
    classes: np.ndarray            # (11520,) number of pair gates, 0..3
    right: np.ndarray              # (11520,) local index of the first layer (classes > 0)
    inner: tuple[tuple[int, ...], ...]  # per class, the local layers between pair gates
    layer_slots: np.ndarray        # (576,) slots of each local layer (the longer qubit)
    layer_pulses: np.ndarray       # (576,) physical pulses of both qubits in each layer
    compilations: tuple[Compilation, Compilation]

    def find(self, unitaries: np.ndarray) -> np.ndarray:
        """Indices of ``(m, 4, 4)`` Clifford unitaries."""
        return np.array([self.index[k] for k in unitary_keys(unitaries)], int)

    def layers(self, element: int) -> list[int | None]:
        """The compiled element in playing order: local indices, None for a pair gate."""
        k = int(self.classes[element])
        if k == 0:
            return [int(self.left[element])]
        out: list[int | None] = [int(self.right[element])]
        for j in range(k):
            out.append(None)
            if j < k - 1:
                out.append(self.inner[k][j])
        return out + [int(self.left[element])]

    def counts(self) -> dict:
        """Mean pair gates, local layers, single-qubit slots and pulses per Clifford."""
        k = self.classes
        slots = self.layer_slots[self.left] + np.where(k > 0, self.layer_slots[self.right], 0)
        pulses = self.layer_pulses[self.left] + np.where(k > 0, self.layer_pulses[self.right],
                                                         0)
        for c in (2, 3):
            slots = slots + (k == c) * sum(self.layer_slots[i] for i in self.inner[c])
            pulses = pulses + (k == c) * sum(self.layer_pulses[i] for i in self.inner[c])
        return {"pair_gate": self.pair_gate, "elements": len(self.unitaries),
                "class_sizes": np.bincount(k, minlength=4).tolist(),
                "mean_pair_gates_per_clifford": float(k.mean()),
                "mean_local_layers_per_clifford": float(np.where(k > 0, k + 1, 1).mean()),
                "mean_single_qubit_slots_per_clifford": float(slots.mean()),
                "mean_single_qubit_pulses_per_clifford": float(pulses.mean())}


def pair_gate_unitary(name: str) -> tuple[str, np.ndarray]:
    """The canonical name and ideal 4 x 4 unitary of a pair gate (CZ, CNOT, iSWAP).

    Raises:
        InputError: any other gate (it must be a Clifford that entangles).
    """
    key = str(name).strip().upper().replace("CX", "CNOT")
    if key not in PAIR_GATES:
        raise InputError(f"two-qubit RB needs a Clifford pair gate: CZ, CNOT or iSWAP, got "
                         f"{name!r}")
    return key, gate(key).unitary


def _local_tables(ca: Compilation, cb: Compilation):
    c1 = single_qubit_cliffords()
    unitaries = np.einsum("aij,bkl->abikjl", c1.unitaries, c1.unitaries).reshape(576, 4, 4)
    sa, sb = ca.slot_counts, cb.slot_counts
    slots = np.maximum(sa[:, None], sb[None, :]).reshape(-1)
    pulses = (ca.physical_counts[:, None] + cb.physical_counts[None, :]).reshape(-1)
    order = np.lexsort((np.arange(576), (sa[:, None] + sb[None, :]).reshape(-1), slots))
    return c1, unitaries, slots, pulses, order  # order: cheapest layer first


def _right_representatives(core, c1, local_u, local_index, order) -> list[int]:
    """The cheapest local of each right coset of ``{l : core l core^-1 local}``."""
    conj = np.einsum("ij,ljk,mk->lim", core, local_u, core.conj())
    stab = [h for h, key in enumerate(unitary_keys(conj)) if key in local_index]
    taken = np.zeros(576, bool)
    reps = []
    for layer in order:
        if taken[layer]:
            continue
        reps.append(int(layer))
        a, b = divmod(int(layer), 24)
        for h in stab:  # the coset H l
            ha, hb = divmod(h, 24)
            taken[c1.product[ha, a] * 24 + c1.product[hb, b]] = True
    return reps


@lru_cache(maxsize=8)
def pair_cliffords(pair_gate: str, compilations: tuple[Compilation, Compilation]
                   ) -> PairCliffords:
    """Build the two-qubit Clifford group and its compilation for one pair gate.

    Args:
        pair_gate: ``"CZ"``, ``"CNOT"`` (control q0) or ``"iSWAP"``.
        compilations: the single-qubit compilations of q0 and q1
            (:func:`shaper.physics.clifford.compile_cliffords`); they decide which layers
            are cheapest.

    Raises:
        InputError: another pair gate.

    References:
        J. P. Barends et al., Nature 508, 500 (2014); A. D. Corcoles et al., Phys. Rev. A
        87, 030301 (2013).
    """
    name, g = pair_gate_unitary(pair_gate)
    c1, local_u, slots, pulses, order = _local_tables(*compilations)
    local_index = {k: i for i, k in enumerate(unitary_keys(local_u))}
    index = dict(local_index)
    us, left, classes, right = [local_u], [np.arange(576)], [np.zeros(576, int)], \
        [np.zeros(576, int)]
    inner: list[tuple[int, ...]] = [(), ()]
    core = g
    for k in (1, 2, 3):
        if k > 1:  # the cheapest inner layer that reaches a new class
            for layer in order:
                trial = g @ local_u[layer] @ core
                if unitary_keys(trial[None])[0] not in index:
                    core, inner = trial, inner + [inner[-1] + (int(layer),)]
                    break
        reps = _right_representatives(core, c1, local_u, local_index, order)
        block = np.einsum("lij,rjk->lrik", local_u, core @ local_u[reps]).reshape(-1, 4, 4)
        for key in unitary_keys(block):
            if key in index:
                raise AssertionError(f"class {k} of {name} overlaps an earlier class")
            index[key] = len(index)
        us.append(block)
        left.append(np.repeat(np.arange(576), len(reps)))
        right.append(np.tile(np.array(reps), 576))
        classes.append(np.full(len(block), k))
    return PairCliffords(name, np.concatenate(us), index, np.concatenate(left),
                         np.concatenate(classes), np.concatenate(right), tuple(inner),
                         slots, pulses, tuple(compilations))
