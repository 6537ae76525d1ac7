"""The one rule for "targets met", used by the optimiser's stop, the report, check, export
and the sweep.

A result meets the recipe's targets when

- its infidelity is at most ``optimizer.target_infidelity`` and its leakage at most
  ``optimizer.target_leakage``, for the nominal system and, with a robustness ensemble,
  for every member (``optimizer.ensemble_targets = "every"``, the default) or on the
  members' mean (``"mean"``);
- with ``pulse.bandwidth``, its out-of-band fraction (:func:`shaper.costs.out_of_band`
  of the baseband envelope, the quantity the bandwidth cost minimises) is at most
  ``pulse.max_out_of_band``.

The optimiser applies the rule to its own figures with ``optimizer.margin`` (the limits
divided by it), so that the exported, quantised samples still meet them; everything
else applies it without margin to the exported samples.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Miss:
    """A target missed: the judged value and its limit."""

    name: str
    value: float
    limit: float


@dataclass(frozen=True)
class Verdict:
    """Whether the targets are met, which are missed, and the values judged."""

    met: bool
    missed: tuple[Miss, ...]
    judged: dict[str, float]
    basis: str = ""  # which model the infidelity and leakage come from ("": the caller's)

    def summary(self) -> str:
        return summary(self.as_dict())

    def as_dict(self) -> dict:
        return {"met": self.met, "judged": self.judged, "judged_on": self.basis,
                "missed": [{"name": m.name, "value": m.value, "limit": m.limit}
                           for m in self.missed]}


def summary(targets: dict) -> str:
    """The line a command ends with: "targets met", or every missed target with its value
    and limit (``targets`` as in a report: ``met`` and ``missed``)."""
    if targets["met"]:
        return "targets met"
    return "targets NOT met: " + "; ".join(
        f"{m['name']} {m['value']:.3e} > {m['limit']:g}" for m in targets["missed"])


def judge(recipe, *, infidelity: float, leakage: float,
          member_infidelities: Sequence[float] | None = None,
          member_leakages: Sequence[float] | None = None,
          out_of_band: float | None = None, margin: float = 1.0, basis: str = "") -> Verdict:
    """Apply the rule to one result's figures.

    Args:
        recipe: the :class:`~shaper.recipe.Recipe` whose targets apply.
        infidelity, leakage: of the nominal system.
        member_infidelities, member_leakages: of each ensemble member (None: no ensemble).
        out_of_band: the out-of-band fraction (None: the recipe sets no bandwidth).
        margin: the limits are divided by this (the optimiser's safety margin).
        basis: what the infidelity and leakage are (e.g. "lab frame, 6 levels, ...").
    """
    o = recipe.optimizer
    judged = {"infidelity": float(infidelity), "leakage": float(leakage)}
    if member_infidelities is not None and len(member_infidelities):
        combine = np.max if o.ensemble_targets == "every" else np.mean
        judged["ensemble_infidelity"] = float(combine(member_infidelities))
        judged["ensemble_leakage"] = float(combine(member_leakages))
    limits = {"infidelity": o.target_infidelity, "leakage": o.target_leakage,
              "ensemble_infidelity": o.target_infidelity, "ensemble_leakage": o.target_leakage}
    if recipe.bandwidth_hz and out_of_band is not None:
        judged["out_of_band"] = float(out_of_band)
        limits["out_of_band"] = recipe.max_out_of_band
    missed = tuple(Miss(name, value, limits[name] / margin) for name, value in judged.items()
                   if not value <= limits[name] / margin)
    return Verdict(met=not missed, missed=missed, judged=judged, basis=basis)
