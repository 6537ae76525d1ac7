"""Re-simulate a finished waveform: figures of merit and level populations over time.

Used for reports and checks; no gradients here. The figures follow CONVENTIONS §5.
"""

from __future__ import annotations

from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

from shaper.figures import gate_figures, state_figures
from shaper.figures import project as project_subspace
from shaper.propagator import propagate
from shaper.systems import System
from shaper.targets import Target


@dataclass(frozen=True)
class Simulation:
    """What a waveform does on a system.

    Attributes:
        fidelity, infidelity, leakage: CONVENTIONS §5 figures.
        frame_before_rad, frame_after_rad: virtual Z angles per qubit (zeros without).
        unitary: ``(d, d)`` total propagator.
        populations: ``(d_c, n + 1, d)``: for each computational input state, the
            population of every basis state after 0..n samples.
    """

    fidelity: float
    infidelity: float
    leakage: float
    frame_before_rad: list[float]
    frame_after_rad: list[float]
    unitary: np.ndarray
    populations: np.ndarray

    def figures(self) -> dict:
        """The scalar figures as a JSON-ready dict."""
        return {"fidelity": self.fidelity, "infidelity": self.infidelity,
                "leakage": self.leakage, "frame_before_rad": self.frame_before_rad,
                "frame_after_rad": self.frame_after_rad}


def simulate(system: System, target: Target, samples: np.ndarray, dt: float, *,
             virtual_z: bool = False, method: str = "eigh") -> Simulation:
    """Simulate ``samples`` ``(n, k)`` Hz on ``system`` and score them against ``target``."""
    history = np.asarray(propagate(system.drift, system.controls, np.asarray(samples, float), dt,
                                   method=method, history=True))
    u = history[-1]
    qubits = max(1, int(round(np.log2(len(system.computational)))))
    if target.is_gate:
        fig = gate_figures(project_subspace(jnp.asarray(u), system.computational),
                           target.unitary, qubits=qubits, virtual_z=virtual_z)
    else:
        fig = state_figures(jnp.asarray(u), target.initial, target.final, system.computational,
                            qubits)
    populations = np.abs(history[:, :, system.computational]) ** 2  # (n+1, d, d_c)
    fidelity = float(fig.fidelity)
    return Simulation(fidelity=fidelity, infidelity=1.0 - fidelity, leakage=float(fig.leakage),
                      frame_before_rad=[float(x) for x in fig.frame_before],
                      frame_after_rad=[float(x) for x in fig.frame_after], unitary=u,
                      populations=np.transpose(populations, (2, 0, 1)))
