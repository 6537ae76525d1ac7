"""The transmon from its charge Hamiltonian (README, "The charge model").

Koch et al., Phys. Rev. A 76, 042319 (2007), eq. (2.1): the Cooper-pair box

    H/h = 4 E_C (n - n_g)^2 - E_J cos(phi)

in the charge basis n = -N..N (``cos(phi)`` couples n and n +- 1 with -E_J/2). Energies in
Hz (E/h). Its eigenstates give the levels and the charge matrix elements ``<i|n|j>`` that
the Duffing model approximates by a harmonic ladder; :func:`fit` finds E_J and E_C from
the qubit frequency and anharmonicity a lab measures.

The basis is grown until the levels kept have converged (:data:`CONVERGED`, relative to
the qubit frequency), so no truncation of the charge basis enters a figure.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.optimize

from shaper.errors import InputError

CONVERGED = 1e-13  # relative change of every kept level between N and N + 10 charges
MIN_RATIO, MAX_RATIO = 5.0, 1e4  # E_J / E_C a fit may reach (a transmon: 20-300)


def charge_hamiltonian(ej_hz: float, ec_hz: float, offset_charge: float,
                       charges: int) -> np.ndarray:
    """``(2N + 1, 2N + 1)`` H/h in the charge basis ``n = -N..N`` (Koch et al. eq. 2.1)."""
    n = np.arange(-charges, charges + 1)
    return (np.diag(4 * ec_hz * (n - offset_charge) ** 2)
            - 0.5 * ej_hz * (np.eye(n.size, k=1) + np.eye(n.size, k=-1)))


def _levels(ej_hz, ec_hz, offset_charge, count, charges):
    h = charge_hamiltonian(ej_hz, ec_hz, offset_charge, charges)
    return scipy.linalg.eigh(h, subset_by_index=(0, count - 1))


def basis_size(ej_hz: float, ec_hz: float, offset_charge: float, count: int) -> int:
    """The smallest N (in steps of 10, from 20) whose lowest ``count`` levels agree with
    N + 10's to :data:`CONVERGED` of the 0-1 frequency."""
    charges = 20
    while True:
        e1, _ = _levels(ej_hz, ec_hz, offset_charge, count, charges)
        e2, _ = _levels(ej_hz, ec_hz, offset_charge, count, charges + 10)
        if np.max(np.abs(e1 - e2)) <= CONVERGED * abs(e2[1] - e2[0]):
            return charges
        charges += 10
        if charges > 2000:
            raise InputError("the charge basis did not converge by 2000 charges; E_J/E_C is "
                             "outside a transmon's range")


@dataclass(frozen=True)
class ChargeLevels:
    """A transmon's lowest levels from the charge Hamiltonian.

    Attributes:
        ej_hz, ec_hz, offset_charge: the parameters.
        charges: N of the charge basis used (converged, :func:`basis_size`).
        energies_hz: ``(levels,)`` E_i - E_0.
        charge_matrix: ``(levels, levels)`` ``<i|n|j>``, phases chosen so that every
            ``<i|n|i+1>`` is real and positive (Hermitian; real for n_g = 0).
    """

    ej_hz: float
    ec_hz: float
    offset_charge: float
    charges: int
    energies_hz: np.ndarray
    charge_matrix: np.ndarray

    @property
    def drive_operator(self) -> np.ndarray:
        """``n / <0|n|1>``: the drive normalised so that I is the 0-1 Rabi frequency, as
        in the Duffing model (README, "Conventions")."""
        return self.charge_matrix / self.charge_matrix[0, 1].real


