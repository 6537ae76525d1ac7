"""A whole chip: every qubit's gate set and every pair's two-qubit gate at its shortest
duration, on local worker processes or a Dask cluster (README, "Chips").

Each task (:class:`shaper.recipe.chip.Task`) is one duration sweep
(:class:`shaper.jobs.sweep.Sweep`) of one gate that must be played, followed by the
gates derived from it (:mod:`shaper.jobs.gateset`); :func:`run_task` does it in
whatever process the executor chose and returns the rows. The coordinator records
each finished task in ``chip.json`` (atomically, with the digest of what it computed),
so a resumed run keeps finished gates and redoes only those whose qubit or template
changed. Tasks are deterministic (seeds from the template), so the local and the Dask
run give the same table.
"""

from __future__ import annotations

import os
import shutil
import sys
import time
from dataclasses import asdict
from pathlib import Path

import numpy as np

from shaper.errors import ResultError
from shaper.io import atomic
from shaper.jobs.executors import DaskExecutor, LocalExecutor  # noqa: F401 (their old home)
from shaper.jobs.gateset import GateRow, describe, write_table
from shaper.jobs.next_steps import task_where
from shaper.recipe.chip import Chip, Task


def run_task(task: Task, root: str, budget: dict | None = None) -> dict:
    """One task, in a worker: the sweep, the shortest passing pulse's export, the derived
    gates. Returns ``rows`` (dictionaries, paths relative to ``root``; None: the budget
    ran out before the task could finish, ``--resume`` redoes it), ``compiles`` (of the
    objective, in this task) and ``wall_time_s``.

    ``budget``: the command line's ``iterations`` and ``starts`` (per optimisation) and
    ``deadline`` (``time.time()`` by which the whole chip ends, ``--hours``); not part of
    the task's digest, so a resumed chip keeps what finished under another budget.
    """
    started = time.monotonic()
    budget = budget or {}
    if budget.get("deadline") is not None and time.time() >= budget["deadline"]:
        return {"rows": None, "compiles": 0, "wall_time_s": 0.0}
    if "jax" not in sys.modules:  # a fresh worker: one thread, as the starts' workers
        from shaper.optimizer.parallel import _PINNED
        os.environ.update(_PINNED)
    from shaper.jobs.chip_kept import kept
    from shaper.jobs.chip_pairs import with_neighbours
    from shaper.jobs.gateset import derive
    from shaper.jobs.sweep import Sweep
    from shaper.recipe import load_recipe
    from shaper.recipe.units import parse_durations

    root_path = Path(root)
    folder = root_path / "gates" / task.id
    marker = folder / "task.json"
    if folder.exists() and (not marker.exists() or atomic.read_json(
            marker, ResultError, "unreadable").get("digest") != task.digest):
        shutil.rmtree(folder)  # another qubit or template: its earlier work does not apply
    folder.mkdir(parents=True, exist_ok=True)
    atomic.write_json(marker, {"task": task.id, "digest": task.digest})
    from shaper.recipe.derive import with_budget

    recipe = with_budget(load_recipe(task.recipe), iterations=budget.get("iterations"),
                         starts=budget.get("starts"))
    sweep = Sweep(recipe, folder / "sweep", resume=True, echo=lambda text: None,
                  deadline=budget.get("deadline"))
    shortest = sweep.run(parse_durations(task.durations, key=task.durations_key),
                         plots=False)
    if shortest is None and (sweep.budget_reached or not sweep.points):
        return {"rows": None, "compiles": sweep.compiles, "wall_time_s":
                time.monotonic() - started}
    where = task_where(task, root, folder / "shortest")  # a miss's next steps: the chip's
    output, first, lengthened = kept(task, sweep, shortest, folder, root_path, where)
    result = output.result
    rows = [first]
    for label, phase in task.derived:
        row = derive(result.recipe, result.samples, label, phase, folder / "derived", where)
        row.waveform = str((folder / "derived" / Path(row.waveform).name).relative_to(
            root_path))
        row.subject = task.subject
        with_neighbours(task, row, root_path, where)  # a no-op without neighbours
        rows.append(row)
    for row in rows:
        row.lengthened = lengthened
    return {"rows": [asdict(r) for r in rows], "compiles": sweep.compiles,
            "wall_time_s": time.monotonic() - started}


