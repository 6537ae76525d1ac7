"""Atomic file writes: a temporary file in the same folder, fsync, then rename.

A reader never sees a half-written report or waveform, even if the process dies.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path

from shaper.errors import EnvironmentFailure


def _read_umask() -> int:
    """The process's umask, read without changing it where Linux says it (/proc)."""
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0)  # elsewhere the only way; done once, at import, not per write
    os.umask(mask)
    return mask


_UMASK = _read_umask()


def inside(folder: str | Path, path: str | Path) -> Path:
    """``path`` if it resolves inside ``folder``; a name that would escape is refused."""
    root, target = Path(folder).resolve(), Path(path).resolve()
    if target != root and root not in target.parents:
        raise EnvironmentFailure(f"refusing to write {path}: it lies outside the output "
                                 f"folder {folder}")
    return Path(path)


def inside_for_reading(folder: str | Path, name, error, what: str) -> Path:
    """``folder / name`` for a name a run's own file gives (a report's waveform): a relative
    path that resolves inside ``folder``; a tampered one is refused with ``error`` (bad
    input, exit 2) rather than followed out of the run folder."""
    root = Path(folder).resolve()
    try:
        target = (root / name).resolve() if isinstance(name, str) and name else None
    except (OSError, RuntimeError):  # a loop of symbolic links
        target = None
    if target is None or Path(name).is_absolute() or (target != root
                                                      and root not in target.parents):
        raise error(f"{what} names {str(name)[:80]!r}, which is not a file inside the run "
                    f"folder {folder}; it is read only from there")
    return target


def write_bytes(path: str | Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the usual permissions
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_text(path: str | Path, text: str) -> None:
    write_bytes(path, text.encode("utf-8"))


def plain(obj):
    """``obj`` as standard JSON can hold it: NaN and infinities become null, NumPy scalars
    and arrays plain numbers and lists, anything else (a date) its text."""
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [plain(v) for v in obj]
    if hasattr(obj, "tolist"):  # numpy arrays and scalars
        return plain(obj.tolist())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if obj is None or isinstance(obj, bool | int | str):
        return obj
    return str(obj)


def write_json(path: str | Path, obj) -> None:
    """Standard JSON (no NaN), written atomically."""
    write_text(path, json.dumps(plain(obj), indent=2, sort_keys=False, allow_nan=False) + "\n")


MAX_JSON_BYTES = 64 * 2 ** 20  # a report, sidecar or chip state; far above what we write


def read_json(path: str | Path, error, missing: str):
    """Parse a JSON file; raise ``error(message)`` naming the file if absent, not a regular
    file, larger than :data:`MAX_JSON_BYTES` or malformed."""
    from shaper.recipe.files import read_text

    path = Path(path)

    def fail(message: str):
        raise error(f"{path}: {message}")
    if not os.path.lexists(path):
        fail(missing)
    text = read_text(path, MAX_JSON_BYTES, fail, what="JSON")
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        fail(f"not valid JSON: {exc}")
    except RecursionError:
        fail("nested too deeply")


_HELD: dict[Path, int] = {}  # folders this process has locked: fd of each lock file


def lock_folder(folder: str | Path) -> None:
    """Lock an output folder for this process (an OS lock on ``folder/.lock``).

    A second process asking for the same folder is refused at once; the lock goes away
    with the process that holds it, however it ends. Asking again from the same process
    is a no-op.
    """
    import fcntl

    folder = Path(folder)
    key = folder.resolve()
    if key in _HELD:
        return
    folder.mkdir(parents=True, exist_ok=True)
    fd = os.open(folder / ".lock", os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW, 0o666 & ~_UMASK)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        other = os.pread(fd, 32, 0).decode(errors="replace").strip() or "another process"
        os.close(fd)
        from shaper.errors import ResultError
        raise ResultError(f"{folder} is in use by another shaper run (pid {other}); wait for "
                          f"it to end or choose another --out") from None
    os.ftruncate(fd, 0)
    os.pwrite(fd, f"{os.getpid()}\n".encode(), 0)
    _HELD[key] = fd


def append_line(path: str | Path, text: str) -> None:
    """Append one line to a log file, never through a symbolic link planted at ``path``."""
    fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT | os.O_NOFOLLOW, 0o666 & ~_UMASK)
    with os.fdopen(fd, "a") as handle:
        handle.write(text + "\n")
