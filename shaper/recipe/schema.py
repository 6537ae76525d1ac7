"""Recipes: one TOML file per job, read into frozen settings and system arrays.

Every key, its unit and default is documented in the README ("Recipe reference").
Any mistake raises :class:`~shaper.errors.RecipeError` naming the file and the key
path, with the fix. Numbers with units go through :mod:`shaper.recipe.units`.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from shaper.errors import InputError, RecipeError
from shaper.physics.systems import System
from shaper.physics.targets import Target
from shaper.recipe.lines import LineSettings
from shaper.recipe.units import _shown, parse_quantity

GUESSES = ("gaussian", "drag", "cosine", "random")  # first guesses by name
ENSEMBLE_RULES = ("every", "mean")  # how ensemble members meet the targets


class Method(NamedTuple):
    """An optimisation method (``optimizer.method``): one line saying what it is, and its
    loop of one start, ``run(session, x0, resume) -> StartResult``
    (:mod:`shaper.optimizer.methods`). A built-in loop is named ``"module:function"`` and
    imported only when a start runs (reading a recipe imports no JAX); a registered method
    gives the function itself (:func:`shaper.optimizer.methods.register`)."""

    what: str
    run: Callable | str


# THE registry of optimisation methods: a recipe's optimizer.method is one of its names
METHODS: dict[str, Method] = {
    "lbfgs": Method("L-BFGS-B from scipy (default)", "shaper.optimizer.methods:run_scipy"),
    "adam": Method("Adam from optax, learning_rate per step",
                   "shaper.optimizer.methods:run_optax"),
    "lbfgs-jit": Method("L-BFGS from optax, ten steps per compiled call",
                        "shaper.optimizer.methods:run_optax"),
}
PADDING = ("after", "before", "centre")
MAX_STARTS = 1000  # starts of one optimisation: each a checkpoint file and a row of a table
MAX_SEED = 2 ** 32 - 1  # seeds of NumPy's generators as shaper uses them, start i at seed + i

# [cost]: the weight of each registered cost term (shaper.costs.terms.TERMS)
DEFAULT_WEIGHTS = {"infidelity": 1.0, "leakage": 0.0, "bandwidth": 1.0, "smoothness": 0.0,
                   "amplitude": 0.0, "robustness": 1.0}

# allowed keys per section; a nested table's keys are listed under "section.sub"
KEYS: dict[str, tuple[str, ...]] = {
    "": ("name", "description", "system", "gate", "pulse", "cost", "optimizer", "export",
         "line", "awg", "verdict"),
    "system": ("model", "levels", "qubit_frequency", "anharmonicity", "drive_frequency",
               "qubit", "frame_frequency", "transmon", "coupling", "unit", "drift",
               "drift_imag", "controls", "controls_imag", "dims", "computational", "t1", "t2",
               "collapse", "collapse_rate", "drive", "spectrum", "offset_charge", "basis"),
    "system.drive": ("name", "transmon", "frequency"),
    "system.transmon": ("name", "levels", "qubit_frequency", "anharmonicity", "flux", "t1",
                        "t2", "spectrum", "offset_charge", "driven"),
    "system.coupling": ("between", "strength"),
    "gate": ("target", "targets", "matrix", "matrix_imag", "initial_state", "final_state",
             "virtual_z", "on"),
    "pulse": ("duration", "sample_rate", "hold", "max_rabi", "max_flux", "flux_range",
              "bandwidth", "max_out_of_band", "zero_ends", "ramp"),
    "cost": tuple(k for k in DEFAULT_WEIGHTS if k != "infidelity")
    + ("ensemble_detunings", "ensemble_scales"),
    "optimizer": ("method", "max_iterations", "target_infidelity", "target_leakage",
                  "margin", "max_time", "stall_iterations", "seed", "starts", "initial",
                  "drag_scale", "learning_rate", "propagator", "ensemble_targets",
                  "open_system", "lab_frame", "escalate"),
    "export": ("full_scale", "dac_bits", "granularity", "padding", "clip", "if_frequency",
               "sideband", "predistort", "mixer", "codes"),
    "export.mixer": ("gain", "phase_deg", "offset_i", "offset_q"),
    "verdict": ("lab_frame", "carrier_phase_deg", "carrier_phases", "extra_levels",
                "benchmark"),
}
LAB_FRAME = ("auto", "on", "off")
# optimizer.lab_frame: "corrected" (second order, at the rotating frame's cost), "exact"
# (the verdict's integrator in the loop), "off" (the rotating-wave approximation)
LAB_MODES = ("auto", "corrected", "exact", "off")
REQUIRED = {"": ("name", "system", "gate", "pulse"), "system": ("model",),
            "pulse": ("duration", "sample_rate", "max_rabi")}


def _require(ok: bool, name: str, value) -> None:
    if not ok:
        raise InputError(f"setting {name} cannot be {value!r}")


@dataclass(frozen=True, kw_only=True)
class OptimizerSettings:
    """How to search (``[optimizer]``); see the README for every key."""

    method: str = "lbfgs"
    max_iterations: int = 1000
    target_infidelity: float = 1e-6
    target_leakage: float = 1e-7
    margin: float = 10.0
    max_time_s: float = 3600.0
    stall_iterations: int = 200
    seed: int = 0
    starts: int = 1
    initial: str = "gaussian"
    drag_scale: float = 1.0
    learning_rate: float = 0.02
    propagator: str = "eigh"
    ensemble_targets: str = "every"  # or "mean": how the ensemble members meet the targets
    open_system: bool = False  # optimise the channel fidelity with the coherence times
    lab_frame: str = "auto"  # the counter-rotating terms in the optimiser (LAB_MODES;
    #                          README, "The lab frame"); "auto" resolved when read
    escalate: bool = True  # go on in the verdict's model when only it misses (jobs.escalate)

    def __post_init__(self):  # settings guard themselves, however they were made
        _require(self.method in METHODS, "method", self.method)
        _require(self.propagator in ("eigh", "pade"), "propagator", self.propagator)
        _require(self.ensemble_targets in ENSEMBLE_RULES, "ensemble_targets",
                 self.ensemble_targets)
        for name in ("max_iterations", "stall_iterations", "starts"):
            _require(isinstance(getattr(self, name), int) and getattr(self, name) >= 1, name,
                     getattr(self, name))
        for name in ("target_infidelity", "target_leakage", "max_time_s", "learning_rate"):
            _require(math.isfinite(getattr(self, name)) and getattr(self, name) > 0, name,
                     getattr(self, name))
        _require(self.margin >= 1, "margin", self.margin)
        _require(self.lab_frame in LAB_MODES, "lab_frame", self.lab_frame)


@dataclass(frozen=True)
class MixerSettings:
    """One I/Q channel's mixer (``[export.mixer.<channel>]``): gain ratio Q/I, phase error
    (degrees), DC offsets (fractions of full scale); see :mod:`shaper.signal.mixer`."""

    gain: float = 1.0
    phase_deg: float = 0.0
    offset_i: float = 0.0
    offset_q: float = 0.0

    def __post_init__(self):
        _require(math.isfinite(self.gain) and 0.5 <= self.gain <= 2.0, "mixer gain", self.gain)
        _require(math.isfinite(self.phase_deg) and abs(self.phase_deg) <= 30, "mixer phase_deg",
                 self.phase_deg)
        for name in ("offset_i", "offset_q"):
            value = getattr(self, name)
            _require(math.isfinite(value) and abs(value) <= 0.5, f"mixer {name}", value)


@dataclass(frozen=True, kw_only=True)
class ExportSettings:
    """How to write the waveform (``[export]``)."""

    full_scale_hz: dict[str, float]
    dac_bits: int | None = 16
    granularity: int = 1
    padding: str = "after"
    clip: bool = False
    if_frequency_hz: float = 0.0
    sideband: str = "lower"
    predistort: bool = False  # invert the recipe's line in the exported samples
    mixer: dict[str, MixerSettings] = field(default_factory=dict)  # corrected per channel
    codes: bool = False  # write integer DAC codes (with dac_bits; unquantised: fractions)

    def __post_init__(self):
        # dac_bits None: keep full precision (the optimiser's own samples, for comparison)
        _require(self.dac_bits is None or (isinstance(self.dac_bits, int)
                                           and 2 <= self.dac_bits <= 32), "dac_bits",
                 self.dac_bits)
        _require(isinstance(self.granularity, int) and self.granularity >= 1, "granularity",
                 self.granularity)
        _require(self.padding in PADDING, "padding", self.padding)
        _require(self.sideband in ("lower", "upper"), "sideband", self.sideband)
        _require(math.isfinite(self.if_frequency_hz), "if_frequency_hz", self.if_frequency_hz)
        _require(all(v > 0 and math.isfinite(v) for v in self.full_scale_hz.values()),
                 "full_scale_hz", self.full_scale_hz)


@dataclass(frozen=True, kw_only=True)
class VerdictSettings:
    """How a waveform is judged (``[verdict]``; README, "How far the figures are trusted").

    ``lab_frame``: "auto" (on wherever the model knows its lab frame: every transmon
    model), "on" (refused for a model without one) or "off"; ``carrier_phase_deg``: the
    carrier's phase at the pulse start if the control system fixes it (None: the worst of
    ``carrier_phases`` phases spread over half a turn); ``extra_levels``: levels added to
    every transmon for the re-check the verdict is judged on.
    """

    lab_frame: str = "auto"
    carrier_phase_deg: float | None = None
    carrier_phases: int = 8
    extra_levels: int = 2
    spread: bool = False  # carrier_phases given: a spread of them, not the guided search
    benchmark: bool = True  # a gate set's or a chip's predicted RB (jobs.benchmarking)

    def __post_init__(self):
        _require(self.lab_frame in LAB_FRAME, "lab_frame", self.lab_frame)
        _require(isinstance(self.carrier_phases, int) and 1 <= self.carrier_phases <= 64,
                 "carrier_phases", self.carrier_phases)
        _require(isinstance(self.extra_levels, int) and 0 <= self.extra_levels <= 8,
                 "extra_levels", self.extra_levels)

    def phases_rad(self) -> tuple[float, ...]:
        """The carrier phases to run: the fixed one, or a spread over [0, pi) (the
        counter-rotating terms turn at twice the carrier: half a turn covers every case)."""
        if self.carrier_phase_deg is not None:
            return (math.radians(self.carrier_phase_deg),)
        return tuple(math.pi * k / self.carrier_phases for k in range(self.carrier_phases))


@dataclass(frozen=True, kw_only=True)
class Recipe:
    """A validated recipe: the system's arrays and every setting in SI units."""

    name: str
    path: str | None
    sha256: str
    system: System
    target: Target
    virtual_z: bool
    gate_set: tuple[str, ...] = ()  # [gate] targets: every gate of a set (target: the first)
    duration_s: float
    sample_rate_hz: float
    samples: int
    hold: int
    limits_hz: dict[str, float]  # per channel: max |I + iQ| or max |flux| (0: not driven)
    bandwidth_hz: dict[str, float] | None  # per channel with a bandwidth limit
    flux_ranges_hz: dict[str, tuple[float, float]]  # per baseband channel: (lowest, highest)
    max_out_of_band: float
    zero_ends: bool
    ramp_samples: int
    weights: dict[str, float]
    ensemble_detunings_hz: np.ndarray
    ensemble_scales: np.ndarray
    optimizer: OptimizerSettings
    export: ExportSettings
    line: LineSettings = field(default_factory=LineSettings)
    verdict: VerdictSettings = field(default_factory=VerdictSettings)
    raw: dict = field(repr=False)
    # the digest without the optimiser's budgets (max_iterations, max_time, starts): what a
    # checkpoint or a sweep belongs to, so a run continues with a larger budget
    problem_sha256: str = ""

    @property
    def dt(self) -> float:
        return 1.0 / self.sample_rate_hz

    def one_gate(self, command: str, hint: str = "give gate.target") -> Recipe:
        """This recipe, refused if it lists a gate set: ``command`` works on one gate.

        Raises:
            RecipeError: naming ``gate.targets``.
        """
        if len(self.gate_set) > 1:
            raise RecipeError(f"lists a gate set ({', '.join(self.gate_set)}); {command} works "
                              f"on one gate: {hint}, or run the set with shaper optimize (or "
                              f"shaper chip, for the shortest durations)",
                              path=self.path, key="gate.targets")
        return self


