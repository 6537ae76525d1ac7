"""The ``[line]`` section: what stands between each DAC output and the chip (README, "The line").

Each channel may list stages, applied in order to each of its DAC outputs (I and Q alike,
or the flux line's one): analog low-pass filters (``bessel``, ``butterworth``,
``gaussian``: kind, order, cutoff), a sum of exponential settling terms (``exponential``:
amplitudes and time constants, as labs fit a step response), or a measured response from
a file (``measured``: a CSV of ``time_s,value``, a step or impulse response). This module
reads and checks the settings; :mod:`shaper.signal.line` turns them into responses.
Nothing here imports JAX or SciPy. ``r`` below is the recipe's typed reader
(:class:`shaper.recipe.schema._Reader`, which imports this module's settings).
"""

from __future__ import annotations

import hashlib
import math
import stat
from collections.abc import Callable
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import NamedTuple

from shaper.recipe.files import excerpt
from shaper.recipe.units import format_quantity, parse_quantity

MAX_ORDER = 8
MAX_OVERSAMPLE = 64
LINE_OVERSAMPLE, AWG_OVERSAMPLE = 4, 2  # line.oversample's default with and without a [line]
MAX_MEASURED_ROWS = 1_000_000


@dataclass(frozen=True)
class Stage:
    """One linear, time-invariant stage of a line: its kind and the kind's own parameters.

    ``params`` is an instance of the frozen dataclass registered with the kind
    (:class:`Kind`; SI units, names with their unit: ``cutoff_hz``, ``width_s``), so a stage
    is hashable (responses are cached per stage and grid) and each kind reads only its own
    numbers.
    """

    kind: str
    params: object

    def summary(self) -> dict:
        """The stage as a report shows it (SI units): its kind and every parameter of its
        kind (a field's ``metadata["report"]`` renames it; fields with ``repr=False``, a
        file's samples, are left out); a new kind reports itself with no change here."""
        out = {"kind": self.kind}
        for f in fields(self.params):
            if f.repr:
                value = getattr(self.params, f.name)
                out[f.metadata.get("report", f.name)] = \
                    list(value) if isinstance(value, tuple) else value
        return out

    def files(self) -> dict[str, str]:
        """The files the stage was read from and the sha256 of their bytes (part of the
        recipe's digest): what its parameters' ``files()`` says, if they have one."""
        files = getattr(self.params, "files", None)
        return files() if callable(files) else {}


@dataclass(frozen=True)
class LowPass:
    """``bessel``, ``butterworth``: an analog low-pass of ``order`` with -3 dB at
    ``cutoff_hz``."""

    order: int
    cutoff_hz: float


@dataclass(frozen=True)
class Gaussian:
    """``gaussian``: a zero-phase Gaussian low-pass with -3 dB at ``cutoff_hz``."""

    cutoff_hz: float


@dataclass(frozen=True)
class Settling:
    """``exponential``: the step response ``1 + sum_k amplitudes[k] exp(-t /
    time_constants_s[k])``."""

    amplitudes: tuple[float, ...]
    time_constants_s: tuple[float, ...]


@dataclass(frozen=True)
class Measured:
    """``measured``: a file's ``step`` or ``impulse`` response (``response``), its samples
    (``times_s``, ``values``, tuples so that the stage is hashable) and the digest of its
    bytes."""

    response: str
    source: str = field(metadata={"report": "file"})
    times_s: tuple[float, ...] = field(repr=False)
    values: tuple[float, ...] = field(repr=False)
    sha256: str

    def files(self) -> dict[str, str]:
        return {self.source: self.sha256}


AWG_FILTERS = ("bessel", "butterworth", "gaussian", "measured", "none")
# What an instrument's output does when the recipe does not say (README, "The AWG's analog
# output"): analog bandwidths of 0.3-0.5 of the sample rate are usual (from memory, common
# practice, no source); a 4th-order Bessel keeps a pulse's shape (linear phase).
AWG_DEFAULT_KIND, AWG_DEFAULT_ORDER, AWG_DEFAULT_FRACTION = "bessel", 4, 0.4


