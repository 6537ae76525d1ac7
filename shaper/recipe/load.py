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
from shaper.recipe.schema import Recipe, _Reader
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
        try:
            text = Path(source).read_bytes()
        except OSError as exc:
            raise RecipeError(f"cannot read the file: {exc.strerror}", path=path) from None
        try:
            raw = tomllib.loads(text.decode("utf-8"))
        except UnicodeDecodeError:
            raise RecipeError("not a text file (TOML must be UTF-8)", path=path) from None
        except tomllib.TOMLDecodeError as exc:
            raise RecipeError(f"not valid TOML: {exc}", path=path) from None
        except RecursionError:
            raise RecipeError("nested too deeply to be a recipe", path=path) from None
    _plain_values(raw, path)

    try:
        recipe = build(_Reader(raw, path), raw, path, digest(raw))
    except InputError as exc:  # a model builder refused the values
        raise RecipeError(str(exc), path=path, key="system") from None
    files = {path: sha for stages in [recipe.line.awg.stages, *recipe.line.stages.values()]
             for st in stages for path, sha in st.files().items()}
    problem = budget_free(raw)
    if files:  # a changed response file is another recipe (its checkpoints are refused)
        return replace(recipe, sha256=digest({"recipe": raw, "files": files}),
                       problem_sha256=digest({"recipe": problem, "files": files}))
    return replace(recipe, problem_sha256=digest(problem))


BUDGETS = ("max_iterations", "max_time", "starts")  # [optimizer] keys that only bound a run


def budget_free(raw: dict) -> dict:
    """The recipe without the optimiser's budgets: a larger budget is the same problem."""
    optimizer = raw.get("optimizer")
    if not isinstance(optimizer, dict) or not any(k in optimizer for k in BUDGETS):
        return raw
    return {**raw, "optimizer": {k: v for k, v in optimizer.items() if k not in BUDGETS}}
