"""A run's folder as the job prepares it: once per run, before anything is written there.

``shaper optimize`` prepares it in :func:`shaper.jobs.setup.run_setup` (before the run
log, the plot helper and JAX); a library call of :func:`shaper.jobs.run.run` prepares it
there. No JAX here: a folder that must be refused is refused at once.
"""

from __future__ import annotations

from pathlib import Path

from shaper.io.runfolder import prepare_folder
from shaper.recipe import Recipe
from shaper.recipe.derive import budget_of


def prepare_run_folder(folder: Path, recipe: Recipe, *, force: bool,
                       resume: bool) -> dict[str, str]:
    """THE preparation of a run's folder (:func:`shaper.io.runfolder.prepare_folder`): made
    and locked; a finished run is refused unless ``force``, which keeps its waveform and
    report (``<name>.csv``, ``<name>.json``, ``report.json``) as ``*.replaced-N.*``; a
    resumed run may go on to the recipe's budget. Returns what was renamed."""
    return prepare_folder(folder, force, resume,
                          keep=[f"{recipe.name}.csv", f"{recipe.name}.json", "report.json"],
                          budget=budget_of(recipe))
