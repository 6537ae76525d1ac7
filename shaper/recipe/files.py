"""Reading a file a user named: regular files only, size known before reading, never
echoed whole.

A recipe, a chip file, a waveform or a report may be anything the user's shell can name:
a FIFO (opening it for reading blocks until a writer comes), a device (``/dev/zero``
never ends), a folder, a symbolic-link loop, a file of gigabytes. :func:`read_bytes`
looks before it reads (``stat``, then an ``open`` that cannot block and a second look at
what was opened) and reads at most its bound; :func:`excerpt` is the only way a file's
content reaches a message: short, quoted, control characters escaped. Nothing here
imports JAX.
"""

from __future__ import annotations

import errno
import os
import stat
from collections.abc import Callable
from pathlib import Path

MIB = 2 ** 20
MAX_TEXT_BYTES = 8 * MIB  # a recipe or chip file (a 200 x 200 complex matrix fits with room)
EXCERPT_CHARS = 24  # the most of a file's content a message shows


def excerpt(value, limit: int = EXCERPT_CHARS) -> str:
    """``value`` as a message may show it: quoted, at most ``limit`` characters of it,
    control and other unprintable characters escaped (``repr``), ``...`` if cut.

    Examples:
        >>> excerpt("time_s,value")
        "'time_s,value'"
        >>> excerpt("\\x1b[31mred" * 9, 8)
        "'\\\\x1b[31mred'..."
    """
    text = value if isinstance(value, str) else str(value)
    return repr(text[:limit]) + ("..." if len(text) > limit else "")


def kind_of(mode: int) -> str | None:
    """What a ``stat`` mode is when it is not a regular file (None for a regular file)."""
    for test, name in ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a FIFO (named pipe)"),
                       (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
                       (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return name
    return None if stat.S_ISREG(mode) else "not a regular file"


def why_unreadable(exc: OSError) -> str:
    """An ``OSError`` of opening or reading a named file, in words."""
    if exc.errno == errno.ENOENT:
        return "no such file"
    if exc.errno == errno.ELOOP:
        return "a loop of symbolic links"
    if exc.errno == errno.ENAMETOOLONG:
        return "the name is too long"
    return exc.strerror or type(exc).__name__


def read_bytes(path: str | Path, limit: int, fail: Callable[[str], None], *,
               what: str = "file", text: bool = True) -> bytes:
    """The bytes of ``path``, a regular file of at most ``limit`` bytes.

    A folder, FIFO, device or socket is refused without being opened for long (``stat``
    first; the open is non-blocking, and what was opened is checked again); a file over
    ``limit`` is refused before it is read. With ``text``, a NUL byte refuses the file
    ("not a text file") and a UTF-8 byte-order mark is dropped. ``fail(message)`` must
    raise (the message does not name the file: the caller's error does); ``what`` names
    the kind of file expected ("recipe", "waveform").
    """
    path = Path(path)
    try:
        info = os.stat(path)
    except OSError as exc:
        fail(f"cannot read the file: {why_unreadable(exc)}")
    other = kind_of(info.st_mode)
    if other:
        fail(f"{other}, not a {what} file")
    if info.st_size > limit:
        fail(f"{_size(info.st_size)}; a {what} file is at most {_size(limit)}")
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | os.O_CLOEXEC)
    except OSError as exc:
        fail(f"cannot read the file: {why_unreadable(exc)}")
    try:
        other = kind_of(os.fstat(fd).st_mode)  # replaced between the two looks?
        if other:
            fail(f"{other}, not a {what} file")
        data = _read_at_most(fd, limit + 1, text and (lambda head: _text_head(head, fail,
                                                                          what)))
    except OSError as exc:
        fail(f"cannot read the file: {why_unreadable(exc)}")
    finally:
        os.close(fd)
    if len(data) > limit:
        fail(f"grew past {_size(limit)} while it was read")
    if text:
        _text_head(data, fail, what)
        if data.startswith(b"\xef\xbb\xbf"):  # a byte-order mark some editors write
            data = data[3:]
    return data


def _text_head(data: bytes, fail, what: str) -> None:
    """Refuse bytes holding a NUL (checked on the first chunk too, so a file of
    gigabytes of NUL bytes is refused before it is read whole)."""
    nul = data.find(b"\0")
    if nul >= 0:
        fail(f"not a text {what} file (a NUL byte at byte {nul})")


def read_text(path: str | Path, limit: int, fail: Callable[[str], None], *,
              what: str = "file") -> str:
    """:func:`read_bytes` decoded as UTF-8 (byte-order mark dropped, NUL refused)."""
    data = read_bytes(path, limit, fail, what=what)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        fail(f"not a text {what} file (byte {exc.start} is not UTF-8)")


def _read_at_most(fd: int, size: int, first=None) -> bytes:
    """At most ``size`` bytes of ``fd``; ``first(chunk)`` looks at the first chunk read."""
    chunks, left = [], size
    while left > 0:
        chunk = os.read(fd, min(left, MIB))
        if not chunk:
            break
        if first and not chunks:
            first(chunk)
        chunks.append(chunk)
        left -= len(chunk)
    return b"".join(chunks)


def _size(n: int) -> str:
    if n >= 2 ** 30:
        return f"{n / 2 ** 30:.3g} GiB"
    return f"{n / MIB:.3g} MiB" if n >= MIB else f"{n} bytes"


def resolves(path: Path, fail: Callable[[str], None]) -> Path:
    """``path`` made absolute with its symbolic links followed; a loop of links (which
    ``Path.resolve`` reports as a RuntimeError) is refused through ``fail``."""
    try:
        return path.resolve()
    except RuntimeError:
        fail(f"{path}: a loop of symbolic links")
    except OSError as exc:
        fail(f"{path}: {why_unreadable(exc)}")


def check_line_files(line, base: Path, prefix: str, fail: Callable[[str, str], None]) -> None:
    """Every measured-response file a raw ``[line]`` table names resolves beside ``base``
    (no loop of symbolic links); ``fail(key, message)`` names ``<prefix>.<channel>[i].file``.
    The files are read (and bounded) by :func:`shaper.recipe.lines.read_response_file`."""
    if not isinstance(line, dict):
        return
    for channel, stages in line.items():
        for i, stage in enumerate(stages if isinstance(stages, list) else [stages]):
            name = stage.get("file") if isinstance(stage, dict) else None
            if isinstance(name, str) and name:
                key = f"{prefix}.{channel}[{i}].file"
                resolves(base / name, lambda message, key=key: fail(key, message))
