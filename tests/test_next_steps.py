"""Every next step runs when pasted (README, "When a result misses its targets").

Each kind of next step the explanations print (budget, interrupted, a longer pulse from
the speed limit up, more starts, quantisation, levels, the lab-frame model that is left,
the ensemble, the neighbours, an export's resampling or instrument, a check's scans) is
built for each place a user stands (optimize, sweep, chip, check, export) and its
commands parsed as the shell and the command line would; then real runs print their next
steps and each is pasted and run from where the user stands: it must not be refused
(exit 2). Cheap recipes (3 levels, the Duffing ladder, no lab-frame verdict) keep it short.
"""

from __future__ import annotations

import re
import shlex

import pytest
from helpers import demo_text, pinned_text, run_cli

from shaper.jobs.explain import explain, speed_limit
from shaper.jobs.next_steps import Where
from shaper.recipe import load_recipe

PLACES = [
    Where("optimize", file="runs/r.toml", out="runs/b", run="runs/b",
          waveform="runs/b/r.csv"),
    Where("sweep", file="r.toml", out="runs/s", durations="8ns:16ns:2ns", run="runs/s/longest"),
    Where("chip", file="chips/c.toml", out="runs/c", durations="8ns:32ns:4ns",
          durations_key="gates.single_durations", run="runs/c/gates/q0-x/shortest"),
    Where("check", file="r.toml", waveform="x.csv", lab_frame="corrected"),
    Where("export", file="r.toml", out="runs/e", run="runs/b", lab_frame="corrected"),
]

PASS = {"infidelity": 1e-9, "leakage": 1e-9}
FAIL = {"infidelity": 3e-3, "leakage": 1e-9}


def report(trust: dict, *, stop="met in the optimiser's model", lab_frame="corrected",
           own=None, **extra) -> dict:
    """A missed report with the blocks a cause is read from (the figures that make it)."""
    return {"targets": {"met": False, "infidelity": 1e-4, "leakage": 1e-4, "missed": []},
            "optimizer": {"stop_reason": stop, "iterations": 40, "starts": [{}],
                          "lab_frame": lab_frame},
            "before_quantisation": {**(own or trust["rotating_frame"]), "lab_frame": lab_frame},
            **trust["rotating_frame"], "trust": trust, "duration_s": 1e-8,
            "wall_time_s": 60.0, "recipe": {"content": {"system": {"model": "transmon",
                                                                   "levels": 3}}}, **extra}


def rotating(fig, **more) -> dict:
    return {"rotating_frame": {"levels": [3], **fig, **more}}


CASES = {
    "budget": report(rotating(FAIL), stop="iteration limit", own=FAIL),
    "time budget": report(rotating(FAIL), stop="time limit", own=FAIL),
    "interrupted": report(rotating(FAIL), stop="interrupted", own=FAIL),
    "converged": report(rotating(FAIL), stop="converged", own=FAIL),
    "quantisation": report(rotating(FAIL, unquantised=PASS)),
    "levels": report({**rotating(PASS), "more_levels": {"levels": [5], **FAIL}}),
    **{f"lab frame ({mode})": report({**rotating(PASS), "second_order": FAIL,
                                      "lab_frame": {"levels": [5], **FAIL}}, lab_frame=mode)
       for mode in ("off", "corrected", "exact")},
    "ensemble": report(rotating(PASS), ensemble={"infidelity": [1e-9, 3e-3],
                                                 "leakage": [1e-9, 1e-9]}),
    "neighbours' ZZ": report({**rotating(FAIL), "idle": {"duration_s": 1e-8, **FAIL},
                              **FAIL}),
    "beside, optimised alone": report(rotating(PASS), beside_neighbours={
        "mode": "check", "rotating": FAIL, "lab_frame": FAIL, "idle": None}),
    "beside, lab frame": report(rotating(PASS), beside_neighbours={
        "mode": "optimise", "rotating": PASS, "lab_frame": FAIL, "idle": None}),
    "resampling": {**report(rotating(FAIL)), "at_run_rate": PASS, "resampling": "box (mean)",
                   "sample_rate_hz": 1.1e9, "waveform": "r.csv"},
    "new instrument": {**report(rotating(FAIL)), "at_run_rate": PASS, "resampling": "none",
                       "dac_bits": 4},
    "detuning": {**report(rotating(FAIL)), "optimizer": None, "before_quantisation": None,
                 "sensitivity": {"detuning_hz": [-2e6, -1e6, 0.0, 1e6, 2e6],
                                 "infidelity_vs_detuning": [1e-9, 1e-3, 3e-3, 6e-3, 9e-3]}},
    "amplitude": {**report(rotating(FAIL)), "optimizer": None, "before_quantisation": None,
                  "sensitivity": {"amplitude_scale": [0.98, 0.99, 1.0, 1.01, 1.02],
                                  "infidelity_vs_scale": [1e-9, 1e-3, 3e-3, 6e-3, 9e-3]}},
    "textbook": {**report(rotating(FAIL)), "optimizer": None, "before_quantisation": None,
                 "textbook_pulses": {"drag": PASS}},
    "other": {**report(rotating(PASS)), "optimizer": None, "before_quantisation": None},
}


