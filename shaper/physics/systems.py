"""System models: plain parameters in, the propagator's arrays out.

A :class:`System` holds the drift (Hz, drive frame), the control operators, how
the controls group into instrument channels (an I/Q pair or one baseband line),
the subsystem dimensions and which basis states are computational. Models follow
the README's "Conventions"; the transmon is the Duffing model of Koch et al.,
Phys. Rev. A 76, 042319 (2007).
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


def transmon_collapse(levels: int, t1_s: float | None, t2_s: float | None, *,
                      index: int = 0, dims: Sequence[int] | None = None,
                      lowering: np.ndarray | None = None) -> list[np.ndarray]:
    """Collapse operators of one transmon (embedded in ``dims``) for its T1 and T2.

    Level n decays to n - 1 at rate n / T1: ``L = a / sqrt(T1)`` (the harmonic-oscillator
    scaling of the Duffing model; common practice, no source); ``lowering`` replaces ``a``
    by a model's own (the charge model's ``<i|n|i+1>/<0|n|1>``: rates follow the squared
    charge matrix elements, Fermi's golden rule for charge noise). Pure dephasing couples to
    the number operator: ``L = sqrt(2 / T_phi) n`` with ``1 / T_phi = 1 / T2 - 1 / (2 T1)``,
    so the coherence between levels m and n decays at ``(m - n)^2 / T_phi`` besides the
    decay, and the 0-1 coherence at exactly 1 / T2. T2 alone (no T1) is pure dephasing.

    Raises:
        InputError: a time that is not a positive finite number, or T2 > 2 T1.

    Examples:
        >>> [op.shape for op in transmon_collapse(3, 40e-6, 30e-6)]
        [(3, 3), (3, 3)]
    """
    dims = tuple(dims or (levels,))
    for value, name in ((t1_s, "t1"), (t2_s, "t2")):
        if value is not None and not (isinstance(value, int | float) and np.isfinite(value)
                                      and value > 0):
            raise InputError(f"{name} must be a positive time, got {value!r}")
    if t1_s is not None and t2_s is not None and t2_s > 2 * t1_s * (1 + 1e-12):
        raise InputError(f"t2 = {t2_s:g} s is longer than 2 t1 = {2 * t1_s:g} s, which no "
                         f"qubit reaches (T2 <= 2 T1)")
    out = []
    if t1_s is not None:
        a = _lowering(levels) if lowering is None else np.asarray(lowering, complex)
        out.append(_embed(a / np.sqrt(t1_s), index, dims))
    if t2_s is not None:
        rate_phi = 1.0 / t2_s - (0.0 if t1_s is None else 0.5 / t1_s)
        if rate_phi > 0:
            n = np.diag(np.arange(levels)).astype(complex)
            out.append(_embed(np.sqrt(2 * rate_phi) * n, index, dims))
    return out


def _lowering(levels: int) -> np.ndarray:
    return np.diag(np.sqrt(np.arange(1, levels)), k=1).astype(complex)


def _embed(op: np.ndarray, index: int, dims: Sequence[int]) -> np.ndarray:
    out = np.array([[1.0 + 0j]])
    for i, dim in enumerate(dims):
        out = np.kron(out, op if i == index else np.eye(dim))
    return out


def _computational_indices(dims: Sequence[int], qubit_levels: int = 2) -> np.ndarray:
    strides = [int(np.prod(dims[i + 1:])) for i in range(len(dims))]
    return np.array([sum(b * s for b, s in zip(bits, strides, strict=True))
                     for bits in itertools.product(range(qubit_levels), repeat=len(dims))])


MAX_CHARGE_LEVELS = 40


@dataclass(frozen=True, kw_only=True)
class TransmonSpec:
    """One transmon: levels >= 2, qubit frequency and anharmonicity in Hz."""

    name: str = "q0"
    levels: int = 3
    qubit_frequency_hz: float
    anharmonicity_hz: float = 0.0
    flux: bool = False  # add a baseband control on its number operator
    t1_s: float | None = None  # energy relaxation time (None: no decay)
    t2_s: float | None = None  # coherence time of the 0-1 superposition (None: T2 = 2 T1)
    spectrum: str = "duffing"  # or "charge": levels of the Cooper-pair box (physics.charge)
    offset_charge: float = 0.0  # n_g of the charge model, in Cooper pairs

    def __post_init__(self):
        if not isinstance(self.levels, int | np.integer) or self.levels < 2:
            raise InputError(f"transmon {self.name!r}: levels must be a whole number >= 2 "
                             f"(0 and 1 are the qubit), got {self.levels!r}")
        if self.spectrum not in SPECTRA:
            raise InputError(f"transmon {self.name!r}: spectrum must be one of "
                             f"{', '.join(SPECTRA)}, got {self.spectrum!r}")
        if self.spectrum == "charge" and self.levels > MAX_CHARGE_LEVELS:
            raise InputError(f"transmon {self.name!r}: the charge model keeps at most "
                             f"{MAX_CHARGE_LEVELS} levels (levels far above the cosine "
                             f"potential are not a transmon's), got {self.levels}")
        transmon_collapse(self.levels, self.t1_s, self.t2_s)  # checks the times

    def ladder(self) -> Ladder:
        """Its levels, drive operator and flux response (:class:`Ladder`)."""
        return SPECTRA[self.spectrum](self)


@dataclass(frozen=True)
class Ladder:
    """One transmon's levels as a model gives them.

    ``energies_hz`` ``(levels,)`` E_i - E_0 (lab frame); ``drive`` ``(levels, levels)`` the
    physical drive operator, normalised to ``<0|D|1> = 1`` so that I is the 0-1 Rabi
    frequency; ``flux`` ``(levels,)`` how far level i moves per hertz of 0-1 shift on a
    flux line (first order); ``parameters``: what the report shows of the model.
    """

    energies_hz: np.ndarray
    drive: np.ndarray
    flux: np.ndarray
    parameters: dict

    @property
    def lowering(self) -> np.ndarray:
        """The drive's lowering part (``<i|D|i+1>``): ``a`` in the Duffing model."""
        return np.triu(np.tril(self.drive, 1), 1)


