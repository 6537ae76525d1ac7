"""Waveform file formats: a registry from ``--format NAME`` to a writer.

A writer turns a :class:`~shaper.io.waveio.Waveform` (fractions of full scale, or DAC
codes) into files in a folder, atomically, and returns their paths, the waveform file
first. A new format (an instrument's own, say) is one function plus one :func:`register`
call (DEVELOPERS.md, "Where new things go").

- ``csv`` (default): ``<name>.csv`` (``time_s`` then one column per control) and the
  ``<name>.json`` sidecar (README, "Waveform files"); the only format shaper reads back.
- ``numbers``: numbers only, one ``<name>_<channel>.txt`` per channel (I,Q columns, or one
  column for a baseband line), for instruments that load bare sample lists.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import NamedTuple

import numpy as np

from shaper.io import atomic
from shaper.io.waveio import CAUTION, FORMAT, Waveform
from shaper.physics.systems import System


class Writer(NamedTuple):
    what: str  # one line for --help
    write: Callable[[Path, str, Waveform, System, dict], list[Path]]
    names: Callable[[str, System], list[str]]  # the file names it writes, before writing
    read_back: bool = False  # shaper can judge the file again (check, export)


def register(name: str, writer: Writer) -> None:
    WRITERS[name] = writer


def csv_with_sidecar(folder: Path, name: str, waveform: Waveform, system: System,
                     source: dict) -> list[Path]:
    """``<name>.csv`` and ``<name>.json``; ``source``: the recipe's name and digest."""
    n = waveform.fractions.shape[0]
    time_s = np.arange(n) / waveform.sample_rate_hz
    header = ",".join(("time_s",) + tuple(waveform.column_names))
    if waveform.codes:  # integers: exact, since the fractions sit on the DAC's levels
        levels = 2 ** (waveform.bits - 1) - 1
        codes = np.rint(waveform.fractions * levels).astype(np.int64)
        lines = [header] + [f"{t:.12e}," + ",".join(str(v) for v in row)
                            for t, row in zip(time_s, codes, strict=True)]
    else:
        lines = [header] + [f"{t:.12e}," + ",".join(f"{v:.12g}" for v in row)
                            for t, row in zip(time_s, waveform.fractions, strict=True)]
    csv_path = atomic.inside(folder, folder / f"{name}.csv")
    json_path = atomic.inside(folder, folder / f"{name}.json")
    atomic.write_text(csv_path, "\n".join(lines) + "\n")
    atomic.write_json(json_path, sidecar(waveform, system, source))
    return [csv_path, json_path]


def sidecar(waveform: Waveform, system: System, source: dict) -> dict:
    """The JSON sidecar of a CSV waveform (README, "Waveform files")."""
    channels = {}
    for ch in system.channels:
        channels[ch.name] = {"kind": ch.kind,
                             "columns": [waveform.column_names[c] for c in ch.columns],
                             "full_scale_rabi_hz": waveform.full_scale_hz[ch.name],
                             "if_frequency_hz": waveform.if_frequency_hz if ch.kind == "iq"
                             else 0.0, "dac_bits": waveform.bits}
        if ch.kind == "iq" and waveform.if_frequency_hz:
            channels[ch.name]["sideband"] = waveform.sideband
    meta = {"format": FORMAT, "caution": CAUTION, "sample_rate_hz": waveform.sample_rate_hz,
            "samples": waveform.fractions.shape[0], "pulse_start_sample": waveform.pulse_start,
            "pulse_start_s": waveform.pulse_start / waveform.sample_rate_hz,
            "channels": channels, **source,
            "values": "dac_codes" if waveform.codes else "fractions",
            "predistorted": waveform.predistorted, "mixer_corrected": waveform.mixer_corrected}
    if waveform.codes:
        meta["dac_code_of_full_scale"] = 2 ** (waveform.bits - 1) - 1
    if waveform.predistortion_residual is not None:
        meta["predistortion_residual"] = waveform.predistortion_residual
    return meta


def numbers_per_channel(folder: Path, name: str, waveform: Waveform, system: System,
                        source: dict) -> list[Path]:
    """One ``<name>_<channel>.txt`` per channel: I,Q columns (baseband: one), no header."""
    paths = []
    for ch in system.channels:
        block = waveform.fractions[:, list(ch.columns)]
        path = atomic.inside(folder, folder / f"{name}_{ch.name}.txt")
        atomic.write_text(path, "\n".join(",".join(f"{v:.12g}" for v in row)
                                          for row in block) + "\n")
        paths.append(path)
    return paths


WRITERS: dict[str, Writer] = {
    "csv": Writer("CSV with a JSON sidecar (rate, full scale, channels); read back by shaper",
                  csv_with_sidecar, lambda name, system: [f"{name}.csv", f"{name}.json"],
                  read_back=True),
    "numbers": Writer("numbers only, one text file per channel, no header or metadata",
                      numbers_per_channel,
                      lambda name, system: [f"{name}_{c.name}.txt" for c in system.channels]),
}


def write_waveform(folder: str | Path, name: str, waveform: Waveform, system: System, *,
                   recipe_name: str, recipe_sha256: str, format: str = "csv") -> list[Path]:
    """Write the waveform in a registered file format (:mod:`shaper.io.writers`) atomically.

    Returns:
        The paths written, the waveform file first.
    """
    return WRITERS[format].write(Path(folder), name, waveform, system,
                                 {"recipe": recipe_name, "recipe_sha256": recipe_sha256})
