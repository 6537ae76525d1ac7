"""Recipes derived from recipes: more levels, coherence times, another duration, rate,
gate or budget.

Every derivation edits the recipe's raw TOML content and reads it again through
:func:`~shaper.recipe.load.load_recipe`, so the result is validated like a file and its
``raw`` and ``sha256`` describe it (never ``dataclasses.replace`` on a Recipe).
"""

from __future__ import annotations

import copy
from collections.abc import Callable, Iterator
from contextlib import contextmanager

from shaper.errors import InputError, RecipeError
from shaper.physics.targets import slug
from shaper.recipe.load import load_recipe
from shaper.recipe.models import level_tables
from shaper.recipe.schema import Recipe


def derived(recipe: Recipe, edit: Callable[[dict], None]) -> Recipe:
    """The recipe whose raw content ``edit`` changed in place, read again (its file's
    path kept: relative file names in it stay where they were)."""
    raw = copy.deepcopy(recipe.raw)
    edit(raw)
    return load_recipe(raw, path=recipe.path)


def _level_tables(raw: dict, what: str) -> list[dict]:
    """The raw tables that carry the levels and coherence times, as the recipe's model
    says (:attr:`shaper.recipe.models.Model.level_tables`).

    Raises:
        InputError: the model's matrices fix them (``what`` names the option).
    """
    tables = level_tables(raw["system"])
    if tables is None:
        raise InputError(f"{what} applies to models whose recipe sets the levels (transmons); "
                         f"this recipe's model is {raw['system'].get('model')!r}, whose "
                         f"matrices fix the levels and the noise")
    return tables


def sets_levels(recipe: Recipe) -> bool:
    """Whether the recipe's model lets a recipe change its levels (:func:`with_levels`)."""
    return level_tables(recipe.raw["system"]) is not None


def with_levels(recipe: Recipe, levels: int | None = None, *, extra: int = 0) -> Recipe:
    """Every subsystem (transmon) keeping ``levels`` levels, or ``extra`` more than it
    keeps, in the tables its model names (:func:`shaper.recipe.models.level_tables`).

    Raises:
        InputError: the model's matrices fix the levels, or levels < 2.
    """
    if levels is not None and levels < 2:
        raise InputError(f"--levels must be at least 2, got {levels}")

    def edit(raw):
        for table in _level_tables(raw, "--levels"):
            table["levels"] = levels if levels is not None else \
                int(table.get("levels", 3)) + extra
    return derived(recipe, edit)


def with_coherence(recipe: Recipe, t1: list[float] | None, t2: list[float] | None) -> Recipe:
    """Coherence times (seconds) per subsystem (transmon): one value for all or one per
    subsystem in recipe order, in the tables its model names.

    Raises:
        InputError: the model's matrices fix the noise, or a list of the wrong length.
    """
    def edit(raw):
        tables = _level_tables(raw, "--t1/--t2")
        for flag, values in (("t1", t1), ("t2", t2)):
            if values is None:
                continue
            if len(values) not in (1, len(tables)):
                raise InputError(f"--{flag}: give one time for every transmon or one per "
                                 f"transmon ({len(tables)}), got {len(values)}")
            for k, table in enumerate(tables):
                table[flag] = values[0] if len(values) == 1 else values[k]
    return derived(recipe, edit)


def at_samples(recipe: Recipe, samples: int, *, rate_hz: float | None = None) -> Recipe:
    """The recipe for a pulse of ``samples`` samples (at ``rate_hz``, default its own)."""
    rate = rate_hz or recipe.sample_rate_hz

    def edit(raw):
        raw["pulse"]["sample_rate"] = f"{rate!r} S/s"
        raw["pulse"]["duration"] = f"{samples / rate!r} s"
    out = derived(recipe, edit)
    if out.samples != samples:  # the duration's rounding must give back the count
        raise InputError(f"{samples} samples at {rate} S/s do not round-trip through the "
                         f"recipe's duration ({out.samples})")
    return out


def for_gate(recipe: Recipe, label: str, *, samples: int | None = None,
             name: str | None = None) -> Recipe:
    """The set's recipe for one of its gates (named ``name``, default ``<set>-<slug>``),
    optionally at another length."""
    def edit(raw):
        gate = {k: v for k, v in raw.get("gate", {}).items() if k != "targets"}
        gate["target"] = label
        raw["gate"] = gate
        raw["name"] = name or f"{recipe.name}-{slug(label)}"
        if samples is not None:
            raw["pulse"]["duration"] = f"{samples / recipe.sample_rate_hz!r} s"
    return derived(recipe, edit)


def with_budget(recipe: Recipe, *, iterations: int | None = None,
                hours: float | None = None, starts: int | None = None) -> Recipe:
    """The recipe with the command line's budgets in place of its own."""
    def edit(raw):
        o = raw.setdefault("optimizer", {})
        if iterations:
            o["max_iterations"] = iterations
        if hours:
            o["max_time"] = f"{hours * 3600!r} s"
        if starts:
            o["starts"] = starts
    return derived(recipe, edit)


def budget_of(recipe: Recipe) -> dict:
    """What a resumed run may go on to: its iterations and its time budget as written
    (:func:`shaper.io.runfolder.prepare_folder`)."""
    return {"max_iterations": recipe.optimizer.max_iterations,
            "max_time": (recipe.raw.get("optimizer") or {}).get("max_time")}


@contextmanager
def as_options(written: dict[str, tuple[str, str]]) -> Iterator[None]:
    """A derivation a command-line option asked for (``--levels``, ``--t1``): a recipe error
    it causes names the option and its value as the user typed it, not the recipe file.

    ``written``: the last part of a recipe key (``"levels"``, ``"t2"``) -> (the option, its
    text); an error on another key names the first option.
    """
    try:
        yield
    except RecipeError as exc:
        last = (exc.key or "").rsplit(".", 1)[-1].lstrip("-")  # "system.t2" or "--t2"
        flag, text = written.get(last, next(iter(written.values())))
        raise InputError(f"{flag} {text}: {exc.detail}") from None
