"""Read a waveform from anywhere: our CSV + JSON, a plain CSV, or numpy ``.npy``/``.npz``.

Files without a sidecar do not say their sample rate or full scale: the caller
gives them (``shaper check ... --sample-rate 2.4GS/s --full-scale 60MHz``). Values are
fractions of full scale in [-1, 1]; columns follow the recipe's control order
(``<ch>_i``, ``<ch>_q``, baseband ``<ch>``), or are named in a header row.
"""

from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

import numpy as np

from shaper.errors import WaveformError
from shaper.io.waveio import MAX_ROWS, Waveform, read_lines, read_waveform
from shaper.physics.systems import System
from shaper.recipe.files import excerpt, kind_of, why_unreadable


def _check_values(path: Path, data: np.ndarray) -> None:
    if data.size == 0 or data.ndim != 2 or data.shape[0] == 0:
        raise WaveformError(f"{path}: empty: expected at least one sample of every column")
    if not np.all(np.isfinite(data)):
        rows = np.unique(np.nonzero(~np.isfinite(data))[0])
        raise WaveformError(f"{path}: NaN or infinite values in row(s) "
                            f"{', '.join(map(str, rows[:5]))}")
    over = np.abs(data) > 1.0 + 1e-12
    if np.any(over):
        rows = np.unique(np.nonzero(over)[0])
        raise WaveformError(f"{path}: values beyond full scale (|x| > 1, up to "
                            f"{np.max(np.abs(data)):.6g}) in row(s) "
                            f"{', '.join(map(str, rows[:5]))}; the file must hold fractions of "
                            f"full scale")


def _order(path: Path, names: list[str], data: np.ndarray, system: System) -> np.ndarray:
    missing = [c for c in system.control_names if c not in names]
    if missing:
        raise WaveformError(f"{path}: missing column(s) {', '.join(missing)}; the recipe's "
                            f"controls are {', '.join(system.control_names)}")
    extra = [c for c in names if c not in system.control_names]
    if extra:
        raise WaveformError(f"{path}: unknown column(s) {', '.join(extra)}; the recipe's "
                            f"controls are {', '.join(system.control_names)}")
    return data[:, [names.index(c) for c in system.control_names]]


def read_any(path: str | Path, system: System, *, sample_rate_hz: float | None = None,
             full_scale_hz: float | dict[str, float] | None = None,
             max_rows: int = MAX_ROWS, why: str = "") -> Waveform:
    """Read a waveform file for ``system``; columns come back in its control order.

    Args:
        path: ``.csv`` (with a ``.json`` sidecar, or plain), ``.npy`` or ``.npz``.
        system: the system the waveform will drive (its control names order the columns).
        sample_rate_hz, full_scale_hz: required where the file does not carry them.
        max_rows: the most samples the caller takes (``why``: what sets it, for the
            message); counted before the samples are parsed.

    Raises:
        WaveformError: not a regular file (a folder, FIFO or device is named as such),
            unreadable, empty, NaN, beyond full scale, missing columns, uneven time steps,
            a missing sample rate or full scale, more than ``max_rows`` samples.
    """
    path = Path(path)
    try:
        other = kind_of(os.stat(path).st_mode)
    except OSError as exc:
        raise WaveformError(f"{path}: {why_unreadable(exc)}") from None
    if other:
        raise WaveformError(f"{path}: {other}, not a waveform file")
    if path.suffix == ".csv" and path.with_suffix(".json").is_file():
        wave = read_waveform(path, max_rows=max_rows, why=why)
        if set(wave.full_scale_hz) != {c.name for c in system.channels}:
            raise WaveformError(f"{path}: channels {sorted(wave.full_scale_hz)} do not match "
                                f"the recipe's {sorted(c.name for c in system.channels)}")
        fractions = _order(path, list(wave.column_names), wave.fractions, system)
        return replace(wave, fractions=fractions, column_names=system.control_names)
    names, data, times, meta_rate, meta_scale = _read_plain(path, system, max_rows, why)
    if data.ndim == 1 and len(system.control_names) == 1:
        data = data[:, None]
    if data.ndim != 2 or data.shape[1] != len(names):
        raise WaveformError(f"{path}: expected {len(names)} column(s) "
                            f"({', '.join(names)}), got shape {data.shape}")
    _check_values(path, data)
    rate = sample_rate_hz or meta_rate
    if rate is None and times is not None and len(times) > 1:
        rate = rate_of_times(path, times)  # a time column says the rate itself
    scale = full_scale_hz if full_scale_hz is not None else meta_scale
    if rate is None:
        raise WaveformError(f"{path}: the file does not give its sample rate (no sidecar, no "
                            f"time_s column); pass --sample-rate (e.g. 2.4GS/s)")
    if scale is None:
        raise WaveformError(f"{path}: the file does not give its full scale; pass "
                            f"--full-scale (the Rabi frequency of 1.0, e.g. 60MHz)")
    if times is not None and len(times) > 1 and not on_grid(times, rate):
        raise WaveformError(f"{path}: time steps are uneven or do not match the sample rate "
                            f"{rate} Hz")
    full = scale if isinstance(scale, dict) else {c.name: float(scale) for c in system.channels}
    return Waveform(fractions=_order(path, names, data, system), sample_rate_hz=float(rate),
                    full_scale_hz=full, column_names=system.control_names)