def _duffing(t: TransmonSpec) -> Ladder:
    """Koch et al. 2007 in the Duffing approximation (README, "Conventions")."""
    n = np.arange(t.levels)
    a = _lowering(t.levels)
    return Ladder(energies_hz=t.qubit_frequency_hz * n + 0.5 * t.anharmonicity_hz * n * (n - 1),
                  drive=a + a.conj().T, flux=n.astype(float), parameters={"spectrum": "duffing"})


def _charge(t: TransmonSpec) -> Ladder:
    """The Cooper-pair box (README, "The charge model"), E_J and E_C fitted to f01, alpha."""
    from shaper.physics import charge

    ej, ec = charge.fit(t.qubit_frequency_hz, t.anharmonicity_hz,
                        offset_charge=t.offset_charge)
    box = charge.levels(ej, ec, t.levels, offset_charge=t.offset_charge)
    return Ladder(energies_hz=box.energies_hz, drive=box.drive_operator,
                  flux=charge.flux_shifts(ej, ec, t.levels, offset_charge=t.offset_charge),
                  parameters={"spectrum": "charge", "ej_hz": ej, "ec_hz": ec,
                              "ej_over_ec": ej / ec, "offset_charge": t.offset_charge,
                              "charge_basis": 2 * box.charges + 1,
                              "n12_over_n01": float(abs(box.drive_operator[1, 2]))
                              if t.levels > 2 else None})


SPECTRA = {"duffing": _duffing, "charge": _charge}  # a new transmon model: one entry


def transmon(levels: int, qubit_frequency_hz: float, anharmonicity_hz: float, *,
             drive_frequency_hz: float | None = None, name: str = "q0",
             t1_s: float | None = None, t2_s: float | None = None) -> System:
    """One transmon (Duffing oscillator) driven by an I/Q pair, in the drive frame.

    Args:
        levels: number of levels kept, >= 2.
        qubit_frequency_hz: f_q, the 0-1 transition.
        anharmonicity_hz: alpha, negative for a transmon (f_12 = f_q + alpha).
        drive_frequency_hz: f_d, the frame; default resonant (f_q).
        name: the channel and qubit name.
        t1_s, t2_s: coherence times (seconds), optional (:func:`transmon_collapse`).

    Returns:
        A :class:`System` with controls ``<name>_i`` = (a + a^dag)/2 and
        ``<name>_q`` = i (a^dag - a)/2 (README, "Conventions").

    Examples:
        >>> s = transmon(3, 5.1e9, -220e6)
        >>> s.drift.real.diagonal() / 1e6
        array([   0.,    0., -220.])
        >>> s.control_names
        ('q0_i', 'q0_q')
    """
    spec = TransmonSpec(name=name, levels=levels, qubit_frequency_hz=qubit_frequency_hz,
                        anharmonicity_hz=anharmonicity_hz, t1_s=t1_s, t2_s=t2_s)
    return coupled_transmons([spec], [], frame_frequency_hz=drive_frequency_hz)