def parsed(command: str) -> list[str]:
    """The command as a shell splits it, checked by shaper's own parser (which exits 2 on
    an unknown option or a bad value, as the command line would)."""
    from shaper.cli.main import build_parser

    words = shlex.split(command)
    assert words[0] == "shaper", command
    try:
        build_parser().parse_args(words[1:])
    except SystemExit as exc:  # argparse's refusal: exit 2
        pytest.fail(f"{command!r} is refused by the parser (exit {exc.code})")
    return words


@pytest.mark.parametrize("where", PLACES, ids=lambda w: w.command)
@pytest.mark.parametrize("case", list(CASES))
def test_every_kind_of_next_step_is_a_command_that_parses(case, where):
    reasons = explain(CASES[case], where=where, shortest_s=8.33e-9)
    assert reasons, case
    for reason in reasons:
        for command in reason.commands:
            assert f"`{command}`" in reason.next  # printed as it runs, between backticks
            words = parsed(command)
            # nothing to fill in: the user's own file and folder, no placeholder
            assert not {"RECIPE", "FILE", "RUN", "OUT", "CHIP", "?"} & set(words), command
            assert where.file in words or where.run in words, command
            if where.out and words[1] in ("optimize", "sweep", "chip") and \
                    "--resume" in words:
                assert words[words.index("--out") + 1] == where.out  # the same --out
    said = " ".join(r.next for r in reasons)
    assert "lab_frame = true" not in said  # the older spelling, never a step now
    if case == "lab frame (corrected)":
        assert "\"exact\"" in said and "= \"corrected\"" not in said
    if case == "lab frame (exact)":
        assert "lab_frame = " not in said and "levels" in said


def test_a_longer_pulse_starts_at_the_speed_limit(tmp_path):
    # 5 ns at 60 MHz cannot make a pi pulse: 1 / (2 x 60 MHz) = 8.33 ns (Rabi's formula)
    path = tmp_path / "r.toml"
    path.write_text(demo_text("r").replace('"20 ns"', '"5 ns"'))
    recipe = load_recipe(path)
    for where in PLACES[:3]:
        bound = speed_limit(recipe, where)
        durations = [w for c in bound.commands for w in [shlex.split(c)]
                     if "--durations" in w]
        for words in durations:
            first = words[words.index("--durations") + 1].split(":")[0]
            assert float(first.removesuffix("ns")) >= 8.33, words
        chip = where.command == "chip" and re.search(r'single_durations = "([\d.]+)ns',
                                                     bound.next)
        assert durations or (chip and float(chip.group(1)) >= 8.33), bound.next


TINY = pinned_text(demo_text("tiny").replace("levels = 4", "levels = 3")) + """
[verdict]
lab_frame = "off"
extra_levels = 1
"""


def pasted(out: str) -> list[str]:
    """Every command of the last ``next:`` lines a command printed, as printed."""
    commands = []
    for line in out.splitlines():
        if line.startswith("next:"):
            commands += re.findall(r"`(shaper [^`]+)`", line)
    return commands


