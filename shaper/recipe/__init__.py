"""Stage 2, the recipe: TOML with units -> frozen, validated settings and system arrays.

- :mod:`~shaper.recipe.units`: numbers with units, the plausibility of bare numbers;
- :mod:`~shaper.recipe.schema`: every key (kind, default), the settings dataclasses, the
  typed reader whose errors name the file and the key path;
- :mod:`~shaper.recipe.sections`: one reader per section; the system models are built here;
- :mod:`~shaper.recipe.load`: :func:`load_recipe` and the canonical digest.
"""

from shaper.recipe.load import digest, load_recipe
from shaper.recipe.schema import (
    ENSEMBLE_RULES,
    GUESSES,
    KEYS,
    ExportSettings,
    OptimizerSettings,
    Recipe,
)

__all__ = ["ENSEMBLE_RULES", "GUESSES", "KEYS", "ExportSettings", "OptimizerSettings", "Recipe",
           "digest", "load_recipe"]
