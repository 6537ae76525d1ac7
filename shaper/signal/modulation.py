"""IF (single-sideband) modulation, and what a DAC that holds modulated samples plays.

Sign convention. With ``sideband="lower"`` (the default) the AWG's samples carry
``I' + iQ' = (I + iQ) exp(+2 pi i f_IF t_k)``; through an I/Q mixer with the
convention of the README's "Conventions" (``eps = I cos(2 pi f t) + Q sin(2 pi f t)``) that puts
the drive at ``f_LO - f_IF``: set the LO to ``f_d + f_IF``. ``sideband="upper"`` uses
``exp(-2 pi i f_IF t_k)`` and an LO at ``f_d - f_IF``. ``t_k`` is the middle of
sample k, counted from the first sample of the *pulse* (after any leading padding), so
the held value equals the ideal modulated signal at the centre of its interval and
padding never turns the drive axis.

The DAC holds ``I' + iQ'`` over each sample; in the drive frame the envelope then
turns within the sample: ``(I' + iQ')_k exp(-+2 pi i f_IF t)``. :func:`to_drive_frame`
gives that envelope on a sub-sample grid, fine enough for the figures to be exact
to well below 1e-9 (see ``substeps``).
"""

from __future__ import annotations

import jax.numpy as jnp
import numpy as np

from shaper.physics import _jax  # noqa: F401
from shaper.physics.grid import MAX_PHASE_STEP, substeps  # noqa: F401 (part of this stage)

SIDEBANDS = {"lower": 1.0, "upper": -1.0}


def sign_of(sideband: str) -> float:
    if sideband not in SIDEBANDS:
        from shaper.errors import InputError
        raise InputError(f"unknown sideband {sideband!r}; choose 'lower' or 'upper'")
    return SIDEBANDS[sideband]


def _rotate(samples, iq_columns, phase):
    """Multiply each I/Q pair's I + iQ by exp(i phase) (phase broadcast over rows)."""
    concrete = isinstance(samples, np.ndarray)
    out = samples.copy() if concrete else samples
    for i, q in np.asarray(iq_columns, int).reshape(-1, 2):
        if concrete:
            z = (samples[:, i] + 1j * samples[:, q]) * np.exp(1j * phase)
            out[:, i], out[:, q] = z.real, z.imag
        else:
            z = (samples[:, i] + 1j * samples[:, q]) * jnp.exp(1j * phase)
            out = out.at[:, i].set(jnp.real(z)).at[:, q].set(jnp.imag(z))
    return out


def modulate(samples, iq_columns, if_hz: float, dt: float, sideband: str = "lower",
             start: int = 0):
    """Baseband samples ``(n, k)`` -> IF-modulated samples (baseband columns untouched).

    ``start`` is the index of the pulse's first sample (time zero of the modulation).
    """
    t = (np.arange(samples.shape[0]) - start + 0.5) * dt
    return _rotate(samples, iq_columns, sign_of(sideband) * 2 * np.pi * if_hz * t)


def demodulate(samples, iq_columns, if_hz: float, dt: float, sideband: str = "lower",
               start: int = 0):
    """The inverse of :func:`modulate`."""
    t = (np.arange(samples.shape[0]) - start + 0.5) * dt
    return _rotate(samples, iq_columns, -sign_of(sideband) * 2 * np.pi * if_hz * t)


def to_drive_frame(fine, iq_columns, if_hz: float, dt: float, sideband: str = "lower", *,
                   steps: int, start: int = 0):
    """What the DAC's modulated outputs ``fine`` (on ``steps`` slices per sample of ``dt``,
    after the hold and any line) are in the drive frame: each I/Q pair turned back by the
    IF phase at the middle of each slice."""
    t = (np.arange(fine.shape[0]) + 0.5) * (dt / steps) - start * dt
    return _rotate(fine, iq_columns, -sign_of(sideband) * 2 * np.pi * if_hz * t)
