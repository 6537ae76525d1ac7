"""Stage 4, the costs: the problem's arrays, the figures of every ensemble member, the cost
terms and their registry, and the one rule for "targets met".

- :mod:`~shaper.costs.problem`: :class:`Problem`, :class:`Evaluation`, one batched
  propagation of the nominal system and every ensemble member;
- :mod:`~shaper.costs.terms`: the term factories, :data:`TERMS` (name -> factory and
  when it is on), :func:`combine`;
- :mod:`~shaper.costs.verdict`: :func:`judge`, the targets rule.
"""

from shaper.costs.problem import (
    Evaluation,
    Problem,
    evaluate,
    evaluate_members,
    figures_of,
    has_ensemble,
    make_problem,
    qubit_count,
    recipe_layout,
    waveform_problem,
)
from shaper.costs.terms import (
    TERMS,
    CostTerm,
    Registered,
    amplitude_limit,
    bandwidth,
    combine,
    infidelity,
    leakage,
    make_term,
    out_of_band,
    robustness,
    smoothness,
    terms_for,
)
from shaper.costs.verdict import Verdict, judge

__all__ = ["TERMS", "CostTerm", "Evaluation", "Problem", "Verdict", "amplitude_limit",
           "bandwidth", "combine", "evaluate", "evaluate_members", "figures_of", "has_ensemble",
           "infidelity", "judge", "leakage", "make_problem", "make_term", "out_of_band",
           "qubit_count", "recipe_layout", "Registered", "robustness", "smoothness", "terms_for",
           "waveform_problem"]
