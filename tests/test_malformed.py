"""Bad input of every kind: each is refused with exit code 2 (3 for the machine's part),
one line that names the file and the key, and no traceback."""

import json
import os
import shutil
from pathlib import Path

import numpy as np
import pytest
from helpers import QUTRIT_MATRICES, run_cli

BASE = """name = "probe"
description = "a robust X gate"
[system]
model = "transmon"
levels = 3
qubit_frequency = "5.1 GHz"
anharmonicity = "-220 MHz"
[gate]
target = "X"
[pulse]
duration = "20 ns"
sample_rate = "2.4 GS/s"
max_rabi = "60 MHz"
[cost]
ensemble_scales = [0.99, 1.0, 1.01]
[optimizer]
max_iterations = 5
[export]
dac_bits = 16
"""

TWO = """name = "pair"
[system]
model = "transmons"
[[system.transmon]]
name = "qa"
levels = 3
qubit_frequency = "5 GHz"
anharmonicity = "-200 MHz"
flux = true
[[system.transmon]]
name = "qb"
levels = 3
qubit_frequency = "5.3 GHz"
anharmonicity = "-200 MHz"
[[system.coupling]]
between = ["qa", "qb"]
strength = "5 MHz"
[gate]
target = "CZ"
[pulse]
duration = "40 ns"
sample_rate = "2 GS/s"
max_rabi = "40 MHz"
max_flux = "900 MHz"
"""

MATRICES = QUTRIT_MATRICES


def sub(text, old, new):
    assert old in text, old
    return text.replace(old, new, 1)