def levels(ej_hz: float, ec_hz: float, count: int, *, offset_charge: float = 0.0) -> ChargeLevels:
    """The lowest ``count`` levels and their charge matrix elements.

    Examples:
        >>> t = levels(15e9, 200e6, 3)  # E_J/E_C = 75
        >>> e = t.energies_hz
        >>> round(float(e[1]) / 1e9, 3), round(float(e[2] - 2 * e[1]) / 1e6, 1)
        (4.69, -222.8)
    """
    charges = basis_size(ej_hz, ec_hz, offset_charge, count)
    w, v = _levels(ej_hz, ec_hz, offset_charge, count, charges)
    v = v.astype(complex)
    n = np.diag(np.arange(-charges, charges + 1) - 0.0).astype(complex)
    for i in range(1, count):  # the phase convention: <i-1|n|i> real and positive
        element = v[:, i - 1].conj() @ n @ v[:, i]
        if abs(element) > 0:
            v[:, i] = v[:, i] * (abs(element) / element)
    matrix = v.conj().T @ n @ v
    return ChargeLevels(ej_hz=float(ej_hz), ec_hz=float(ec_hz),
                        offset_charge=float(offset_charge), charges=charges,
                        energies_hz=w - w[0], charge_matrix=matrix)


@functools.lru_cache(maxsize=256)
def fit(qubit_frequency_hz: float, anharmonicity_hz: float, *,
        offset_charge: float = 0.0) -> tuple[float, float]:
    """``(E_J, E_C)`` in Hz whose exact levels give ``f01`` and ``alpha = f12 - f01``.

    Starts from Koch et al.'s asymptotic formulas (f01 ~ sqrt(8 E_J E_C) - E_C,
    alpha ~ -E_C) and solves the exact levels with scipy's least squares.

    Raises:
        InputError: alpha not negative, or no transmon (E_J/E_C in [5, 1e4]) fits.
    """
    f01, alpha = float(qubit_frequency_hz), float(anharmonicity_hz)
    if not (f01 > 0 and alpha < 0 and -alpha < f01 / 4):
        raise InputError(f"the charge model needs a positive qubit frequency and a negative "
                         f"anharmonicity smaller than a quarter of it (a transmon), got "
                         f"f01 = {f01:g} Hz, alpha = {alpha:g} Hz")
    ec0 = -alpha
    ej0 = (f01 + ec0) ** 2 / (8 * ec0)

    def residual(x):
        ej, ec = np.exp(x) * (ej0, ec0)
        e = _levels(ej, ec, offset_charge, 3, 60)[0]
        return [(e[1] - e[0] - f01) / f01, (e[2] - 2 * e[1] + e[0] - alpha) / f01]

    solution = scipy.optimize.least_squares(residual, [0.0, 0.0], xtol=1e-15, ftol=1e-15,
                                            gtol=1e-15)
    ej, ec = np.exp(solution.x) * (ej0, ec0)
    check = levels(ej, ec, 3, offset_charge=offset_charge)
    e = check.energies_hz
    if not (MIN_RATIO <= ej / ec <= MAX_RATIO) or abs(e[1] - f01) > 1e-9 * f01 \
            or abs(e[2] - 2 * e[1] - alpha) > 1e-9 * f01:
        raise InputError(f"no transmon has f01 = {f01:g} Hz and alpha = {alpha:g} Hz "
                         f"(the fit reached E_J/E_C = {ej / ec:.3g})")
    return float(ej), float(ec)


def flux_shifts(ej_hz: float, ec_hz: float, count: int, *,
                offset_charge: float = 0.0) -> np.ndarray:
    """``(count,)`` how level i moves per hertz the 0-1 frequency moves when E_J changes
    (a flux line on a symmetric SQUID, to first order): ``dE_i/dE_J / dE_1/dE_J``.

    The Duffing model's answer is ``i``; the charge model's is slightly more (its
    anharmonicity depends on E_J too). Central differences of the exact levels.
    """
    step = 1e-5 * ej_hz
    up = levels(ej_hz + step, ec_hz, count, offset_charge=offset_charge).energies_hz
    down = levels(ej_hz - step, ec_hz, count, offset_charge=offset_charge).energies_hz
    slope = (up - down) / (2 * step)
    return slope / slope[1]
