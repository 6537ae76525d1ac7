"""Predicted two-qubit randomized benchmarking of a pair gate with its qubits' gates.

Sequences of m random two-qubit Cliffords (:mod:`shaper.physics.clifford_pairs`) and the
recovery, each played as its compilation: local layers (both qubits' single-qubit gates at
once, each qubit's maps as given, the shorter padded with its idle map) and the pair
gate's map on the pair's ``d_a d_b`` levels; survival of ``|00>``, fitted ``A p^m + B``,
``r = 3 (1 - p) / 4`` (d = 4; Magesan, Gambetta and Emerson, Phys. Rev. Lett. 106, 180504
(2011)). The population outside levels 0/1 of either transmon is fitted as for one qubit
(Wood and Gambetta, Phys. Rev. A 97, 032306 (2018)).

Only sampled sequences: the exact average would carry one density matrix per group element,
a transfer operator of ``(11520 D^2)^2`` entries (D = 4: 3.4e10; a 3-level pair: 8.7e11),
far too large for a general noisy map. The noisy maps are applied to the states, not
multiplied together: a local layer costs ``D^2 (d_a^2 + d_b^2)`` per state and a pair gate
``D^4``, so a sequence costs its number of map applications
(:func:`estimate_pair_cost`, stated before anything runs) and no Clifford's map is built.
Virtual Z is exact on every level of each transmon (:mod:`shaper.physics.gate_maps`); the
pair gate's map is taken as played in the frame those updates define.
"""

from __future__ import annotations

import time
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from shaper.errors import InputError
from shaper.physics.benchmarking import Benchmark, check_run, decay_result
from shaper.physics.clifford import ROTATIONS, Compilation, compile_cliffords
from shaper.physics.clifford_pairs import PairCliffords, pair_cliffords
from shaper.physics.gate_maps import QubitMaps, as_superoperator, computational_indices

DEFAULT_PAIR_LENGTHS = (1, 2, 4, 8, 16, 32, 64, 128)


class PairPlayer:
    """Applies compiled two-qubit Cliffords to a batch of density matrices ``(K, D, D)``."""

    def __init__(self, cliffords: PairCliffords, maps: tuple[QubitMaps, QubitMaps],
                 pair: np.ndarray):
        self.cl, self.pair = cliffords, pair
        self.dims = (maps[0].levels, maps[1].levels)
        top = int(cliffords.layer_slots.max())
        self.padded = []  # per qubit (24, top + 1, d^2, d^2): Clifford c padded to s slots
        for q, m in enumerate(maps):
            comp = cliffords.compilations[q]
            table = np.zeros((24, top + 1, m.levels ** 2, m.levels ** 2), complex)
            for c, seq in enumerate(comp.sequences):
                for s in range(int(comp.slot_counts[c]), top + 1):
                    table[c, s] = m.play(seq, slots=s)
            self.padded.append(table)

    def local(self, rho: np.ndarray, layer: np.ndarray) -> np.ndarray:
        """Both qubits' compiled single-qubit Cliffords ``layer = a * 24 + b`` at once."""
        da, db = self.dims
        a, b = np.divmod(layer, 24)
        slots = self.cl.layer_slots[layer]
        sa = self.padded[0][a, slots].reshape(-1, da, da, da, da)  # [k, J, I, j, i]
        sb = self.padded[1][b, slots].reshape(-1, db, db, db, db)
        r5 = rho.reshape(-1, da, db, da, db)  # [k, iA, iB, jA, jB]
        r5 = np.einsum("kJIji,kimjl->kImJl", sa, r5)
        r5 = np.einsum("kLMlm,kImJl->kIMJL", sb, r5)
        return r5.reshape(rho.shape)

    def pair_gate(self, rho: np.ndarray) -> np.ndarray:
        big = rho.shape[-1]
        vec = rho.transpose(0, 2, 1).reshape(len(rho), -1)  # column-stacked
        # NumPy's own loop, not BLAS: on a loaded 2-core machine threaded BLAS products
        # here took 10-20 ms per call (threads waking) and a whole 3 x 3-level run 4-12 s
        # instead of 0.4 s (measured; the same with OPENBLAS_NUM_THREADS=1: 0.4 s)
        vec = np.einsum("ab,kb->ka", self.pair, vec)
        return vec.reshape(len(rho), big, big).transpose(0, 2, 1)

    def play(self, rho: np.ndarray, elements: np.ndarray) -> np.ndarray:
        """Each state k after its own Clifford ``elements[k]``."""
        out = rho.copy()
        for k in range(4):
            sel = np.flatnonzero(self.cl.classes[elements] == k)
            if not len(sel):
                continue
            r, el = rho[sel], elements[sel]
            if k:
                r = self.local(r, self.cl.right[el])
            for j in range(k):
                r = self.pair_gate(r)
                if j < k - 1:
                    r = self.local(r, np.full(len(sel), self.cl.inner[k][j]))
            out[sel] = self.local(r, self.cl.left[el])
        return out


