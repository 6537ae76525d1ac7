"""System models: plain parameters in, the propagator's arrays out.

A :class:`System` holds the drift (Hz, drive frame), the control operators, how
the controls group into instrument channels (an I/Q pair or one baseband line),
the subsystem dimensions and which basis states are computational. Models follow
the README's "Conventions"; transmons are built in :mod:`shaper.physics.transmons`.
"""

from __future__ import annotations

import itertools
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from shaper.errors import InputError


@dataclass(frozen=True)
class Channel:
    """One instrument output: an I/Q pair (``kind="iq"``) or one real baseband line.

    ``columns`` are the indices of its controls in ``System.controls``: (I, Q) or (u,).
    ``subsystem`` is the index of the subsystem it acts on, or None. A drive whose carrier
    is not the frame's (``offset_hz``) turns in the frame: its held envelope is multiplied
    by ``exp(-2 pi i offset t)`` (:mod:`shaper.signal.chain`).
    """

    name: str
    kind: str  # "iq" or "baseband"
    columns: tuple[int, ...]
    subsystem: int | None = None
    offset_hz: float = 0.0  # an I/Q drive's carrier minus the frame frequency (0: in frame)


@dataclass(frozen=True)
class System:
    """Arrays of a driven N-level system, ready for :func:`shaper.propagate`.

    Attributes:
        drift: ``(d, d)`` complex Hermitian, Hz.
        controls: ``(k, d, d)`` complex Hermitian, dimensionless (a sample in Hz times it).
        control_names: ``k`` names, ``"<channel>_i"``, ``"<channel>_q"`` or ``"<channel>"``.
        channels: how the controls group into instrument channels.
        dims: subsystem dimensions, first subsystem most significant.
        computational: indices of the computational basis states in the full space,
            in the order 00, 01, 10, 11, ... (one entry per state).
        qubit_names: one name per subsystem.
        number_operators: ``(len(dims), d, d)``, the level number of each subsystem;
            a detuning offset ``delta`` (Hz) adds ``delta * number_operators[q]``.
        transition_frequencies: per subsystem, the frequencies (Hz, drive frame) of its
            0-1 and 1-2 transitions where the model knows them (for spectrum plots).
    """

    drift: np.ndarray
    controls: np.ndarray
    control_names: tuple[str, ...]
    channels: tuple[Channel, ...]
    dims: tuple[int, ...]
    computational: np.ndarray
    qubit_names: tuple[str, ...]
    number_operators: np.ndarray
    transition_frequencies: dict = field(default_factory=dict)
    # open system (README, "Decoherence"): collapse operators L_k, each scaled so that the
    # Lindblad term is L rho L^dag - {L^dag L, rho}/2 in 1/s; empty: a closed system
    collapse: tuple = ()
    coherence: dict = field(default_factory=dict)  # per qubit: {"t1_s", "t2_s"} given
    # the lab-frame Hamiltonian this System approximates (physics.labframe.LabModel);
    # None: matrices given by the user, whose lab frame shaper does not know
    lab: object = None
    models: dict = field(default_factory=dict)  # per transmon: its spectrum and parameters

    def __post_init__(self):
        check_names(self)

    @property
    def dimension(self) -> int:
        return int(self.drift.shape[0])

    @property
    def qubit_count(self) -> int:
        return len(self.dims)

    def iq_columns(self) -> np.ndarray:
        """``(p, 2)`` control columns (I, Q) of each I/Q channel, in channel order."""
        return np.array([c.columns for c in self.channels if c.kind == "iq"],
                        int).reshape(-1, 2)

    def isometry(self) -> np.ndarray:
        """``(d, d_c)`` isometry V onto the computational subspace."""
        v = np.zeros((self.dimension, len(self.computational)))
        v[self.computational, np.arange(len(self.computational))] = 1.0
        return v

    def level_labels(self) -> list[str]:
        """Labels of the basis states: ``"0"``, ``"1"``, ... or ``"00"``, ``"01"``, ..."""
        return ["".join(str(n) for n in idx) for idx in itertools.product(*map(range, self.dims))]


