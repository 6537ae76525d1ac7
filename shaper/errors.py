"""The exceptions shaper raises for a user's mistake.

Every message says what was expected, what came, and the fix. The command line
turns any :class:`ShaperError` into one line on stderr and exit code 2; nothing
else in the package prints tracebacks for bad input.
"""

from __future__ import annotations


class ShaperError(Exception):
    """Base class of every error caused by bad input, not by a bug.

    ``exit_code`` is what the command line exits with: 2 for bad input.
    """

    exit_code = 2


class InputError(ShaperError, ValueError):
    """Arrays or arguments handed to the library have the wrong shape, dtype or value."""


class RecipeError(ShaperError):
    """A recipe file is malformed: carries the file and the key path (``pulse.max_rabi``).

    Args:
        message: what is wrong and how to fix it.
        path: the recipe file, or None for a recipe given as a dictionary.
        key: dotted key path into the recipe, or None for the whole file.
    """

    def __init__(self, message: str, *, path: str | None = None, key: str | None = None):
        self.path = path
        self.key = key
        self.detail = message
        where = path or ("command line" if key and key.startswith("--") else "<recipe>")
        if key:
            where += f": {key}"
        super().__init__(f"{where}: {message}")


class WaveformError(ShaperError):
    """A waveform file or array cannot be read or written as asked."""


class ResultError(ShaperError):
    """An output folder or report is missing, or would be overwritten."""


class EnvironmentFailure(ShaperError):
    """The machine, not the input, failed the run: a stall, a full disk, no permission,
    not enough memory. The command line exits 3."""

    exit_code = 3
