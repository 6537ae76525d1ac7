"""Hostile inputs and machine faults (README, "Commands": exit codes): every bad chip key,
export option, response file and odd recipe value is refused in one line naming the file
and the key (exit 2) within 20 s of the start; a machine that fails a run is exit 3 and
loses nothing that finished. Each row is a case a user or a script could produce."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from helpers import HOSTILE_CHIP, HOSTILE_PAIR, demo_text, verdict_code
from helpers import run_cli as cli

from shaper.errors import RecipeError
from shaper.recipe import load_recipe
from shaper.recipe.chip import load_chip

ROOT = Path(__file__).resolve().parents[1]

CHIP, PAIR = HOSTILE_CHIP, HOSTILE_PAIR


def gates(line: str) -> str:
    return CHIP.replace('single_durations = "10ns,12ns"', f'single_durations = "10ns,12ns"\n'
                                                           f'{line}')


# (case, chip text, the key the message must name, a word of the reason)
CHIP_CASES = [
    ("pair-number", gates("pair = 5"), "gates.pair", "gate name"),
    ("pair-list", gates('pair = ["CZ"]'), "gates.pair", "gate name"),
    ("pair-one-qubit", gates('pair = "X"'), "gates.pair", "qubit"),
    ("fixed-pair-number", gates("fixed_pair = 7"), "gates.fixed_pair", "gate name"),
    ("fixed-pair-durations-number", gates("fixed_pair_durations = 5"),
     "gates.fixed_pair_durations", "text"),
    ("pair-durations-garbage", gates('pair_durations = "soon"'), "gates.pair_durations", ""),
    ("single-empty", CHIP.replace('single = ["X"]', "single = []"), "gates.single",
     "non-empty"),
    ("single-twice", CHIP.replace('single = ["X"]', 'single = ["X", "x"]'), "gates.single[1]",
     "twice"),
    ("single-unknown", CHIP.replace('single = ["X"]', 'single = ["Q"]'), "gates.single[0]", ""),
    ("durations-billion", CHIP.replace('"10ns,12ns"', '"1ns:1ms:1ps"'),
     "gates.single_durations", "at most 500"),
    ("between-nested", CHIP + PAIR.replace('["qa", "qb"]', '[["qa"], "qb"]'),
     "coupling[0].between", "two qubit names"),
    ("coupling-huge", CHIP + PAIR.replace('"12 MHz"', '"1e30 Hz"'), "coupling[0]",
     "strength"),
    ("flux-range-excludes-zero", CHIP.replace('["-900 MHz", 0]', '["100 MHz", "200 MHz"]'),
     'qubit "qb".flux_range', "lowest <= 0"),
    ("flux-range-one-element", CHIP.replace('["-900 MHz", 0]', '["-900 MHz"]'),
     'qubit "qb".flux_range', "[lowest, highest]"),
    ("flux-text", CHIP.replace("flux = true", 'flux = "yes"'), 'qubit "qb".flux', "true"),
    ("max-flux-on-fixed", CHIP.replace('levels = 3\n\n[[qubit]]',
                                       'levels = 3\nmax_flux = "1 GHz"\n\n[[qubit]]', 1),
     'qubit "qa".max_flux', "fixed"),
    ("template-max-rabi", CHIP + '[template.pulse]\nmax_rabi = "1 THz"\n',
     "template.pulse.max_rabi", "set by the chip"),
    ("levels-huge", CHIP.replace("levels = 3", "levels = 100000", 1), 'qubit "qa".levels',
     "from 2"),
    ("neighbours-unknown", gates('neighbours = "ignore"'), "gates.neighbours", "choose"),
    ("neighbour-levels-huge", gates("neighbour_levels = 40"), "gates.neighbour_levels",
     "from 2 to"),
    ("simultaneous-text", gates('simultaneous = "yes"'), "gates.simultaneous", "true"),
    ("pair-none-typo", gates('pair = "nothing"'), "gates.pair", "unknown gate"),
]


@pytest.mark.parametrize("case,text,key,reason", CHIP_CASES, ids=[c[0] for c in CHIP_CASES])
def test_a_bad_chip_key_is_refused_before_any_worker(tmp_path, case, text, key, reason):
    path = tmp_path / "chip.toml"
    path.write_text(text)
    started = time.monotonic()
    proc = subprocess.run([sys.executable, "-m", "shaper", "chip", str(path), "--out",
                           str(tmp_path / "out"), "--quiet"], capture_output=True, text=True,
                          timeout=60)
    took = time.monotonic() - started  # reported, not asserted (the bound is the timeout)
    lines = proc.stderr.strip().splitlines()
    assert proc.returncode == 2, (case, proc.stderr[-2000:])
    assert len(lines) == 1 and str(path) in lines[0] and key in lines[0], lines
    assert reason.lower() in lines[0].lower(), lines[0]
    assert "Traceback" not in proc.stderr and not (tmp_path / "out" / "chip.json").exists(), \
        took


def test_a_response_file_is_found_beside_the_chip_and_its_bytes_count(tmp_path, monkeypatch):
    folder = tmp_path / "lab"
    folder.mkdir()
    (folder / "step.csv").write_text("time_s,value\n0,0\n1e-9,0.8\n2e-9,1\n3e-9,1\n")
    text = CHIP + ('[[template.line.qa]]\nkind = "measured"\nfile = "step.csv"\n'
                   '[[template.line.qb]]\nkind = "measured"\nfile = "step.csv"\n')
    (folder / "chip.toml").write_text(text)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)  # the file is the chip's neighbour, not the shell's
    chip = load_chip(folder / "chip.toml")
    first = {t.id: t.digest for t in chip.tasks}
    (folder / "step.csv").write_text("time_s,value\n0,0\n1e-9,0.7\n2e-9,1\n3e-9,1\n")
    again = {t.id: t.digest for t in load_chip(folder / "chip.toml").tasks}
    assert all(first[k] != again[k] for k in first)  # a changed line redoes every task


# ----- response files of a recipe

def line_recipe(tmp_path: Path, file: str, response: str = "step") -> Path:
    path = tmp_path / "line.toml"
    path.write_text(demo_text("line") + f'\n[[line.q0]]\nkind = "measured"\nfile = "{file}"\n'
                                        f'response = "{response}"\n')
    return path


def test_response_files_that_could_hang_are_refused(tmp_path):
    fifo = tmp_path / "fifo.csv"
    os.mkfifo(fifo)
    for name, why in (("/dev/zero", "not a regular file"), (str(fifo), "not a regular file"),
                      (str(tmp_path), "not a regular file")):
        started = time.monotonic()
        with pytest.raises(RecipeError, match="line.q0\\[0\\].file") as err:
            load_recipe(line_recipe(tmp_path, name))
        assert why in str(err.value) and time.monotonic() - started < 20


def test_a_response_that_settles_to_zero_is_refused(tmp_path):
    (tmp_path / "tiny.csv").write_text("time_s,value\n0,0\n1e-9,0.5\n2e-9,1e-300\n")
    with pytest.raises(RecipeError, match="settles to zero"):
        load_recipe(line_recipe(tmp_path, "tiny.csv"))


def test_a_changed_response_file_changes_the_digest(tmp_path):
    (tmp_path / "step.csv").write_text("time_s,value\n0,0\n1e-9,0.8\n2e-9,1\n3e-9,1\n")
    first = load_recipe(line_recipe(tmp_path, "step.csv")).sha256
    (tmp_path / "step.csv").write_text("time_s,value\n0,0\n1e-9,0.6\n2e-9,1\n3e-9,1\n")
    assert load_recipe(line_recipe(tmp_path, "step.csv")).sha256 != first


# ----- odd recipe values (issue of export options and odd files)

RECIPE_CASES = [
    ("line-1hz", '\n[[line.q0]]\nkind = "bessel"\norder = 2\ncutoff = "1 Hz"\n',
     "line.q0[0].cutoff", "passes almost nothing"),
    ("negative-if", '\n[export]\nif_frequency = "-50 MHz"\n', "export.if_frequency",
     "0 or more"),
    ("sideband-without-if", '\n[export]\nsideband = "upper"\n', "export.sideband", "needs an IF"),
    ("granularity-huge", "\n[export]\ngranularity = 100000000\n", "export.granularity",
     "at most"),
    ("rabi-terahertz", None, "pulse.max_rabi", "beyond any transmon"),
]


@pytest.mark.parametrize("case,extra,key,reason", RECIPE_CASES, ids=[c[0] for c in RECIPE_CASES])
def test_odd_recipe_values_are_refused(tmp_path, case, extra, key, reason):
    text = demo_text(case)
    text = text.replace('"60 MHz"', '"1 THz"') if extra is None else text + extra
    path = tmp_path / "r.toml"
    path.write_text(text)
    with pytest.raises(RecipeError) as err:
        load_recipe(path)
    assert err.value.key.startswith(key) and reason in str(err.value), str(err.value)


def test_a_cross_resonance_tone_far_from_the_frame_is_refused():
    text = (ROOT / "recipes" / "cr-cnot.toml").read_text()
    start = text.index("[[system.drive]]")
    at = text.index("frequency", start)
    end = text.index("\n", at)
    bad = text[:at] + 'frequency = "1e6 GHz"' + text[end:]
    started = time.monotonic()
    with pytest.raises(RecipeError, match=r"system\.drive\[0\]\.frequency") as err:
        load_recipe(tomllib_loads(bad))
    assert "from the frame" in str(err.value) and time.monotonic() - started < 20


def tomllib_loads(text):
    import tomllib

    return tomllib.loads(text)


# ----- export into a run's own folder, and export options

@pytest.fixture(scope="module")
def run_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("hostile") / "run"
    recipe = folder.parent / "demo.toml"
    recipe.write_text(demo_text("demo") + "\n[optimizer]\nmax_iterations = 60\n")
    code, _, err = cli("optimize", recipe, "--out", folder, "--quiet", "--no-plots")
    assert code == verdict_code(folder / "report.json"), err
    return folder


EXPORT_CASES = [
    ("rate-overflow", ["--sample-rate", "1e30"], "--sample-rate"),
    ("rate-petahertz", ["--sample-rate", "1e15"], "--sample-rate"),
    ("rate-zero", ["--sample-rate", "0GS/s"], "--sample-rate"),
    ("granularity-huge", ["--granularity", "100000000"], "--granularity"),
    ("granularity-zero", ["--granularity", "0"], "--granularity"),
    ("bits-64", ["--bits", "64"], "--bits"),
    ("if-negative", ["--if=-50MHz"], "--if"),
    ("if-nyquist", ["--if", "2GHz"], "Nyquist"),
    ("sideband-without-if", ["--sideband", "upper"], "--sideband"),
]


@pytest.mark.parametrize("case,args,named", EXPORT_CASES, ids=[c[0] for c in EXPORT_CASES])
def test_export_options_out_of_range_are_refused(run_folder, tmp_path, case, args, named):
    code, _, err = cli("export", run_folder, "--out", tmp_path / "e", *args)
    assert code == 2 and named in err and len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "e").exists()


def test_export_never_replaces_a_run_waveform_silently(run_folder, tmp_path):
    import shutil

    folder = tmp_path / "run"
    shutil.copytree(run_folder, folder)
    before = {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}
    code, _, err = cli("export", folder, "--out", folder, "--sample-rate", "1.2GS/s")
    assert code == 2 and "--force" in err and "demo.csv" in err, err
    assert {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()} == before
    # --out naming a file is the user's mistake, named
    code, _, err = cli("export", folder, "--out", folder / "demo.csv")
    assert code == 2 and "--out" in err and "is a file" in err, err
    # with --force: the run's waveform is kept, and its report follows it
    code, out, err = cli("export", folder, "--out", folder, "--sample-rate", "1.2GS/s",
                         "--force")
    assert code == verdict_code(folder / "export.json") and "Traceback" not in err, err
    report = json.loads((folder / "report.json").read_text())
    assert report["waveform"] == "demo.replaced-1.csv"
    assert (folder / "demo.replaced-1.csv").read_bytes() == before["demo.csv"]
    assert (folder / "demo.replaced-1.json").read_bytes() == before["demo.json"]
    assert json.loads((folder / "export.json").read_text())["sample_rate_hz"] == 1.2e9
    # the kept run is still a run: export reads it back from its report
    code, _, err = cli("export", folder, "--out", tmp_path / "again")
    assert code == verdict_code(tmp_path / "again" / "export.json"), err
    assert (tmp_path / "again" / "demo.csv").exists()
    # a second forced export keeps the first export too, under the next number
    code, _, err = cli("export", folder, "--out", folder, "--force")
    assert (folder / "demo.replaced-2.csv").exists() and (folder / "export.replaced-2.json"
                                                          ).exists(), err


def test_optimize_force_keeps_the_earlier_run(run_folder, tmp_path):
    import shutil

    folder = tmp_path / "run"
    shutil.copytree(run_folder, folder)
    old = (folder / "demo.csv").read_bytes()
    recipe = tmp_path / "demo.toml"
    recipe.write_text(demo_text("demo") + "\n[optimizer]\nmax_iterations = 30\n")
    code, _, err = cli("optimize", recipe, "--out", folder, "--quiet", "--no-plots")
    assert code == 2 and "--force" in err
    code, _, err = cli("optimize", recipe, "--out", folder, "--quiet", "--no-plots", "--force")
    assert code == verdict_code(folder / "report.json"), err
    assert (folder / "demo.replaced-1.csv").read_bytes() == old
    kept = json.loads((folder / "report.replaced-1.json").read_text())
    assert kept["waveform"] == "demo.replaced-1.csv"
    assert json.loads((folder / "report.json").read_text())["waveform"] == "demo.csv"


# ----- coupled transmons named in their dressed basis, spectators, a gate on some qubits

PAIR_RECIPE = """name = "spectator"
[system]
model = "transmons"
basis = "dressed"
[[system.transmon]]
name = "qa"
levels = 3
qubit_frequency = "5.0 GHz"
anharmonicity = "-220 MHz"
[[system.transmon]]
name = "qb"
levels = 3
qubit_frequency = "5.4 GHz"
anharmonicity = "-210 MHz"
driven = false
[[system.coupling]]
between = ["qa", "qb"]
strength = "6 MHz"
[gate]
target = "X"
on = ["qa"]
virtual_z = true
[pulse]
duration = "20 ns"
sample_rate = "2.4 GS/s"
max_rabi = {qa = "60 MHz"}
"""
SPECTATOR_CASES = [
    ("basis-unknown", ('basis = "dressed"', 'basis = "sideways"'), "system.basis", "choose"),
    ("on-unknown-qubit", ('on = ["qa"]', 'on = ["qz"]'), "gate.on[0]", "no qubit named"),
    ("on-twice", ('on = ["qa"]', 'on = ["qa", "qa"]'), "gate.on", "different"),
    ("on-too-many", ('on = ["qa"]', 'on = ["qa", "qb"]'), "gate.target", "acts on 1"),
    ("on-state", ('target = "X"\non = ["qa"]', 'target = "state"\non = ["qa"]\n'
                  'initial_state = [1, 0, 0, 0]\nfinal_state = [0, 0, 1, 0]'), "gate.on",
     "state"),
    ("nothing-driven", ('anharmonicity = "-220 MHz"\n', 'anharmonicity = "-220 MHz"\n'
                        'driven = false\n'), "system.transmon", "no transmon is driven"),
    # equal frequencies: |01> and |10> hybridise fully at rest, no dressed labels
    ("resonant-at-rest", ('"5.4 GHz"', '"5.0 GHz"'), "system.basis", "resonance"),
]


@pytest.mark.parametrize("case,change,key,reason", SPECTATOR_CASES,
                         ids=[c[0] for c in SPECTATOR_CASES])
def test_spectator_recipes_name_the_key(tmp_path, case, change, key, reason):
    path = tmp_path / "r.toml"
    assert change[0] in PAIR_RECIPE
    path.write_text(PAIR_RECIPE.replace(change[0], change[1], 1))
    with pytest.raises(RecipeError) as err:
        load_recipe(path)
    assert err.value.key == key and reason in str(err.value), str(err.value)
    assert str(path) in str(err.value)


def test_a_spectator_recipe_reads_as_the_gate_on_one_qubit():
    recipe = load_recipe(tomllib_loads(PAIR_RECIPE))
    assert recipe.system.control_names == ("qa_i", "qa_q")  # qb has no line of its own
    x = np.array([[0, 1], [1, 0]])
    assert np.allclose(recipe.target.unitary, np.kron(x, np.eye(2)))  # X on qa, I on qb
    drift = recipe.system.drift
    assert np.allclose(drift, np.diag(np.diag(drift)), atol=1e-6)  # dressed: diagonal
