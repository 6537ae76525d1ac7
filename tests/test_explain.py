"""The morning after: every miss says why, from the run's own numbers, and what to run next
(README, "When a result misses its targets"). Each cause is produced by a real run and read
back from the report and from the command's last lines, or by a report built here with the
figures that make it (the cause follows from the numbers, not from a committed result)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from helpers import demo_text, pinned_text, verdict_code
from helpers import run_cli as cli

from shaper.jobs.explain import explain


def missed(trust: dict, *, stop: str = "met in the optimiser's model", iterations: int = 100,
           system: dict | None = None, limits=(1e-4, 1e-4), duration_s: float = 1e-8,
           lab_frame: str = "off") -> dict:
    """A report whose judged figures miss ``limits``: the optimiser's own figures (in its
    model, ``lab_frame``) and the file's in the recipe's rotating frame are
    ``trust["rotating_frame"]``; ``system``: the recipe's ``[system]`` table as the report
    carries it."""
    rotating = trust["rotating_frame"]
    return {"targets": {"met": False, "infidelity": limits[0], "leakage": limits[1]},
            "optimizer": {"stop_reason": stop, "iterations": iterations, "starts": [{}],
                          "lab_frame": lab_frame},
            "before_quantisation": {**{k: rotating[k] for k in ("infidelity", "leakage")},
                                    "lab_frame": lab_frame},
            "infidelity": rotating["infidelity"], "leakage": rotating["leakage"],
            "trust": trust, "duration_s": duration_s,
            "recipe": {"content": {"system": system or {"model": "transmon", "levels": 5}}}}


def test_a_met_target_needs_no_explanation():
    assert explain({"targets": {"met": True}, "infidelity": 1e-9, "leakage": 1e-9}) == []


def test_the_lab_frame_is_named_where_the_rotating_frame_passes():
    # passes in the rotating frame, with and without 2 more levels; misses in the lab frame
    report = missed({"rotating_frame": {"levels": [5], "infidelity": 6e-8, "leakage": 1e-9},
                     "more_levels": {"levels": [7], "infidelity": 5.7e-8, "leakage": 1e-9},
                     "lab_frame": {"levels": [7], "infidelity": 3.21e-4, "leakage": 2e-7}})
    (reason,) = explain(report, recipe="my/r.toml")
    assert reason.cause == "lab frame"
    assert "3.21e-04" in reason.why and "5.70e-08" in reason.why  # the report's own numbers
    assert "optimizer.lab_frame = \"exact\"" in reason.next  # no second-order model here
    assert "shaper sweep my/r.toml --durations 10ns:20ns:" in reason.next  # up to twice 10 ns
    # where the optimiser already worked in the lab frame, what is left: exact, or longer
    for used, wanted in (("corrected", "\"exact\""), ("exact", "system.levels = 8")):
        (reason,) = explain({**report, "optimizer": {**report["optimizer"],
                                                     "lab_frame": used},
                             "before_quantisation": {**report["before_quantisation"],
                                                     "lab_frame": used}}, recipe="my/r.toml")
        assert wanted in reason.next and "lab_frame = true" not in reason.next
        assert "= \"corrected\"" not in reason.next


@pytest.mark.parametrize("system, key", [
    ({"model": "transmons", "transmon": [{"name": "qa", "levels": 4},
                                         {"name": "qb", "levels": 4}]},
     "levels on every [[system.transmon]] = 6"),
    ({"model": "transmon", "levels": 4}, "system.levels = 6"),
])
def test_truncated_levels_are_named_with_the_key_to_change(system, key):
    # fine on the recipe's levels, far over on 2 more; the optimiser also ran out of
    # iterations, named second (the smaller part of the miss)
    report = missed({"rotating_frame": {"levels": [4, 4], "infidelity": 2.8e-5,
                                        "leakage": 1e-6},
                     "more_levels": {"levels": [6, 6], "infidelity": 6.8e-3, "leakage": 1e-4}},
                    stop="iteration limit", iterations=3000, system=system)
    reason, budget = explain(report)
    assert reason.cause == "levels" and budget.cause == "budget"
    assert "6x6" in reason.why and "6.80e-03" in reason.why and key in reason.next
    assert "--iterations 6000" in budget.next


def write_demo(tmp_path: Path, extra: str = "", duration: str = "20 ns") -> Path:
    path = tmp_path / "demo.toml"
    path.write_text(demo_text("demo").replace('"20 ns"', f'"{duration}"') + extra)
    return path


def last_lines(out: str) -> str:
    return "\n".join(out.strip().splitlines()[-4:])


def test_a_spent_budget_says_so_and_how_to_give_more(tmp_path):
    recipe = write_demo(tmp_path, duration="10 ns")
    code, out, err = cli("optimize", recipe, "--out", tmp_path / "run", "--quiet",
                         "--no-plots", "--iterations", 3)
    report = json.loads((tmp_path / "run" / "report.json").read_text())
    assert code == 1 == verdict_code(tmp_path / "run" / "report.json"), err
    assert report["explanation"][0]["cause"] == "budget"
    tail = last_lines(out)
    assert "why: the optimiser stopped at its iteration limit after 3 iterations" in tail
    command = f"shaper optimize {recipe} --out {tmp_path / 'run'} --resume --iterations 13"
    assert report["explanation"][0]["commands"] == [command]
    assert f"next: a larger budget, going on from where it stopped (the same --out): " \
        f"`{command}`" in tail
    # and that is what it does: the same run goes on to 40 iterations from its checkpoints
    code, out, err = cli("optimize", recipe, "--out", tmp_path / "run", "--quiet",
                         "--no-plots", "--resume", "--iterations", 40)
    more = json.loads((tmp_path / "run" / "report.json").read_text())["optimizer"]
    assert code == verdict_code(tmp_path / "run" / "report.json"), err
    assert more["iterations"] > 3 and more["starts"][0]["iterations"] > 3


def test_a_target_out_of_reach_is_said_before_the_night_and_after_it(tmp_path):
    # 5 ns at a 60 MHz limit cannot make a pi pulse: a rotation by theta takes at least
    # theta / (2 pi Omega) = 8.33 ns (the Rabi formula, theta = 2 pi Omega t)
    recipe = write_demo(tmp_path, "\n[optimizer]\nstall_iterations = 20\n", duration="5 ns")
    code, out, err = cli("optimize", recipe, "--out", tmp_path / "run", "--no-plots")
    assert code == 1, err
    said = err.index("warning: the X rotation at most 60 MHz of Rabi frequency takes at least "
                     "8.33 ns")
    assert said < err.index("start 0")  # before the optimiser ran
    bound, reason = json.loads((tmp_path / "run" / "report.json").read_text())["explanation"]
    assert bound["cause"] == "speed limit" and "8.33 ns" in bound["next"]
    assert reason["cause"] == "converged above the target"
    assert "out of reach at 5 ns" in reason["why"]
    # the longer pulses begin at the speed limit, not below it
    sweep = f"shaper sweep {recipe} --durations 8.4ns:16.8ns:2ns --out {tmp_path / 'run'}-sweep"
    assert sweep in reason["commands"] and f"`{sweep}`" in reason["next"]
    assert sweep in bound["commands"]
    assert "why: the X rotation" in "\n".join(out.strip().splitlines()[-4:])


def test_an_ensemble_that_spreads_past_the_target_is_named(tmp_path):
    # +-2 MHz of detuning on a 12.5 ns X gate: the nominal pulse reaches ~1e-7, the members
    # ~8e-4 (measured); the spread is named first, as the largest miss
    recipe = write_demo(tmp_path, '\n[cost]\nensemble_detunings = ["-2 MHz", "0 MHz", '
                                  '"2 MHz"]\n', duration="12.5 ns")
    code, out, err = cli("optimize", recipe, "--out", tmp_path / "run", "--quiet",
                         "--no-plots")
    report = json.loads((tmp_path / "run" / "report.json").read_text())
    assert code == 1, err
    first = report["explanation"][0]
    assert first["cause"] == "ensemble spread", report["explanation"]
    assert "the worst ensemble member reaches" in first["why"]
    assert "cost.ensemble_detunings" in first["next"]


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("explain")
    recipe = write_demo(folder)
    code, _, err = cli("optimize", recipe, "--out", folder / "run", "--quiet", "--no-plots")
    assert code == 0, err
    return folder / "run"


def test_an_export_lost_in_resampling_says_optimise_at_that_rate(demo_run, tmp_path):
    # 2.4 GS/s -> 1.1 GS/s is no whole ratio: box-averaged, the pulse's shape changes
    code, out, err = cli("export", demo_run, "--out", tmp_path / "e", "--sample-rate",
                         "1.1GS/s")
    report = json.loads((tmp_path / "e" / "export.json").read_text())
    assert code == verdict_code(tmp_path / "e" / "export.json") == 1, err
    (reason,) = report["explanation"]
    assert reason["cause"] == "resampling" and "pulse.sample_rate = \"1.1 GS/s\"" in \
        reason["next"]
    assert "why: the run meets the targets at its own rate" in last_lines(out)


def test_an_export_to_a_coarse_dac_names_the_instrument(demo_run, tmp_path):
    code, out, err = cli("export", demo_run, "--out", tmp_path / "e", "--bits", "4")
    report = json.loads((tmp_path / "e" / "export.json").read_text())
    assert code == 1, err
    assert report["explanation"][0]["cause"] == "the new instrument"
    assert "4-bit" in report["explanation"][0]["why"]


def test_a_sweep_with_no_passing_duration_says_why_in_its_table(tmp_path):
    # 5 ns and 5.83 ns: both below the 8.33 ns a pi pulse needs at 60 MHz (Rabi formula)
    recipe = write_demo(tmp_path)
    code, out, err = cli("sweep", recipe, "--durations", "5ns,6ns", "--out", tmp_path / "s",
                         "--quiet", "--no-plots")
    assert code == 1, err
    summary = (tmp_path / "s" / "sweep.md").read_text()
    assert "## Why the longest duration missed, and what to try" in summary
    assert "takes at least 8.33 ns" in summary and "why: the X rotation" in out


def test_a_coarse_dac_in_the_recipe_is_named_as_quantisation(tmp_path):
    # 5-bit DAC codes: the optimiser's samples meet the targets, their quantised file not
    recipe = write_demo(tmp_path, "\n[export]\ndac_bits = 5\n")
    code, out, err = cli("optimize", recipe, "--out", tmp_path / "run", "--quiet",
                         "--no-plots")
    report = json.loads((tmp_path / "run" / "report.json").read_text())
    assert code == 1, err
    assert report["before_quantisation"]["infidelity"] < 1e-6 < report["infidelity"]
    assert report["explanation"][0]["cause"] == "quantisation"
    assert "export.dac_bits" in report["explanation"][0]["next"]


SPECTATOR = pinned_text("""name = "beside"
[system]
model = "transmons"
basis = "dressed"
[[system.transmon]]
name = "q0"
levels = 4
qubit_frequency = "4.95 GHz"
anharmonicity = "-330 MHz"
[[system.transmon]]
name = "q1"
levels = 3
qubit_frequency = "5.45 GHz"
anharmonicity = "-210 MHz"
driven = false
[[system.coupling]]
between = ["q0", "q1"]
strength = "30 MHz"
[gate]
target = "X"
on = ["q0"]
virtual_z = true
[pulse]
duration = "12.5 ns"
sample_rate = "2.4 GS/s"
max_rabi = {q0 = "60 MHz"}
[optimizer]
max_iterations = 300
[verdict]
lab_frame = "off"
extra_levels = 1
""")  # the Duffing ladder of the formula below


def test_a_neighbours_zz_is_named_where_it_is_most_of_the_miss(tmp_path):
    # a strongly coupled neighbour (30 MHz, 0.5 GHz away): left idle for the pulse's 12.5 ns
    # the conditional phase phi = 2 pi ZZ t costs 1 - F, with the best single-qubit Z
    # corrections diag(1, e^{-i phi/2}, e^{-i phi/2}, 1): |Tr| = 4 |cos(phi/4)|, F =
    # (d + |Tr|^2) / (d (d + 1)), d = 4 (Pedersen et al., Phys. Lett. A 367, 47 (2007)); ZZ
    # from the eigenvalues of the exchange Hamiltonian written out here (Koch et al. 2007)
    import numpy as np

    recipe = tmp_path / "beside.toml"
    recipe.write_text(SPECTATOR)
    code, out, err = cli("optimize", recipe, "--out", tmp_path / "run", "--quiet",
                         "--no-plots")
    report = json.loads((tmp_path / "run" / "report.json").read_text())
    assert code == 1, err
    (reason,) = report["explanation"]
    assert reason["cause"] == "neighbours' ZZ" and "shaper sweep" in reason["next"]
    assert "neighbours" in last_lines(out) and "conditional phase" in last_lines(out)

    def ladder(levels, f, alpha):
        n = np.arange(levels)
        return np.diag(f * n + alpha / 2 * n * (n - 1)), np.diag(np.sqrt(n[1:]), 1)
    (h0, a), (h1, b) = ladder(4, 0.0, -330e6), ladder(3, 0.5e9, -210e6)
    A, B = np.kron(a, np.eye(3)), np.kron(np.eye(4), b)
    h = np.kron(h0, np.eye(3)) + np.kron(np.eye(4), h1) + 30e6 * (A.T @ B + A @ B.T)
    energies, vectors = np.linalg.eigh(h)
    e = {s: energies[np.argmax(np.abs(vectors[s]))] for s in (0, 1, 3, 4)}  # 00 01 10 11
    phi = 2 * np.pi * (e[4] - e[3] - e[1] + e[0]) * 12.5e-9
    fidelity = (4 + 16 * np.cos(phi / 4) ** 2) / 20
    assert report["trust"]["idle"]["infidelity"] == pytest.approx(1 - fidelity, rel=1e-6)