# (id, recipe text, the key the message must name)
CASES = [
    # units and plausibility: bare numbers that are unit slips
    ("bare-rabi-hz", sub(BASE, 'max_rabi = "60 MHz"', "max_rabi = 60"), "pulse.max_rabi"),
    ("bare-duration-s", sub(BASE, 'duration = "20 ns"', "duration = 20"), "pulse.duration"),
    ("bare-rate", sub(BASE, 'sample_rate = "2.4 GS/s"', "sample_rate = 2.4"),
     "pulse.sample_rate"),
    ("bare-frequency-string", sub(BASE, 'qubit_frequency = "5.1 GHz"', 'qubit_frequency = "5.1"'),
     "system.qubit_frequency"),
    ("bare-anharmonicity", sub(BASE, 'anharmonicity = "-220 MHz"', "anharmonicity = -220"),
     "system.anharmonicity"),
    ("bare-detuning", sub(BASE, "ensemble_scales = [0.99, 1.0, 1.01]",
                          "ensemble_detunings = [1, 0]"), "cost.ensemble_detunings[0]"),
    ("unknown-unit", sub(BASE, '"60 MHz"', '"60 MHZ"'), "pulse.max_rabi"),
    ("wrong-kind-unit", sub(BASE, '"20 ns"', '"20 MHz"'), "pulse.duration"),
    ("rate-as-time", sub(BASE, '"2.4 GS/s"', '"2.4 ns"'), "pulse.sample_rate"),
    ("garbage-number", sub(BASE, '"60 MHz"', '"sixty MHz"'), "pulse.max_rabi"),
    ("complex-string", sub(BASE, '"60 MHz"', '"1+2j MHz"'), "pulse.max_rabi"),
    ("not-whole-samples", sub(BASE, '"20 ns"', '"20.1 ns"'), "pulse.duration"),
    ("zero-duration", sub(BASE, '"20 ns"', '"0 ns"'), "pulse.duration"),
    ("negative-rate", sub(BASE, '"2.4 GS/s"', '"-2.4 GS/s"'), "pulse.sample_rate"),
    # non-finite values
    ("inf-rabi", sub(BASE, 'max_rabi = "60 MHz"', "max_rabi = inf"), "pulse.max_rabi"),
    ("nan-rabi", sub(BASE, 'max_rabi = "60 MHz"', "max_rabi = nan"), "pulse.max_rabi"),
    ("inf-scale", sub(BASE, "[0.99, 1.0, 1.01]", "[0.99, inf]"), "cost.ensemble_scales[1]"),
    ("nan-scale", sub(BASE, "[0.99, 1.0, 1.01]", "[nan]"), "cost.ensemble_scales[0]"),
    ("inf-detuning", sub(BASE, "ensemble_scales = [0.99, 1.0, 1.01]",
                         "ensemble_detunings = [inf]"), "cost.ensemble_detunings[0]"),
    ("nan-description", sub(BASE, 'description = "a robust X gate"', "description = nan"),
     "description"),
    ("nan-target", sub(BASE, "max_iterations = 5", "target_infidelity = nan"),
     "optimizer.target_infidelity"),
    ("inf-weight", sub(BASE, "[cost]", "[cost]\nleakage = inf"), "cost.leakage"),
    ("negative-scale", sub(BASE, "[0.99, 1.0, 1.01]", "[-1.0]"), "cost.ensemble_scales[0]"),
    # types
    ("date-description", sub(BASE, 'description = "a robust X gate"',
                             "description = 2026-12-02"), "description"),
    ("datetime-deep", sub(BASE, "[export]", "[export]\nclip = 2026-12-02T10:00:00"),
     "export.clip"),
    ("dict-for-number", sub(BASE, "max_iterations = 5", "max_iterations = {a = 1}"),
     "optimizer.max_iterations"),
    ("dict-for-quantity", sub(BASE, 'duration = "20 ns"', "duration = {value = 20}"),
     "pulse.duration"),
    ("list-for-quantity", sub(BASE, 'duration = "20 ns"', 'duration = ["20 ns"]'),
     "pulse.duration"),
    ("bool-for-number", sub(BASE, "max_iterations = 5", "max_iterations = true"),
     "optimizer.max_iterations"),
    ("float-iterations", sub(BASE, "max_iterations = 5", "max_iterations = 5.5"),
     "optimizer.max_iterations"),
    ("string-flag", sub(BASE, "[export]", "[export]\nclip = \"yes\""), "export.clip"),
    ("table-is-value", sub(BASE, "[optimizer]\nmax_iterations = 5", "optimizer = 5"),
     "optimizer"),
    ("deep-nesting", sub(BASE, "[export]", "[export.a.b.c.d.e.f.g]\nx = 1\n[export]"),
     "export.a.b.c.d.e"),
    # names that become file names and CSV headers
    ("name-dotdot", sub(BASE, 'name = "probe"', 'name = ".."'), "name"),
    ("name-slash", sub(BASE, 'name = "probe"', 'name = "a/b"'), "name"),
    ("name-too-long", sub(BASE, 'name = "probe"', f'name = "{"x" * 300}"'), "name"),
    ("name-newline", sub(BASE, 'name = "probe"', 'name = "a\\nb"'), "name"),
    ("name-empty", sub(BASE, 'name = "probe"', 'name = ""'), "name"),
    ("qubit-comma", sub(BASE, 'model = "transmon"', 'model = "transmon"\nqubit = "q,0"'),
     "system.qubit"),
    ("transmon-escape", sub(TWO, 'name = "qb"', 'name = "x/../../../ESCAPED"'),
     "system.transmon[1].name"),
    ("transmon-newline", sub(TWO, 'name = "qb"', 'name = "q\\nb"'), "system.transmon[1].name"),
    ("flux-name-clash", sub(TWO, 'name = "qb"', 'name = "qa_flux"'), "system"),
    ("control-name-clash", sub(MATRICES, "[gate]", "controls.drive = [[0, 1, 0], [1, 0, 0], "
                                                   "[0, 0, 0]]\n[gate]"), "system"),
    ("control-name-bad", sub(MATRICES, "controls.drive_q", 'controls."drive q"'),
     'system.controls.drive q'),
    ("imag-typo", sub(MATRICES, "[gate]", "controls_imag.drive_z = [[0, 0, 0], [0, 0, 0], "
                                          "[0, 0, 0]]\n[gate]"), "system.controls_imag.drive_z"),
    # structure
    ("unknown-key", sub(BASE, "max_iterations = 5", "max_iteration = 5"),
     "optimizer.max_iteration"),
    ("unknown-section", BASE + "[extra]\nx = 1\n", "extra"),
    ("missing-pulse", BASE.split("[pulse]")[0], "pulse"),
    ("missing-levels", sub(BASE, "levels = 3\n", ""), "system.levels"),
    ("one-level", sub(BASE, "levels = 3", "levels = 1"), "system.levels"),
    ("unknown-model", sub(BASE, '"transmon"', '"fluxonium"'), "system.model"),
    ("unknown-target", sub(BASE, 'target = "X"', 'target = "XX7"'), "gate.target"),
    ("unknown-method", sub(BASE, "max_iterations = 5", 'method = "newton"'),
     "optimizer.method"),
    ("unknown-ensemble-rule", sub(BASE, "max_iterations = 5", 'ensemble_targets = "most"'),
     "optimizer.ensemble_targets"),
    ("transmon-list-under-one", sub(BASE, "[gate]", '[[system.transmon]]\nname = "qa"\n[gate]'),
     "system.transmon"),
    ("coupling-unknown-qubit", sub(TWO, 'between = ["qa", "qb"]', 'between = ["qa", "qz"]'),
     "system"),
    ("coupling-self", sub(TWO, 'between = ["qa", "qb"]', 'between = ["qa", "qa"]'), "system"),
    ("missing-flux-limit", sub(TWO, 'max_flux = "900 MHz"\n', ""), "pulse.max_flux"),
    ("matrix-not-square", sub(MATRICES, "drift = [[0, 0, 0], [0, 0, 0], [0, 0, -200]]",
                              "drift = [[0, 0], [0, 0], [0, 0]]"), "system.drift"),
    ("matrix-not-hermitian", sub(MATRICES, "[0, 0.5, 0], [0.5, 0, 0.7]",
                                 "[0, 0.5, 0], [0.9, 0, 0.7]"), "system"),
    ("if-above-nyquist", sub(BASE, "dac_bits = 16", 'if_frequency = "1.3 GHz"'),
     "export.if_frequency"),
    ("granularity-huge", sub(BASE, "dac_bits = 16", "granularity = 100000000"),
     "export.granularity"),
    ("dac-bits-one", sub(BASE, "dac_bits = 16", "dac_bits = 1"), "export.dac_bits"),
    ("limit-over-full-scale", sub(BASE, "dac_bits = 16", 'full_scale = "50 MHz"'),
     "pulse.max_rabi"),
    ("too-big-for-memory", sub(BASE, "levels = 3", "levels = 2000"), "system.levels"),
    ("ramp-too-long", sub(BASE, 'max_rabi = "60 MHz"', 'max_rabi = "60 MHz"\nramp = "15 ns"'),
     "pulse.ramp"),
    ("initial-missing-file", sub(BASE, "max_iterations = 5", 'initial = "nowhere.csv"'),
     "nowhere.csv"),
]




