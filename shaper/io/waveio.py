"""Waveform files for the AWG (README, "Output files"): quantise, pad, write CSV + JSON; read back.

``<name>.csv`` has a header ``time_s,<ch>_i,<ch>_q,...`` (a baseband channel has one
column ``<ch>``) and one row per sample, values as fractions of full scale in
[-1, 1]; ``<name>.json`` beside it holds the sample rate, and per channel the
full-scale Rabi frequency, the IF frequency (0: the I/Q are baseband) and the DAC
bits. Nothing is clipped silently.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from shaper.errors import WaveformError
from shaper.io import atomic
from shaper.physics.grid import padding
from shaper.physics.systems import System
from shaper.recipe.files import excerpt

FORMAT = "shaper-waveform/1"
MAX_ROWS = 10_000_000  # samples of a waveform file: more than any AWG memory holds
MAX_ROW_BYTES = 256  # a row of a waveform CSV as text (a number takes 12-20 characters)
CAUTION = ("This waveform drives real instruments. Before loading it, check it against the "
           "instrument's output limits and your lab's rules for its lines.")


@dataclass(frozen=True)
class Waveform:
    """Samples as the instrument plays them.

    Attributes:
        fractions: ``(n, k)`` fractions of full scale, columns in the system's control order.
        sample_rate_hz: AWG sample rate.
        full_scale_hz: per channel name, the Rabi frequency (Hz) of full scale 1.0.
        column_names: ``k`` column names.
        pulse_start: index of the first sample of the pulse (after leading padding).
        bits: DAC bits the fractions were quantised to (None: not quantised).
    """

    fractions: np.ndarray
    sample_rate_hz: float
    full_scale_hz: dict[str, float]
    column_names: tuple[str, ...]
    pulse_start: int = 0
    bits: int | None = None
    if_frequency_hz: float = 0.0  # the I/Q carry this IF (signal.modulation), 0: baseband
    sideband: str = "lower"
    predistorted: bool = False  # the samples invert the recipe's line (signal.line)
    mixer_corrected: bool = False  # the samples correct the recipe's mixer (signal.mixer)
    codes: bool = False  # the CSV holds integer DAC codes (fraction x (2^(bits-1) - 1))
    predistortion_residual: float | None = None  # line output vs intended, rel. to its peak

    def to_hz(self, system: System) -> np.ndarray:
        """The samples in Hz, ``(n, k)``, in the system's control order."""
        return self.fractions * column_scales(system, self.full_scale_hz)[None, :]


def column_scales(system: System, full_scale_hz: dict[str, float]) -> np.ndarray:
    """``(k,)`` full scale in Hz of each control column."""
    scales = np.zeros(len(system.control_names))
    for ch in system.channels:
        scales[list(ch.columns)] = full_scale_hz[ch.name]
    return scales


def quantise(fractions: np.ndarray, bits: int, *, bound: np.ndarray | None = None,
             pairs: np.ndarray | None = None) -> np.ndarray:
    """Round to the nearest of the ``2^(bits-1) - 1`` levels per sign of a signed DAC.

    Error at most half a step, ``0.5 / (2^(bits-1) - 1)`` (common practice, no source).
    Where rounding would lift an I/Q pair's magnitude ``|I + iQ|`` above ``bound`` (per
    pair, as a fraction of full scale), that sample is rounded toward zero instead, so a
    limit that held before quantisation still holds after.

    Args:
        fractions: ``(n, k)`` values in [-1, 1].
        bits: DAC resolution.
        bound: ``(p,)`` magnitude limit of each I/Q pair; ``pairs``: ``(p, 2)`` columns.
    """
    levels = 2 ** (bits - 1) - 1
    x = np.asarray(fractions, float) * levels
    out = np.round(x)
    if bound is not None and pairs is not None:
        for (i, q), lim in zip(pairs, bound, strict=True):
            over = np.hypot(out[:, i], out[:, q]) > lim * levels
            out[over, i] = np.trunc(x[over, i])
            out[over, q] = np.trunc(x[over, q])
    return out / levels


def pad(fractions: np.ndarray, granularity: int, placement: str) -> tuple[np.ndarray, int]:
    """Zero-pad to a whole multiple of ``granularity`` samples; return (padded, pulse_start)."""
    n = fractions.shape[0]
    before, after = padding(n, granularity, placement)
    extra = before + after
    out = np.zeros((n + extra,) + fractions.shape[1:])
    out[before:before + n] = fractions
    return out, before


