"""What an explanation is made of (:mod:`shaper.jobs.explain`): a :class:`Reason` (cause,
why, next and its commands), the report and the place it is read for (:class:`Context`),
and the small readers of a report's figures every cause uses."""

from __future__ import annotations

from typing import NamedTuple

from shaper.jobs import next_steps as steps
from shaper.jobs.next_steps import Step, Where
from shaper.recipe.models import levels_key


class Reason(NamedTuple):
    cause: str  # a short name: budget, converged above the target, ensemble spread, ...
    why: str  # one sentence from the run's own numbers
    next: str  # what to run or change, every command in backticks
    commands: tuple[str, ...] = ()  # the commands in ``next``, each runnable as it is

    def line(self) -> str:
        return f"why: {self.why}. next: {self.next}"


def reason(cause: str, why: str, remedy: Step | str) -> Reason:
    if isinstance(remedy, str):
        return Reason(cause, why, remedy)
    return Reason(cause, why, remedy.text, remedy.commands)


def joined(*remedies: Step | str) -> Step:
    """Several remedies as one next step ("a, or b, or c")."""
    parts = [r if isinstance(r, Step) else Step(r) for r in remedies if r]
    return Step(", or ".join(p.text for p in parts), sum((p.commands for p in parts), ()))


class Context(NamedTuple):
    report: dict
    where: Where
    limits: tuple[float, float]
    shortest_s: float | None

    def longer(self) -> Step:
        duration = self.report.get("duration_s")
        longest = duration if self.where.command == "sweep" else None
        return steps.longer(self.where, duration, self.shortest_s, longest)

    def key(self, key: str) -> str:
        """A recipe key as the user's file spells it (a chip's template, its qubits)."""
        if self.where.command != "chip":
            return key
        return "levels on every [[qubit]]" if "levels" in key else f"template.{key}"


def figures(report: dict) -> dict:
    return {"infidelity": report.get("infidelity", 0.0), "leakage": report.get("leakage", 0.0)}


def nominal(report: dict) -> dict:
    return report.get("before_quantisation") or figures(report)


def over(fig: dict | None, limits) -> bool:
    return bool(fig) and (fig["infidelity"] > limits[0] or fig["leakage"] > limits[1])


def pair(fig: dict) -> str:
    return f"infidelity {fig['infidelity']:.2e}, leakage {fig['leakage']:.2e}"


def levels_text(levels) -> str:
    return "x".join(str(n) for n in levels) or "?"


def report_levels_key(report: dict) -> str:
    source = report.get("recipe")  # a run's report: the recipe; check's verdict: its name
    content = source.get("content") if isinstance(source, dict) else None
    return levels_key((content or {}).get("system") or {})


def duration(report: dict) -> str:
    seconds = report.get("duration_s")
    return f"{seconds * 1e9:.3g} ns" if seconds else "this duration"
