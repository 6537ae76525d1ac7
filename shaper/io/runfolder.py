"""A run's output folder: made, locked, and never overwritten by accident.

No JAX here: a command that must refuse a folder (in use, finished, a file in the way)
says so at once.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from pathlib import Path

from shaper.errors import ResultError
from shaper.io import atomic


def prepare_folder(folder: Path, force: bool, resume: bool = False, *,
                   keep: Sequence[str] = (), budget: dict | None = None) -> dict[str, str]:
    """Create and lock the run folder; refuse to overwrite an earlier run unless ``force``.

    The lock (:func:`shaper.io.atomic.lock_folder`) keeps a second run out of the folder while
    this process lives. With ``force`` over an earlier run, the files named in ``keep``
    (its waveform and report) are kept under new names (:func:`keep_replaced`); returns
    what was renamed. ``budget`` (the run's ``max_iterations`` and ``max_time_s``): a
    finished run that stopped at a smaller budget may be resumed to go on.
    """
    if folder.exists() and not folder.is_dir():
        raise ResultError(f"{folder} is a file, not a folder; choose another --out")
    if folder.is_dir():
        atomic.lock_folder(folder)  # first: another live run there is the first thing to say
    if resume:
        if not any(folder.glob("checkpoint-*.npz")):
            raise ResultError(f"{folder}: no checkpoint to resume from (checkpoint-<i>.npz); "
                              f"start the run without --resume")
        atomic.lock_folder(folder)
        report = folder / "report.json"
        if report.exists() and not force:
            old = atomic.read_json(report, ResultError, "unreadable report")
            if not _can_go_on(old, budget):
                raise ResultError(f"{folder} holds a finished run (report.json); there is "
                                  f"nothing to resume. Pass --force (force=True) to export it "
                                  f"again")
        return {}
    if (folder / "report.json").exists() and not force:
        raise ResultError(f"{folder} already holds a run (report.json); choose another --out "
                          f"(out=) or pass --force (force=True) to replace it (its waveform "
                          f"and report are kept as *.replaced-N.*)")
    if any(folder.glob("checkpoint-*.npz")) and not force:
        raise ResultError(f"{folder} holds checkpoints of an unfinished run; pass --resume to "
                          f"continue it or --force (force=True) to start again")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError):
        raise ResultError(f"cannot make the folder {folder}: part of its path is a file; "
                          f"choose another --out") from None
    atomic.lock_folder(folder)
    return keep_replaced(folder, keep) if force else {}


def _can_go_on(report: dict, budget: dict | None) -> bool:
    """An earlier run resumes if it was interrupted, or stopped at a budget that the new
    one exceeds (more iterations, or more time)."""
    optimizer = report.get("optimizer", {})
    stop = optimizer.get("stop_reason")
    if stop == "interrupted":
        return True
    old = ((report.get("recipe") or {}).get("content") or {}).get("optimizer") or {}
    budget = budget or {}
    if stop == "iteration limit":
        return budget.get("max_iterations", 0) > optimizer.get("iterations", 0)
    if stop == "time limit":
        return budget.get("max_time", 0) != old.get("max_time")
    return False


REPORTS = ("report.json", "export.json")  # the files whose references follow a renaming


def keep_replaced(folder: Path, names: Sequence[str]) -> dict[str, str]:
    """Keep the files ``names`` in ``folder`` that a new write would replace: each is
    renamed ``<stem>.replaced-<k><suffix>`` (the first free ``k``, the same for all of them,
    so a waveform and its sidecar stay a pair), and every report in the folder (kept or
    not) refers to the renamed files by their new names (``waveform``, ``sidecar``,
    ``files``): a run's report.json goes on describing the waveform it was made for.
    Returns ``{old: new}`` names."""
    present = [n for n in dict.fromkeys(names) if (folder / n).is_file()]
    if not present:
        return {}
    k = 1
    while any((folder / _renamed(n, k)).exists() for n in present):
        k += 1
    renamed = {n: _renamed(n, k) for n in present}
    for old, new in renamed.items():
        os.replace(folder / old, folder / new)
    for report in REPORTS:
        for name in (renamed.get(report), report):
            if name and (folder / name).is_file():
                _follow(folder / name, renamed)
    return renamed


def _renamed(name: str, k: int) -> str:
    stem, dot, suffix = name.partition(".")
    return f"{stem}.replaced-{k}{dot}{suffix}"


def _follow(report: Path, renamed: dict[str, str]) -> None:
    try:
        data = json.loads(report.read_text())
    except (OSError, ValueError):
        return  # not ours to repair: it is kept as it was
    if not isinstance(data, dict):
        return
    for key in ("waveform", "sidecar"):
        if data.get(key) in renamed:
            data[key] = renamed[data[key]]
    if isinstance(data.get("files"), list):
        data["files"] = [renamed.get(f, f) if isinstance(f, str) else f for f in data["files"]]
    atomic.write_json(report, data)


NAME_MAX = 255  # bytes of one name in a path on the file systems shaper writes to
PATH_MAX = 4096  # bytes of a whole path (Linux)


def check_out(folder: str | Path, flag: str = "--out") -> Path:
    """An output folder the user named, checked before anything runs: every name in it
    short enough for the file system, the whole path too, and no part of it a file.

    Raises:
        InputError: naming ``flag`` (exit 2: a name too long is the user's, not the
            machine's).
    """
    from shaper.errors import InputError
    from shaper.recipe.files import excerpt

    folder = Path(folder)
    limit = NAME_MAX
    for part in folder.parts:
        size = len(os.fsencode(part))
        if size > limit:
            raise InputError(f"{flag}: the name {excerpt(part)} is {size} bytes long; a file "
                             f"system allows at most {limit}")
    if len(os.fsencode(os.path.abspath(folder))) > PATH_MAX - 256:  # room for our files
        raise InputError(f"{flag}: the path is longer than {PATH_MAX - 256} bytes")
    for above in [folder, *folder.parents]:
        if above.exists() or above.is_symlink():
            if not above.is_dir():
                raise InputError(f"cannot make the folder {folder}: part of its path is a "
                                 f"file ({above}); choose another {flag}")
            break
    return folder
