"""The commands from Python (README, "From Python"): ``shaper.check``, ``export``, ``sweep``
(``chip``: tests/test_chip_pairs.py) and ``run``, each result with ``met``, the same
verdict as the command's exit code; and the spellings and inputs a user tries first."""

from __future__ import annotations

import json

import numpy as np
import pytest
from helpers import demo_text, pinned_text, run_cli

import shaper

TINY = pinned_text(demo_text("tiny").replace("levels = 4", "levels = 3")) + """
[verdict]
lab_frame = "off"
extra_levels = 1
"""


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    folder = tmp_path_factory.mktemp("api")
    (folder / "tiny.toml").write_text(TINY)
    return folder, shaper.run(folder / "tiny.toml", out=folder / "run", plots_too=False)


def test_a_run_says_whether_it_met_its_targets(tiny):
    _, run = tiny
    assert run.met is run.report["targets"]["met"] is True
    # its top-level figures are the judged ones, and say what they are
    assert run.report["judged_on"] == "rotating frame, 4 levels"
    assert run.report["infidelity"] == run.report["trust"]["more_levels"]["infidelity"]


def test_check_from_python_is_the_commands_verdict(tiny, capsys):
    folder, run = tiny
    result = shaper.check(folder / "tiny.toml", folder / "run" / "tiny.csv")
    code, out, _ = run_cli("check", folder / "tiny.toml", folder / "run" / "tiny.csv",
                           "--json")
    assert result.met and code == 0
    assert result.report["infidelity"] == pytest.approx(json.loads(out)["infidelity"],
                                                        rel=1e-12)
    assert result.report["infidelity"] == pytest.approx(run.report["infidelity"], rel=1e-9)
    tight = shaper.check(load_tight(folder), folder / "run" / "tiny.csv")
    assert not tight.met and tight.report["explanation"]


def load_tight(folder):
    path = folder / "tight.toml"
    path.write_text(TINY + "\n[optimizer]\ntarget_infidelity = 1e-12\n")
    return path


def test_export_from_python_writes_and_judges_the_new_file(tiny):
    folder, _ = tiny
    coarse = shaper.export(folder / "run", folder / "coarse", bits=4)
    assert not coarse.met and all(p.is_file() for p in coarse.files)
    assert coarse.report["explanation"][0]["cause"] == "the new instrument"
    fine = shaper.export(folder / "run", folder / "fine", granularity=32, padding="center")
    assert fine.met and fine.report["samples"] == 64  # 48 padded, centred


def test_sweep_from_python_finds_the_shortest(tiny):
    folder, _ = tiny
    result = shaper.sweep(folder / "tiny.toml", "8ns,20ns", out=folder / "sweep",
                          iterations=200, plots=False)
    assert result.met and result.shortest_s is not None
    assert 8e-9 < result.shortest_s <= 20e-9
    assert result.report["targets"]["met"] and "| duration |" in result.table
    assert [p.met for p in result.points][-1]


def test_a_plain_file_with_a_time_column_needs_no_sample_rate(tiny, tmp_path):
    folder, _ = tiny
    wave = shaper.read_waveform(folder / "run" / "tiny.csv")
    times = np.arange(wave.fractions.shape[0]) / wave.sample_rate_hz  # 2.4 GS/s
    path = tmp_path / "plain.csv"
    np.savetxt(path, np.column_stack([np.round(times, 15), wave.fractions]), delimiter=",",
               header="time_s,q0_i,q0_q", comments="")
    code, out, err = run_cli("check", folder / "tiny.toml", path, "--full-scale", "60MHz",
                             "--json")
    assert code == 0, err
    assert json.loads(out)["sample_rate_hz"] == 2.4e9
    uneven = tmp_path / "uneven.csv"
    uneven.write_text("time_s,q0_i,q0_q\n0,0,0\n1e-9,0.1,0\n3e-9,0.2,0\n")
    code, _, err = run_cli("check", folder / "tiny.toml", uneven, "--full-scale", "60MHz")
    assert code == 2 and "time steps are uneven" in err


def test_both_spellings_are_taken_and_ours_is_printed(tmp_path):
    code, _, err = run_cli("optimise", tmp_path / "missing.toml")
    assert code == 2 and err.startswith("shaper optimize: error:")
    path = tmp_path / "t.toml"
    path.write_text(TINY + '\n[export]\ngranularity = 16\npadding = "center"\n')
    assert shaper.load_recipe(path).export.padding == "centre"
    path.write_text(TINY + '\n[export]\npadding = "middle"\n')
    with pytest.raises(shaper.RecipeError, match="export.padding.*after, before, centre"):
        shaper.load_recipe(path)
