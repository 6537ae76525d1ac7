"""Transmons: one or several coupled, in the frame of a drive (README, "Conventions").

The level ladder of each transmon comes from its spectrum model, a registry
(:data:`SPECTRA`): the Duffing oscillator of Koch et al., Phys. Rev. A 76, 042319 (2007),
or the Cooper-pair box solved in the charge basis (:mod:`shaper.physics.charge`; README,
"The charge model"). :func:`coupled_transmons` assembles the static Hamiltonian, the
drives, flux controls, collapse operators and the lab-frame model of a chip.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shaper.errors import InputError
from shaper.physics.systems import Channel, System, computational_indices, embed


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
        out.append(embed(a / np.sqrt(t1_s), index, dims))
    if t2_s is not None:
        rate_phi = 1.0 / t2_s - (0.0 if t1_s is None else 0.5 / t1_s)
        if rate_phi > 0:
            n = np.diag(np.arange(levels)).astype(complex)
            out.append(embed(np.sqrt(2 * rate_phi) * n, index, dims))
    return out


def _lowering(levels: int) -> np.ndarray:
    return np.diag(np.sqrt(np.arange(1, levels)), k=1).astype(complex)


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
    spectrum: str = "charge"  # the Cooper-pair box (physics.charge), or "duffing"
    offset_charge: float = 0.0  # n_g of the charge model, in Cooper pairs
    driven: bool = True  # False: a spectator with no drive line of its own (README, "Chips")

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
             t1_s: float | None = None, t2_s: float | None = None,
             spectrum: str = "charge") -> System:
    """One transmon driven by an I/Q pair, in the drive frame.

    Args:
        levels: number of levels kept, >= 2.
        qubit_frequency_hz: f_q, the 0-1 transition.
        anharmonicity_hz: alpha, negative for a transmon (f_12 = f_q + alpha).
        drive_frequency_hz: f_d, the frame; default resonant (f_q).
        name: the channel and qubit name.
        t1_s, t2_s: coherence times (seconds), optional (:func:`transmon_collapse`).
        spectrum: ``"charge"`` (the Cooper-pair box, the default: README, "The charge
            model") or ``"duffing"`` (the Duffing ladder).

    Returns:
        A :class:`System` with controls ``<name>_i`` = (a + a^dag)/2 and
        ``<name>_q`` = i (a^dag - a)/2 (README, "Conventions").

    Examples:
        >>> s = transmon(3, 5.1e9, -220e6, spectrum="duffing")
        >>> s.drift.real.diagonal() / 1e6
        array([   0.,    0., -220.])
        >>> s.control_names
        ('q0_i', 'q0_q')
    """
    spec = TransmonSpec(name=name, levels=levels, qubit_frequency_hz=qubit_frequency_hz,
                        anharmonicity_hz=anharmonicity_hz, t1_s=t1_s, t2_s=t2_s,
                        spectrum=spectrum)
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
    names = _checked_names(transmons, couplings, drives)
    frame = transmons[0].qubit_frequency_hz if frame_frequency_hz is None else frame_frequency_hz
    dims = tuple(int(t.levels) for t in transmons)
    ladders = [t.ladder() for t in transmons]
    numbers = [embed(np.diag(np.arange(dim)).astype(complex), q, dims)
               for q, dim in enumerate(dims)]
    static = sum(embed(np.diag(ld.energies_hz).astype(complex), q, dims)
                 for q, ld in enumerate(ladders))
    drive_ops = [embed(ld.drive.astype(complex), q, dims) for q, ld in enumerate(ladders)]
    for a_name, b_name, g in couplings:  # charge coupling g D_a D_b; its RWA is the exchange
        static = static + g * drive_ops[names.index(a_name)] @ drive_ops[names.index(b_name)]
    from shaper.physics.labframe import LabModel
    lab = LabModel(frame_hz=frame, excitations=np.real(np.diag(sum(numbers))), static=static,
                   drives={})
    controls, channels = _Controls(), []
    for q, t in enumerate(transmons):
        if t.driven:
            channels.append(controls.iq(t.name, q, 0.0, ladders[q].lowering, dims))
            lab.drives[t.name] = drive_ops[q]
    for name, on, carrier in drives:
        q = names.index(on)
        channels.append(controls.iq(name, q, carrier - frame, ladders[q].lowering, dims))
        lab.drives[name] = drive_ops[q]
    for q, (t, ld) in enumerate(zip(transmons, ladders, strict=True)):
        if t.flux:
            channels.append(controls.flux(f"{t.name}_flux", q, ld.flux, dims))
    collapse, coherence = _noise(transmons, ladders, dims)
    return System(collapse=collapse, coherence=coherence, drift=lab.rotating_drift(),
                  lab=lab, controls=np.array(controls.ops),
                  control_names=tuple(controls.names), channels=tuple(channels), dims=dims,
                  computational=computational_indices(dims), qubit_names=tuple(names),
                  number_operators=np.array(numbers),
                  transition_frequencies=_transitions(transmons, ladders, frame),
                  models={t.name: ld.parameters for t, ld in zip(transmons, ladders,
                                                                 strict=True)})


def _noise(transmons, ladders, dims) -> tuple[tuple[np.ndarray, ...], dict]:
    """Every transmon's collapse operators in the whole space (:func:`transmon_collapse`,
    its ladder's own lowering operator) and the coherence times the report lists."""
    collapse = tuple(op for q, t in enumerate(transmons)
                     for op in transmon_collapse(t.levels, t.t1_s, t.t2_s, index=q, dims=dims,
                                                 lowering=ladders[q].lowering))
    coherence = {t.name: {"t1_s": t.t1_s, "t2_s": t.t2_s} for t in transmons
                 if t.t1_s is not None or t.t2_s is not None}
    return collapse, coherence


def _checked_names(transmons, couplings, drives) -> list[str]:
    """The transmons' names, after checking that couplings and drives name them."""
    if not transmons:
        raise InputError("at least one transmon is needed")
    names = [t.name for t in transmons]
    if len(set(names)) != len(names):
        raise InputError(f"transmon names must differ, got {names}")
    for a_name, b_name, _ in couplings:
        for nm in (a_name, b_name):
            if nm not in names:
                raise InputError(f"coupling names transmon {nm!r}, which is not one of {names}")
        if a_name == b_name:
            raise InputError(f"a coupling needs two different transmons, got {a_name!r} twice")
    for name, on, _ in drives:
        if on not in names:
            raise InputError(f"drive {name!r} is on transmon {on!r}, which is not one of "
                             f"{names}")
    return names


class _Controls:
    """The control operators and their names, in the order channels claim them."""

    def __init__(self):
        self.ops, self.names = [], []

    def iq(self, name, q, offset_hz, lowering, dims) -> Channel:
        lower = embed(lowering.astype(complex), q, dims)
        start = len(self.ops)
        self.ops.extend([0.5 * (lower + lower.conj().T), 0.5j * (lower.conj().T - lower)])
        self.names.extend([f"{name}_i", f"{name}_q"])
        return Channel(name, "iq", (start, start + 1), q, offset_hz=offset_hz)

    def flux(self, name, q, flux, dims) -> Channel:
        self.ops.append(embed(np.diag(flux).astype(complex), q, dims))
        self.names.append(name)
        return Channel(name, "baseband", (len(self.ops) - 1,), q)


def _transitions(transmons, ladders, frame) -> dict:
    """Each transmon's 0-1 and 1-2 transitions relative to the frame (Hz)."""
    out = {}
    for t, ld in zip(transmons, ladders, strict=True):
        e = ld.energies_hz
        out[t.name] = {"f01_hz": e[1] - frame,
                       "f12_hz": (e[2] - e[1] if len(e) > 2 else
                                  t.qubit_frequency_hz + t.anharmonicity_hz) - frame}
    return out




def static_zz(static: np.ndarray, dims: Sequence[int], a: int = 0, b: int = 1) -> float:
    """The static ZZ (Hz) of transmons ``a`` and ``b`` at rest: ``E11 - E10 - E01 + E00`` of
    the dressed levels that the bare states (the others in 0) become, each the eigenstate
    of largest overlap, by exact diagonalisation of the static Hamiltonian (Hz; any frame
    linear in the excitation number cancels).

    Raises:
        InputError: two bare states claim the same dressed state (a resonance: the pair
            is too strongly hybridised for a ZZ to mean anything).
    """
    energies, vectors = np.linalg.eigh(np.asarray(static, complex))
    strides = [int(np.prod(dims[i + 1:])) for i in range(len(dims))]
    chosen = {}
    for bits in ((0, 0), (0, 1), (1, 0), (1, 1)):
        index = bits[0] * strides[a] + bits[1] * strides[b]
        chosen[bits] = int(np.argmax(np.abs(vectors[index, :]) ** 2))
    if len(set(chosen.values())) < 4:
        raise InputError("two bare states of the pair map to one dressed state (a "
                         "resonance): no static ZZ")
    e = {bits: float(energies[k]) for bits, k in chosen.items()}
    return e[(1, 1)] - e[(1, 0)] - e[(0, 1)] + e[(0, 0)]
