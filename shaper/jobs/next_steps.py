"""What to run next, as commands that run where the user stands (README, "When a result
misses its targets").

A next step is worth something only if it runs as printed: the same recipe or chip file,
the same ``--out``, options consistent with the run's settings. :class:`Where` says where
the user stands (which command made the report, on which file, into which folder); the
functions here turn a remedy into words with the commands embedded in backticks, and the
commands themselves (``Step.commands``, each a line a shell runs as it is, built with
:func:`shlex.join`). :mod:`shaper.jobs.explain` chooses the remedy; this module only says
how to run it. Nothing is computed here.
"""

from __future__ import annotations

import math
import shlex
from dataclasses import dataclass, fields
from pathlib import Path
from typing import NamedTuple

# the commands whose report a next step can name as "the same command again"
RERUNS = ("optimize", "sweep", "chip")


@dataclass(frozen=True)
class Where:
    """Where a report was made, so that its next steps run there.

    Attributes:
        command: ``optimize``, ``sweep``, ``chip``, ``check``, ``export`` or ``benchmark``.
        file: the recipe (a chip: the chip file) as the user named it.
        out: that command's ``--out`` (None: check and benchmark have none).
        run: the folder holding the judged report (a run, a sweep's ``shortest``, an
            export's source run).
        waveform: the file judged (check; a run's own file).
        durations: ``--durations`` of a sweep, a chip task's sweep as its file gives it.
        durations_key: a chip's key for those durations (``gates.single_durations``).
        lab_frame: the optimiser's lab-frame model the recipe asks for, where no report
            says which the optimiser used (check, export).
        gate: the gate of a gate set the report is of (a check of its file names it).
    """

    command: str = "optimize"
    file: str = "RECIPE"
    out: str | None = None
    run: str | None = None
    waveform: str | None = None
    durations: str | None = None
    durations_key: str | None = None
    lab_frame: str | None = None
    gate: str | None = None  # a gate set's gate: its check needs --gate

    @classmethod
    def of(cls, value) -> Where:
        """A :class:`Where` from one, from a dict of its fields, or from a recipe path (the
        plain ``recipe=`` of earlier callers: an ``optimize`` there)."""
        if isinstance(value, Where):
            return value
        if isinstance(value, dict):
            known = {f.name for f in fields(cls)}
            return cls(**{k: v for k, v in value.items() if k in known})
        return cls(file=str(value) if value else "RECIPE")

    @property
    def name(self) -> str:
        """The recipe's or chip's file stem: folder names of fresh runs."""
        return Path(self.file).stem or "run"


class Step(NamedTuple):
    """A remedy in words (its commands in backticks inside) and its commands."""

    text: str
    commands: tuple[str, ...] = ()


def shaper(*words) -> str:
    """A ``shaper`` command line, quoted for a POSIX shell."""
    return shlex.join(["shaper", *(str(w) for w in words)])


def step(text: str, *commands: str) -> Step:
    """``text`` with ``{0}``, ``{1}``, ... replaced by the commands in backticks."""
    return Step(text.format(*(f"`{c}`" for c in commands)), tuple(commands))


def fresh(where: Where, suffix: str) -> str:
    """A new folder beside the command's own for a run that starts over."""
    base = where.out or f"runs/{where.name}"
    return f"{str(base).rstrip('/')}-{suffix}"


def again(where: Where, *options) -> str | None:
    """The same command again in the same folder with ``options`` added (None for a
    command that cannot be run again as it was: check, export, benchmark)."""
    out = ["--out", where.out] if where.out else []
    if where.command == "optimize":
        return shaper("optimize", where.file, *out, *options)
    if where.command == "sweep":
        return shaper("sweep", where.file, "--durations", where.durations or "?", *out,
                      *options)
    if where.command == "chip":
        return shaper("chip", where.file, *out, *options)
    return None


def nanoseconds(seconds: float) -> str:
    return f"{seconds * 1e9:.4g}ns"


def sweep_range(start_s: float) -> str:
    """From ``start_s`` (rounded up to a tenth of a nanosecond: never below a bound it
    was given) to twice it, in about four whole-nanosecond steps."""
    start = max(1.0, math.ceil(round(start_s * 1e10, 6)) / 10)
    step_ns = max(1.0, round(start / 4))
    return f"{start:g}ns:{2 * start:g}ns:{step_ns:g}ns"