def test_the_table_is_large_enough():
    assert len(CASES) >= 60
    assert len({c[0] for c in CASES}) == len(CASES)


@pytest.mark.parametrize("case, text, key", CASES, ids=[c[0] for c in CASES])
def test_malformed_recipe_is_refused(tmp_path, case, text, key):
    path = tmp_path / "recipe.toml"
    path.write_text(text)
    code, out, err = run_cli("optimize", path, "--out", tmp_path / "out", "--no-plots",
                             "--quiet")
    assert code == 2, (code, out, err)
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    assert key in err, err
    assert str(path) in err or key.endswith(".csv"), err
    assert not (tmp_path / "out" / "report.json").exists()


FILESYSTEM = [
    ("out-is-a-file", lambda p: (p / "taken").write_text("x"), "taken", 2),
    ("read-only-folder", lambda p: (p / "ro").mkdir(mode=0o555), "ro/run", 3),
    ("dangling-symlink-out", lambda p: (p / "link").symlink_to(p / "nowhere" / "deeper"),
     "link", None),
    ("recipe-is-a-folder", None, None, 2),
    ("recipe-missing", None, None, 2),
    ("recipe-not-utf8", None, None, 2),
    ("recipe-not-toml", None, None, 2),
]


@pytest.mark.parametrize("case, prepare, out, expected", FILESYSTEM,
                         ids=[f[0] for f in FILESYSTEM])
