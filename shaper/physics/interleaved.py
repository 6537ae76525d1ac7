"""Predicted interleaved randomized benchmarking of one physical gate.

The gate's noisy map is played after every random Clifford (the recovery inverts the whole
product, gate included); the decay ``p_C`` beside the reference decay ``p`` gives the gate's
error ``r_C = (d - 1)(1 - p_C / p) / d`` (Magesan et al., Phys. Rev. Lett. 109, 080505
(2012)). The paper bounds the difference between ``r_C`` and the gate's true average error
by (its Eq. (5), written here from memory)

    E = min{ (d - 1)[|p - p_C / p| + (1 - p)] / d,
             2 (d^2 - 1)(1 - p) / (p d^2) + 4 sqrt(1 - p) sqrt(d^2 - 1) / p }.

Beside it, the gate's average gate infidelity computed from its map as given (Pedersen,
Moller and Molmer, Phys. Lett. A 367, 47 (2007); no frame update optimised) and its
leakage (Wood and Gambetta, Phys. Rev. A 97, 032306 (2018)).
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shaper.errors import InputError
from shaper.physics.benchmarking import (
    DEFAULT_LENGTHS,
    Benchmark,
    average,
    check_run,
    clifford_maps,
    decay_result,
    predict_rb,
)
from shaper.physics.clifford import (
    ROTATIONS,
    Compilation,
    compile_cliffords,
    op_unitary,
    single_qubit_cliffords,
)
from shaper.physics.gate_maps import QubitMaps, channel_figures


def interleaved_bound(p: float, p_gate: float, d: int = 2) -> float:
    """Magesan et al. (2012), Eq. (5) (from memory): the half-width E around ``r_C``.

    Examples:
        >>> round(interleaved_bound(0.99, 0.99 * 0.995), 6)
        0.0075
    """
    first = (d - 1) * (abs(p - p_gate / p) + (1 - p)) / d
    second = (2 * (d * d - 1) * (1 - p) / (p * d * d)
              + 4 * np.sqrt(max(1 - p, 0.0)) * np.sqrt(d * d - 1) / p)
    return float(min(first, second))


@dataclass(frozen=True)
class Interleaved:
    """Interleaved RB of one gate beside its reference decay."""

    gate: str
    reference: Benchmark        # the plain RB decay p
    interleaved: Benchmark      # the decay p_C with the gate after every Clifford
    gate_infidelity: float      # 1 - F of the gate's map as given (no frame optimised)
    gate_leakage: float         # its leakage

    @property
    def gate_error(self) -> float:
        """``r_C = (d - 1)(1 - p_C / p) / d``, d = 2."""
        return (1 - self.interleaved.fit.decay / self.reference.fit.decay) / 2

    @property
    def bound(self) -> float:
        """The paper's half-width E: the true error lies in ``r_C +- E``."""
        return interleaved_bound(self.reference.fit.decay, self.interleaved.fit.decay)

    def figures(self) -> dict:
        """JSON-ready: the gate's RB error, its bound, its infidelity and both decays."""
        return {"gate": self.gate, "gate_error": self.gate_error, "bound": self.bound,
                "interval": [self.gate_error - self.bound, self.gate_error + self.bound],
                "gate_infidelity": self.gate_infidelity, "gate_leakage": self.gate_leakage,
                "reference": self.reference.figures(),
                "interleaved": self.interleaved.figures()}


def predict_interleaved(maps: QubitMaps, gate: str, *,
                        compilation: Compilation | None = None,
                        lengths: Sequence[int] = DEFAULT_LENGTHS, method: str = "exact",
                        sequences: int = 50, seed: int = 0,
                        reference: Benchmark | None = None) -> Interleaved:
    """Interleaved RB of the physical gate ``gate`` of ``maps``.

    Args:
        maps: the gate set's noisy maps.
        gate: a physical gate that ``maps`` has (a Clifford: X, X/2, ...).
        compilation, lengths, method, sequences, seed: as
            :func:`shaper.physics.benchmarking.predict_rb`.
        reference: a reference decay already computed with the same settings, or None.

    Returns:
        The :class:`Interleaved`.

    Raises:
        InputError: a gate the maps lack, or the errors of ``predict_rb``.

    References:
        E. Magesan et al., Phys. Rev. Lett. 109, 080505 (2012).
    """
    started = time.perf_counter()
    key = str(gate).strip().upper()
    if key not in maps.gates or key not in ROTATIONS:
        raise InputError(f"interleaved RB needs a physical gate of the set; {gate!r} is not "
                         f"one of {', '.join(maps.gates)}")
    lengths = check_run(lengths, method, sequences)
    compilation = compilation or compile_cliffords(maps.gates)
    if reference is None:
        reference = predict_rb(maps, compilation=compilation, lengths=lengths,
                               method=method, sequences=sequences, seed=seed)
    element = int(single_qubit_cliffords().find(op_unitary(key)[None])[0])
    means, errors = average(clifford_maps(maps, compilation), lengths, maps.levels, method,
                         sequences, seed + 1, maps.gates[key], element)
    inter = decay_result(1, method, lengths, means, errors, sequences, seed + 1,
                         compilation.summary(), started=started)
    infidelity, leak = channel_figures(maps.gates[key], op_unitary(key), (maps.levels,))
    return Interleaved(key, reference, inter, infidelity, leak)
