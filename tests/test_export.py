"""Export, import and check: waveforms a lab can load, and a verdict on any waveform."""

import json
import subprocess
from pathlib import Path

import numpy as np
import pytest
from helpers import duffing, expm_product, pedersen_fidelity, pinned_text, subspace_leakage
from helpers import run_cli as cli

from shaper.errors import WaveformError
from shaper.io.waveform_import import read_any
from shaper.io.waveio import read_waveform
from shaper.io.writers import write_waveform
from shaper.jobs.playback import Playback
from shaper.jobs.run import run
from shaper.jobs.waveform import make_waveform, resample
from shaper.recipe import load_recipe
from shaper.signal.modulation import demodulate, modulate

ROOT = Path(__file__).parent.parent
X = np.array([[0, 1], [1, 0]], complex)




def recipe_file(tmp_path, levels, alpha="-200 MHz", duration="10 ns", rate="2 GS/s",
                targets=""):
    # pinned to what the references here build by hand (tests/helpers.py, pinned_text):
    # the Duffing ladder played as held samples
    path = tmp_path / f"r{levels}.toml"
    path.write_text(pinned_text(f"""name = "t{levels}"
[system]
model = "transmon"
levels = {levels}
qubit_frequency = "5 GHz"
anharmonicity = "{alpha}"
[gate]
target = "X"
[pulse]
duration = "{duration}"
sample_rate = "{rate}"
max_rabi = "200 MHz"
[optimizer]
{targets}
"""))
    return path


def gaussian_pi(n, dt):
    # area 1/2: a pi rotation by Rabi's resonant solution (I. I. Rabi, Phys. Rev. 51, 652 (1937))
    t = (np.arange(n) + 0.5) * dt
    sigma = n * dt / 5
    g = np.exp(-0.5 * ((t - n * dt / 2) / sigma) ** 2)
    return 0.5 * g / (g.sum() * dt)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    # the bundled demo, pinned to what the references here build by hand: the Duffing
    # ladder played as held samples, judged in the rotating frame on its own levels (the
    # output filter and the lab frame have their own independent checks: test_analog.py,
    # test_labframe.py)
    out = tmp_path_factory.mktemp("demo")
    recipe = out / "demo-x180.toml"
    recipe.write_text(pinned_text((ROOT / "recipes" / "demo-x180.toml").read_text())
                      + '\n[verdict]\nlab_frame = "off"\nextra_levels = 0\n')
    return run(recipe, out=out / "run", plots_too=False)


def test_the_library_run_writes_its_log(demo):
    log = (demo.folder / "run.log").read_text()
    assert "starting demo-x180" in log and "start 0 (seed 0)" in log
    # the last line: how the optimiser stopped, then the judged figures and the verdict
    last = log.strip().splitlines()[-1]
    assert "finished: the optimiser stopped: met in the optimiser's model; judged" in last
    assert demo.report["judged_on"] in last and last.endswith("targets met")


def test_round_trip_within_half_a_dac_step(demo, tmp_path):
    recipe = load_recipe(demo.folder.parent / "demo-x180.toml")  # the run's own (pinned)
    for bits in (16, 12):
        settings = recipe.export.__class__(**{**recipe.export.__dict__, "dac_bits": bits})
        wave, _ = make_waveform(recipe, demo.result.samples, settings, recipe.sample_rate_hz)
        from shaper.io.writers import write_waveform
        folder = tmp_path / str(bits)
        folder.mkdir()
        write_waveform(folder, "w", wave, recipe.system, recipe_name="x", recipe_sha256="0")
        back = read_waveform(folder / "w.csv")
        exact = demo.result.samples / 60e6
        # half a step of a signed DAC: 0.5 / (2^(bits-1) - 1) (common practice, no source)
        assert np.max(np.abs(back.fractions - exact)) <= 0.5 / (2 ** (bits - 1) - 1) + 1e-15
        if bits == 16:
            # the rotating frame before and after quantisation (the optimiser's own figures,
            # before_quantisation, are in its model: the lab frame to second order)
            change = abs(Playback(recipe, back).played().infidelity - demo.report[
                "trust"]["rotating_frame"]["unquantised"]["infidelity"])
            assert change < 1e-8  # 16 bits cost next to nothing on this pulse