def test_filesystem_faults(tmp_path, case, prepare, out, expected):
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(sub(BASE, "max_iterations = 5", "max_iterations = 2"))
    if case == "recipe-is-a-folder":
        recipe = tmp_path / "folder.toml"
        recipe.mkdir()
    elif case == "recipe-missing":
        recipe = tmp_path / "absent.toml"
    elif case == "recipe-not-utf8":
        recipe.write_bytes(b"name = \"\xff\xfe\"\n")
    elif case == "recipe-not-toml":
        recipe.write_text("name = [unclosed\n")
    if prepare is not None:
        prepare(tmp_path)
    if os.geteuid() == 0 and case == "read-only-folder":
        pytest.skip("root writes into read-only folders")
    target = tmp_path / (out or "out")
    code, stdout, err = run_cli("optimize", recipe, "--out", target, "--no-plots", "--quiet")
    assert "Traceback" not in err
    if expected is None:  # a dangling link is followed into a new folder, or refused
        assert code in (0, 1, 2, 3), err
    else:
        assert code == expected, (code, err)
        assert len(err.strip().splitlines()) == 1, err


# ---- waveform files: `shaper check` on a broken copy of the bundled demo's export ----

DEMO = Path(__file__).parent.parent / "recipes" / "demo-x180.toml"
DEMO_CSV = Path(__file__).parent.parent / "results" / "demo-x180" / "demo-x180.csv"


def csv_lines(text):
    return text.splitlines()


def edit_csv(fn):
    def apply(csv: Path, side: Path):
        csv.write_text(fn(csv.read_text()))
    return apply


def edit_side(fn):
    def apply(csv: Path, side: Path):
        meta = json.loads(side.read_text())
        fn(meta)
        side.write_text(json.dumps(meta))
    return apply


def raw_side(text: bytes):
    def apply(csv: Path, side: Path):
        side.write_bytes(text)
    return apply


def first_channel(meta):
    return next(iter(meta["channels"].values()))


def replace_row(text, index, row):
    lines = text.splitlines()
    lines[index] = row
    return "\n".join(lines) + "\n"


def numpy_file(name, make):
    def apply(csv: Path, side: Path):
        make(csv.parent / name)
    return apply