def to_fractions(samples_hz: np.ndarray, system: System, full_scale_hz: dict[str, float], *,
                 clip: bool = False) -> tuple[np.ndarray, int]:
    """Samples in Hz -> fractions of full scale; over full scale is an error unless ``clip``.

    Returns:
        (fractions, number of samples clipped).

    Raises:
        WaveformError: a sample beyond full scale and ``clip`` is False; says which and by
            how much.
    """
    fractions = np.asarray(samples_hz, float) / column_scales(system, full_scale_hz)[None, :]
    over = np.abs(fractions) > 1.0
    if np.any(over) and not clip:
        rows, cols = np.nonzero(over)
        worst = float(np.max(np.abs(fractions)))
        shown = ", ".join(f"{system.control_names[c]}[{r}]" for r, c in zip(rows[:5], cols[:5],
                                                                              strict=True))
        raise WaveformError(f"{len(rows)} sample(s) exceed full scale (up to {worst:.6g} of "
                            f"full scale, {100 * (worst - 1):.3g}% over): {shown}"
                            f"{' ...' if len(rows) > 5 else ''}; raise the full scale or "
                            f"ask for clipping (--clip)")
    return np.clip(fractions, -1.0, 1.0), int(np.count_nonzero(over))


def read_waveform(csv_path: str | Path, *, max_rows: int = MAX_ROWS,
                  why: str = "") -> Waveform:
    """Read a waveform written by :func:`shaper.io.writers.write_waveform` (CSV + JSON
    sidecar) of at most ``max_rows`` samples (``why``: what sets that bound, for the
    message).

    Raises:
        WaveformError: missing or malformed file or sidecar, NaN, values beyond full scale,
            uneven time steps, a sidecar that contradicts the CSV, too many rows.
    """
    csv_path = Path(csv_path)
    json_path = csv_path.with_suffix(".json")
    meta = atomic.read_json(json_path, WaveformError, "the waveform's sidecar is missing; it "
                            "holds the sample rate and full scale")
    header, data = _read_table(csv_path, max_rows, why)
    side = Sidecar(json_path, meta)
    rate = side.number(meta, "sample_rate_hz", positive=True)
    samples = side.whole(meta, "samples", minimum=1)
    if samples != data.shape[0]:
        raise WaveformError(f"{json_path}: says {samples} samples, the CSV has "
                            f"{data.shape[0]}")
    if data.shape[0] > 1 and not np.allclose(np.diff(data[:, 0]), 1 / rate, rtol=1e-6,
                                             atol=0):
        raise WaveformError(f"{csv_path}: time steps are uneven or do not match the sidecar's "
                            f"sample rate {rate} Hz")
    values = side.choice(meta, "values", ("fractions", "dac_codes"), "fractions", "")
    if values == "dac_codes":
        levels = side.whole(meta, "dac_code_of_full_scale", minimum=1, maximum=2 ** 31 - 1)
        if np.any(data[:, 1:] != np.rint(data[:, 1:])):
            raise WaveformError(f"{csv_path}: the sidecar says DAC codes, but not every value "
                                f"is a whole number")
        data[:, 1:] /= levels
    if np.any(np.abs(data[:, 1:]) > 1.0 + 1e-12):
        raise WaveformError(f"{csv_path}: values beyond full scale (|x| > 1)")
    full, bits, ifs, sidebands, columns = _read_channels(side, meta)
    if len(ifs) > 1 or len(sidebands) > 1:
        raise WaveformError(f"{json_path}: channels with different IF frequencies or "
                            f"sidebands are not supported")
    if columns and sorted(columns) != sorted(header[1:]):
        raise WaveformError(f"{json_path}: lists columns {columns}, the CSV has {header[1:]}")
    start = side.whole(meta, "pulse_start_sample", minimum=0, maximum=samples - 1,
                       optional=True) or 0
    return Waveform(fractions=data[:, 1:], sample_rate_hz=rate, full_scale_hz=full,
                    column_names=tuple(header[1:]),
                    pulse_start=start,
                    bits=bits.pop() if len(bits) == 1 else None,
                    if_frequency_hz=ifs.pop() if ifs else 0.0,
                    sideband=sidebands.pop() if sidebands else "lower",
                    predistorted=side.flag(meta, "predistorted"),
                    mixer_corrected=side.flag(meta, "mixer_corrected"),
                    codes=values == "dac_codes")


def _read_table(csv_path: Path, max_rows: int, why: str) -> tuple[list[str], np.ndarray]:
    """The CSV's header and its numbers (time first), all finite."""
    lines = read_lines(csv_path, max_rows=max_rows, why=why)
    if len(lines) < 2:
        raise WaveformError(f"{csv_path}: empty: expected a header row and at least one sample")
    header = [h.strip() for h in lines[0].split(",")]
    if header[0] != "time_s":
        raise WaveformError(f"{csv_path}: the first column must be time_s, got "
                            f"{excerpt(header[0])}")
    try:
        data = np.array([[float(v) for v in line.split(",")] for line in lines[1:] if line],
                        float)
    except ValueError:
        raise WaveformError(f"{csv_path}: every value after the header must be a number") \
            from None
    if data.ndim != 2 or data.shape[1] != len(header):
        raise WaveformError(f"{csv_path}: every row must have {len(header)} values")
    if not np.all(np.isfinite(data)):
        raise WaveformError(f"{csv_path}: contains NaN or infinite values")
    return header, data