NAME = re.compile(r"[A-Za-z0-9_-]{1,64}")  # used with fullmatch
NAME_RULE = "1 to 64 letters, digits, '_' or '-'"


def check_name(name, what: str) -> str:
    """``name`` if it is a safe file-name part and CSV header (:data:`NAME`), else InputError."""
    if not isinstance(name, str) or not NAME.fullmatch(name):
        raise InputError(f"{what} {name!r} is not a valid name: use {NAME_RULE} (names "
                         f"become file names and CSV column headers)")
    return name


def check_names(system: System) -> None:
    """Every name valid, every channel and control column name unique, every control in
    exactly one channel, with the column names the waveform file uses.

    A clash would give one channel another's amplitude limit and full scale (a transmon
    ``qa`` with flux beside a transmon named ``qa_flux``; controls ``drive_i``,
    ``drive_q`` and ``drive``), so it is refused, not resolved.
    """
    for q in system.qubit_names:
        check_name(q, "qubit")
    names = [c.name for c in system.channels]
    for c in names:
        check_name(c, "channel")
    twice = sorted({c for c in names if names.count(c) > 1})
    if twice:
        raise InputError(f"channel names must be unique, but {', '.join(map(repr, twice))} "
                         f"names more than one channel (derived names: <transmon>_flux for a "
                         f"flux line, <c>_i and <c>_q pair into channel <c>); rename one")
    columns = [i for c in system.channels for i in c.columns]
    if sorted(columns) != list(range(len(system.control_names))):
        raise InputError("every control must belong to exactly one channel")
    for c in system.channels:
        expected = (f"{c.name}_i", f"{c.name}_q") if c.kind == "iq" else (c.name,)
        got = tuple(system.control_names[i] for i in c.columns)
        if got != expected:
            raise InputError(f"channel {c.name!r}: its controls are named {got}, the waveform "
                             f"file would call them {expected}")
    headers = list(system.control_names)
    twice = sorted({h for h in headers if headers.count(h) > 1})
    if twice:
        raise InputError(f"the waveform columns {', '.join(map(repr, twice))} would appear "
                         f"twice; rename the channels so that no <c>_i or <c>_q equals another "
                         f"channel's name")


HERMITIAN_TOLERANCE = 1e-9  # relative to the largest entry


def assert_hermitian(matrix: np.ndarray, name: str) -> None:
    """Raise :class:`InputError` unless ``matrix`` is Hermitian to a relative 1e-9."""
    scale = max(float(np.max(np.abs(matrix))), 1e-300)
    error = float(np.max(np.abs(matrix - matrix.conj().T)))
    if not np.all(np.isfinite(matrix)):
        raise InputError(f"{name} contains NaN or infinite entries")
    if error > HERMITIAN_TOLERANCE * scale:
        raise InputError(f"{name} is not Hermitian: max |A - A^dag| = {error:.3g} against "
                         f"entries up to {scale:.3g}; a Hamiltonian term must equal its "
                         f"conjugate transpose")


def embed(op: np.ndarray, index: int, dims: Sequence[int]) -> np.ndarray:
    out = np.array([[1.0 + 0j]])
    for i, dim in enumerate(dims):
        out = np.kron(out, op if i == index else np.eye(dim))
    return out


def computational_indices(dims: Sequence[int], qubit_levels: int = 2) -> np.ndarray:
    strides = [int(np.prod(dims[i + 1:])) for i in range(len(dims))]
    return np.array([sum(b * s for b, s in zip(bits, strides, strict=True))
                     for bits in itertools.product(range(qubit_levels), repeat=len(dims))])