WAVES = [
    ("csv-empty", edit_csv(lambda t: ""), None),
    ("csv-header-only", edit_csv(lambda t: t.splitlines()[0] + "\n"), None),
    ("csv-first-column", edit_csv(lambda t: t.replace("time_s", "t", 1)), None),
    ("csv-word", edit_csv(lambda t: replace_row(t, 3, "0,abc,0")), None),
    ("csv-nan", edit_csv(lambda t: replace_row(t, 3, "8.3e-10,nan,0")), None),
    ("csv-inf", edit_csv(lambda t: replace_row(t, 3, "8.3e-10,inf,0")), None),
    ("csv-ragged", edit_csv(lambda t: replace_row(t, 3, "8.3e-10,0")), None),
    ("csv-over-full-scale", edit_csv(lambda t: replace_row(t, 3, "8.333333333e-10,1.5,0")), None),
    ("csv-uneven-time", edit_csv(lambda t: replace_row(t, 3, "9.9e-10,0,0")), None),
    ("csv-not-utf8", lambda csv, side: csv.write_bytes(b"time_s,q0_i,q0_q\n0,\xff\xfe,0\n"),
     None),
    ("side-not-json", raw_side(b"{not json"), None),
    ("side-not-utf8", raw_side(b"{\"a\": \"\xff\"}"), None),
    ("side-a-list", raw_side(b"[1, 2]"), None),
    ("side-no-rate", edit_side(lambda m: m.pop("sample_rate_hz")), "sample_rate_hz"),
    ("side-rate-with-unit", edit_side(lambda m: m.update(sample_rate_hz="2.4 GS/s")),
     "sample_rate_hz"),
    ("side-rate-zero", edit_side(lambda m: m.update(sample_rate_hz=0)), "sample_rate_hz"),
    ("side-rate-negative", edit_side(lambda m: m.update(sample_rate_hz=-2.4e9)),
     "sample_rate_hz"),
    ("side-samples-wrong", edit_side(lambda m: m.update(samples=47)), "samples"),
    ("side-samples-text", edit_side(lambda m: m.update(samples="48")), "samples"),
    ("side-no-channels", edit_side(lambda m: m.pop("channels")), "channels"),
    ("side-channels-list", edit_side(lambda m: m.update(channels=["q0"])), "channels"),
    ("side-channel-not-table", edit_side(lambda m: m.update(channels={"q0": 5})), "channels.q0"),
    ("side-no-full-scale", edit_side(lambda m: first_channel(m).pop("full_scale_rabi_hz")),
     "full_scale_rabi_hz"),
    ("side-full-scale-negative",
     edit_side(lambda m: first_channel(m).update(full_scale_rabi_hz=-6e7)), "full_scale_rabi_hz"),
    ("side-full-scale-unit",
     edit_side(lambda m: first_channel(m).update(full_scale_rabi_hz="60 MHz")),
     "full_scale_rabi_hz"),
    ("side-kind-unknown", edit_side(lambda m: first_channel(m).update(kind="rf")), "kind"),
    ("side-columns-text", edit_side(lambda m: first_channel(m).update(columns="q0_i")),
     "columns"),
    ("side-columns-mismatch",
     edit_side(lambda m: first_channel(m).update(columns=["a_i", "a_q"])), "columns"),
    ("side-dac-bits", edit_side(lambda m: first_channel(m).update(dac_bits=99)), "dac_bits"),
    ("side-if-text", edit_side(lambda m: first_channel(m).update(if_frequency_hz="100 MHz")),
     "if_frequency_hz"),
    ("side-sideband", edit_side(lambda m: first_channel(m).update(sideband="middle")),
     "sideband"),
    ("side-pulse-start", edit_side(lambda m: m.update(pulse_start_sample=480)),
     "pulse_start_sample"),
    ("side-other-channels", edit_side(lambda m: m.update(
        channels={"qx": {**first_channel(m), "columns": []}})), "channels"),
    ("npy-complex", numpy_file("w.npy", lambda p: np.save(p, np.zeros((48, 2), complex))), None),
    ("npy-strings", numpy_file("w.npy", lambda p: np.save(p, np.array([["a", "b"]] * 48))),
     None),
    ("npy-columns", numpy_file("w.npy", lambda p: np.save(p, np.zeros((48, 3)))), None),
    ("npy-truncated", numpy_file("w.npy", lambda p: p.write_bytes(b"\x93NUMPY\x01\x00")), None),
    ("npz-no-samples", numpy_file("w.npz", lambda p: np.savez(p, other=np.zeros(3))), None),
    ("npz-rate-array", numpy_file("w.npz", lambda p: np.savez(
        p, samples=np.zeros((48, 2)), sample_rate_hz=np.array([1e9, 2e9]),
        full_scale_hz=6e7)), "sample_rate_hz"),
    ("npz-rate-zero", numpy_file("w.npz", lambda p: np.savez(
        p, samples=np.zeros((48, 2)), sample_rate_hz=0.0, full_scale_hz=6e7)), "sample_rate_hz"),
]


@pytest.mark.parametrize("case, damage, field", WAVES, ids=[w[0] for w in WAVES])
def test_malformed_waveform_is_refused(tmp_path, case, damage, field):
    csv, side = tmp_path / "w.csv", tmp_path / "w.json"
    shutil.copy(DEMO_CSV, csv)
    shutil.copy(DEMO_CSV.with_suffix(".json"), side)
    damage(csv, side)
    target = csv
    if case.startswith(("npy", "npz")):
        target = tmp_path / f"w.{case[:3]}"
    code, out, err = run_cli("check", DEMO, target, "--sample-rate", "2.4 GS/s",
                             "--full-scale", "60 MHz")
    assert code == 2, (code, out, err)
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    assert str(tmp_path) in err, err
    if field:
        assert field in err, err


