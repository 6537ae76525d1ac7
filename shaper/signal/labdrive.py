"""The optimiser's drive in the lab frame: AWG samples -> the lab-frame slice coefficients.

With ``optimizer.lab_frame = true`` the optimiser sees the drive's counter-rotating terms
(README, "The lab frame"): the recipe's chain (:mod:`shaper.signal.chain`) gives the
drive-frame envelope on its cells, each cell is cut into the Magnus sub-steps of
:mod:`shaper.physics.labframe`, and every lab term's coefficient is a linear function of
the envelope at a given carrier phase. Linear, pure JAX: the propagator's exact gradient
carries through. The verdict's lab frame turns the IF at the exact time inside a cell;
this drive takes each cell's value as the chain gives it (its middle), a difference of
the chain's own sub-step error (about 1e-9).
"""

from __future__ import annotations

from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

from shaper.physics import labframe as lf
from shaper.signal.chain import Chain


@dataclass(frozen=True, eq=False)
class LabDrive:
    """``drive(samples, phase)``: AWG samples ``(n, k)`` -> ``(M, K)`` coefficients of
    ``terms.operators`` on slices of ``dt_s``, at carrier phase ``phase`` (radians).

    Attributes:
        chain: the recipe's chain (padding, IF, line, carrier offsets).
        terms: the lab frame's operators (:func:`shaper.physics.labframe.lab_terms`).
        sub: Magnus sub-steps per chain cell.
    """

    chain: Chain
    terms: lf.LabTerms
    sub: int

    @classmethod
    def for_chain(cls, chain: Chain, system) -> LabDrive:
        terms = lf.lab_terms(system)
        return cls(chain, terms, lf.steps_per_cell(terms, chain.dt_s, chain.turning_hz))

    @property
    def dt_s(self) -> float:
        """The length of one slice (half a Magnus sub-step)."""
        return self.chain.dt_s / self.sub / 2

    def slices(self, samples: int) -> int:
        return (samples + self.chain.lead + self.chain.tail) * self.chain.steps * self.sub * 2

    def times(self, samples: int) -> np.ndarray:
        """The Gauss nodes, seconds from the pulse start."""
        cells = (samples + self.chain.lead + self.chain.tail) * self.chain.steps
        return lf.node_times(cells, self.chain.dt_s, self.sub) \
            - self.chain.start * self.chain.period_s

    def __call__(self, samples, phase):
        values = jnp.repeat(self.chain(samples), 2 * self.sub, axis=0)
        return lf.slice_samples(lf.coefficients(self.terms, values,
                                                self.times(samples.shape[0]), phase))