@dataclass(frozen=True)
class AwgOutput:
    """``[awg]``: what the instrument plays between its samples, on every channel.

    Its DAC holds each sample and its output stage low-passes the staircase; ``stages``
    is that low-pass (empty: an ideal staircase, ``filter = "none"``). ``assumed``: the
    recipe did not say, the default was taken (every report says so).
    """

    stages: tuple[Stage, ...] = ()
    assumed: bool = False

    def words(self) -> str:
        """The output in words, e.g. "4th-order Bessel low-pass at 960 MHz"."""
        if not self.stages:
            return "an ideal staircase (no output filter)"
        st = self.stages[0]
        p = st.params
        if isinstance(p, Measured):
            return f"the measured {p.response} response {Path(p.source).name}"
        order = f"{p.order}{_ordinal(p.order)}-order " if isinstance(p, LowPass) else ""
        return f"{order}{st.kind.capitalize()} low-pass at {format_quantity(p.cutoff_hz, 'Hz')}"

    def summary(self) -> dict:
        return {"filter": self.stages[0].kind if self.stages else "none",
                **({} if not self.stages else self.stages[0].summary()),
                "assumed": self.assumed, "words": self.words()}


def _ordinal(n: int) -> str:
    return {1: "st", 2: "nd", 3: "rd"}.get(n if n < 20 else n % 10, "th")


@dataclass(frozen=True)
class LineSettings:
    """The ``[line]`` section: stages per channel name, and the fine grid's oversampling;
    with the instrument's own output (``[awg]``), which every channel passes first."""

    stages: dict[str, tuple[Stage, ...]] = field(default_factory=dict)
    oversample: int = 4  # propagator slices per AWG sample where a channel is filtered
    awg: AwgOutput = field(default_factory=AwgOutput)

    @property
    def active(self) -> bool:
        """The recipe has a ``[line]`` (stages beyond the instrument's own output)."""
        return any(self.stages.values())

    def played(self, channel: str, *, line: bool = True, awg: bool = True) -> tuple[Stage, ...]:
        """The stages between ``channel``'s DAC and the chip, in order: the instrument's
        output (unless ``awg`` is False: the ideal staircase), then the channel's line
        (unless ``line`` is False)."""
        return (self.awg.stages if awg else ()) + \
            (self.stages.get(channel, ()) if line else ())


def read_line(r, t: dict, channels: list[str], sample_rate_hz: float) -> LineSettings:
    """Read ``[line]``: ``oversample`` and one list of stage tables per channel name (the
    instrument's own output, ``[awg]``, is :func:`shaper.recipe.awg.read_awg`)."""
    stages = {}
    for key, value in t.items():
        if key == "oversample":
            continue
        if key not in channels:
            r.fail(f"line.{key}", f"no channel of that name; channels: {', '.join(channels)} "
                                  f"(and the key oversample)")
        if isinstance(value, dict):
            value = [value]
        if not isinstance(value, list) or not value:
            r.fail(f"line.{key}", f"expected one or more stage tables ([[line.{key}]]), got "
                                  f"{str(value)[:60]!r}")
        stages[key] = tuple(_stage(r, s, f"line.{key}[{i}]", sample_rate_hz)
                            for i, s in enumerate(value))
    # slices per sample where outputs are filtered: a [line]'s steep stages need 4; the
    # instrument's output filter alone 2 (its figures move by 1e-8 on a 60 MHz pulse and
    # 1e-6 on a 300 MHz one against 6.6e-8 and 3.6e-6 at 1, measured; the report's are
    # extrapolated from s and 2 s either way)
    default = LINE_OVERSAMPLE if stages else AWG_OVERSAMPLE
    oversample = r.number(t, "oversample", "line.oversample", default, integer=True,
                          minimum=1)
    if oversample > MAX_OVERSAMPLE:
        r.fail("line.oversample", f"must be at most {MAX_OVERSAMPLE}, got {oversample}")
    return LineSettings(stages=stages, oversample=oversample)


def _stage(r, s, where: str, rate: float, names: dict | None = None) -> Stage:
    if not isinstance(s, dict):
        r.fail(where, f"expected a stage table with a kind, got {str(s)[:60]!r}")
    kind_key = (names or {}).get("kind", "kind")
    kind = r.choice(s, "kind", f"{where}.{kind_key}", tuple(KINDS))
    allowed = ("kind",) + KINDS[kind].keys
    for key in s:
        if key not in allowed:
            names = (a if a != "kind" else kind_key for a in allowed)
            r.fail(f"{where}.{key}", f"not a key of a {kind} stage; its keys: "
                                     f"{', '.join(names)}")
    stage = KINDS[kind].read(r, s, where, rate)
    if not (isinstance(stage, Stage) and stage.kind == kind
            and isinstance(stage.params, KINDS[kind].params)):
        raise TypeError(f"the reader of line stage kind {kind!r} returned {stage!r}; expected "
                        f"Stage({kind!r}, {KINDS[kind].params.__name__}(...))")
    return stage