def longer(where: Where, duration_s: float | None, floor_s: float | None = None,
           longest_s: float | None = None) -> Step:
    """A longer pulse: from this duration (at least the speed limit ``floor_s``, beyond a
    sweep's ``longest_s``) to twice it, run where it can be."""
    start = max(duration_s or 0.0, floor_s or 0.0)
    if longest_s:
        start = max(start, longest_s * 1.25)
    if not start:
        start = 20e-9
    durations = sweep_range(start)
    if where.command == "chip":
        key = where.durations_key or "gates.single_durations"
        now = f" (now \"{where.durations}\")" if where.durations else ""
        return step(f"a longer pulse: set {key} = \"{durations}\" in {where.file}{now}, "
                    f"then {{0}} (the tasks whose durations changed are redone)",
                    shaper("chip", where.file, "--out", where.out or f"results/{where.name}",
                           "--resume"))
    if where.command == "sweep":
        return step("a longer pulse: the same sweep on to longer durations (finished ones "
                    "are kept): {0}",
                    shaper("sweep", where.file, "--durations", durations,
                           *(["--out", where.out] if where.out else []), "--resume"))
    return step("a longer pulse: {0} finds the shortest that passes",
                shaper("sweep", where.file, "--durations", durations, "--out",
                       fresh(where, "sweep")))


def budget(where: Where, stop: str, iterations: int, wall_s: float | None) -> Step:
    """A larger budget, going on from where the optimiser stopped."""
    more = ["--iterations", str(max(2 * iterations, iterations + 10))] \
        if stop == "iteration limit" else ["--hours", f"{max(0.1, 2 * (wall_s or 0) / 3600):.2g}"]
    if where.command == "optimize":
        return step("a larger budget, going on from where it stopped (the same --out): {0} "
                    "(or optimizer.max_iterations / max_time in the recipe)",
                    again(where, "--resume", *more))
    if where.command in ("sweep", "chip"):  # finished points and tasks are not redone
        command = shaper(where.command, where.file,
                         *(["--durations", where.durations] if where.command == "sweep"
                           else []), "--out", fresh(where, "budget"), *more)
        return step("a larger budget for every optimisation, in a new folder (finished "
                    "ones are kept as they are by --resume): {0}", command)
    return step("a larger budget: {0}", shaper("optimize", where.file, "--out",
                                               fresh(where, "run"), *more))


def resume(where: Where) -> Step:
    """An interrupted run goes on from its checkpoints."""
    command = again(where, "--resume")
    if command is None:
        return Step("run the command again")
    return step("go on from where it stopped (its checkpoints, the same --out): {0}", command)


def edit_then(where: Where, edits: str, suffix: str) -> Step:
    """Change the recipe (or chip) file by ``edits`` (words naming keys and values), then
    the command that uses it: the same run again (its earlier files kept as
    ``*.replaced-N.*``), a sweep in a fresh folder (another recipe's sweep cannot share
    one), the chip's changed tasks redone, a new run for a file that was checked."""
    if where.command == "optimize":
        command = again(where, "--force")
        tail = "(its earlier files are kept as *.replaced-N.*)"
    elif where.command == "sweep":
        command = shaper("sweep", where.file, "--durations", where.durations or "?", "--out",
                         fresh(where, suffix))
        tail = "(a changed recipe sweeps in a new folder)"
    elif where.command == "chip":
        command = again(where, "--resume")
        tail = "(the tasks it changes are redone, the others kept)"
    else:
        command = shaper("optimize", where.file, "--out", fresh(where, suffix))
        tail = "(a new optimisation of this recipe)"
    return step(f"{edits} in {where.file}, then {{0}} {tail}", command)


def check_plots(where: Where) -> Step:
    """Where the figures go wrong, drawn: a check of the judged file with its plots."""
    if where.command == "chip" or not where.waveform:  # a chip's recipes are not files
        return Step(f"the run's own report and plots ({where.run or where.out or 'its folder'})"
                    f" show where")
    gate = ["--gate", where.gate] if where.gate else []
    return step("{0} shows where", shaper("check", where.file, where.waveform, *gate,
                                          "--plots", fresh(where, "plots")))


def task_where(task, root, run) -> Where:
    """Where a chip task's misses are explained (a :class:`shaper.recipe.chip.Task`): the
    chip's own command (or a gate set's sweep) on its file and ``--out`` (``root``), the
    task's durations and the key that sets them; ``run``: its judged run's folder."""
    given = task.where or {"command": "chip", "file": "CHIP"}
    return Where.of({**given, "out": str(root), "run": str(run),
                     "durations": task.durations,
                     "durations_key": task.durations_key if given["command"] == "chip"
                     else None})