GRID_TOLERANCE = 1e-3  # of a sample period: what printed times may be off by (a DAC's
# clock is far better; a time column written with 7 digits is off by about 1e-5 of one)


def on_grid(times: np.ndarray, rate: float) -> bool:
    """Whether ``times`` are the first one plus whole sample periods at ``rate``, each
    within :data:`GRID_TOLERANCE` of a period (the precision a CSV prints them with)."""
    times = np.asarray(times, float)
    grid = times[0] + np.arange(len(times)) / rate
    return bool(np.all(np.isfinite(times))
                and np.max(np.abs(times - grid)) <= GRID_TOLERANCE / rate)


def rate_of_times(path: Path, times: np.ndarray) -> float:
    """The sample rate a ``time_s`` column gives: its samples over its span, rounded to 7
    significant digits where the times allow it (a rate written as times of a few digits
    comes back as the round number it was).

    Raises:
        WaveformError: times that do not increase by one period per row.
    """
    times = np.asarray(times, float)
    span = float(times[-1]) - float(times[0])
    rate = (len(times) - 1) / span if span > 0 else 0.0
    if not rate > 0 or not on_grid(times, rate):
        raise WaveformError(f"{path}: time steps are uneven (the time_s column must increase "
                            f"by one sample period per row)")
    rounded = float(f"{rate:.7g}")
    return rounded if on_grid(times, rounded) else rate


def _read_plain(path: Path, system: System, max_rows: int, why: str):
    """A file without our sidecar: its column names, samples, times (CSV only) and the
    sample rate and full scale it carries (npz only)."""
    meta_rate, meta_scale, times = None, None, None
    if path.suffix == ".csv":
        names, data, times = _read_plain_csv(path, system, max_rows, why)
    elif path.suffix == ".npy":
        data = _load_numpy(path, max_rows, why)
        names = list(system.control_names)
    elif path.suffix == ".npz":
        with _open_npz(path) as archive:
            if "samples" not in archive:
                raise WaveformError(f"{path}: expected an array named 'samples' (n, controls)")
            _bounded(path, archive.zip.open("samples.npy"), max_rows, why)
            data = _real(path, archive["samples"])
            names = [str(c) for c in archive["columns"]] if "columns" in archive \
                else list(system.control_names)
            meta_rate = _scalar(path, archive, "sample_rate_hz")
            meta_scale = _scalar(path, archive, "full_scale_hz")
    else:
        raise WaveformError(f"{path}: unknown waveform type {path.suffix!r}; use .csv, .npy "
                            f"or .npz")
    return names, data, times, meta_rate, meta_scale


def _real(path: Path, data) -> np.ndarray:
    data = np.asarray(data)
    if np.iscomplexobj(data):
        raise WaveformError(f"{path}: complex values; store I and Q as separate real columns "
                            f"(fractions of full scale), in the recipe's control order")
    if data.dtype.kind not in "fiub":
        raise WaveformError(f"{path}: expected numbers, got an array of {data.dtype}")
    return data.astype(float)


def _load_numpy(path: Path, max_rows: int, why: str) -> np.ndarray:
    try:
        with open(path, "rb") as handle:
            _bounded(path, handle, max_rows, why)
        return _real(path, np.load(path, allow_pickle=False))
    except (ValueError, OSError, EOFError) as exc:
        raise WaveformError(f"{path}: not a numpy array file: {excerpt(exc, 80)}") from None


MAX_NUMPY_COLUMNS = 64  # control columns of a waveform: a few per qubit