def _lowpass(r, s: dict, where: str, rate: float) -> Stage:
    kind = s["kind"]
    cutoff = r.number(s, "cutoff", f"{where}.cutoff", kind="frequency", positive=True)
    if cutoff >= rate / 2:
        grid = "the sample rate" if where.startswith("line") else \
            "the sample rate x line.oversample"
        r.fail(f"{where}.cutoff", f"{format_quantity(cutoff, 'Hz')} is at or above "
                                  f"{format_quantity(rate / 2, 'Hz')}, half {grid}; the "
                                  f"fine grid cannot resolve it")
    if kind == "gaussian":
        return Stage(kind, Gaussian(cutoff_hz=cutoff))
    order = r.number(s, "order", f"{where}.order", integer=True, minimum=1)
    if order > MAX_ORDER:
        r.fail(f"{where}.order", f"must be at most {MAX_ORDER}, got {order}")
    return Stage(kind, LowPass(order=order, cutoff_hz=cutoff))


def _exponential(r, s: dict, where: str, rate: float) -> Stage:
    amps, taus = s.get("amplitudes"), s.get("time_constants")
    for key, val in (("amplitudes", amps), ("time_constants", taus)):
        if not isinstance(val, list) or not val:
            r.fail(f"{where}.{key}", f"expected a non-empty list, got {val!r}")
    if len(amps) != len(taus):
        r.fail(f"{where}.time_constants", f"{len(taus)} time constants for {len(amps)} "
                                          f"amplitudes; give one per amplitude")
    amplitudes = []
    for i, a in enumerate(amps):
        if isinstance(a, bool) or not isinstance(a, int | float) or not math.isfinite(a) \
                or not -1 < a < 1:
            r.fail(f"{where}.amplitudes[{i}]", f"expected a fraction of the step between "
                                               f"-1 and 1, got {a!r}")
        amplitudes.append(float(a))
    if not 1 + sum(amplitudes) > 0:
        r.fail(f"{where}.amplitudes", "the step response would start at or below zero "
                                      "(1 + sum of amplitudes <= 0)")
    constants = tuple(parse_quantity(v, "time", key=f"{where}.time_constants[{i}]",
                                     path=r.path) for i, v in enumerate(taus))
    for i, tau in enumerate(constants):
        if not tau > 0:
            r.fail(f"{where}.time_constants[{i}]", f"must be a positive time, got {tau}")
    return Stage("exponential", Settling(amplitudes=tuple(amplitudes),
                                         time_constants_s=constants))


def _measured(r, s: dict, where: str, rate: float) -> Stage:
    response = r.choice(s, "response", f"{where}.response", ("step", "impulse"), "step")
    name = s.get("file")
    if not isinstance(name, str) or not name:
        r.fail(f"{where}.file", f"expected the path of a CSV file (time_s,value), got {name!r}")
    base = Path(r.path).parent if r.path else Path.cwd()
    path = (base / name).resolve()
    data = read_response_file(path, lambda message: r.fail(f"{where}.file", message))
    lines = data.decode("utf-8").splitlines()
    header = [h.strip() for h in lines[0].split(",")] if lines else []
    if header != ["time_s", "value"]:
        r.fail(f"{where}.file", f"{path}: the first row must be the header time_s,value"
                                + ("" if lines else ", the file is empty"))
    if len(lines) > MAX_MEASURED_ROWS + 1:
        r.fail(f"{where}.file", f"{path}: more than {MAX_MEASURED_ROWS} rows")
    rows = []
    for i, line in enumerate(lines[1:], start=2):
        if not line.strip():
            continue
        parts = line.split(",")
        try:
            rows.append((float(parts[0]), float(parts[1])) if len(parts) == 2 else None)
        except ValueError:
            rows.append(None)
        if rows[-1] is None or not all(math.isfinite(v) for v in rows[-1]):
            r.fail(f"{where}.file", f"{path}, line {i}: expected two finite numbers "
                                    f"(time_s,value), got {excerpt(line)}")
    if len(rows) < 3:
        r.fail(f"{where}.file", f"{path}: needs at least 3 samples, has {len(rows)}")
    times = [t for t, _ in rows]
    step = times[1] - times[0]
    if abs(times[0]) > 1e-6 * abs(step) or not step > 0 or any(
            abs((b - a) - step) > 1e-6 * step for a, b in zip(times, times[1:], strict=False)):
        r.fail(f"{where}.file", f"{path}: time_s must start at 0 and rise in even steps (one "
                                f"sample rate); resample the measurement first")
    values = [v for _, v in rows]
    scale = values[-1] if response == "step" else math.fsum(values) * step
    size = max(abs(v) for v in values) * (1.0 if response == "step" else step * len(values))
    if not abs(scale) > 1e-9 * size:  # 1e-300 is zero here: dividing by it is meaningless
        r.fail(f"{where}.file", f"{path}: the response settles to zero; a {response} response "
                                f"is normalised to unit gain at DC and needs a non-zero "
                                f"{'final value' if response == 'step' else 'area'}")
    return Stage("measured", Measured(response=response, source=str(path),
                                      times_s=tuple(times), values=tuple(values),
                                      sha256=hashlib.sha256(data).hexdigest()))


