"""Work done once: a warm ``shaper optimize`` traces and compiles nothing new, and a report
simulates each played file once per variant (DEVELOPERS.md, "Architecture")."""

import hashlib
import json
import subprocess
import sys
from collections import Counter
from pathlib import Path

import numpy as np

import shaper
from shaper.jobs import playback
from shaper.recipe import load_recipe

ROOT = Path(__file__).parent.parent
DEMO = ROOT / "recipes" / "demo-x180.toml"

# The second of two identical commands in one process, with JAX's compile log on: every
# jitted program must be reused (the objective, the re-simulation, the members, the
# textbook calibration), so the log stays empty.
WARM = """
import logging, sys
import jax
from shaper.cli.main import main

assert main(["optimize", RECIPE, "--out", OUT + "/a", "--no-plots", "--quiet"]) == 0
records = []
class Catch(logging.Handler):
    def emit(self, record):
        records.append(record.getMessage())
logging.getLogger("jax").addHandler(Catch())
logging.getLogger("jax").setLevel(logging.DEBUG)
jax.config.update("jax_log_compiles", True)
code = main(["optimize", RECIPE, "--out", OUT + "/b", "--no-plots", "--quiet"])
print("CODE", code)
for text in records:
    if "tracing" in text or "Compiling" in text:
        print("COMPILED", text[:160])
"""


def test_a_warm_optimize_compiles_nothing_new(tmp_path):
    code = WARM.replace("RECIPE", repr(str(DEMO))).replace("OUT", repr(str(tmp_path)))
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=600)
    assert "CODE 0" in proc.stdout, proc.stderr[-3000:]
    compiled = [line for line in proc.stdout.splitlines() if line.startswith("COMPILED")]
    assert compiled == [], compiled
    # and the second run is the same run: identical waveform files
    assert (tmp_path / "a" / "demo-x180.csv").read_bytes() == \
        (tmp_path / "b" / "demo-x180.csv").read_bytes()


def test_a_report_simulates_each_file_once(tmp_path, monkeypatch):
    # Every simulation a run's report makes goes through Playback._simulate or its lab
    # frame; counted here per (file content, recipe, variant): none may repeat.
    seen = Counter()
    real_simulate, real_lab = playback.Playback._simulate, playback.Playback.lab.func

    def counted(self, line, mixer, extrapolate):
        seen[(_digest(self), "rotating", line, mixer, extrapolate)] += 1
        return real_simulate(self, line, mixer, extrapolate)

    def counted_lab(self):
        seen[(_digest(self), "lab")] += 1
        return real_lab(self)

    monkeypatch.setattr(playback.Playback, "_simulate", counted)
    monkeypatch.setattr(playback.Playback, "lab", _cached(counted_lab))
    raw = {**_toml(DEMO), "optimizer": {"max_iterations": 40},
           "cost": {"ensemble_scales": [0.99, 1.0, 1.01]},
           "line": {"q0": [{"kind": "bessel", "order": 2, "cutoff": "400 MHz"}]}}
    out = shaper.run(load_recipe(raw), out=tmp_path / "run", plots_too=True)
    repeated = {k: n for k, n in seen.items() if n > 1}
    assert seen and not repeated, repeated
    report = json.loads((out.folder / "report.json").read_text())
    rotating = report["trust"]["rotating_frame"]  # the line's figures are this model's
    assert report["line"]["with_line"]["infidelity"] == rotating["infidelity"]
    assert report["trust"]["lab_frame"] is not None
    # the pictures a gate engineer decides with, all drawn (README, "Output files"): the
    # robust run's sensitivity with its members, the textbook comparison
    assert "extras_failed" not in report, report.get("extras_failed")
    for name in ("waveform.png", "spectrum.png", "populations.png", "convergence.png",
                 "sensitivity.png", "textbook.png"):
        assert (out.folder / name).stat().st_size > 10_000, name
    assert len(report["sensitivity"]["detuning_hz"]) == 21


def _digest(play) -> tuple:
    return (hashlib.sha256(np.ascontiguousarray(play.wave.fractions).tobytes()).hexdigest(),
            play.recipe.sha256)


def _cached(func):
    from functools import cached_property

    prop = cached_property(func)
    prop.__set_name__(playback.Playback, "lab")
    return prop


def _toml(path):
    import tomllib

    return tomllib.loads(path.read_text())
