"""Bad input of every kind: each is refused with exit code 2 (3 for the machine's part),
one line that names the file and the key, and no traceback."""

import contextlib
import io
import os

import pytest

from shaper.cli.main import main

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

MATRICES = """name = "mat"
[system]
model = "matrices"
unit = "MHz"
drift = [[0, 0, 0], [0, 0, 0], [0, 0, -200]]
controls.drive_i = [[0, 0.5, 0], [0.5, 0, 0.7], [0, 0.7, 0]]
controls.drive_q = [[0, 0, 0], [0, 0, 0], [0, 0, 0]]
[gate]
target = "X"
[pulse]
duration = "20 ns"
sample_rate = "2.4 GS/s"
max_rabi = "20 MHz"
"""


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


def run_cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in args])
    return code, out.getvalue(), err.getvalue()


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
