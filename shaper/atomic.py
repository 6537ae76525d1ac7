"""Atomic file writes: a temporary file in the same folder, fsync, then rename.

A reader never sees a half-written report or waveform, even if the process dies.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path


def write_bytes(path: str | Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual permissions
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_text(path: str | Path, text: str) -> None:
    write_bytes(path, text.encode("utf-8"))


def write_json(path: str | Path, obj) -> None:
    write_text(path, json.dumps(obj, indent=2, sort_keys=False) + "\n")


def read_json(path: str | Path, error, missing: str):
    """Parse a JSON file; raise ``error(message)`` naming the file if absent or malformed."""
    path = Path(path)
    try:
        return json.loads(path.read_text())
    except OSError:
        raise error(f"{path}: {missing}") from None
    except json.JSONDecodeError as exc:
        raise error(f"{path}: not valid JSON: {exc}") from None