def test_if_modulation_round_trip_and_spectral_line():
    rng = np.random.default_rng(0)
    samples = rng.normal(size=(64, 3))
    mod = modulate(samples, [[0, 1]], 150e6, 1 / 2.4e9, "lower", start=5)
    assert np.max(np.abs(demodulate(mod, [[0, 1]], 150e6, 1 / 2.4e9, "lower", start=5)
                         - samples)) < 1e-14
    assert np.array_equal(mod[:, 2], samples[:, 2])  # baseband column untouched
    constant = np.tile([1.0, 0.0, 0.0], (480, 1))
    z = modulate(constant, [[0, 1]], 100e6, 1 / 2.4e9, "lower")
    spectrum = np.abs(np.fft.fft(z[:, 0] + 1j * z[:, 1]))
    freqs = np.fft.fftfreq(480, 1 / 2.4e9)
    assert freqs[np.argmax(spectrum)] == pytest.approx(100e6)  # lower sideband: +f_IF
    z = modulate(constant, [[0, 1]], 100e6, 1 / 2.4e9, "upper")
    assert freqs[np.argmax(np.abs(np.fft.fft(z[:, 0] + 1j * z[:, 1])))] == pytest.approx(-100e6)


def test_if_export_figures_match_a_fine_independent_simulation(demo, tmp_path):
    # What the DAC plays: modulated values held per sample; in the drive frame the envelope
    # turns at -f_IF within each sample. Reference: scipy expm on 400 sub-steps per sample.
    code, out, err = cli("export", demo.folder, "--out", tmp_path / "if", "--if", "100MHz")
    # optimised at baseband, the pulse plays with ~1.6e-5 at this IF: computed, target missed
    assert code == 1, err
    assert "targets NOT met: infidelity" in out
    report = json.loads((tmp_path / "if" / "export.json").read_text())
    meta = json.loads((tmp_path / "if" / "demo-x180.json").read_text())
    assert meta["channels"]["q0"]["if_frequency_hz"] == 100e6
    data = np.genfromtxt(tmp_path / "if" / "demo-x180.csv", delimiter=",", names=True)
    z = (data["q0_i"] + 1j * data["q0_q"]) * 60e6
    dt, steps = 1 / 2.4e9, 400
    t = (np.arange(len(z) * steps) + 0.5) * dt / steps
    envelope = np.repeat(z, steps) * np.exp(-2j * np.pi * 100e6 * t)
    drift, controls = duffing(4, 0.0, -220e6)
    u = _held_product(drift, controls, np.column_stack([envelope.real, envelope.imag]),
                      dt / steps)
    rotating = report["trust"]["rotating_frame"]  # the model re-simulated here
    assert abs((1 - pedersen_fidelity(u[:2, :2], X)) - rotating["infidelity"]) < 1e-9
    assert abs(subspace_leakage(u, [0, 1]) - rotating["leakage"]) < 1e-9
    # holding the modulated value costs fidelity against the baseband run (both rotating)
    assert rotating["infidelity"] > 10 * report["at_run_rate"]["infidelity"]


def _held_product(drift, controls, samples, dt):
    """helpers.expm_product with every exp(-2 pi i dt H_j) from numpy's eigendecomposition of
    the Hermitian H_j = V diag(w) V^dag, all at once (common practice, no source): the same
    product, for the 19200 sub-steps above in one call."""
    w, v = np.linalg.eigh(drift + np.tensordot(np.asarray(samples, float), controls, axes=1))
    steps = (v * np.exp(-2j * np.pi * dt * w)[:, None, :]) @ np.conj(np.swapaxes(v, 1, 2))
    u = np.eye(drift.shape[0], dtype=complex)
    for step in steps:
        u = step @ u
    return u


def test_resampling_integer_ratio_is_exact_and_box_keeps_area():
    rng = np.random.default_rng(1)
    samples = rng.normal(size=(48, 2))
    held, how = resample(samples, 2.4e9, 4.8e9)
    assert "exact" in how and np.array_equal(held[::2], samples)
    box, how = resample(samples, 2.4e9, 1e9)
    assert box.shape == (20, 2)
    # the integral over time of the piecewise-constant pulse is unchanged
    assert np.allclose(box.sum(axis=0) / 1e9, samples.sum(axis=0) / 2.4e9, atol=1e-15)