MAX_RESPONSE_BYTES = 64 * 2 ** 20  # a million rows of two numbers fit with room


def read_response_file(path: Path, fail) -> bytes:
    """The bytes of a measured-response file: a regular file (not a FIFO, device or
    folder, which could block or never end), at most :data:`MAX_RESPONSE_BYTES`, read
    only after its size is known; UTF-8 text. ``fail(message)`` raises."""
    try:
        info = path.stat()
    except OSError as e:
        fail(f"cannot read {path}: {e.strerror}")
    if not stat.S_ISREG(info.st_mode):
        fail(f"{path} is not a regular file (a folder, FIFO or device); give a CSV file")
    if info.st_size > MAX_RESPONSE_BYTES:
        fail(f"{path} is {info.st_size / 2 ** 20:.0f} MiB; a response file is at most "
             f"{MAX_RESPONSE_BYTES // 2 ** 20} MiB ({MAX_MEASURED_ROWS} rows)")
    try:
        with open(path, "rb") as handle:
            data = handle.read(MAX_RESPONSE_BYTES + 1)
        data.decode("utf-8")
    except OSError as e:
        fail(f"cannot read {path}: {e.strerror}")
    except UnicodeDecodeError:
        fail(f"cannot read {path}: not text")
    if len(data) > MAX_RESPONSE_BYTES:
        fail(f"{path} grew past {MAX_RESPONSE_BYTES // 2 ** 20} MiB while it was read")
    return data


class Kind(NamedTuple):
    """A line stage kind as the recipe reads it: its keys besides ``kind``, a reader
    ``read(r, table, where, sample_rate_hz) -> Stage(kind, params)`` and the frozen
    dataclass of its parameters (``params``). How it responds is
    :data:`shaper.signal.line.RESPONSES`; :func:`shaper.signal.line.register_kind` adds both."""

    keys: tuple[str, ...]
    read: Callable
    params: type


AWG_KEYS = ("filter", "order", "cutoff", "file", "response")

KINDS: dict[str, Kind] = {
    "bessel": Kind(("order", "cutoff"), _lowpass, LowPass),
    "butterworth": Kind(("order", "cutoff"), _lowpass, LowPass),
    "gaussian": Kind(("cutoff",), _lowpass, Gaussian),
    "exponential": Kind(("amplitudes", "time_constants"), _exponential, Settling),
    "measured": Kind(("file", "response"), _measured, Measured),
}


def register_reader(name: str, keys: tuple[str, ...], read: Callable, params: type) -> None:
    KINDS[name] = Kind(keys, read, params)


def stage_files(line: dict):
    """The stage tables of a raw ``[line]`` table that name a file (measured responses),
    for a chip or a task to resolve or hash them; the keys are checked by :func:`read_line`."""
    for stages in line.values() if isinstance(line, dict) else ():
        for stage in stages if isinstance(stages, list) else [stages]:
            if isinstance(stage, dict) and isinstance(stage.get("file"), str):
                yield stage


def resolve_files(line: dict, base: Path) -> None:
    """Make every stage file of a raw ``[line]`` table absolute beside ``base`` (in place):
    the recipe is read again elsewhere (a worker, a task)."""
    for stage in stage_files(line):
        stage["file"] = str((base / stage["file"]).resolve())
