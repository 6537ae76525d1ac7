"""The optimiser's drive in the lab frame: AWG samples -> the lab-frame slice coefficients.

With ``optimizer.lab_frame`` the optimiser sees the drive's counter-rotating terms
(README, "The lab frame"): the recipe's chain (:mod:`shaper.signal.chain`) gives the
continuous drive-frame output of the instrument and the line at the Magnus nodes of
:mod:`shaper.physics.labframe` (:meth:`~shaper.signal.chain.Chain.lab_envelope`, the
same values the verdict's lab frame uses), and every lab term's coefficient is a linear
function of it at a given carrier phase. Linear, pure JAX: the propagator's exact gradient
carries through.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from shaper.physics import labframe as lf
from shaper.signal.chain import Chain


@dataclass(frozen=True, eq=False)
class LabDrive:
    """``drive(samples, phase)``: AWG samples ``(n, k)`` -> ``(M, K)`` coefficients of
    ``terms.operators`` on slices of ``dt_s``, at carrier phase ``phase`` (radians).

    Attributes:
        chain: the recipe's chain (padding, IF, output filter, line, ring-down, carriers).
        terms: the lab frame's operators (:func:`shaper.physics.labframe.lab_terms`).
        sub: Magnus sub-steps per AWG sample.
        samples: the input's length (AWG samples).
    """

    chain: Chain
    terms: lf.LabTerms
    sub: int
    samples: int

    @classmethod
    def for_chain(cls, chain: Chain, system, samples: int) -> LabDrive:
        terms = lf.lab_terms(system)
        return cls(chain, terms, lf.steps_per_cell(terms, chain.period_s, chain.turning_hz),
                   samples)

    @property
    def offsets(self) -> tuple[float, ...]:
        """The Gauss nodes inside a sample, as fractions of it (the verdict's)."""
        return tuple(((np.arange(self.sub)[:, None] + lf.NODES[None, :]) / self.sub)
                     .reshape(-1).tolist())

    @property
    def before(self) -> int:
        return self.chain.before(self.offsets, self.samples)

    @property
    def dt_s(self) -> float:
        """The length of one slice (half a Magnus sub-step)."""
        return self.chain.period_s / self.sub / 2

    def slices(self) -> int:
        return (self.before + self.chain.played_samples(self.samples)) * self.sub * 2

    def times(self) -> np.ndarray:
        """The Gauss nodes, seconds from the pulse start."""
        periods = self.before + self.chain.played_samples(self.samples)
        return lf.node_times(periods, self.chain.period_s, self.sub) \
            - (self.before + self.chain.start) * self.chain.period_s

    def __call__(self, samples, phase):
        values = self.chain.lab_envelope(samples, self.offsets)
        return lf.slice_samples(lf.coefficients(self.terms, values, self.times(), phase))


SHARPNESS = 16  # the Lehmer mean's power: a smooth maximum over the carrier phases


@dataclass(frozen=True, eq=False)
class CorrectedDrive:
    """The lab frame to second order at the rotating frame's cost
    (:mod:`shaper.physics.effective`): each slice's Hamiltonian gains the effective term of
    the counter-rotating parts, and the carrier phase enters through the kicks at the
    footprint's two ends; the figures over ``phases_rad`` are combined by a smooth maximum
    (the verdict judges the worst phase).

    Attributes:
        correction: the System's arrays (:func:`shaper.physics.effective.correction_for`).
        phases_rad: ``(P,)`` carrier phases at the pulse start.
        start_s: the first slice's start, seconds from the pulse start.
    """

    correction: object
    phases_rad: np.ndarray
    start_s: float

    @classmethod
    def for_chain(cls, chain: Chain, system, phases: tuple[float, ...],
                  drive_hz: float) -> CorrectedDrive:
        from shaper.physics.effective import correction_for
        return cls(correction_for(system, drive_hz), np.asarray(phases, float),
                   -chain.start * chain.period_s)

    def extra(self, values):
        """``(n, d, d)`` the effective term of every slice from its control values."""
        from shaper.physics.effective import effective_term
        return effective_term(self.correction, values)

    def kicked(self, u, values, footprint_s):
        """``(P, d, d)`` the lab propagator at every phase: ``exp(-iK(end)) U exp(iK(0))``,
        the kicks from the first and last slices' control values; ``footprint_s`` (may be
        traced): the active slices' length (a shorter pulse on a shared program)."""
        import jax
        import jax.numpy as jnp

        from shaper.physics.effective import kick
        from shaper.physics.propagator import taylor_exponential

        f = self.correction.frame_hz

        def one(phase):
            k0 = kick(self.correction, values[0], 2 * np.pi * f * self.start_s + phase)
            k1 = kick(self.correction, values[-1],
                      2 * np.pi * f * (self.start_s + footprint_s) + phase)
            # exp(i K) = exp(-2 pi i H) with H = -K / (2 pi)
            ends = taylor_exponential(jnp.stack([k1, -k0]) / (2 * np.pi))
            return ends[0] @ u @ ends[1]

        return jax.vmap(one)(jnp.asarray(self.phases_rad))


def smooth_worst(figures):
    """One :class:`~shaper.physics.figures.Figures` from per-phase ones (leading axis P):
    infidelity and leakage by a Lehmer mean of power :data:`SHARPNESS` (at most the
    largest, within a few per cent of it), the frame angles of the worst phase."""
    import jax
    import jax.numpy as jnp

    def worst(x):
        # homogeneous of degree one: scaled by its (constant) largest value, no underflow
        x = jnp.maximum(x, 0.0)
        top = jax.lax.stop_gradient(jnp.max(x)) + 1e-300
        y = x / top
        return top * jnp.sum(y ** SHARPNESS) / (jnp.sum(y ** (SHARPNESS - 1)) + 1e-300)

    infidelity = worst(1.0 - figures.fidelity)
    index = jnp.argmax(1.0 - figures.fidelity)
    return figures._replace(fidelity=1.0 - infidelity, leakage=worst(figures.leakage),
                            frame_before=figures.frame_before[index],
                            frame_after=figures.frame_after[index])