def write_plain(tmp_path, name, samples, full_scale):
    path = tmp_path / name
    np.savetxt(path, samples / full_scale, delimiter=",", header="q0_i,q0_q", comments="")
    return path


def test_gaussian_area_rule_on_two_levels(tmp_path):
    # Rabi's resonant solution: area 1/2 is a pi pulse; on two levels the fidelity > 0.9999
    dt, n = 0.5e-9, 20
    g = gaussian_pi(n, dt)
    path = write_plain(tmp_path, "g.csv", np.column_stack([g, 0 * g]), 200e6)
    code, out, err = cli("check", recipe_file(tmp_path, 2), path, "--sample-rate", "2GS/s",
                         "--full-scale", "200MHz", "--json")
    rotating = json.loads(out)["trust"]["rotating_frame"]  # two levels, the Rabi formula's
    assert rotating["infidelity"] < 1e-4
    assert abs(rotating["leakage"]) < 1e-12


def test_check_leakage_matches_independent_simulation_and_drag_leaks_less(tmp_path):
    dt, n, alpha = 0.5e-9, 20, -200e6
    g = gaussian_pi(n, dt)
    # first-order DRAG, Motzoi et al., Phys. Rev. Lett. 103, 110501 (2009), in these units
    # (Rabi frequencies in Hz): Q = -(dI/dt) / (2 pi alpha)
    drag_q = -np.gradient(g, dt) / (2 * np.pi * alpha)
    leaks = {}
    recipe = recipe_file(tmp_path, 3)
    for name, samples in (("gauss", np.column_stack([g, 0 * g])),
                          ("drag", np.column_stack([g, drag_q]))):
        path = write_plain(tmp_path, f"{name}.csv", samples, 200e6)
        code, out, err = cli("check", recipe, path, "--sample-rate", "2GS/s", "--full-scale",
                             "200MHz", "--json")
        verdict = json.loads(out)
        assert code == (0 if verdict["pass"] else 1), err
        drift, controls = duffing(3, 0.0, alpha)
        quantised = np.genfromtxt(path, delimiter=",", names=True)
        held = np.column_stack([quantised["q0_i"], quantised["q0_q"]]) * 200e6
        u = expm_product(drift, controls, held, dt)
        rotating = verdict["trust"]["rotating_frame"]  # the model re-simulated here
        assert abs(rotating["leakage"] - subspace_leakage(u, [0, 1])) < 1e-9
        leaks[name] = rotating["leakage"]
    assert leaks["gauss"] > 1e-4
    assert leaks["drag"] < leaks["gauss"] / 10


def test_check_agrees_with_the_run_report_and_exit_codes(demo, tmp_path):
    recipe = demo.folder.parent / "demo-x180.toml"
    csv = demo.folder / "demo-x180.csv"
    code, out, err = cli("check", recipe, csv, "--json")
    assert code == 0, err
    verdict = json.loads(out)
    for key in ("fidelity", "infidelity", "leakage"):
        assert verdict[key] == pytest.approx(demo.report[key], abs=1e-12)
    for key in ("populations", "sensitivity", "pass", "frame_after_rad"):
        assert key in verdict
    # more levels for a leakage study: still a valid verdict, 6 levels
    code, out, _ = cli("check", recipe, csv, "--json", "--levels", "6")
    assert json.loads(out)["levels"] == [6]
    # a recipe with stricter targets than the pulse reaches: exit 1
    strict = recipe_file(tmp_path, 4, alpha="-220 MHz", duration="20 ns", rate="2.4 GS/s",
                         targets="target_infidelity = 1e-12")
    code, out, err = cli("check", strict, csv, "--json")
    assert code == 1, err


