"""shaper: optimal-control pulse shaping for qubit gates.

A recipe (TOML) describes the qubit(s), the gate and the instrument; shaper finds
drive samples that implement the gate within the instrument's limits and writes
them as I/Q waveforms for an AWG, with a report. See README.md.

The public API is listed in ``__all__``; JAX is imported on first use of the engine.
"""

from __future__ import annotations

from importlib import import_module

__version__ = "0.1.0"

_EXPORTS = {
    "propagate": "shaper.physics.propagator",
    "cycle_exponential": "shaper.physics.propagator",
    "System": "shaper.physics.systems",
    "TransmonSpec": "shaper.physics.transmons",
    "transmon": "shaper.physics.transmons",
    "coupled_transmons": "shaper.physics.transmons",
    "from_matrices": "shaper.physics.systems",
    "Target": "shaper.physics.targets",
    "gate": "shaper.physics.targets",
    "state_transfer": "shaper.physics.targets",
    "average_gate_fidelity": "shaper.physics.figures",
    "leakage": "shaper.physics.figures",
    "gate_figures": "shaper.physics.figures",
    "best_frame_angles": "shaper.physics.figures",
    "load_recipe": "shaper.recipe",
    "Recipe": "shaper.recipe",
    "optimize": "shaper.optimizer.starts",
    "Result": "shaper.optimizer.starts",
    "run": "shaper.jobs.run",
    "RunOutput": "shaper.jobs.run",
    "check": "shaper.jobs.api",
    "CheckResult": "shaper.jobs.api",
    "export": "shaper.jobs.api",
    "ExportResult": "shaper.jobs.api",
    "sweep": "shaper.jobs.api",
    "SweepResult": "shaper.jobs.api",
    "chip": "shaper.jobs.api",
    "ChipResult": "shaper.jobs.api",
    "simulate": "shaper.physics.simulation",
    "read_waveform": "shaper.io.waveio",
    "ShaperError": "shaper.errors",
    "RecipeError": "shaper.errors",
    "InputError": "shaper.errors",
    "WaveformError": "shaper.errors",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str):
    # lazy, so that `import shaper` (and `shaper --help`) does not import JAX
    if name in _EXPORTS:
        return getattr(import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'shaper' has no attribute {name!r}")


def __dir__():
    return __all__
