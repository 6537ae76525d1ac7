"""Reading a recipe: TOML or a dictionary -> a validated :class:`~shaper.recipe.Recipe`.

The schema (every key, its kind and default) is :mod:`shaper.recipe.schema`; the section
readers are :mod:`shaper.recipe.sections`. Nothing here imports JAX.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from dataclasses import replace
from pathlib import Path

from shaper.errors import InputError, RecipeError
from shaper.recipe.files import (
    MAX_TEXT_BYTES,
    check_line_files,
    kind_of,
    read_bytes,
    why_unreadable,
)
from shaper.recipe.schema import GUESSES, Recipe, _Reader
from shaper.recipe.sections import build

MAX_DEPTH = 6  # the deepest a recipe nests: [system] -> transmon list -> table -> value


def _plain_values(raw: dict, path: str | None) -> None:
    """Refuse what no recipe key takes: dates and times, and nesting deeper than any key."""
    stack = [(raw, "", 0)]
    while stack:
        value, where, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise RecipeError("nested deeper than any recipe key", path=path, key=where or None)
        if isinstance(value, dict):
            for k, v in value.items():
                if not isinstance(k, str):
                    raise RecipeError(f"keys must be text, got {k!r}", path=path,
                                      key=where or None)
                stack.append((v, f"{where}.{k}" if where else k, depth + 1))
        elif isinstance(value, list):
            stack.extend((v, f"{where}[{i}]", depth + 1) for i, v in enumerate(value))
        elif not (value is None or isinstance(value, bool | int | float | str)):
            raise RecipeError(f"expected a number, text, true/false, a list or a table, got "
                              f"{type(value).__name__} {str(value)[:40]!r} (dates and times "
                              f"are not used in recipes)", path=path, key=where)


def digest(raw: dict) -> str:
    """The recipe's sha256: of its content in a canonical JSON form, so a recipe read from
    its file, from a report's copy or given as a dictionary has the same digest."""
    text = json.dumps(raw, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode()).hexdigest()


def load_recipe(source: str | Path | dict, *, path: str | None = None) -> Recipe:
    """Read a recipe from a TOML file or a dictionary (as :mod:`tomllib` would return).

    ``path``: for a dictionary, the file it came from (relative file names in it, such as
    a first guess or a measured response, are found beside that file; errors name it).

    Raises:
        RecipeError: the file is missing, not TOML, or any key is wrong.
    """
    if isinstance(source, dict):
        raw = source
    else:
        path = str(source)
        raw, _ = read_toml(source, "recipe")
    _plain_values(raw, path)
    reader = _Reader(raw, path)
    base = Path(path).parent if path else Path.cwd()
    check_line_files(raw.get("line"), base, "line", reader.fail)
    try:
        recipe = build(reader, raw, path, digest(raw))
    except InputError as exc:  # a model builder refused the values
        raise RecipeError(str(exc), path=path, key="system") from None
    if path is not None:  # a recipe read again from a report has no folder to look in
        check_first_guess(reader, recipe.optimizer.initial, base)
    files = {path: sha for stages in [recipe.line.awg.stages, *recipe.line.stages.values()]
             for st in stages for path, sha in st.files().items()}
    problem = budget_free(raw)
    if files:  # a changed response file is another recipe (its checkpoints are refused)
        return replace(recipe, sha256=digest({"recipe": raw, "files": files}),
                       problem_sha256=digest({"recipe": problem, "files": files}))
    return replace(recipe, problem_sha256=digest(problem))


def read_toml(source: str | Path, what: str) -> tuple[dict, bytes]:
    """A TOML file a user named (a recipe, a chip) and its bytes: a regular file of at
    most :data:`~shaper.recipe.files.MAX_TEXT_BYTES`, UTF-8 (a byte-order mark is dropped).

    Raises:
        RecipeError: naming the file: not a regular file, too large, not text, not TOML.
    """
    path = str(source)

    def fail(message: str):
        raise RecipeError(message, path=path)
    data = read_bytes(source, MAX_TEXT_BYTES, fail, what=what)
    try:
        return tomllib.loads(data.decode("utf-8")), data
    except UnicodeDecodeError as exc:
        fail(f"not a text file (byte {exc.start} is not UTF-8; TOML is UTF-8)")
    except tomllib.TOMLDecodeError as exc:
        fail(f"not valid TOML: {' '.join(str(exc).split())}")
    except RecursionError:
        fail(f"nested too deeply to be a {what}")


def check_first_guess(r: _Reader, initial, base: Path,
                      key: str = "optimizer.initial") -> Path | None:
    """``optimizer.initial`` naming a waveform file: it must be there now (beside the
    recipe, or in the working folder, as :func:`shaper.io.waveio.read_first_guess` looks),
    not found missing after JAX has loaded. Returns the file found (None: a guess by name,
    or not a file name, which the recipe reader refuses)."""
    if not isinstance(initial, str) or initial in GUESSES:
        return None
    beside = base / initial
    found = beside if beside.exists() or Path(initial).is_absolute() else Path(initial)

    def fail(message: str):
        r.fail(key, f"{message} (a first guess: a waveform file from an earlier run, beside "
                    f"the {'chip file' if key.startswith('template') else 'recipe'} or in the "
                    f"working folder)")
    try:
        info = found.stat()
    except OSError as exc:
        fail(f"{found}: {why_unreadable(exc)}")
    other = kind_of(info.st_mode)
    if other:
        fail(f"{found} is {other}, not a waveform file")
    return found


BUDGETS = ("max_iterations", "max_time", "starts")  # [optimizer] keys that only bound a run


def budget_free(raw: dict) -> dict:
    """The recipe without the optimiser's budgets: a larger budget is the same problem."""
    optimizer = raw.get("optimizer")
    if not isinstance(optimizer, dict) or not any(k in optimizer for k in BUDGETS):
        return raw
    return {**raw, "optimizer": {k: v for k, v in optimizer.items() if k not in BUDGETS}}