class _Reader:
    """Typed access to the raw TOML with errors that name file and key."""

    def __init__(self, raw: dict, path: str | None):
        self.raw, self.path = raw, path

    def fail(self, key: str | None, message: str):
        raise RecipeError(message, path=self.path, key=key)

    def check_keys(self, table: dict, section: str, key_prefix: str | None = None, *,
                   keys: dict[str, tuple[str, ...]] | None = None) -> None:
        """Refuse unknown keys (suggesting the closest) and missing required ones of
        ``section`` (in ``keys``, default the recipe's :data:`KEYS`)."""
        prefix = key_prefix if key_prefix is not None else section
        allowed = (keys or KEYS)[section]
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.5)
                hint = f"; did you mean {close[0]!r}?" if close else \
                    f"; valid keys here: {', '.join(allowed)}"
                self.fail(f"{prefix}.{key}" if prefix else key, f"unknown key{hint}")
        for key in (REQUIRED.get(section, ()) if keys is None else ()):
            if key not in table:
                self.fail(f"{prefix}.{key}" if prefix else key, "missing required key")

    def tables(self, table: dict, key: str, where: str, section: str, *,
               keys: dict[str, tuple[str, ...]] | None = None):
        """The tables of the array ``key`` (``[[...]]``, default none), each checked against
        ``section``'s keys; yields ``(where, item)`` with ``where`` like ``coupling[2]``."""
        value = table.get(key, [])
        if not isinstance(value, list):
            self.fail(where, f"expected [[{where}]] tables, got {str(value)[:60]!r}")
        allowed = (keys or KEYS)[section]
        for i, item in enumerate(value):
            here = f"{where}[{i}]"
            if not isinstance(item, dict):
                self.fail(here, f"expected a table with keys {', '.join(allowed)}")
            self.check_keys(item, section, here, keys=keys)
            yield here, item

    def table(self, table: dict, key: str, where: str) -> dict:
        value = table.get(key, {})
        if not isinstance(value, dict):
            self.fail(where, f"expected a table [{where}], got {_shown(value)}")
        return value

    def number(self, table, key, where, default=None, *, kind=None, positive=False,
               integer=False, minimum=None, maximum=None, below=None, bare_check=True,
               hint=None):
        """A number (``kind``: a quantity with a unit) within its bounds: ``minimum`` and
        ``maximum`` inclusive, ``below`` exclusive; errors quote the value as written."""
        if key not in table:
            if default is None:
                self.fail(where, "missing required key")
            return default
        value = table[key]
        if kind:
            value = parse_quantity(value, kind, key=where, path=self.path,
                                   bare_check=bare_check, hint=hint)
        elif isinstance(value, bool) or not isinstance(value, int | float):
            self.fail(where, f"expected a number, got {_shown(value)}")
        if not math.isfinite(value):
            self.fail(where, f"expected a finite number, got {value!r}")
        if integer and (not isinstance(value, int) or isinstance(value, bool)):
            self.fail(where, f"expected a whole number, got {value!r}")
        if positive and value <= 0:
            self.fail(where, f"must be positive, got {table[key]!r}")
        if minimum is not None and value < minimum:
            self.fail(where, f"must be at least {minimum}, got {table[key]!r}")
        if maximum is not None and value > maximum:
            self.fail(where, f"must be at most {maximum:,}, got {table[key]!r}")
        if below is not None and not value < below:
            self.fail(where, f"must be below {below}, got {table[key]!r}")
        return value

    def flag(self, table, key, where, default: bool) -> bool:
        value = table.get(key, default)
        if not isinstance(value, bool):
            self.fail(where, f"expected true or false, got {_shown(value)}")
        return value

    def choice(self, table, key, where, options, default=None) -> str:
        value = table.get(key, default)
        if value is None:
            self.fail(where, "missing required key")
        if value not in options:
            self.fail(where, f"unknown value {_shown(value)}; choose one of: "
                             f"{', '.join(options)}")
        return value

    def matrix(self, table, key, where, size=None, *, imag_key=None) -> np.ndarray:
        value = table.get(key)
        try:
            real = np.array(value, dtype=float)
            imag = np.array(table[imag_key], dtype=float) if imag_key and imag_key in table \
                else np.zeros_like(real)
        except (TypeError, ValueError):
            self.fail(where, "expected a matrix: a list of equal-length rows of numbers")
        if real.ndim != 2 or real.shape[0] != real.shape[1] or real.shape[0] < 2:
            self.fail(where, f"expected a square matrix of at least 2x2, got shape {real.shape}")
        if imag.shape != real.shape:
            self.fail(f"{where}_imag", f"imaginary part has shape {imag.shape}, "
                                       f"the real part {real.shape}")
        if size is not None and real.shape[0] != size:
            self.fail(where, f"expected a {size}x{size} matrix, got {real.shape[0]}x"
                             f"{real.shape[1]}")
        if not np.all(np.isfinite(real)) or not np.all(np.isfinite(imag)):
            self.fail(where, "matrix entries must be finite numbers")
        return real + 1j * imag

    def per_channel(self, value, where, channels: list[str], *,
                    allow_zero: bool = False) -> dict[str, float]:
        if isinstance(value, dict):
            unknown = [k for k in value if k not in channels]
            if unknown:
                self.fail(f"{where}.{unknown[0]}", f"no channel of that name; channels: "
                                                   f"{', '.join(channels)}")
            missing = [c for c in channels if c not in value]
            if missing:
                self.fail(where, f"no value for channel(s) {', '.join(missing)}")
            out = {c: parse_quantity(value[c], "frequency", key=f"{where}.{c}", path=self.path)
                   for c in channels}
        else:
            one = parse_quantity(value, "frequency", key=where, path=self.path)
            out = dict.fromkeys(channels, one)
        for c, v in out.items():
            if not (v > 0 or (allow_zero and v == 0)):
                allowed = "positive (or 0: the channel is not driven)" if allow_zero \
                    else "positive"
                self.fail(where, f"must be {allowed}, got {v} Hz for channel {c}")
        return out