def run_chip(chip: Chip, out: Path, *, executor, resume: bool = False, force: bool = False,
             echo=print, progress: bool = True, budget: dict | None = None) -> list[GateRow]:
    """Run every task not finished yet; write the summary; return every finished row.
    ``budget``: as :func:`run_task` takes it (``--iterations``, ``--starts``, ``--hours``).

    Raises:
        ResultError: ``out`` holds another chip's run, or a run that ``resume``/``force``
            should continue or replace.
        EnvironmentFailure: the workers or the scheduler were lost (``--resume`` goes on).
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    state = _state(chip, out, resume, force)
    done = {t.id: state["tasks"][t.id]["rows"] for t in chip.tasks
            if state["tasks"].get(t.id, {}).get("digest") == t.digest}
    todo = [t for t in chip.tasks if t.id not in done]
    echo(f"chip {chip.name}: {len(chip.qubits)} qubit(s), {len(chip.pairs)} pair(s), "
         f"{len(chip.tasks)} optimisation(s); {len(done)} finished earlier and kept, "
         f"{len(todo)} to run on {executor.description}")
    bar, weights = None, {t.id: expected_cost(t) for t in todo}
    if progress and todo:
        from tqdm import tqdm
        # the bar counts work, not tasks: a pair's task costs far more than a qubit's, so
        # the time left is weighed by each task's expected cost (expected_cost)
        bar = tqdm(total=sum(weights.values()), file=sys.stderr, dynamic_ncols=True,
                   bar_format="{l_bar}{bar}| {postfix} [{elapsed} < {remaining}]")
        bar.set_postfix_str(f"0/{len(todo)} tasks")
    started, finished = time.monotonic(), []

    def tick(task) -> None:
        finished.append(task.id)
        if bar is not None:
            bar.set_postfix_str(f"{len(finished)}/{len(todo)} tasks", refresh=False)
            bar.update(min(weights[task.id], bar.total - bar.n))  # float sums: not past 1
    try:
        _run_tasks(executor, chip, todo, out, state, done, budget,
                   say=bar.write if bar is not None else echo, tick=tick)
    finally:
        if bar is not None:
            bar.close()
    rows = [GateRow(**r) for t in chip.tasks if t.id in done for r in done[t.id]]
    missing = [t.id for t in chip.tasks if t.id not in done]
    if missing:
        echo(f"{len(missing)} task(s) not finished within the budget (--hours): "
             f"{', '.join(missing)}; run again with --resume (and a budget) to finish them")
    state["wall_time_s"] = time.monotonic() - started
    atomic.write_json(out / "chip.json", state)
    echo("writing the chip's tables, plots and page")
    together, benchmarking = _units_found(chip, state)
    write_summary(chip, out, rows, together=together, benchmarking=benchmarking)
    return rows


def expected_cost(task: Task) -> float:
    """A task's expected share of the work: its durations times their samples times d^3
    (one eigendecomposition of a d x d slice) times the systems propagated together.
    Only relative sizes matter (the progress bar's time left)."""
    from shaper.recipe import load_recipe
    from shaper.recipe.units import parse_durations

    recipe = load_recipe(task.recipe)
    durations = parse_durations(task.durations, key=task.durations_key)
    samples = sum(durations) * recipe.sample_rate_hz
    return samples * recipe.system.dimension ** 3 * (len(recipe.ensemble_scales) + 1)


def _state(chip: Chip, out: Path, resume: bool, force: bool) -> dict:
    """chip.json: what finished earlier (a resumed run), or a fresh state."""
    state_path = out / "chip.json"
    state = {"chip": chip.name, "chip_sha256": chip.sha256, "tasks": {}}
    if state_path.exists() and not force:
        if not resume:
            raise ResultError(f"{out} already holds a chip run (chip.json); pass --resume to "
                              f"continue it or --force to start over (resume=True / "
                              f"force=True from Python)")
        state = atomic.read_json(state_path, ResultError, "unreadable")
        if not isinstance(state, dict) or not isinstance(state.get("tasks"), dict):
            raise ResultError(f"{state_path}: not a chip run's state (no table of tasks)")
        if state.get("chip") != chip.name:
            raise ResultError(f"{state_path}: belongs to chip {state.get('chip')!r}, not "
                              f"{chip.name!r}")
        for kind in UNIT_WORDS:  # a unit a stop left unfinished runs again
            units = state.get(kind) if isinstance(state.get(kind), dict) else {}
            state[kind] = {k: u for k, u in units.items()
                           if isinstance(u, dict) and u.get("result") is not None}
        for task_id, task in state["tasks"].items():  # files are read from the run only
            for row in (task.get("rows") or []) if isinstance(task, dict) else []:
                atomic.inside_for_reading(out, row.get("waveform") if isinstance(row, dict)
                                          else None, ResultError,
                                          f"{state_path}: task {task_id!r}")
    if force and (out / "gates").exists():
        shutil.rmtree(out / "gates")  # start over: no task resumes its earlier sweep
    return state


def _run_tasks(executor, chip: Chip, todo, out: Path, state: dict, done: dict, budget, *,
               say, tick) -> None:
    """Submit every task; record each as it finishes (chip.json written at once). The
    physics that needs several tasks' files (a pair's gates played together, a qubit's or
    a pair's predicted RB) are units of their own (:func:`_ready_units`), submitted as soon
    as the tasks they read are done and recorded beside the tasks."""
    futures = {executor.submit(run_task, t, str(out), budget): t for t in todo}
    pending = list(futures)

    def submit_units() -> None:
        for kind, key, digest, args in _ready_units(chip, done, state):
            future = executor.submit(_unit, kind, chip, *args, str(out))
            futures[future] = (kind, key, digest)
            pending.append(future)
            state.setdefault(kind, {})[key] = {"digest": digest, "result": None}
    submit_units()
    try:
        while pending:
            future = next(iter(executor.completed(pending)))
            pending.remove(future)
            unit = futures[future]
            outcome = executor.result(future)
            if isinstance(unit, tuple):
                kind, key, digest = unit
                state[kind][key] = {"digest": digest, "result": outcome}
                atomic.write_json(out / "chip.json", state)
                say(f"{key}: {UNIT_WORDS[kind]}")
                continue
            _record(unit, outcome, out, state, done, say, tick)
            submit_units()
    except Exception as exc:
        lost = getattr(executor, "lost", lambda e: None)(exc)
        if lost is None:
            raise
        raise lost from None


UNIT_WORDS = {"together": "gates played together", "benchmark_qubit": "predicted RB",
              "benchmark_pair": "predicted two-qubit RB"}


def _record(task, outcome: dict, out: Path, state: dict, done: dict, say, tick) -> None:
    """A finished task into chip.json (at once) and the progress."""
    if outcome["rows"] is None:  # the budget ran out first: not finished
        tick(task)
        return
    state["tasks"][task.id] = {"digest": task.digest, "rows": outcome["rows"],
                               "compiles": outcome["compiles"],
                               "wall_time_s": outcome["wall_time_s"],
                               "finished": time.strftime("%Y-%m-%dT%H:%M:%S%z")}
    atomic.write_json(out / "chip.json", state)
    done[task.id] = outcome["rows"]
    for row in outcome["rows"]:
        say(describe(GateRow(**row)))
    tick(task)


def _unit(kind: str, chip, subjects: tuple[str, ...], rows: list[dict], root: str):
    """A worker's entry for one unit (:data:`UNIT_WORDS`): plain data in and out."""
    if "jax" not in sys.modules:  # a fresh worker: one thread, as the tasks' workers
        from shaper.optimizer.parallel import _PINNED
        os.environ.update(_PINNED)
    if kind == "together":
        from shaper.jobs.chip_simultaneous import play_pair
        return play_pair(chip, *subjects, rows, root)
    from shaper.jobs import benchmarking_report as rb
    gates = [GateRow(**r) for r in rows]
    quiet = lambda text: None  # noqa: E731 - the coordinator says one line per unit
    if kind == "benchmark_qubit":
        return rb.qubit_unit(chip, subjects[0], gates, Path(root), echo=quiet)
    return rb.pair_unit(chip, *subjects, gates, Path(root), echo=quiet)


def _ready_units(chip: Chip, done: dict, state: dict) -> list[tuple]:
    """``(kind, key, digest, (subjects, rows))`` of every unit whose tasks are done and
    that is not recorded for these very tasks: pairs played together (``[gates]
    simultaneous``), each qubit's predicted RB and each pair's (``verdict.benchmark``)."""
    wanted = []
    if chip.simultaneous:
        from shaper.jobs.chip_simultaneous import together_pairs
        wanted += [("together", (a, b)) for a, b in together_pairs(chip)]
    if benchmarks(chip):
        wanted += [("benchmark_qubit", (q,)) for q in chip.qubits]
        wanted += [("benchmark_pair", (a, b)) for a, b in chip.pairs  # with a pair gate
                   if any(t.subject == f"{a}-{b}" for t in chip.tasks)]
    ready = []
    for kind, subjects in wanted:
        names = set(subjects) | ({"-".join(subjects)} if kind == "benchmark_pair" else set())
        tasks = [t for t in chip.tasks if t.subject in names]
        if not tasks or any(t.id not in done for t in tasks):
            continue
        key, digest = "-".join(subjects), _digest([[t.digest for t in tasks], kind])
        if state.get(kind, {}).get(key, {}).get("digest") != digest:
            rows = [r for t in tasks for r in done[t.id]]
            ready.append((kind, key, digest, (subjects, rows)))
    return ready


def benchmarks(chip: Chip) -> bool:
    """Whether the chip predicts RB (``[template.verdict] benchmark``, default true)."""
    return all(t.recipe.get("verdict", {}).get("benchmark", True) for t in chip.tasks)


def _digest(value) -> str:
    import hashlib
    import json
    return hashlib.sha256(json.dumps(value, sort_keys=True).encode()).hexdigest()


def _units_found(chip: Chip, state: dict) -> tuple[list[dict], dict]:
    """What the units recorded: the pairs played together (in the chip's order) and the
    predicted-RB block ``{"qubits": ..., "pairs": ...}``."""
    found = state.get("together", {})
    together = []
    if chip.simultaneous:
        from shaper.jobs.chip_simultaneous import together_pairs
        together = [e for a, b in together_pairs(chip)
                    for e in (found.get(f"{a}-{b}", {}).get("result") or [])]
    block = {"qubits": {k: v["result"] for k, v in state.get("benchmark_qubit", {}).items()
                        if v.get("result") is not None},
             "pairs": {k: v["result"] for k, v in state.get("benchmark_pair", {}).items()
                       if v.get("result") is not None}}
    return together, block


def write_summary(chip: Chip, out: Path, rows: list[GateRow], *,
                  together: list[dict] | None = None,
                  benchmarking: dict | None = None) -> list[Path]:
    """``chip.csv``, ``chip.md``, ``chip-durations.png``, ``chip-errors.png``, predicted RB
    (``benchmarking.json`` and a decay plot per qubit and pair) and the self-contained
    ``chip.html`` (images embedded: open it in any browser, no server), from the finished
    rows and the pairs played together."""
    from shaper.jobs.benchmarking_report import annotate, page_section, write_block
    from shaper.jobs.chip_page import (
        QUBIT_HEAD,
        neighbours_summary,
        qubits_given,
        write_page,
        write_plots,
    )
    from shaper.jobs.chip_pairs import pair_zz, write_pairs
    from shaper.jobs.chip_simultaneous import mark_rows, write_together

    played_together = together or []
    mark_rows(rows, played_together)
    benchmarking = benchmarking or {"qubits": {}, "pairs": {}}
    annotate(rows, benchmarking)  # before the table: its columns
    files = write_table(out, "chip", rows)
    words = neighbours_summary(chip, rows)
    if words:
        atomic.write_text(out / "chip.md", (out / "chip.md").read_text() + f"\n{words}\n")
    given = qubits_given(chip)
    if given:  # what was given, in chip.md too
        lines = ["", "## The qubits as given", "", "| " + " | ".join(QUBIT_HEAD) + " |",
                 "|" + "---|" * len(QUBIT_HEAD)] + ["| " + " | ".join(r) + " |" for r in given]
        atomic.write_text(out / "chip.md", (out / "chip.md").read_text()
                          + "\n".join(lines) + "\n")
    pairs = pair_zz(chip)
    if pairs:
        files.append(write_pairs(out, pairs))
    if played_together:
        files.append(write_together(out, played_together))
    images = write_plots(out, chip, rows)
    files += images
    extra = write_block(out, benchmarking, "chip.md") \
        if benchmarking["qubits"] or benchmarking["pairs"] else []  # a plot each
    files += extra
    images += [p for p in extra if p.suffix == ".png"]
    files.append(write_page(out / "chip.html", chip, rows, images, pairs=pairs,
                            together=played_together,
                            benchmarking=page_section(benchmarking) if extra else None))
    return files


def gate_set_chip(recipe, durations: str) -> Chip:
    """A recipe's gate set as the tasks of a one-subject chip: every gate that must be
    played swept over ``durations`` (``--durations``), the derived ones from their parent
    at its shortest duration (``shaper sweep`` of a gate set)."""
    from shaper.physics.targets import plan, slug
    from shaper.recipe.derive import for_gate
    from shaper.recipe.units import parse_durations

    parse_durations(durations, key="--durations")  # refused here, not in a worker
    qubits = int(round(np.log2(len(recipe.system.computational))))
    subject = recipe.system.qubit_names[0] if qubits == 1 else recipe.name
    tasks = []
    for parent, derived in plan(recipe.gate_set, qubits):
        raw = _absolute_files(for_gate(recipe, parent).raw, recipe.path)
        tasks.append(Task(slug(parent), subject, parent, tuple(derived), raw, durations,
                          "--durations", where={"command": "sweep",
                                                "file": recipe.path or "RECIPE"}))
    return Chip(name=recipe.name, path=recipe.path, sha256=recipe.sha256,
                qubits=(subject,), pairs=(), tasks=tuple(tasks))


def _absolute_files(raw: dict, path: str | None) -> dict:
    """The recipe with the files it names (measured responses, a first guess) made
    absolute beside ``path``: a task's recipe is read again in a worker, elsewhere."""
    if not path:
        return raw
    import copy

    from shaper.recipe.lines import resolve_files

    raw, base = copy.deepcopy(raw), Path(path).parent
    resolve_files(raw.get("line", {}), base)
    initial = raw.get("optimizer", {}).get("initial")
    if isinstance(initial, str) and initial.endswith((".csv", ".npy", ".npz")) \
            and (base / initial).exists():
        raw["optimizer"]["initial"] = str((base / initial).resolve())
    return raw