def test_check_command_installed_exit_codes(demo, tmp_path):
    csv = demo.folder / "demo-x180.csv"
    # the console script installed beside the interpreter running the tests (its
    # environment's bin folder need not be on PATH), else the one on PATH
    import shutil
    import sys
    installed = Path(sys.executable).with_name("shaper")
    command = str(installed) if installed.exists() else shutil.which("shaper")
    assert command, "the shaper command is not installed"
    proc = subprocess.run([command, "check", str(demo.folder.parent / "demo-x180.toml"),
                           str(csv), "--plots", str(tmp_path / "plots")], capture_output=True,
                          text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert "PASS" in proc.stdout
    for name in ("sensitivity", "spectrum", "waveform", "populations"):  # drawn by the helper
        assert (tmp_path / "plots" / f"{name}.png").stat().st_size > 10_000, name
    assert "warning" not in proc.stderr


def test_over_full_scale_is_an_error_and_clip_counts(demo, tmp_path):
    recipe = load_recipe(ROOT / "recipes" / "demo-x180.toml")
    loud = demo.result.samples * 1.5
    with pytest.raises(WaveformError, match=r"exceed full scale \(up to 1\.\d+ of full scale"):
        make_waveform(recipe, loud, recipe.export, recipe.sample_rate_hz)
    settings = recipe.export.__class__(**{**recipe.export.__dict__, "clip": True})
    wave, clipped = make_waveform(recipe, loud, settings, recipe.sample_rate_hz)
    assert clipped > 0 and np.max(np.abs(wave.fractions)) <= 1.0


def test_numbers_format_and_granularity(demo, tmp_path):
    code, out, err = cli("export", demo.folder, "--out", tmp_path / "b", "--format", "numbers",
                         "--granularity", "32", "--padding", "centre")
    assert code == 0, err
    numbers = np.loadtxt(tmp_path / "b" / "demo-x180_q0.txt", delimiter=",")
    assert numbers.shape == (64, 2)  # 48 samples padded to a multiple of 32
    assert np.all(numbers[:8] == 0) and np.all(numbers[-8:] == 0)
    report = json.loads((tmp_path / "b" / "export.json").read_text())
    # zero padding is free evolution, the identity on resonance (common practice, no source):
    # the judged figure of the padded file still meets the run's targets
    assert report["infidelity"] < 1e-4 and report["judged_on"] == report["trust"]["judged_on"]


def _bad_files(tmp_path, demo):
    csv = (demo.folder / "demo-x180.csv").read_text().splitlines()
    sidecar = json.loads((demo.folder / "demo-x180.json").read_text())
    cases = {}

    def ours(name, lines, meta=sidecar):
        folder = tmp_path / name
        folder.mkdir()
        (folder / "w.csv").write_text("\n".join(lines) + "\n")
        (folder / "w.json").write_text(json.dumps(meta))
        return folder / "w.csv"
    cases["NaN value"] = (ours("nan", csv[:3] + ["1e-9,nan,0"] + csv[4:]), "NaN or infinite")
    cases["missing column"] = (ours("col", [",".join(r.split(",")[:2]) for r in csv]),
                               "lists columns")
    uneven = csv[:5] + [csv[5].replace(csv[5].split(",")[0], "9.9e-9", 1)] + csv[6:]
    cases["uneven time steps"] = (ours("uneven", uneven), "uneven")
    cases["beyond full scale"] = (ours("over", csv[:3] + ["8.333333333333e-10,1.5,0"] + csv[4:]),
                                  "beyond full scale")
    cases["empty file"] = (ours("empty", []), "empty")
    cases["sidecar contradicts"] = (ours("count", csv, {**sidecar, "samples": 7}),
                                    "says 7 samples")
    plain = tmp_path / "plain.csv"
    plain.write_text("q0_i,q0_q\n0.1,0.2\n")
    cases["plain csv without rate"] = (plain, "does not give its sample rate")
    npy = tmp_path / "w.npy"
    np.save(npy, np.zeros((10, 3)))
    cases["npy of the wrong shape"] = (npy, "expected 2 column")
    odd = tmp_path / "w.wav"
    odd.write_text("x")
    cases["unknown type"] = (odd, "unknown waveform type")
    cases["missing file"] = (tmp_path / "nope.csv", "no such file")
    return cases


def test_malformed_waveform_files_exit_2(demo, tmp_path):
    recipe = ROOT / "recipes" / "demo-x180.toml"
    for label, (path, match) in _bad_files(tmp_path, demo).items():
        code, out, err = cli("check", recipe, path)
        assert code == 2, (label, err)
        assert match in err, (label, err)
        assert "Traceback" not in err


def test_numpy_archives_read(tmp_path):
    system = load_recipe(ROOT / "recipes" / "demo-x180.toml").system
    data = np.random.default_rng(2).uniform(-0.5, 0.5, size=(48, 2))
    np.savez(tmp_path / "w.npz", samples=data, sample_rate_hz=2.4e9, full_scale_hz=60e6)
    wave = read_any(tmp_path / "w.npz", system)
    assert np.array_equal(wave.fractions, data) and wave.sample_rate_hz == 2.4e9
    np.save(tmp_path / "w.npy", data)
    wave = read_any(tmp_path / "w.npy", system, sample_rate_hz=2.4e9, full_scale_hz=60e6)
    assert np.allclose(wave.to_hz(system), data * 60e6)


def test_check_judges_padded_held_and_foreign_length_files(tmp_path):
    # the recipe supplies the physics, the file the samples: a bundled export longer than its
    # recipe's pulse (granularity padding: 64 samples for 60) and other recipes' files, one
    # shorter and one of another length, are judged (0 or 1), never a crash (4) or bad input
    detuned = ROOT / "recipes" / "detuned-x180.toml"
    folder = ROOT / "results" / "detuned-x180"
    report = json.loads((folder / "report.json").read_text())
    assert report["samples"] == 64 and report["pulse_samples"] == 60
    code, out, err = cli("check", detuned, folder / "detuned-x180.csv", "--json")
    verdict = json.loads(out)
    assert code == (0 if verdict["pass"] else 1), err  # the verdict's (lab frame) exit code
    assert verdict["pass"] == report["targets"]["met"]
    assert verdict["samples"] == 64
    # the same file on the same recipe: the same judged and rotating-frame figures
    assert verdict["infidelity"] == pytest.approx(report["trust"]["infidelity"], abs=1e-12)
    assert verdict["trust"]["rotating_frame"]["infidelity"] == pytest.approx(
        report["trust"]["rotating_frame"]["infidelity"], abs=1e-12)
    # canonical frame angles: the same pair in the report and in check (README)
    assert verdict["frame_before_rad"] == pytest.approx(report["frame_before_rad"], abs=1e-9)
    assert verdict["frame_after_rad"] == pytest.approx(report["frame_after_rad"], abs=1e-9)
    for other in ("demo-x180", "short-x180"):
        code, out, err = cli("check", detuned, ROOT / "results" / other / f"{other}.csv",
                             "--json")
        assert code == (0 if json.loads(out)["pass"] else 1) and "Traceback" not in err, err
        assert json.loads(out)["samples"] != 60
    # held: the demo's samples each held for two samples of a 4.8 GS/s AWG play the same
    # pulse, so the same figures (a DAC's zero-order hold, common practice)
    from dataclasses import replace as dc_replace

    # (held samples with no output filter: a filter set at a fraction of the sample rate
    # would differ between the two rates)
    pinned_demo = tmp_path / "demo-x180.toml"
    pinned_demo.write_text(pinned_text((ROOT / "recipes" / "demo-x180.toml").read_text()))
    demo_recipe = load_recipe(pinned_demo)
    original = ROOT / "results" / "demo-x180" / "demo-x180.csv"
    wave = read_waveform(original)
    held = dc_replace(wave, fractions=np.repeat(wave.fractions, 2, axis=0),
                      sample_rate_hz=2 * wave.sample_rate_hz)
    files = write_waveform(tmp_path, "held", held, demo_recipe.system, recipe_name="held",
                           recipe_sha256="0")
    figures = []
    for file in (original, files[0]):
        code, out, err = cli("check", pinned_demo, file, "--json")
        assert "Traceback" not in err, err
        figures.append(json.loads(out)["trust"]["rotating_frame"]["infidelity"])
    assert figures[1] == pytest.approx(figures[0], abs=1e-12)


def test_report_measures_the_band_as_the_cost_does_with_an_if(tmp_path):
    # With an IF the report used to measure the modulated samples (8x the cost's value,
    # so max_out_of_band could never be met); now both measure the baseband envelope.
    raw = dict(load_recipe(ROOT / "recipes" / "demo-x180.toml").raw)
    raw["pulse"] = {**raw["pulse"], "bandwidth": "120 MHz"}
    raw["export"] = {"if_frequency": "100 MHz"}
    out = run(raw, out=tmp_path / "if", plots_too=False)
    optimiser = out.report["costs"]["bandwidth"]
    exported = out.report["out_of_band_fraction"]
    assert exported == pytest.approx(optimiser, rel=0.05, abs=1e-9)
    assert out.report["targets"]["judged"]["out_of_band"] == exported


def test_a_failing_extra_does_not_lose_the_result(tmp_path, monkeypatch):
    import shaper.jobs.run as job

    def broken(*args, **kwargs):
        raise RuntimeError("comparison failed")
    monkeypatch.setattr(job, "textbook_pulses", broken)
    out = run(ROOT / "recipes" / "demo-x180.toml", out=tmp_path / "r", plots_too=False)
    report = json.loads((tmp_path / "r" / "report.json").read_text())
    assert report["extras_failed"]["textbook_pulses"].startswith("RuntimeError")
    assert report["infidelity"] == out.report["infidelity"] < 1e-6
    assert (tmp_path / "r" / "demo-x180.csv").exists()


def test_an_internal_error_is_one_line_and_exit_4(monkeypatch, tmp_path):
    import shaper.cli.check_cmd as check_cmd

    def bug(args):
        raise ZeroDivisionError("division by zero")
    monkeypatch.setattr(check_cmd, "run", bug)
    code, out, err = cli("check", "a.toml", "b.csv")
    assert code == 4 and "internal error: ZeroDivisionError" in err and "--debug" in err
    assert "Traceback" not in err
    with pytest.raises(ZeroDivisionError):
        cli("--debug", "check", "a.toml", "b.csv")


PADDED = """name = "padded"
[system]
model = "transmon"
levels = 4
qubit_frequency = "5.002 GHz"
drive_frequency = "5.0 GHz"
anharmonicity = "-220 MHz"
[gate]
target = "X/2"
[pulse]
duration = "24 ns"
sample_rate = "1 GS/s"
max_rabi = "60 MHz"
[export]
granularity = 16
padding = "centre"
[verdict]
lab_frame = "off"  # this test is about the padding; 1 GS/s steps miss 1e-7 leakage in the lab
extra_levels = 0  # judged on the levels re-simulated here
"""


@pytest.mark.parametrize("ensemble", [False, True])
def test_the_optimiser_sees_the_exports_padding(tmp_path, ensemble):
    # a 2 MHz detuned drive idles through the padding (24 -> 32 samples): the optimiser must
    # optimise the padded file, or the exported gate is off by the idle rotation (1.7e-3
    # before this was fixed). Re-simulated here with scipy's expm on the file's samples.
    # (with the ensemble the run stops at its iteration limit: the members' figures on the
    # padded file are what is checked, not the targets)
    text = PADDED + ("[cost]\nensemble_detunings = [\"-0.1 MHz\", \"0.1 MHz\"]\n"
                     "[optimizer]\nmax_iterations = 60\n" if ensemble else "")
    path = tmp_path / "padded.toml"
    path.write_text(pinned_text(text))  # the Duffing ladder as held samples, as built here
    out = run(path, out=tmp_path / "run", plots_too=False)
    report = out.report
    assert report["samples"] == 32 and report["pulse_samples"] == 24
    assert report["targets"]["met"] or ensemble, report["targets"]
    wave = read_waveform(tmp_path / "run" / "padded.csv")
    drift, controls = duffing(4, 2e6, -220e6)
    u = expm_product(drift, controls, wave.fractions * wave.full_scale_hz["q0"], 1e-9)
    half = np.array([[1, -1j], [-1j, 1]]) / 2 ** 0.5  # exp(-i pi/4 X), by hand
    infidelity = 1 - pedersen_fidelity(u[:2, :2], half)
    rotating = report["trust"]["rotating_frame"]  # the model re-simulated here
    assert infidelity == pytest.approx(rotating["infidelity"], abs=1e-12)
    assert infidelity < 1e-5
    # the optimiser's own figure (its best start, in its model: here the rotating frame on
    # the recipe's levels) agrees with the padded file's before the DAC's rounding
    assert report["before_quantisation"]["lab_frame"] == "off"
    assert report["optimizer"]["starts"][0]["infidelity"] == pytest.approx(
        rotating["unquantised"]["infidelity"], rel=1e-6)
    if ensemble:
        for delta, member in zip((-0.1e6, 0.1e6), report["ensemble"]["infidelity"],
                                 strict=True):
            d2, _ = duffing(4, 2e6 + delta, -220e6)
            v = expm_product(d2, controls, wave.fractions * wave.full_scale_hz["q0"], 1e-9)
            assert 1 - pedersen_fidelity(v[:2, :2], half) == pytest.approx(member, abs=1e-9)
