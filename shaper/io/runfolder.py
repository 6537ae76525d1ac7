"""A run's output folder: made, locked, and never overwritten by accident.

No JAX here: a command that must refuse a folder (in use, finished, a file in the way)
says so at once.
"""

from __future__ import annotations

from pathlib import Path

from shaper.errors import ResultError
from shaper.io import atomic


def prepare_folder(folder: Path, force: bool, resume: bool = False) -> None:
    """Create and lock the run folder; refuse to overwrite an earlier run unless ``force``.

    The lock (:func:`shaper.io.atomic.lock_folder`) keeps a second run out of the folder while
    this process lives.
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
            if old.get("optimizer", {}).get("stop_reason") != "interrupted":
                raise ResultError(f"{folder} holds a finished run (report.json); there is "
                                  f"nothing to resume. Pass --force to export it again")
        return
    if (folder / "report.json").exists() and not force:
        raise ResultError(f"{folder} already holds a run (report.json); choose another --out "
                          f"or pass --force to overwrite it")
    if any(folder.glob("checkpoint-*.npz")) and not force:
        raise ResultError(f"{folder} holds checkpoints of an unfinished run; pass --resume to "
                          f"continue it or --force to start again")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError):
        raise ResultError(f"cannot make the folder {folder}: part of its path is a file; "
                          f"choose another --out") from None
    atomic.lock_folder(folder)
