"""Recipes: one TOML file per job, read into frozen settings and system arrays.

Every key, its unit and default is documented in the README ("Recipe reference").
Any mistake raises :class:`~shaper.errors.RecipeError` naming the file and the key
path, with the fix. Numbers with units go through :mod:`shaper.units`.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from shaper.errors import InputError, RecipeError
from shaper.systems import System
from shaper.targets import Target
from shaper.units import parse_quantity

MODELS = ("transmon", "transmons", "matrices")
METHODS = ("lbfgs", "adam", "lbfgs-jit")
PADDING = ("after", "before", "centre")

# allowed keys per section; a nested table's keys are listed under "section.sub"
KEYS: dict[str, tuple[str, ...]] = {
    "": ("name", "description", "system", "gate", "pulse", "cost", "optimizer", "export"),
    "system": ("model", "levels", "qubit_frequency", "anharmonicity", "drive_frequency",
               "qubit", "frame_frequency", "transmon", "coupling", "unit", "drift",
               "drift_imag", "controls", "controls_imag", "dims", "computational"),
    "system.transmon": ("name", "levels", "qubit_frequency", "anharmonicity", "flux"),
    "system.coupling": ("between", "strength"),
    "gate": ("target", "matrix", "matrix_imag", "initial_state", "final_state", "virtual_z"),
    "pulse": ("duration", "sample_rate", "hold", "max_rabi", "max_flux", "bandwidth",
              "max_out_of_band", "zero_ends", "ramp"),
    "cost": ("leakage", "bandwidth", "smoothness", "amplitude", "robustness",
             "ensemble_detunings", "ensemble_scales"),
    "optimizer": ("method", "max_iterations", "target_infidelity", "target_leakage",
                  "margin", "max_time", "stall_iterations", "seed", "starts", "initial",
                  "drag_scale", "learning_rate", "propagator", "ensemble_targets"),
    "export": ("full_scale", "dac_bits", "granularity", "padding", "clip", "if_frequency",
               "sideband"),
}
REQUIRED = {"": ("name", "system", "gate", "pulse"), "system": ("model",),
            "pulse": ("duration", "sample_rate", "max_rabi")}


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


@dataclass(frozen=True, kw_only=True)
class ExportSettings:
    """How to write the waveform (``[export]``)."""

    full_scale_hz: dict[str, float]
    dac_bits: int = 16
    granularity: int = 1
    padding: str = "after"
    clip: bool = False
    if_frequency_hz: float = 0.0
    sideband: str = "lower"


@dataclass(frozen=True, kw_only=True)
class Recipe:
    """A validated recipe: the system's arrays and every setting in SI units."""

    name: str
    path: str | None
    sha256: str
    system: System
    target: Target
    virtual_z: bool
    duration_s: float
    sample_rate_hz: float
    samples: int
    hold: int
    limits_hz: dict[str, float]
    bandwidth_hz: float | None
    max_out_of_band: float
    zero_ends: bool
    ramp_samples: int
    weights: dict[str, float]
    ensemble_detunings_hz: np.ndarray
    ensemble_scales: np.ndarray
    optimizer: OptimizerSettings
    export: ExportSettings
    raw: dict = field(repr=False)

    @property
    def dt(self) -> float:
        return 1.0 / self.sample_rate_hz