def test_the_waveform_table_is_large_enough():
    assert len(WAVES) >= 30


def test_a_sample_rate_of_zero_on_the_command_line(tmp_path):
    np.save(tmp_path / "w.npy", np.zeros((48, 2)))
    code, out, err = run_cli("check", DEMO, tmp_path / "w.npy", "--sample-rate", "0 GS/s",
                             "--full-scale", "60 MHz")
    assert code == 2 and "--sample-rate must be positive" in err, err


@pytest.mark.parametrize("args, key", [
    (["export", "RUN", "--out", "OUT", "--if", "50"], "--if"),
    (["sweep", "RECIPE", "--durations", "6:30:2"], "--durations"),
    (["optimize", "RECIPE", "--stall-limit", "soon"], "--stall-limit"),
])
def test_unit_slips_on_the_command_line(tmp_path, args, key):
    recipe = tmp_path / "r.toml"
    recipe.write_text(BASE)
    args = [str(recipe) if a == "RECIPE" else str(tmp_path) if a == "RUN"
            else str(tmp_path / "o") if a == "OUT" else a for a in args]
    code, out, err = run_cli(*args)
    assert code == 2 and key in err and "Traceback" not in err, err


def test_a_first_guess_longer_than_the_pulse_is_refused(tmp_path):
    np.save(tmp_path / "long.npy", np.full((60, 2), 0.1))
    recipe = tmp_path / "r.toml"
    recipe.write_text(sub(BASE, "max_iterations = 5", 'initial = "long.npy"'))
    code, out, err = run_cli("optimize", recipe, "--out", tmp_path / "o", "--quiet")
    assert code == 2 and "past the recipe's 48 samples" in err, err


def test_more_filesystem_faults(tmp_path, monkeypatch):
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(sub(BASE, "max_iterations = 5", "max_iterations = 2"))
    # a path through a file
    (tmp_path / "plain").write_text("x")
    code, _, err = run_cli("optimize", recipe, "--out", tmp_path / "plain" / "run", "--quiet")
    assert code == 2 and "part of its path is a file" in err, err
    # a run.log planted as a symbolic link is not followed: the target stays untouched
    outside = tmp_path / "outside.txt"
    outside.write_text("keep\n")
    (tmp_path / "planted").mkdir()
    (tmp_path / "planted" / "run.log").symlink_to(outside)
    code, _, err = run_cli("optimize", recipe, "--out", tmp_path / "planted", "--quiet",
                           "--no-plots")
    assert code == 3 and "run.log" in err and "Traceback" not in err, err
    assert outside.read_text() == "keep\n"
    # a full disk while writing: exit 3 with the reason, one line
    import errno

    from shaper.io import atomic

    def full(path, data):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))
    monkeypatch.setattr(atomic, "write_bytes", full)
    code, _, err = run_cli("optimize", recipe, "--out", tmp_path / "full", "--quiet",
                           "--no-plots")
    assert code == 3 and "No space left on device" in err and "Traceback" not in err, err
    monkeypatch.undo()
    # resuming a finished run is refused without --force
    code, _, err = run_cli("optimize", recipe, "--out", tmp_path / "done", "--quiet",
                           "--no-plots")
    met = json.loads((tmp_path / "done" / "report.json").read_text())["targets"]["met"]
    assert code == (0 if met else 1), err
    code, _, err = run_cli("optimize", recipe, "--out", tmp_path / "done", "--quiet",
                           "--resume")
    assert code == 2 and "finished run" in err, err


def test_the_filesystem_table_is_large_enough():
    # FILESYSTEM above plus the four of test_more_filesystem_faults and the folder lock
    # (tests/test_trust.py)
    assert len(FILESYSTEM) + 4 + 1 >= 10