def _read_channels(side: Sidecar, meta: dict):
    """The sidecar's channels: full scales, DAC bits, IFs, sidebands and column names."""
    channels = meta.get("channels")
    if not isinstance(channels, dict) or not channels:
        raise WaveformError(f"{side.path}: 'channels' must be a table of the channels, "
                            f"got {str(channels)[:60]!r}")
    full, bits, ifs, sidebands, columns = {}, set(), set(), set(), []
    for name, ch in channels.items():
        where = f"channels.{name}"
        if not isinstance(ch, dict):
            raise WaveformError(f"{side.path}: {where} must be a table")
        full[name] = side.number(ch, "full_scale_rabi_hz", where, positive=True)
        kind = side.choice(ch, "kind", ("iq", "baseband"), "iq", where)
        bits.add(side.whole(ch, "dac_bits", minimum=2, maximum=32, where=where, optional=True))
        names = ch.get("columns", [])
        if not isinstance(names, list) or not all(isinstance(c, str) for c in names):
            raise WaveformError(f"{side.path}: {where}.columns must be a list of column names")
        columns += names
        if kind == "iq":
            ifs.add(side.number(ch, "if_frequency_hz", where, default=0.0))
            sidebands.add(side.choice(ch, "sideband", ("lower", "upper"), "lower", where))
    return full, bits, ifs, sidebands, columns


def read_lines(path: Path, *, max_rows: int = MAX_ROWS, why: str = "") -> list[str]:
    """The lines of a waveform CSV of at most ``max_rows`` rows after its header: a
    regular text file (no NUL byte; a UTF-8 byte-order mark is dropped), its size bounded
    before it is read and its rows counted before any is parsed; the file named in every
    error. ``why``: what sets ``max_rows``, for the message."""
    from shaper.recipe.files import read_text

    def fail(message: str):
        raise WaveformError(f"{path}: {message}")
    limit = 4096 + (max_rows + 1) * MAX_ROW_BYTES
    text = read_text(path, limit, fail, what="CSV")
    rows = text.count("\n") - 1
    if rows > max_rows:
        fail(f"{rows} rows; at most {max_rows}{why or ' (more than any AWG memory holds)'}")
    return text.splitlines()


class Sidecar:
    """Typed reads of a sidecar's fields, each error naming the file and the field."""

    def __init__(self, path: Path, meta):
        if not isinstance(meta, dict):
            raise WaveformError(f"{path}: expected a JSON object, got {type(meta).__name__}")
        self.path = path

    def fail(self, where: str, message: str):
        raise WaveformError(f"{self.path}: {where}: {message}")

    def number(self, table: dict, key: str, where: str = "", *, positive: bool = False,
               default: float | None = None) -> float:
        name = f"{where}.{key}" if where else key
        if key not in table:
            if default is not None:
                return default
            self.fail(name, "missing")
        value = table[key]
        if isinstance(value, bool) or not isinstance(value, int | float):
            self.fail(name, f"expected a number in SI units (Hz), got {value!r}")
        if not math.isfinite(value) or (positive and not value > 0):
            self.fail(name, f"expected a {'positive ' if positive else ''}finite number, "
                            f"got {value!r}")
        return float(value)

    def whole(self, table: dict, key: str, *, minimum: int, maximum: int | None = None,
              where: str = "", optional: bool = False) -> int | None:
        name = f"{where}.{key}" if where else key
        if table.get(key) is None:
            if optional:
                return None
            self.fail(name, "missing")
        value = table[key]
        if isinstance(value, bool) or not isinstance(value, int) or value < minimum \
                or (maximum is not None and value > maximum):
            bound = f" and {maximum}" if maximum is not None else ""
            self.fail(name, f"expected a whole number between {minimum}{bound or ' and more'},"
                            f" got {value!r}")
        return value

    def choice(self, table: dict, key: str, options, default: str, where: str) -> str:
        value = table.get(key, default)
        if value not in options:
            self.fail(f"{where}.{key}" if where else key,
                      f"expected one of {', '.join(options)}, got {value!r}")
        return value

    def flag(self, table: dict, key: str, default: bool = False) -> bool:
        value = table.get(key, default)
        if not isinstance(value, bool):
            self.fail(key, f"expected true or false, got {value!r}")
        return value
