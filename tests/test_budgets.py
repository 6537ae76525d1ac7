"""Every long command takes a budget (README, "Overnight runs"): --hours, --iterations and
--starts on optimize, sweep and chip; a budget that runs out leaves the finished work for
--resume; a sweep point that fails while a longer one passes is tried again with more
starts, and the table says so."""

from __future__ import annotations

import json
from pathlib import Path

from helpers import chip_text, demo_text, quick_text
from helpers import run_cli as cli

# budgets are the subject: judged quickly (rotating frame on the recipe's levels, no
# escalation, no predicted RB; each has tests of its own)
CHIP = quick_text(chip_text("budget", [("qa", "5.0 GHz", "-220 MHz", 3),
                                       ("qb", "5.3 GHz", "-210 MHz", 3)],
                            optimizer="max_iterations = 200"), chip=True)


def sweep_points(folder: Path) -> list[dict]:
    return json.loads((folder / "sweep.json").read_text())["points"]


def test_a_sweep_stops_at_its_hours_and_resume_finishes(tmp_path):
    recipe = tmp_path / "demo.toml"
    recipe.write_text(quick_text(demo_text("demo") + "\n[optimizer]\nmax_iterations = 30\n"))
    out = tmp_path / "sweep"
    # a budget spent before the first duration: nothing runs, the sweep says so
    code, stdout, err = cli("sweep", recipe, "--durations", "10ns:20ns:5ns", "--out", out,
                            "--quiet", "--no-plots", "--workers", 1, "--hours", 1e-9)
    assert code == 1, err
    assert "the --hours budget ran out after 0 duration(s)" in stdout and "--resume" in stdout
    code, stdout, err = cli("sweep", recipe, "--durations", "10ns:20ns:5ns", "--out", out,
                            "--quiet", "--no-plots", "--workers", 1, "--resume")
    assert "Traceback" not in err and len(sweep_points(out)) >= 3, err


def test_an_optimisation_gets_only_what_is_left_of_a_larger_budget():
    # Adam never stops on its own before its 100000 iterations at a target of 1e-14: the
    # time left of a sweep's or chip's --hours (1 s here) stops it
    import tomllib

    from shaper.optimizer.starts import optimize
    from shaper.recipe import load_recipe

    # 5 ns: shorter than a pi pulse at 60 MHz can be (8.3 ns), so no target is ever met
    raw = tomllib.loads(demo_text("adam").replace('"20 ns"', '"5 ns"')
                        + "\n[optimizer]\nmethod = \"adam\"\n"
                        "max_iterations = 100000\nstall_iterations = 1000000\n"
                        "target_infidelity = 1e-14\n")
    result = optimize(load_recipe(raw), time_left_s=1.0)
    assert result.best.stop_reason == "time limit" and result.best.iterations < 100000


def test_a_failing_point_below_a_passing_one_is_retried_with_more_starts(tmp_path):
    # 7.5 ns at a 60 MHz limit cannot make a pi pulse (its area needs 8.3 ns at full drive:
    # the Rabi formula, theta = 2 pi Omega t); 10 ns can. The miss just below the first pass
    # decides the shortest duration, so it is tried again with 4 starts before it counts.
    recipe = tmp_path / "demo.toml"
    recipe.write_text(quick_text(demo_text("demo") + "\n[optimizer]\nmax_iterations = 150\n"
                                 "target_infidelity = 1e-4\ntarget_leakage = 1e-4\n"))
    out = tmp_path / "sweep"
    code, stdout, err = cli("sweep", recipe, "--durations", "7.5ns,10ns", "--out", out,
                            "--quiet", "--no-plots", "--workers", 1)
    assert code == 0, err
    points = {p["samples"]: p for p in sweep_points(out)}
    assert points[18]["retried"] and points[18]["starts"] == 4 and not points[18]["met"]
    assert points[24]["met"] and not points[24]["retried"]
    assert "no (retried, 4 starts)" in (out / "sweep.md").read_text()
    # the retry kept the first start (from its checkpoint) and added three
    starts = json.loads((out / "duration-18" / "starts.json").read_text())
    assert [s["index"] for s in starts] == [0, 1, 2, 3]


def test_a_chip_takes_iterations_and_hours(tmp_path):
    chip = tmp_path / "chip.toml"
    chip.write_text(CHIP)
    out = tmp_path / "run"
    code, stdout, err = cli("chip", chip, "--out", out, "--workers", 1, "--quiet",
                            "--iterations", 5)
    met = all(r.split(",")[8] == "yes" for r in (out / "chip.csv").read_text().splitlines()[1:])
    assert code == (0 if met else 1) and "Traceback" not in err, err
    for task in ("qa-x", "qb-x"):
        for point in sweep_points(out / "gates" / task / "sweep"):
            assert point["iterations"] <= 5 * point["starts"], point
    # an hour budget already spent: every task is left for --resume, nothing is recorded
    spent = tmp_path / "spent"
    code, stdout, err = cli("chip", chip, "--out", spent, "--workers", 1, "--quiet",
                            "--hours", 1e-9)
    assert code == 1 and "2 task(s) not finished within --hours" in stdout, err
    assert json.loads((spent / "chip.json").read_text())["tasks"] == {}
    code, stdout, err = cli("chip", chip, "--out", spent, "--workers", 1, "--quiet",
                            "--resume", "--iterations", 5)
    assert "0 finished earlier and kept, 2 to run" in err
    assert len(json.loads((spent / "chip.json").read_text())["tasks"]) == 2
