"""Recipe reading and the malformed-recipe table (run through the installed command)."""

import subprocess
import sys

import numpy as np
import pytest

from shaper.errors import RecipeError
from shaper.recipe import load_recipe

DEMO = """name = "demo-x180"

[system]
model = "transmon"
levels = 4
qubit_frequency = "5.1 GHz"
anharmonicity = "-220 MHz"

[gate]
target = "X"

[pulse]
duration = "20 ns"
sample_rate = "2.4 GS/s"
max_rabi = "60 MHz"
"""

MATRICES = """name = "m"
[system]
model = "matrices"
unit = "MHz"
drift = DRIFT
[system.controls]
d_i = [[0, 0.5, 0], [0.5, 0, 0.7], [0, 0.7, 0]]
[gate]
target = "X"
[pulse]
duration = "10 ns"
sample_rate = "1 GS/s"
max_rabi = "50 MHz"
"""


def test_minimal_demo_recipe_reads_exactly_as_written(tmp_path):
    path = tmp_path / "demo.toml"
    path.write_text(DEMO)
    r = load_recipe(path)
    assert r.samples == 48 and r.duration_s == pytest.approx(20e-9)
    assert r.limits_hz == {"q0": 60e6}
    assert r.system.dims == (4,)
    assert np.real(r.system.drift[2, 2]) == pytest.approx(-220e6)
    assert r.export.full_scale_hz == {"q0": 60e6}


def _cases():
    def edit(old, new):
        assert old in DEMO
        return DEMO.replace(old, new)
    return [
        ("unknown key", edit("max_rabi", "max_rabbi"),
         r"pulse\.max_rabbi: unknown key; did you mean 'max_rabi'"),
        ("missing key", edit('duration = "20 ns"\n', ""), r"pulse\.duration: missing required"),
        ("unknown unit", edit('"20 ns"', '"20 fortnights"'),
         r"pulse\.duration: unknown unit 'fortnights'"),
        ("wrong unit kind", edit('"20 ns"', '"20 MHz"'),
         r"pulse\.duration: '20 MHz' is a frequency, but this key wants a time"),
        ("non-positive duration", edit('"20 ns"', '"-5 ns"'),
         r"pulse\.duration: must be positive"),
        ("not whole samples", edit('"20 ns"', '"20.1 ns"'),
         r"pulse\.duration: .*nearest valid durations: 20 ns \(48 samples\) or "
         r"20\.4166666667 ns"),
        ("levels below two", edit("levels = 4", "levels = 1"),
         r"system\.levels: must be from 2"),
        ("limit above full scale", DEMO + '[export]\nfull_scale = "50 MHz"\n',
         r"pulse\.max_rabi: the limit 60 MHz of channel q0 is above its full scale 50 MHz"),
        ("unknown target", edit('target = "X"', 'target = "W"'),
         r"gate\.target: unknown gate 'W'; known gates: I, X, Y, Z"),
        ("unknown model", edit('model = "transmon"', 'model = "fluxonium"'),
         r"system\.model: unknown value 'fluxonium'; choose one of: transmon, transmons, matrices"),
        ("malformed matrix", MATRICES.replace("DRIFT", "[[0, 0], [0, 0, 1], [1]]"),
         r"system\.drift: expected a matrix"),
        ("non-Hermitian matrix", MATRICES.replace("DRIFT", "[[0, 1, 0], [0, 0, 0], [0, 0, 5]]"),
         r"system: drift is not Hermitian"),
        ("not TOML", DEMO.replace('levels = 4', 'levels = = 4'),
         r"not valid TOML: .*line 5, column"),
        ("unknown optimiser", DEMO + '[optimizer]\nmethod = "newton"\n',
         r"optimizer\.method: unknown value 'newton'; choose one of: lbfgs, adam"),
        ("bad unit-less string", edit('"5.1 GHz"', '"fast"'),
         r"system\.qubit_frequency: cannot read 'fast'"),
        ("ramp too long", edit('max_rabi = "60 MHz"', 'max_rabi = "60 MHz"\nramp = "15 ns"'),
         r"pulse\.ramp: two ramps of 36 samples do not fit in 48"),
    ]


CASES = _cases()


def test_a_suggested_duration_is_accepted_as_written(tmp_path):
    # the durations an error suggests are printed with digits enough to be accepted back
    import re

    path = tmp_path / "r.toml"
    path.write_text(DEMO.replace('"20 ns"', '"12 ns"'))  # 28.8 samples at 2.4 GS/s
    with pytest.raises(RecipeError) as err:
        load_recipe(path)
    found = re.findall(r"([0-9.]+ ns) \((\d+) samples\)", str(err.value))
    assert [int(n) for _, n in found] == [28, 29]
    for text, samples in found:
        path.write_text(DEMO.replace('"20 ns"', f'"{text}"'))
        assert load_recipe(path).samples == int(samples)


@pytest.mark.parametrize("label, text, match", CASES, ids=[c[0] for c in CASES])
def test_malformed_recipe_library_error(tmp_path, label, text, match):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(RecipeError, match=match):
        load_recipe(path)


def test_malformed_recipes_exit_2_from_the_command(tmp_path):
    # one subprocess per case is slow (JAX import); run them all through one interpreter
    # that calls the installed command's entry point exactly as the console script does
    paths = []
    for i, (_, text, _) in enumerate(CASES):
        path = tmp_path / f"bad{i}.toml"
        path.write_text(text)
        paths.append(str(path))
    script = (
        "import sys, io, contextlib\n"
        "from shaper.cli.main import main\n"
        "for p in sys.argv[1:]:\n"
        "    err = io.StringIO()\n"
        "    with contextlib.redirect_stderr(err):\n"
        "        code = main(['optimize', p, '--out', p + '.out'])\n"
        "    print(code, err.getvalue().strip().replace('\\n', ' | '))\n")
    proc = subprocess.run([sys.executable, "-c", script, *paths], capture_output=True,
                          text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.strip().splitlines()
    assert len(lines) == len(CASES)
    for (label, _, match), path, line in zip(CASES, paths, lines, strict=True):
        code, message = line.split(" ", 1)
        assert code == "2", (label, line)
        assert path in message, (label, message)
        assert "Traceback" not in message
        import re
        assert re.search(match, message), (label, message)


def test_the_installed_command_exits_2_without_traceback(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text(DEMO.replace("max_rabi", "max_rabbi"))
    proc = subprocess.run(["shaper", "optimize", str(path)], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert f"{path}: pulse.max_rabbi: unknown key; did you mean 'max_rabi'?" in proc.stderr


def test_missing_file():
    with pytest.raises(RecipeError, match="cannot read the file"):
        load_recipe("/nonexistent/recipe.toml")


def test_bundled_recipes_all_load():
    from pathlib import Path
    recipes = sorted((Path(__file__).parent.parent / "recipes").glob("*.toml"))
    assert len(recipes) >= 6
    for path in recipes:
        load_recipe(path)