def coupled_transmons(transmons: Sequence[TransmonSpec],
                      couplings: Sequence[tuple[str, str, float]] = (), *,
                      frame_frequency_hz: float | None = None,
                      drives: Sequence[tuple[str, str, float]] = ()) -> System:
    """Transmons with exchange couplings, in one frame rotating at the drive frequency.

    ``H/h = sum_q [(f_q - f_frame) n_q + alpha_q/2 n_q(n_q - 1)]
    + sum g (a_i^dag a_j + a_j^dag a_i)`` plus, per transmon, the I/Q drive of
    the README's "Conventions" and, if ``flux``, a baseband control ``u(t) n_q``.

    Args:
        transmons: the transmons, first one leftmost in the tensor product.
        couplings: ``(name_a, name_b, g_hz)`` triples.
        frame_frequency_hz: the common frame; default the first transmon's frequency.
        drives: extra I/Q drives ``(name, transmon, carrier_hz)``: a line of that transmon
            carrying another frequency (e.g. the target's, for cross-resonance), with the
            transmon's drive operators and a carrier offset from the frame.

    Returns:
        A :class:`System`; control names ``<q>_i``, ``<q>_q``, ``<q>_flux`` and
        ``<drive>_i``, ``<drive>_q``.
    """
    if not transmons:
        raise InputError("at least one transmon is needed")
    names = [t.name for t in transmons]
    if len(set(names)) != len(names):
        raise InputError(f"transmon names must differ, got {names}")
    frame = transmons[0].qubit_frequency_hz if frame_frequency_hz is None else frame_frequency_hz
    dims = tuple(int(t.levels) for t in transmons)
    ladders = [t.ladder() for t in transmons]
    numbers = [_embed(np.diag(np.arange(dim)).astype(complex), q, dims)
               for q, dim in enumerate(dims)]
    static = sum(_embed(np.diag(ld.energies_hz).astype(complex), q, dims)
                 for q, ld in enumerate(ladders))
    drive_ops = [_embed(ld.drive.astype(complex), q, dims) for q, ld in enumerate(ladders)]
    for a_name, b_name, g in couplings:  # charge coupling g D_a D_b; its RWA is the exchange
        for nm in (a_name, b_name):
            if nm not in names:
                raise InputError(f"coupling names transmon {nm!r}, which is not one of {names}")
        if a_name == b_name:
            raise InputError(f"a coupling needs two different transmons, got {a_name!r} twice")
        static = static + g * drive_ops[names.index(a_name)] @ drive_ops[names.index(b_name)]
    from shaper.physics.labframe import LabModel
    lab = LabModel(frame_hz=frame, excitations=np.real(np.diag(sum(numbers))), static=static,
                   drives={})
    drift = lab.rotating_drift()
    controls, control_names, channels, transitions = [], [], [], {}

    def add_drive(name, q, offset):
        lower = _embed(ladders[q].lowering.astype(complex), q, dims)
        start = len(controls)
        controls.extend([0.5 * (lower + lower.conj().T), 0.5j * (lower.conj().T - lower)])
        control_names.extend([f"{name}_i", f"{name}_q"])
        channels.append(Channel(name, "iq", (start, start + 1), q, offset_hz=offset))
        lab.drives[name] = drive_ops[q]

    for q, (t, ld) in enumerate(zip(transmons, ladders, strict=True)):
        e = ld.energies_hz
        transitions[t.name] = {"f01_hz": e[1] - frame,
                               "f12_hz": (e[2] - e[1] if len(e) > 2 else
                                          t.qubit_frequency_hz + t.anharmonicity_hz) - frame}
        add_drive(t.name, q, 0.0)
    for name, on, carrier in drives:
        if on not in names:
            raise InputError(f"drive {name!r} is on transmon {on!r}, which is not one of "
                             f"{names}")
        add_drive(name, names.index(on), carrier - frame)
    for q, (t, ld) in enumerate(zip(transmons, ladders, strict=True)):
        if t.flux:
            channels.append(Channel(f"{t.name}_flux", "baseband", (len(controls),), q))
            controls.append(_embed(np.diag(ld.flux).astype(complex), q, dims))
            control_names.append(f"{t.name}_flux")
    collapse, coherence = [], {}
    for q, t in enumerate(transmons):
        collapse += transmon_collapse(t.levels, t.t1_s, t.t2_s, index=q, dims=dims,
                                      lowering=ladders[q].lowering)
        if t.t1_s is not None or t.t2_s is not None:
            coherence[t.name] = {"t1_s": t.t1_s, "t2_s": t.t2_s}
    return System(collapse=tuple(collapse), coherence=coherence, drift=drift, lab=lab,
                  controls=np.array(controls), control_names=tuple(control_names),
                  channels=tuple(channels), dims=dims,
                  computational=_computational_indices(dims),
                  qubit_names=tuple(names), number_operators=np.array(numbers),
                  transition_frequencies=transitions,
                  models={t.name: ld.parameters for t, ld in zip(transmons, ladders,
                                                                 strict=True)})


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
    if computational is None:
        comp = _computational_indices(dims)
    else:
        comp = np.asarray(computational, dtype=int)
        if comp.ndim != 1 or len(comp) < 2 or len(set(comp.tolist())) != len(comp) \
                or comp.min() < 0 or comp.max() >= d:
            raise InputError(f"computational must list at least two different basis indices "
                             f"in 0..{d - 1}, got {list(np.atleast_1d(comp))}")
    qubit_names = tuple(qubit_names or (f"q{i}" for i in range(len(dims))))
    numbers = np.array([_embed(np.diag(np.arange(dim)).astype(complex), i, dims)
                        for i, dim in enumerate(dims)])
    ops_collapse = []
    for cname, op in (collapse or {}).items():
        op = np.asarray(op, dtype=complex)
        if op.shape != (d, d) or not np.all(np.isfinite(op)):
            raise InputError(f"collapse operator {cname!r} has shape {op.shape}, the drift is "
                             f"({d}, {d})")
        ops_collapse.append(op)
    return System(collapse=tuple(ops_collapse), drift=drift, controls=np.array(ops),
                  control_names=tuple(names),
                  channels=tuple(channels), dims=dims, computational=comp,
                  qubit_names=qubit_names, number_operators=numbers)