def paste(command: str, *budget) -> tuple[int, str, str]:
    """Run a pasted command as the shell would split it (``budget``: options that only
    keep the test short, added at the end of a command that optimises)."""
    words = parsed(command)[1:]
    if words[0] not in ("optimize", "sweep", "chip"):
        budget = ()
    code, out, err = run_cli(*words, *budget)
    assert code != 2, (command, err)
    assert code in (0, 1), (command, code, err)
    return code, out, err


@pytest.fixture
def here(tmp_path, monkeypatch):
    """The user's own folder, with the cheap recipe in it, as the working directory."""
    monkeypatch.chdir(tmp_path)
    (tmp_path / "tiny.toml").write_text(TINY)
    return tmp_path


def test_a_runs_budget_step_and_an_exports_instrument_step_run_when_pasted(here):
    code, out, err = run_cli("optimize", "tiny.toml", "--out", "runs/b", "--iterations", 2,
                             "--no-plots", "--quiet")
    assert code == 1, err
    (command,) = pasted(out)
    assert command.startswith("shaper optimize tiny.toml --out runs/b --resume --iterations")
    paste(command)
    code, out, err = run_cli("export", "runs/b", "--out", "runs/e", "--bits", 4)
    assert code == 1, err
    commands = pasted(out)
    assert commands == ["shaper export runs/b --out runs/e --bits 8 --force"], out
    paste(commands[0])


def test_a_checks_detuning_step_runs_when_pasted(here):
    code, _, err = run_cli("optimize", "tiny.toml", "--out", "runs/b", "--no-plots",
                           "--quiet")
    assert code == 0, err
    # the same qubit 2 MHz lower than the drive the file was made for: the scan finds it
    (here / "drifted.toml").write_text(TINY.replace(
        'qubit_frequency = "5.1 GHz"', 'qubit_frequency = "5.098 GHz"\n'
                                       'drive_frequency = "5.1 GHz"'))
    code, out, err = run_cli("check", "drifted.toml", "runs/b/tiny.csv")
    assert code == 1, err
    assert "why: the file does best at a detuning of +2 MHz" in out
    commands = pasted(out)
    assert "shaper optimize drifted.toml --out runs/drifted-run" in commands, out
    for command in commands:
        paste(command, "--iterations", 5)


def test_a_speed_limit_and_a_sweeps_own_steps_run_when_pasted(here):
    (here / "short.toml").write_text(TINY.replace('"20 ns"', '"5 ns"'))
    code, out, err = run_cli("optimize", "short.toml", "--out", "runs/short", "--iterations",
                             3, "--no-plots", "--quiet")
    assert code == 1, err
    sweeps = [c for c in pasted(out) if " sweep " in c]
    assert sweeps and all("--durations 8.4ns:16.8ns:2ns --out runs/short-sweep" in c
                          for c in sweeps), out
    paste(sweeps[0], "--iterations", 3, "--no-plots")
    code, out, err = run_cli("sweep", "short.toml", "--durations", "5ns,6ns", "--out",
                             "runs/s", "--iterations", 3, "--no-plots", "--quiet")
    assert code == 1, err
    onwards = [c for c in pasted(out) if "--resume" in c and " sweep " in c]
    assert onwards and all("--out runs/s --resume" in c for c in onwards), out
    paste(onwards[0], "--iterations", 3, "--no-plots")


def test_a_benchmarks_step_is_the_check_that_says_why(tmp_path):
    import argparse

    from shaper.cli.benchmark_cmd import _next_steps

    path = tmp_path / "r.toml"
    path.write_text(TINY)
    args = argparse.Namespace(recipe=str(path), files=[f"X={tmp_path / 'x.csv'}"])
    (line,) = _next_steps(args, load_recipe(path), {"X": {"met": False}})
    (command,) = re.findall(r"`(shaper [^`]+)`", line)
    assert shlex.split(command)[1:3] == ["check", str(path)]
    parsed(command)