class _Reader:
    """Typed access to the raw TOML with errors that name file and key."""

    def __init__(self, raw: dict, path: str | None):
        self.raw, self.path = raw, path

    def fail(self, key: str | None, message: str):
        raise RecipeError(message, path=self.path, key=key)

    def check_keys(self, table: dict, section: str, key_prefix: str | None = None) -> None:
        prefix = key_prefix if key_prefix is not None else section
        allowed = KEYS[section]
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.5)
                hint = f"; did you mean {close[0]!r}?" if close else \
                    f"; valid keys here: {', '.join(allowed)}"
                self.fail(f"{prefix}.{key}" if prefix else key, f"unknown key{hint}")
        for key in REQUIRED.get(section, ()):
            if key not in table:
                self.fail(f"{prefix}.{key}" if prefix else key, "missing required key")

    def table(self, table: dict, key: str, where: str) -> dict:
        value = table.get(key, {})
        if not isinstance(value, dict):
            self.fail(where, f"expected a table [{where}], got {value!r}")
        return value

    def number(self, table, key, where, default=None, *, kind=None, positive=False,
               integer=False, minimum=None, bare_check=True):
        if key not in table:
            if default is None:
                self.fail(where, "missing required key")
            return default
        value = table[key]
        if kind:
            value = parse_quantity(value, kind, key=where, path=self.path,
                                   bare_check=bare_check)
        elif isinstance(value, bool) or not isinstance(value, int | float):
            self.fail(where, f"expected a number, got {value!r}")
        if not math.isfinite(value):
            self.fail(where, f"expected a finite number, got {value!r}")
        if integer and (not isinstance(value, int) or isinstance(value, bool)):
            self.fail(where, f"expected a whole number, got {value!r}")
        if positive and value <= 0:
            self.fail(where, f"must be positive, got {table[key]!r}")
        if minimum is not None and value < minimum:
            self.fail(where, f"must be at least {minimum}, got {table[key]!r}")
        return value

    def flag(self, table, key, where, default: bool) -> bool:
        value = table.get(key, default)
        if not isinstance(value, bool):
            self.fail(where, f"expected true or false, got {value!r}")
        return value

    def choice(self, table, key, where, options, default=None) -> str:
        value = table.get(key, default)
        if value is None:
            self.fail(where, "missing required key")
        if value not in options:
            self.fail(where, f"unknown value {value!r}; choose one of: {', '.join(options)}")
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

    def per_channel(self, value, where, channels: list[str]) -> dict[str, float]:
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
            if not v > 0:
                self.fail(where, f"must be positive, got {v} Hz for channel {c}")
        return out


MAX_DEPTH = 6  # the deepest a recipe nests: [system] -> transmon list -> table -> value


def _plain_values(raw: dict, path: str | None) -> None:
    """Refuse what no recipe key takes: dates and times, and nesting deeper than any key."""
    stack = [(raw, "", 0)]
    while stack:
        value, where, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise RecipeError("nested deeper than any recipe key", path=path, key=where or None)
        if isinstance(value, dict):
            for k, v in value.items():
                if not isinstance(k, str):
                    raise RecipeError(f"keys must be text, got {k!r}", path=path,
                                      key=where or None)
                stack.append((v, f"{where}.{k}" if where else k, depth + 1))
        elif isinstance(value, list):
            stack.extend((v, f"{where}[{i}]", depth + 1) for i, v in enumerate(value))
        elif not (value is None or isinstance(value, bool | int | float | str)):
            raise RecipeError(f"expected a number, text, true/false, a list or a table, got "
                              f"{type(value).__name__} {str(value)[:40]!r} (dates and times "
                              f"are not used in recipes)", path=path, key=where)


def digest(raw: dict) -> str:
    """The recipe's sha256: of its content in a canonical JSON form, so a recipe read from
    its file, from a report's copy or given as a dictionary has the same digest."""
    text = json.dumps(raw, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode()).hexdigest()


def load_recipe(source: str | Path | dict) -> Recipe:
    """Read a recipe from a TOML file or a dictionary (as :mod:`tomllib` would return).

    Raises:
        RecipeError: the file is missing, not TOML, or any key is wrong.
    """
    if isinstance(source, dict):
        raw, path = source, None
    else:
        path = str(source)
        try:
            text = Path(source).read_bytes()
        except OSError as exc:
            raise RecipeError(f"cannot read the file: {exc.strerror}", path=path) from None
        try:
            raw = tomllib.loads(text.decode("utf-8"))
        except UnicodeDecodeError:
            raise RecipeError("not a text file (TOML must be UTF-8)", path=path) from None
        except tomllib.TOMLDecodeError as exc:
            raise RecipeError(f"not valid TOML: {exc}", path=path) from None
        except RecursionError:
            raise RecipeError("nested too deeply to be a recipe", path=path) from None
    _plain_values(raw, path)
    from shaper.recipe_sections import build  # the section readers

    try:
        return build(_Reader(raw, path), raw, path, digest(raw))
    except InputError as exc:  # a model builder refused the values
        raise RecipeError(str(exc), path=path, key="system") from None
