"""The rows of ``shaper bench`` a user feels: whole commands, ensembles, open systems.

Every row is a ratio of two things timed in this run, each the fastest of a few tries
(:func:`best_time`), so that a busy machine slows both sides:

- start-up: a whole ``shaper`` command in a fresh process against the floor of any
  command that computes, ``python -c "import jax, jax.numpy as jnp; jnp.zeros(2)"``.
  "cold" runs with an empty compilation cache (a new machine, a new JAX), "warm" with
  the cache the cold run filled; the cache is a temporary folder, never the user's.
- ensemble: value and gradient of the demo recipe's objective with a 3 x 3 robustness
  ensemble (detunings x amplitude scales) against the nominal objective.
- open system: the same recipe's objective with T1/T2 (the Lindblad channel) against
  the closed one.
- predicted RB (full mode): an X and an X/2 file's predicted randomized benchmarking
  against one verdict of one file.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FLOOR = [sys.executable, "-c", "import jax, jax.numpy as jnp; jnp.zeros(2)"]
ENSEMBLE = {"ensemble_detunings": ["-2 MHz", "0 MHz", "2 MHz"],
            "ensemble_scales": [0.97, 1.0, 1.03]}
COHERENCE = {"t1": "35 us", "t2": "28 us"}


def best_time(fn, repeats: int) -> float:
    """The fastest of ``repeats`` calls: the least disturbed by the rest of the machine
    (as timeit recommends), taken the same way for both sides of every ratio."""
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def shaper_command() -> list[str]:
    """The ``shaper`` console script of this interpreter (``python -m shaper`` without)."""
    script = Path(sys.executable).with_name("shaper")
    return [str(script)] if script.exists() else [sys.executable, "-m", "shaper"]


def _run(argv: list[str], env: dict, cwd: Path) -> float:
    t = time.perf_counter()
    done = subprocess.run(argv, env=env, cwd=cwd, capture_output=True, text=True)
    seconds = time.perf_counter() - t
    if done.returncode not in (0, 1):  # 1: targets missed is still a finished command
        raise RuntimeError(f"{' '.join(argv)} exited {done.returncode}: "
                           f"{done.stderr.strip().splitlines()[-1:]}")
    return seconds


def startup_rows(recipe: Path, *, repeats: int, full: bool) -> list[dict]:
    """Seconds of whole commands on ``recipe`` and their ratio to the JAX-import floor.

    ``optimize`` runs cold once, then warm; with ``full`` also ``check`` (of the
    optimised file), ``export`` (to another folder) and ``sweep`` (three durations), each
    primed once so that its own programs are cached.
    """
    from shaper.recipe import load_recipe

    recipe = recipe.resolve()
    rows = []
    with tempfile.TemporaryDirectory(prefix="shaper-bench-") as tmp:
        work = Path(tmp)
        env = dict(os.environ, SHAPER_CACHE_DIR=str(work / "cache"), PYTHONWARNINGS="ignore")
        cli = shaper_command()
        run_dir = work / "run"
        # each entry: the command line of try i (a sweep refuses a used folder)
        commands = {"optimize": lambda i: cli + ["optimize", str(recipe), "--force", "--out",
                                                 str(run_dir)]}
        floors = [_run(FLOOR, env, work)]
        cold = _run(commands["optimize"](0), env, work)
        if full:
            waveform = run_dir / f"{load_recipe(recipe).name}.csv"
            commands["check"] = lambda i: cli + ["check", str(recipe), str(waveform)]
            # the same check with the rotating frame only: what the lab frame costs a user
            rotating = work / "rotating.toml"
            rotating.write_text(recipe.read_text() + '\n[verdict]\nlab_frame = "off"\n')
            commands["check, lab frame off"] = lambda i: cli + ["check", str(rotating),
                                                                str(waveform)]
            commands["export"] = lambda i: cli + ["export", str(run_dir), "--out",
                                                  str(work / "again"), "--bits", "12",
                                                  "--force"]
            commands["sweep"] = lambda i: cli + ["sweep", str(recipe), "--durations",
                                                 "16ns,18ns,20ns", "--out",
                                                 str(work / f"sweep-{i}")]
            for name in ("check", "check, lab frame off", "export", "sweep"):
                _run(commands[name](0), env, work)  # prime the cache with its programs
        warm = {name: [] for name in commands}
        for i in range(1, repeats + 1):
            floors.append(_run(FLOOR, env, work))
            for name, argv in commands.items():
                warm[name].append(_run(argv(i), env, work))
        floor = min(floors)
        rows.append({"command": "optimize (cold cache)", "seconds": cold, "floor_s": floor,
                     "ratio": cold / floor})
        for name, times in warm.items():
            rows.append({"command": f"{name} (warm cache)", "seconds": min(times),
                         "floor_s": floor, "ratio": min(times) / floor})
        if full:  # goal: the lab-frame verdict at most 3x the rotating-frame one
            lab, rotating = min(warm["check"]), min(warm["check, lab frame off"])
            rows.append({"command": "check with the lab frame / without (ratio of the two)",
                         "seconds": lab, "floor_s": rotating, "ratio": lab / rotating})
    return rows


def scale_rows(root: Path) -> list[dict]:
    """Whole commands at a chip's and a night's scale (full mode; minutes each): a chip of
    three transmons in a line with every single-qubit gate made and judged beside its
    neighbours (``recipes/chips/line-3.toml``) against one ``optimize`` of the demo, and a
    cross-resonance CNOT (``recipes/cr-cnot-200.toml``) with escalation against without
    (what going on in the verdict's model costs when it is needed)."""
    rows = []
    chip, cr, demo = (root / "recipes" / "chips" / "line-3.toml",
                      root / "recipes" / "cr-cnot-200.toml", root / "recipes" / "demo-x180.toml")
    if not (chip.exists() and cr.exists() and demo.exists()):
        return rows
    with tempfile.TemporaryDirectory(prefix="shaper-bench-") as tmp:
        work = Path(tmp)
        env = dict(os.environ, SHAPER_CACHE_DIR=str(work / "cache"), PYTHONWARNINGS="ignore")
        cli = shaper_command()
        one = _run(cli + ["optimize", str(demo), "--out", str(work / "demo"), "--quiet"],
                   env, work)
        whole = _run(cli + ["chip", str(chip), "--out", str(work / "chip"), "--quiet"],
                     env, work)
        rows.append({"command": "a 3-transmon line chip, every single-qubit gate made and "
                                "judged beside its neighbours / one optimize of the demo",
                     "seconds": whole, "floor_s": one, "ratio": whole / one})
        off = work / "no-escalation.toml"
        off.write_text(cr.read_text().replace("[optimizer]\n",
                                              "[optimizer]\nescalate = false\n"))
        plain = _run(cli + ["optimize", str(off), "--out", str(work / "cr-off"), "--quiet"],
                     env, work)
        escalated = _run(cli + ["optimize", str(cr), "--out", str(work / "cr"), "--quiet"],
                         env, work)
        rows.append({"command": "a 200 ns cross-resonance CNOT with escalation / without",
                     "seconds": escalated, "floor_s": plain, "ratio": escalated / plain})
    return rows


def _objective_call(raw: dict):
    """A no-argument call of the recipe's jitted value and gradient, compiled."""
    import jax

    from shaper.optimizer.objective import make_objective
    from shaper.physics._jax import device
    from shaper.recipe import load_recipe

    objective = make_objective(load_recipe(raw))
    x = device(np.random.default_rng(0).normal(scale=0.3, size=objective.layout.shape))
    weights = device(objective.weights, float)

    def call():
        jax.block_until_ready(objective.value_and_grad(x, objective.problem, weights))
    call()
    return call


def objective_rows(recipe: Path, *, repeats: int, turns: int = 5) -> list[dict]:
    """Value and gradient of the recipe's objective: nominal, with a 3 x 3 ensemble, and
    as an open system (T1/T2 added), timed in ``turns`` rounds so that both sides of a
    ratio share the machine's moods (the best of each side is kept)."""
    import tomllib

    with open(recipe, "rb") as f:
        raw = tomllib.load(f)
    raw.setdefault("optimizer", {})["lab_frame"] = "off"  # the rotating frame: the baseline
    variants = _variants(raw)
    lab = variants["lab"]
    near = {k: v for k, v in variants.items() if k.startswith("near ")}
    calls = {name: _objective_call(r) for name, r in variants.items()}
    best = {name: [] for name in calls}
    for _ in range(turns):
        for name, call in calls.items():
            best[name].append(1e3 * best_time(call, repeats))
    ms = {name: min(times) for name, times in best.items()}
    members = len(ENSEMBLE["ensemble_detunings"]) * len(ENSEMBLE["ensemble_scales"])
    from shaper.recipe import load_recipe
    phases = len(load_recipe(lab).verdict.phases_rad())
    return [{"what": f"ensemble of {members} (detunings x scales) / nominal",
             "ms": ms["ensemble"], "baseline_ms": ms["nominal"],
             "ratio": ms["ensemble"] / ms["nominal"]},
            {"what": "open system (T1, T2) / closed", "ms": ms["open"],
             "baseline_ms": ms["closed"], "ratio": ms["open"] / ms["closed"]},
            {"what": "lab frame to second order, 16 carrier phases (the default) / "
                     "rotating frame (the recipe's levels)",
             "ms": ms["second"], "baseline_ms": ms["nominal"],
             "ratio": ms["second"] / ms["nominal"]},
            {"what": "lab frame to second order, 16 carrier phases / rotating frame "
                     "(9 levels)", "ms": ms["second nine"], "baseline_ms": ms["nine"],
             "ratio": ms["second nine"] / ms["nine"]},
            {"what": f"lab frame exactly, {phases} carrier phases / rotating frame (the "
                     f"recipe's levels)", "ms": ms["lab"], "baseline_ms": ms["nominal"],
             "ratio": ms["lab"] / ms["nominal"]},
            {"what": f"lab frame exactly, {phases} carrier phases / rotating frame "
                     f"(9 levels)", "ms": ms["lab nine"], "baseline_ms": ms["nine"],
             "ratio": ms["lab nine"] / ms["nine"]}] + [
        {"what": f"beside {n} neighbours of {lv} levels (d = {_dimension(near[name])}) / "
                 f"alone (d = {raw['system']['levels']})",
         "ms": ms[name], "baseline_ms": ms["nominal"], "ratio": ms[name] / ms["nominal"]}
        for (n, lv), name in zip(NEIGHBOURHOODS, near, strict=True)]


def _variants(raw: dict) -> dict[str, dict]:
    """The recipes of :func:`objective_rows`, by name: the rotating frame, a 3 x 3
    ensemble, an open system and its closed twin, the lab frame exactly and to second
    order on the recipe's levels and on 9, and neighbourhoods."""
    import copy

    ensemble = copy.deepcopy(raw)
    ensemble.setdefault("cost", {}).update(ENSEMBLE)
    closed = copy.deepcopy(raw)
    closed["system"].update(COHERENCE)
    opened = copy.deepcopy(closed)
    opened.setdefault("optimizer", {})["open_system"] = True
    # the lab frame in the loop against the rotating frame, on the recipe's levels (d = 4
    # for the demo) and on 9: to second order (the default, 16 carrier phases) and exactly
    # (the verdict's integrator, its spread of carrier phases)
    def lab_mode(base: dict, mode: str) -> dict:
        out = copy.deepcopy(base)
        out["optimizer"]["lab_frame"] = mode
        return out
    nine = copy.deepcopy(raw)
    nine["system"]["levels"] = 9
    lab, lab_nine = lab_mode(raw, "exact"), lab_mode(nine, "exact")
    second, second_nine = lab_mode(raw, "corrected"), lab_mode(nine, "corrected")
    # a chip qubit beside its coupled neighbours (README, "Chips: neighbours"): the qubit
    # at the recipe's levels with 2 neighbours of 3 levels, 3 of 3, and 2 of 4
    near = {f"near {n}x{lv}": neighbourhood(raw, n, lv) for n, lv in NEIGHBOURHOODS}
    return {"nominal": raw, "ensemble": ensemble, "closed": closed, "open": opened,
            "lab": lab, "nine": nine, "lab nine": lab_nine, "second": second,
            "second nine": second_nine, **near}


NEIGHBOURHOODS = ((2, 3), (3, 3), (2, 4))  # (neighbours, levels each)


def neighbourhood(raw: dict, count: int, levels: int) -> dict:
    """The recipe's one transmon with ``count`` coupled neighbours of ``levels`` levels
    (made-up frequencies 250 MHz apart, 6 MHz couplings) as a chip's neighbourhood task
    builds it: dressed basis, the neighbours without a drive line, the gate on the qubit."""
    import copy

    out = copy.deepcopy(raw)
    system = raw["system"]
    qubit = {"name": "q0", "levels": system["levels"],
             "qubit_frequency": system["qubit_frequency"],
             "anharmonicity": system["anharmonicity"]}
    others = [{"name": f"n{i}", "levels": levels, "qubit_frequency": f"{5.35 + 0.25 * i} GHz",
               "anharmonicity": "-210 MHz", "driven": False} for i in range(count)]
    out["system"] = {"model": "transmons", "basis": "dressed", "transmon": [qubit, *others],
                     "coupling": [{"between": ["q0", o["name"]], "strength": "6 MHz"}
                                  for o in others]}
    out["gate"] = {**raw.get("gate", {}), "on": ["q0"], "virtual_z": True}
    return out


def _dimension(raw: dict) -> int:
    return int(np.prod([t["levels"] for t in raw["system"]["transmon"]]))


def benchmarking_rows(recipe: Path, *, repeats: int) -> list[dict]:
    """Predicted RB (:mod:`shaper.jobs.benchmarking`) of an X and an X/2 file on the
    recipe's system (Gaussian DRAG pulses of its duration, Motzoi et al., Phys. Rev. Lett.
    103, 110501 (2009)) against one verdict of one of those files, both from fresh
    Playbacks (each file played as the chip plays it), warm, in this process."""
    from shaper.jobs.benchmarking import predict_qubit, slot_maps
    from shaper.jobs.playback import Playback
    from shaper.jobs.waveform import make_waveform
    from shaper.recipe import load_recipe
    from shaper.recipe.derive import for_gate
    from shaper.signal.pulses import gaussian_shape, rotation_area

    base = load_recipe(recipe)
    files = {}
    for label in ("X", "X/2"):
        one = for_gate(base, label)
        s = np.zeros((one.samples, len(one.system.control_names)))
        i, q = one.system.iq_columns()[0]
        s[:, i] = rotation_area(label) * gaussian_shape(one.samples, one.dt)
        alpha = one.system.transition_frequencies[one.system.channels[0].name]
        s[:, q] = -np.gradient(s[:, i], one.dt) / (2 * np.pi * (alpha["f12_hz"]
                                                                - alpha["f01_hz"]))
        files[label] = (one, make_waveform(one, s, one.export, one.sample_rate_hz)[0])

    def fresh():
        return {g: Playback(r, w) for g, (r, w) in files.items()}
    maps = slot_maps(fresh())[0]  # also primes every compiled program
    predict_qubit(fresh())
    from shaper.physics.benchmarking import predict_rb
    from shaper.physics.interleaved import predict_interleaved

    def from_maps():
        reference = predict_rb(maps)
        for g in maps.gates:
            predict_interleaved(maps, g, reference=reference)
    verdict = best_time(lambda: Playback(*files["X"]).verdict(), repeats)
    whole = best_time(lambda: predict_qubit(fresh()), repeats)
    alone = best_time(from_maps, repeats)
    what = f"levels {maps.levels}, lengths up to 2048"
    return [{"what": f"predicted RB of X and X/2, their files played ({what}) / one "
                     f"verdict of one file", "ms": 1e3 * whole, "baseline_ms": 1e3 * verdict,
             "ratio": whole / verdict},
            {"what": f"of which RB and interleaved RB from the maps ({what}) / one verdict",
             "ms": 1e3 * alone, "baseline_ms": 1e3 * verdict, "ratio": alone / verdict}]


def markdown(startup: list[dict], objectives: list[dict], recipe: str,
             benchmarking: list[dict] = ()) -> list[str]:
    lines = []
    if startup:
        lines += ["", f"Whole commands on `{recipe}` in a fresh process (fastest of the tries; "
                      "cold: empty compilation cache) against the floor `python -c \"import jax, "
                      "jax.numpy as jnp; jnp.zeros(2)\"` timed in the same run.", "",
                  "| command | seconds | floor (s) | ratio to floor |", "|---|---|---|---|"]
        lines += [f"| {r['command']} | {r['seconds']:.2f} | {r['floor_s']:.2f} | "
                  f"{r['ratio']:.2f}x |" for r in startup]
    if objectives:
        lines += ["", f"Value and gradient of the objective of `{recipe}` (fastest of the "
                      "calls).", "", "| objective | ms | baseline (ms) | ratio |",
                  "|---|---|---|---|"]
        lines += [f"| {r['what']} | {r['ms']:.3f} | {r['baseline_ms']:.3f} | "
                  f"{r['ratio']:.2f}x |" for r in objectives]
    if benchmarking:
        lines += ["", f"Predicted randomized benchmarking on `{recipe}`'s system against one "
                      "verdict of one file (fastest of the tries, warm, fresh Playbacks).", "",
                  "| prediction | ms | one verdict (ms) | ratio |", "|---|---|---|---|"]
        lines += [f"| {r['what']} | {r['ms']:.1f} | {r['baseline_ms']:.1f} | "
                  f"{r['ratio']:.2f}x |" for r in benchmarking]
    return lines