def _sample(player: PairPlayer, lengths: Sequence[int], sequences: int, seed: int):
    """Mean and standard error of (survival of |00>, subspace population) per length."""
    cliffords = player.cl
    rng = np.random.default_rng(seed)
    comp = computational_indices(player.dims)
    big = player.dims[0] * player.dims[1]
    means, errors = [], []
    for m in lengths:
        rho = np.zeros((sequences, big, big), complex)
        rho[:, 0, 0] = 1.0
        ideal = np.tile(np.eye(4, dtype=complex), (sequences, 1, 1))
        for _ in range(m):
            draw = rng.integers(0, len(cliffords.unitaries), size=sequences)
            rho = player.play(rho, draw)
            ideal = np.einsum("kab,kbc->kac", cliffords.unitaries[draw], ideal)
        rho = player.play(rho, cliffords.find(ideal.conj().transpose(0, 2, 1)))
        values = np.stack([rho[:, 0, 0].real, rho[:, comp, comp].real.sum(axis=1)], axis=1)
        means.append(values.mean(axis=0))
        errors.append(values.std(axis=0, ddof=1) / np.sqrt(sequences))
    return np.array(means), np.array(errors)


def estimate_pair_cost(levels: tuple[int, int], lengths: Sequence[int], sequences: int,
                       *, cliffords: PairCliffords | None = None, repeats: int = 3) -> dict:
    """The cost of a sampled two-qubit prediction, stated before it runs.

    Map applications = sequences x sum over lengths of (m + 1) x (pair gates + local
    layers per Clifford). The time is the number of Clifford steps, sum of (m + 1), times
    the time of one step of all ``sequences`` states, measured here on maps of the same
    size (the fastest of ``repeats``; it includes NumPy's per-call overhead, which
    dominates for small pairs).

    Args:
        levels: (d_0, d_1), levels of each transmon.
        lengths: sequence lengths.
        sequences: random sequences per length.
        cliffords: the group and compilation to time (default: CZ, X/2 and virtual Z).
        repeats: timing repeats.

    Returns:
        ``{"map_applications", "pair_gate_applications", "local_layer_applications",
        "clifford_steps", "seconds_per_step", "estimated_seconds"}``.
    """
    if cliffords is None:
        c = compile_cliffords(["X/2"])
        cliffords = pair_cliffords("CZ", (c, c))
    counts = cliffords.counts()
    steps = sum(int(m) + 1 for m in lengths)
    played = sequences * steps
    pairs = played * counts["mean_pair_gates_per_clifford"]
    locals_ = played * counts["mean_local_layers_per_clifford"]
    maps = tuple(QubitMaps(d, dict.fromkeys(ROTATIONS, np.eye(d * d, dtype=complex)),
                           np.eye(d * d, dtype=complex)) for d in levels)  # timing only
    big = levels[0] * levels[1]
    player = PairPlayer(cliffords, maps, np.eye(big ** 2, dtype=complex))
    rho = np.tile(np.eye(big, dtype=complex) / big, (sequences, 1, 1))
    draw = np.random.default_rng(0).integers(0, len(cliffords.unitaries), size=sequences)
    step = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        player.play(rho, draw)
        step = min(step, time.perf_counter() - t0)
    return {"map_applications": float(pairs + locals_), "pair_gate_applications": float(pairs),
            "local_layer_applications": float(locals_), "clifford_steps": steps,
            "seconds_per_step": step, "estimated_seconds": float(steps * step)}


def predict_pair_rb(pair_gate: str, pair_map: ArrayLike, maps: tuple[QubitMaps, QubitMaps],
                    *, compilations: tuple[Compilation, Compilation] | None = None,
                    lengths: Sequence[int] = DEFAULT_PAIR_LENGTHS, sequences: int = 30,
                    seed: int = 0, max_seconds: float | None = None) -> Benchmark:
    """Predicted two-qubit RB (sampled sequences).

    Args:
        pair_gate: ``"CZ"``, ``"CNOT"`` (control q0) or ``"iSWAP"``.
        pair_map: the pair gate's ``(D, D)`` unitary or ``(D^2, D^2)`` superoperator on
            the pair's levels, ``D = d_0 d_1``, q0 most significant, as played (its frame
            updates applied).
        maps: each qubit's single-qubit maps (q0, q1).
        compilations: the single-qubit compilations; default the shortest from each
            qubit's gates with virtual Z.
        lengths: sequence lengths (at least 3 different).
        sequences: random sequences per length.
        seed: of the sequences.
        max_seconds: refuse to run when the estimated time exceeds it.

    Returns:
        The :class:`shaper.physics.benchmarking.Benchmark` (qubits 2), with ``cost`` the
        estimate made before running.

    Raises:
        InputError: a bad pair gate, map, lengths or sequences, or an estimate above
            ``max_seconds`` (the message gives the estimate and what to reduce).
    """
    started = time.perf_counter()
    lengths = check_run(lengths, "sampled", sequences)
    compilations = compilations or tuple(compile_cliffords(m.gates) for m in maps)
    cliffords = pair_cliffords(pair_gate, tuple(compilations))
    levels = (maps[0].levels, maps[1].levels)
    big = levels[0] * levels[1]
    pair = as_superoperator(pair_map, big, cliffords.pair_gate)
    cost = estimate_pair_cost(levels, lengths, sequences, cliffords=cliffords)
    if max_seconds is not None and cost["estimated_seconds"] > max_seconds:
        raise InputError(f"two-qubit RB would take about {cost['estimated_seconds']:.3g} s "
                         f"({cost['map_applications']:.3g} map applications), more than "
                         f"max_seconds = {max_seconds:g}; use fewer sequences or shorter "
                         f"lengths")
    means, errors = _sample(PairPlayer(cliffords, maps, pair), lengths, sequences, seed)
    summary = {**cliffords.counts(), "single_qubit": [c.summary() for c in compilations]}
    return decay_result(2, "sampled", lengths, means, errors, sequences, seed, summary,
                        cost=cost, started=started)