def from_matrices(drift: np.ndarray, controls: Mapping[str, np.ndarray], *,
                  dims: Sequence[int] | None = None,
                  computational: Sequence[int] | None = None,
                  qubit_names: Sequence[str] | None = None,
                  collapse: Mapping[str, np.ndarray] | None = None) -> System:
    """Any system given as matrices (Hz).

    Controls named ``<c>_i`` and ``<c>_q`` form one I/Q channel ``<c>``; every other
    control is a baseband channel of its own.

    Args:
        drift: ``(d, d)`` Hermitian, Hz.
        controls: name -> ``(d, d)`` Hermitian operator.
        dims: subsystem dimensions whose product is d; default ``(d,)``.
        computational: indices of the computational basis states; default: the states
            with every subsystem in level 0 or 1.
        qubit_names: one per subsystem; default q0, q1, ...
        collapse: name -> collapse operator ``L`` (``sqrt(rate)`` times a matrix, 1/sqrt(s)),
            for an open system.

    Raises:
        InputError: a matrix is not square, not Hermitian, of another size, or the
            dims or computational levels do not fit.
    """
    drift = np.asarray(drift, dtype=complex)
    if drift.ndim != 2 or drift.shape[0] != drift.shape[1]:
        raise InputError(f"drift must be a square matrix, got shape {drift.shape}")
    assert_hermitian(drift, "drift")
    d = drift.shape[0]
    dims = tuple(int(x) for x in (dims if dims is not None else (d,)))
    if int(np.prod(dims)) != d or any(x < 2 for x in dims):
        raise InputError(f"dims {list(dims)} must each be >= 2 and multiply to the drift's "
                         f"size {d}")
    if not controls:
        raise InputError("at least one control operator is needed")
    ops, names = [], []
    for name, op in controls.items():
        op = np.asarray(op, dtype=complex)
        if op.shape != (d, d):
            raise InputError(f"control {name!r} has shape {op.shape}, the drift is ({d}, {d})")
        assert_hermitian(op, f"control {name!r}")
        ops.append(op)
        names.append(str(name))
    channels = _channels_of(names)
    if computational is None:
        comp = computational_indices(dims)
    else:
        comp = np.asarray(computational, dtype=int)
        if comp.ndim != 1 or len(comp) < 2 or len(set(comp.tolist())) != len(comp) \
                or comp.min() < 0 or comp.max() >= d:
            raise InputError(f"computational must list at least two different basis indices "
                             f"in 0..{d - 1}, got {list(np.atleast_1d(comp))}")
    qubit_names = tuple(qubit_names or (f"q{i}" for i in range(len(dims))))
    numbers = np.array([embed(np.diag(np.arange(dim)).astype(complex), i, dims)
                        for i, dim in enumerate(dims)])
    ops_collapse = _collapse_operators(collapse or {}, d)
    return System(collapse=tuple(ops_collapse), drift=drift, controls=np.array(ops),
                  control_names=tuple(names),
                  channels=tuple(channels), dims=dims, computational=comp,
                  qubit_names=qubit_names, number_operators=numbers)


def _channels_of(names: Sequence[str]) -> list[Channel]:
    """``<c>_i`` with ``<c>_q``: one I/Q channel ``<c>``; any other control: baseband."""
    channels, used = [], set()
    for idx, name in enumerate(names):
        if idx in used:
            continue
        if name.endswith("_i") and name[:-2] + "_q" in names:
            jdx = names.index(name[:-2] + "_q")
            channels.append(Channel(name[:-2], "iq", (idx, jdx)))
            used |= {idx, jdx}
        elif not (name.endswith("_q") and name[:-2] + "_i" in names):
            channels.append(Channel(name, "baseband", (idx,)))
            used.add(idx)
    return channels


def _collapse_operators(collapse: Mapping[str, np.ndarray], d: int) -> list[np.ndarray]:
    out = []
    for cname, op in collapse.items():
        op = np.asarray(op, dtype=complex)
        if op.shape != (d, d) or not np.all(np.isfinite(op)):
            raise InputError(f"collapse operator {cname!r} has shape {op.shape}, the drift is "
                             f"({d}, {d})")
        out.append(op)
    return out