def _bounded(path: Path, handle, max_rows: int, why: str) -> None:
    """Read a ``.npy`` header (shape and type) before the array: at most ``max_rows`` rows
    of at most :data:`MAX_NUMPY_COLUMNS` columns (an archive's compressed array could
    otherwise unpack to any size)."""
    try:
        version = np.lib.format.read_magic(handle)
        header = np.lib.format.read_array_header_1_0 if version == (1, 0) else \
            np.lib.format.read_array_header_2_0
        shape, _, _ = header(handle)
    except (ValueError, OSError, EOFError, KeyError) as exc:
        raise WaveformError(f"{path}: not a numpy array file: {excerpt(exc, 80)}") from None
    rows = shape[0] if shape else 1
    if rows > max_rows or int(np.prod(shape[1:], dtype=float)) > MAX_NUMPY_COLUMNS:
        raise WaveformError(f"{path}: an array of shape {tuple(shape)}; at most {max_rows} "
                            f"rows{why} of at most {MAX_NUMPY_COLUMNS} columns")


def _scalar(path: Path, archive, key: str) -> float | None:
    if key not in archive:
        return None
    value = _real(path, archive[key])
    if value.size != 1 or not np.isfinite(value).all() or not float(value.ravel()[0]) > 0:
        raise WaveformError(f"{path}: {key} must be one positive number (SI units), got "
                            f"{value.ravel()[:3].tolist()}")
    return float(value.ravel()[0])


def _open_npz(path: Path):
    try:
        return np.load(path, allow_pickle=False)
    except (ValueError, OSError) as exc:
        raise WaveformError(f"{path}: not a numpy .npz archive: {excerpt(exc, 80)}") from None


def _read_plain_csv(path: Path, system: System, max_rows: int, why: str):
    lines = [ln for ln in read_lines(path, max_rows=max_rows, why=why) if ln.strip()]
    if not lines:
        raise WaveformError(f"{path}: empty: expected rows of comma-separated numbers")
    first = [c.strip() for c in lines[0].split(",")]
    try:
        [float(c) for c in first]
        header, rows = None, lines
    except ValueError:
        header, rows = first, lines[1:]
    try:
        data = np.array([[float(v) for v in row.split(",")] for row in rows], float)
    except ValueError:
        raise WaveformError(f"{path}: every value after the header must be a number") from None
    if data.size == 0:
        raise WaveformError(f"{path}: empty: a header but no samples")
    if data.ndim != 2 or len({len(r.split(",")) for r in rows}) != 1:
        raise WaveformError(f"{path}: rows have different numbers of values")
    names = header or list(system.control_names)
    if header is None and data.shape[1] == len(names) + 1:
        names = ["time_s"] + names
    times = None
    if names and names[0] == "time_s":
        times, data, names = data[:, 0], data[:, 1:], names[1:]
    return names, data, times


def read_first_guess(path: str, recipe) -> np.ndarray:
    """A waveform file as baseband samples in Hz on the recipe's grid (a first guess).

    A relative path is looked up beside the recipe first, then in the working folder. Files
    without a sidecar are read with the recipe's sample rate and full scale.

    Raises:
        WaveformError: the file's columns, sample rate or length do not fit the recipe.
    """
    candidate = Path(path)
    if not candidate.is_absolute() and recipe.path:
        beside = Path(recipe.path).parent / candidate
        candidate = beside if beside.exists() else candidate
    system = recipe.system
    wave = read_any(candidate, system, sample_rate_hz=recipe.sample_rate_hz,
                    full_scale_hz=dict(recipe.export.full_scale_hz))
    if abs(wave.sample_rate_hz - recipe.sample_rate_hz) > 1e-9 * recipe.sample_rate_hz:
        raise WaveformError(f"{candidate}: sample rate {wave.sample_rate_hz} Hz, the recipe's "
                            f"is {recipe.sample_rate_hz} Hz")
    samples = wave.to_hz(system)
    if wave.if_frequency_hz:
        from shaper.signal.modulation import demodulate
        samples = demodulate(samples, recipe.system.iq_columns(), wave.if_frequency_hz,
                             1 / wave.sample_rate_hz, wave.sideband, start=wave.pulse_start)
    rest = samples[wave.pulse_start + recipe.samples:]
    if np.any(rest != 0):
        raise WaveformError(f"{candidate}: the pulse goes on past the recipe's {recipe.samples} "
                            f"samples (non-zero samples up to "
                            f"{wave.pulse_start + recipe.samples + np.nonzero(rest)[0].max()}); "
                            f"a first guess must have the recipe's length")
    samples = samples[wave.pulse_start:wave.pulse_start + recipe.samples]
    if samples.shape[0] != recipe.samples:
        raise WaveformError(f"{candidate}: {samples.shape[0]} pulse samples, the recipe needs "
                            f"{recipe.samples}")
    return samples
