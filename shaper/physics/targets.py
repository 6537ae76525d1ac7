"""What the pulse should do: a gate on the computational subspace, or a state transfer.

One-qubit gates follow the usual matrices (Nielsen and Chuang, Quantum
Computation and Quantum Information, 2000, ch. 4); X/2 and Y/2 are rotations by
pi/2 about x and y, ``exp(-i pi/4 sigma)``; -X/2 and -Y/2 by
-pi/2. Two-qubit gates act on |q0 q1> with
q0 most significant (README, "Conventions"); CNOT's control is q0.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from functools import reduce

import numpy as np

from shaper.errors import InputError

_S2 = 1 / np.sqrt(2)
GATES: dict[str, np.ndarray] = {
    "I": np.eye(2),
    "X": np.array([[0, 1], [1, 0]]),
    "Y": np.array([[0, -1j], [1j, 0]]),
    "Z": np.diag([1, -1]),
    "X/2": _S2 * np.array([[1, -1j], [-1j, 1]]),
    "Y/2": _S2 * np.array([[1, -1], [1, 1]]),
    "-X/2": _S2 * np.array([[1, 1j], [1j, 1]]),
    "-Y/2": _S2 * np.array([[1, 1], [-1, 1]]),
    "H": _S2 * np.array([[1, 1], [1, -1]]),
    "S": np.diag([1, 1j]),
    "T": np.diag([1, np.exp(1j * np.pi / 4)]),
    "CZ": np.diag([1, 1, 1, -1]),
    "CNOT": np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]]),
    "ISWAP": np.array([[1, 0, 0, 0], [0, 0, 1j, 0], [0, 1j, 0, 0], [0, 0, 0, 1]]),
    "SQRT_ISWAP": np.array([[1, 0, 0, 0], [0, _S2, 1j * _S2, 0],
                            [0, 1j * _S2, _S2, 0], [0, 0, 0, 1]]),
}
ALIASES = {"ID": "I", "IDENTITY": "I", "ISWAP": "ISWAP", "SQRT(ISWAP)": "SQRT_ISWAP",
           "SQRTISWAP": "SQRT_ISWAP", "CX": "CNOT", "HADAMARD": "H"}


@dataclass(frozen=True)
class Target:
    """A target on the computational subspace of dimension ``d_c``.

    Either a gate (``unitary`` set, ``(d_c, d_c)``) or a state transfer (``initial``
    and ``final`` set, ``(d_c,)`` normalised); ``label`` is for reports.
    """

    label: str
    unitary: np.ndarray | None = None
    initial: np.ndarray | None = None
    final: np.ndarray | None = None

    @property
    def is_gate(self) -> bool:
        return self.unitary is not None

    @property
    def dimension(self) -> int:
        return int((self.unitary if self.is_gate else self.initial).shape[0])


def gate_names() -> list[str]:
    """The names :func:`gate` knows, for error messages and docs."""
    return ["I", "X", "Y", "Z", "X/2", "Y/2", "-X/2", "-Y/2", "H", "S", "T", "CZ", "CNOT",
            "iSWAP", "sqrt(iSWAP)"]


def _lookup(name: str) -> np.ndarray:
    key = str(name).strip().upper()
    key = ALIASES.get(key, key)
    if key not in GATES:
        raise InputError(f"unknown gate {name!r}; known gates: {', '.join(gate_names())}, "
                         f"a list of one-qubit gates (one per qubit), or a matrix")
    return GATES[key].astype(complex)


def gate(spec: str | Sequence[str] | np.ndarray, *, qubits: int | None = None) -> Target:
    """A gate target from a name, a list of one-qubit names (tensor product), or a matrix.

    Args:
        spec: ``"X"``, ``"CZ"``, ``["X", "I"]`` (X on q0, identity on q1), or a unitary.
        qubits: if given, the number of qubits the target must act on.

    Raises:
        InputError: unknown name, a matrix that is not unitary or not 2^n square, or a
            target for another number of qubits.

    Examples:
        >>> gate(["X", "I"]).unitary.shape
        (4, 4)
        >>> gate("X/2").label
        'X/2'
    """
    if isinstance(spec, str):
        unitary, label = _lookup(spec), spec
    elif isinstance(spec, np.ndarray) or (isinstance(spec, Sequence) and spec
                                          and not isinstance(spec[0], str)):
        unitary, label = np.asarray(spec, dtype=complex), "matrix"
        if unitary.ndim != 2 or unitary.shape[0] != unitary.shape[1] or unitary.shape[0] < 2:
            raise InputError(f"a target matrix must be square, got shape {unitary.shape}")
        error = float(np.max(np.abs(unitary.conj().T @ unitary - np.eye(len(unitary)))))
        if error > 1e-8:
            raise InputError(f"the target matrix is not unitary: max |U^dag U - 1| = "
                             f"{error:.3g} (needs < 1e-8)")
    elif isinstance(spec, Sequence) and spec:
        parts = [_lookup(s) for s in spec]
        if any(p.shape != (2, 2) for p in parts):
            raise InputError(f"a list target takes one-qubit gates only, got {list(spec)}")
        unitary, label = reduce(np.kron, parts), "*".join(spec)
    else:
        raise InputError(f"cannot read target {spec!r}")
    if qubits is not None and unitary.shape[0] != 2 ** qubits:
        raise InputError(f"target {label!r} acts on {int(np.log2(unitary.shape[0]))} qubit(s), "
                         f"the system has {qubits}")
    return Target(label=label, unitary=unitary)


def on_qubits(target: Target, positions: Sequence[int], qubits: int) -> Target:
    """``target`` acting on the qubits at ``positions`` (in its own qubit order) of a
    ``qubits``-qubit register, the identity on the others; the label stays.

    Raises:
        InputError: positions repeated, out of range, or not as many as the target's qubits.
    """
    k = int(np.log2(target.dimension))
    positions = [int(p) for p in positions]
    if len(positions) != k or len(set(positions)) != k or not all(
            0 <= p < qubits for p in positions):
        raise InputError(f"target {target.label!r} acts on {k} qubit(s); got positions "
                         f"{positions} of {qubits}")
    rest = [q for q in range(qubits) if q not in positions]
    full = np.kron(target.unitary, np.eye(2 ** len(rest)))  # order: positions, then rest
    order = positions + rest  # axis j of `full` is qubit order[j]
    tensor = full.reshape([2] * (2 * qubits))
    back = np.argsort(order)
    tensor = tensor.transpose(list(back) + [qubits + b for b in back])
    return Target(label=target.label, unitary=tensor.reshape(2 ** qubits, 2 ** qubits))


def state_transfer(initial: Sequence[complex], final: Sequence[complex]) -> Target:
    """A state-to-state target; both vectors live on the computational subspace.

    Raises:
        InputError: vectors of different length, or zero.
    """
    a, b = np.asarray(initial, dtype=complex), np.asarray(final, dtype=complex)
    if a.ndim != 1 or a.shape != b.shape:
        raise InputError(f"initial and final states must be vectors of one length, got "
                         f"{a.shape} and {b.shape}")
    for name, v in (("initial", a), ("final", b)):
        if np.linalg.norm(v) == 0 or not np.all(np.isfinite(v)):
            raise InputError(f"the {name} state must be a finite, non-zero vector")
    return Target(label="state transfer", initial=a / np.linalg.norm(a),
                  final=b / np.linalg.norm(b))


# gate -> (the gate it is derived from, the drive phase in degrees)
DERIVED = {"Y": ("X", 90.0), "Y/2": ("X/2", 90.0), "-X/2": ("X/2", 180.0),
           "-Y/2": ("X/2", 270.0)}


def slug(label: str) -> str:
    """A file-safe name for a gate label: ``X/2`` -> ``x_half``, ``-Y/2`` -> ``my_half``."""
    return label.strip().lower().replace("/2", "_half").replace("-", "m").replace(
        "(", "").replace(")", "")


def plan(labels, qubits: int) -> list[tuple[str, list[tuple[str, float]]]]:
    """The gates to optimise, in order, each with the gates derived from it ``(label,
    phase_deg)``. Derivation needs one qubit; a parent not asked for is optimised anyway."""
    bases: dict[str, list[tuple[str, float]]] = {}
    for label in labels:
        key = label.strip().upper()
        if qubits == 1 and key in DERIVED:
            parent, phase = DERIVED[key]
            bases.setdefault(parent, []).append((key, phase))
        else:
            bases.setdefault(key, [])
    return list(bases.items())
