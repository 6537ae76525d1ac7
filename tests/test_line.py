"""The line between DAC and chip (README, "The line"): filters against scipy.signal and
closed forms, the line in the optimiser's loop against an independent re-simulation,
pre-distortion, channel constraints, mixer correction and DAC codes, and bad input."""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.signal
from helpers import (
    demo_text,
    duffing,
    pedersen_fidelity,
    pinned_text,
    quick_text,
    subspace_leakage,
)
from helpers import run_cli as cli

from shaper.errors import InputError, RecipeError
from shaper.io.waveio import read_waveform
from shaper.jobs.playback import Playback
from shaper.jobs.run import run
from shaper.jobs.waveform import make_waveform
from shaper.optimizer.objective import make_objective
from shaper.recipe import load_recipe
from shaper.recipe.lines import Gaussian, LowPass, Settling, Stage
from shaper.signal import line as lines
from shaper.signal.chain import for_waveform
from shaper.signal.mixer import Mixer

ROOT = Path(__file__).resolve().parents[1]
RATE = 2.4e9

DEMO = demo_text("NAME")
# the demo as the references below build it by hand: the Duffing ladder, the [line] alone
# after held samples (no instrument output filter), judged in the rotating frame on the
# recipe's levels (the output filter, the charge model and the lab frame have their own
# tests against independent references: test_analog, test_charge, test_labframe)
PINNED = quick_text(pinned_text(DEMO))
BESSEL = """
[line]
oversample = 4
[[line.q0]]
kind = "bessel"
order = 2
cutoff = "150 MHz"
"""


def cell_means_by_scipy(b, a, x, *, form="ss"):
    """Mean of the analog filter's output over each cell of a held input, from scipy alone:
    the integral of the output is the output of H(s)/s, discretised exactly for a held
    input by cont2discrete(method="zoh") (time in units of the cell) and run by dlsim in
    state-space form, or by lfilter in transfer-function form."""
    integrator = np.polymul(a, [1.0, 0.0])
    u = np.concatenate([x, [0.0]])
    if form == "ss":
        ad, bd, cd, dd, _ = scipy.signal.cont2discrete(scipy.signal.tf2ss(b, integrator), 1.0,
                                                       method="zoh")
        integral = scipy.signal.dlsim((ad, bd, cd, dd, 1.0), u)[1].ravel()
    else:
        bd, ad, _ = scipy.signal.cont2discrete((b, integrator), 1.0, method="zoh")
        integral = scipy.signal.lfilter(np.ravel(bd), ad, u)
    return np.diff(integral)


# cont2discrete of H(s)/s leaves a numerator whose leading coefficient is ~0 (a delay of
# one cell): scipy warns about it; the comparison below shows the result is sound
@pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")
@pytest.mark.parametrize("kind,order", [("bessel", 2), ("bessel", 4), ("butterworth", 3)])
def test_filters_equal_scipy_designs_on_the_same_samples(kind, order):
    # scipy.signal.bessel (norm="mag": -3 dB at the cutoff) and butter, analog designs
    steps, cutoff = 4, 150e6
    wc = 2 * math.pi * cutoff / RATE / steps
    b, a = (scipy.signal.bessel(order, wc, analog=True, norm="mag") if kind == "bessel"
            else scipy.signal.butter(order, wc, analog=True))
    x = np.random.default_rng(3).normal(size=400)
    g, lead = lines.cell_response((Stage(kind, LowPass(order=order, cutoff_hz=cutoff)),), 1 / RATE,
                                  steps, 400)
    ours = lines.apply(x, g, lead)
    ref = cell_means_by_scipy(b, a, x)
    assert lead == 0
    assert np.max(np.abs(ours - ref)) < 1e-12 * np.max(np.abs(ref))
    # lfilter on the transfer-function form agrees as far as that form's conditioning
    # allows (its poles crowd near z = 1 on a fine grid; the error grows along the run)
    ref_tf = cell_means_by_scipy(b, a, x, form="tf")
    assert np.max(np.abs(ours - ref_tf)) < 1e-9 * np.max(np.abs(ref))


def test_first_order_step_response_is_the_rc_charge_curve():
    # textbook RC low-pass: step response 1 - exp(-t/tau), tau = 1/(2 pi f_c) (common
    # practice, no source); compared as the mean over each cell, which the propagator holds
    steps, cutoff = 8, 100e6
    h, tau = 1 / RATE / steps, 1 / (2 * math.pi * 100e6)
    g, lead = lines.cell_response((Stage("butterworth", LowPass(order=1, cutoff_hz=cutoff)),),
                                  1 / RATE, steps, 800)
    square = np.ones(800)
    out = lines.apply(square, g, lead)
    t = np.arange(800) * h
    exact = 1 - tau / h * (np.exp(-t / tau) - np.exp(-(t + h) / tau))
    assert np.max(np.abs(out - exact)) < 1e-13
    # and at the sample times: the mean over a vanishing cell tends to 1 - exp(-t/tau)
    at_samples = out[::steps]
    assert np.max(np.abs(at_samples - (1 - np.exp(-(t[::steps] + h / 2) / tau)))) < 2e-3


def test_settling_terms_and_gaussian_and_measured_responses_against_closed_forms(tmp_path):
    steps, period = 4, 1 / RATE
    h = period / steps
    t = np.arange(600) * h
    # sum of exponentials, the lab's fit of a step response: 1 + sum A exp(-t/tau)
    amps, taus = (0.04, -0.015), (6e-9, 40e-9)
    g, lead = lines.cell_response((Stage("exponential", Settling(amps, taus)),),
                                  period, steps, 600)
    step = lines.apply(np.ones(600), g, lead)
    exact = 1 + sum(a * tau / h * (np.exp(-t / tau) - np.exp(-(t + h) / tau))
                    for a, tau in zip(amps, taus, strict=True))
    assert np.max(np.abs(step - exact)) < 1e-12
    # zero-phase Gaussian with -3 dB at f_c: sigma_t = sqrt(ln 2) / (2 pi f_c); its step
    # response is the normal CDF, here integrated over the cells by scipy.integrate.quad
    fc = 200e6
    sigma = math.sqrt(math.log(2)) / (2 * math.pi * fc)
    g, lead = lines.cell_response((Stage("gaussian", Gaussian(cutoff_hz=fc)),), period, steps, 600)
    step = lines.apply(np.concatenate([np.zeros(100), np.ones(500)]), g, lead)
    start = 100 * h
    ref = [scipy.integrate.quad(lambda s: 0.5 * (1 + math.erf((s - start) / (sigma * 2 ** .5))),
                                tj, tj + h)[0] / h for tj in t[60:200]]
    assert np.max(np.abs(step[60:200] - ref)) < 1e-10
    assert abs(np.sum(g) - 1) < 1e-12  # unit gain at DC
    # a measured step response of an RC line, sampled at 50 ps: close to the RC closed form
    tau = 1 / (2 * math.pi * 100e6)
    ts = np.arange(0, 30e-9, 50e-12)
    path = tmp_path / "step.csv"
    path.write_text("time_s,value\n" + "".join(
        f"{float(a)!r},{2.5 * (1 - math.exp(-a / tau))!r}\n" for a in ts))
    recipe = load_recipe(_with(tmp_path, "measured", DEMO, f"""
[[line.q0]]
kind = "measured"
file = "{path.name}"
response = "step"
"""))
    (stage,) = recipe.line.stages["q0"]
    g, lead = lines.cell_response((stage,), period, steps, 600)
    step = lines.apply(np.ones(600), g, lead)
    exact = 1 - tau / h * (np.exp(-t / tau) - np.exp(-(t + h) / tau))
    assert np.max(np.abs(step - exact)) < 2e-3  # linear interpolation of 50 ps samples


def _with(tmp_path, name, base, extra=""):
    path = tmp_path / f"{name}.toml"
    path.write_text(base.replace("NAME", name) + extra)
    return path


def held_exponentials(hamiltonians, dt):
    """``exp(-2 pi i dt H_j)`` of every Hermitian ``H_j`` (Hz) at once, from numpy's
    eigendecomposition ``H = V diag(w) V^dag`` (common practice, no source): the same as
    scipy.linalg.expm one by one, in one call."""
    w, v = np.linalg.eigh(hamiltonians)
    return (v * np.exp(-2j * np.pi * dt * w)[:, None, :]) @ np.conj(np.swapaxes(v, 1, 2))


def independent_played_fidelity(recipe, csv, end_s, sub=32):
    """Re-simulate a waveform through a 2nd-order 150 MHz Bessel without shaper's propagator
    or line: scipy.signal.lsim (zero-order-hold input) on ``sub`` points per sample, the
    output at the middle of each sub-step, a scipy.linalg.expm product, on to ``end_s``
    after the first sample (the DAC holds zero after the file while the line rings down:
    README, "The ring-down and the footprint")."""
    wave = read_waveform(csv)
    samples = wave.fractions * 60e6
    n = round(end_s * RATE)
    assert abs(n - end_s * RATE) < 1e-6 and n >= samples.shape[0]
    samples = np.concatenate([samples, np.zeros((n - samples.shape[0], 2))])
    b, a = scipy.signal.bessel(2, 2 * math.pi * 150e6, analog=True, norm="mag")
    dt = 1 / RATE / sub
    t = (np.arange(2 * n * sub) + 0.5) * dt / 2  # half steps: the midpoints are odd entries
    held = np.repeat(samples, 2 * sub, axis=0)
    system = scipy.signal.lti(b, a)
    out = np.stack([scipy.signal.lsim(system, held[:, c], t - t[0], interp=False)[1]
                    for c in range(2)], axis=1)
    # lsim starts its clock at t[0]; the held input is exact, so shift by half a step
    mid = out[1::2]
    drift, controls = duffing(4, 0.0, -220e6)
    u = np.eye(4, dtype=complex)
    for step in held_exponentials(drift + np.tensordot(mid, controls, axes=1), dt):
        u = step @ u
    x = np.array([[0, 1], [1, 0]], complex)
    return 1 - pedersen_fidelity(u[:2, :2], x), subspace_leakage(u, [0, 1])


@pytest.fixture(scope="module")
def bessel_runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("bessel")
    with_line = run(_with(tmp, "inloop", PINNED, BESSEL), out=tmp / "inloop", plots_too=False)
    plain = run(_with(tmp, "plain", PINNED), out=tmp / "plain", plots_too=False)
    return tmp, with_line, plain


def test_pulse_optimised_through_the_filter_meets_the_target_by_independent_resimulation(
        bessel_runs):
    tmp, inloop, plain = bessel_runs
    recipe = load_recipe(tmp / "inloop.toml")
    # the rotating frame on the recipe's levels, the model re-simulated here (the report's
    # top-level figures are the judged ones, the lab frame: test_labframe, test_analog)
    ours = inloop.report["trust"]["rotating_frame"]["infidelity"]
    footprint = inloop.report["trust"]["output"]["footprint_s"]  # the file and its tail
    assert footprint > 20e-9
    ref_inf, ref_leak = independent_played_fidelity(recipe, inloop.folder / "inloop.csv",
                                                    footprint)
    assert ref_inf < recipe.optimizer.target_infidelity
    assert abs(ref_inf - ours) < 2e-8  # two discretisations of the same continuous drive
    # the line delays the pulse past the file's end: cut at the last sample the file misses
    # by far (measured 3.6e-4), which is why the figures play on to the footprint's end
    cut_inf, _ = independent_played_fidelity(recipe, inloop.folder / "inloop.csv", 48 / RATE)
    assert cut_inf > 100 * recipe.optimizer.target_infidelity
    # played to its end, the pulse optimised for an ideal line does worse through the filter
    # than the one optimised through it (measured 1.4e-7 against 1.8e-9: a 150 MHz Bessel
    # mostly delays a 20 ns pulse, and a delay on resonance costs little; cut at the file's
    # end, as this test once compared, both miss by the delay)
    plain_inf, _ = independent_played_fidelity(recipe, plain.folder / "plain.csv", footprint)
    assert plain_inf > 10 * ref_inf
    line = inloop.report["line"]
    assert line["in_the_loop"] and line["without_line"]["infidelity"] > 100 * ours


def test_oversampling_converges_at_second_order(bessel_runs):
    tmp, inloop, _ = bessel_runs
    recipe = load_recipe(tmp / "inloop.toml")
    wave = read_waveform(inloop.folder / "inloop.csv")
    from shaper.physics.simulation import simulate
    values = []
    for steps in (4, 8, 16, 32, 64):
        chain = for_waveform(recipe, wave)
        assert chain.ring > 0  # the line's ring-down after the file, simulated too
        chain = type(chain)(chain.iq_columns, chain.period_s, line=chain.line,
                            modulated=True, steps=steps, ring=chain.ring)
        sim = simulate(recipe.system, recipe.target, chain(wave.to_hz(recipe.system)),
                       chain.dt_s)
        values.append(sim.fidelity)
    errors = np.abs(np.diff(values))
    ratios = errors[:-1] / errors[1:]
    assert np.all(ratios > 2.5) and 3.3 < ratios[-1] < 4.7, ratios  # -> 4: error ~ h^2
    # the optimiser's own grid (oversample 4) is within 2e-9 of the converged fidelity,
    # and the report's Richardson-extrapolated figure within 1e-10
    assert abs(values[0] - values[-1]) < 2e-9
    rotating = inloop.report["trust"]["rotating_frame"]  # the model simulated here
    assert abs((1 - rotating["infidelity"]) - values[-1]) < 1e-10 + errors[-1]


def test_gradient_through_the_filter_matches_finite_differences(tmp_path):
    recipe = load_recipe(_with(tmp_path, "grad", DEMO, BESSEL))
    objective = make_objective(recipe)
    rng = np.random.default_rng(7)
    x = jnp.asarray(rng.normal(scale=0.3, size=objective.layout.shape))
    w = jnp.asarray(objective.weights)
    (_, _), grad = objective.value_and_grad(x, objective.problem, w)
    direction = rng.normal(size=x.shape)
    f = jax.jit(lambda p: objective.loss(p, objective.problem, w)[0])
    eps = 1e-5
    fd = (f(x + eps * direction) - f(x - eps * direction)) / (2 * eps)
    exact = float(jnp.sum(grad * direction))
    assert abs(fd - exact) < 1e-7 * max(1.0, abs(exact))


def settled(samples, amplitudes, taus, sub=64):
    """Independent forward model of a line of settling terms: each jump of the held samples
    starts the step response 1 + sum A exp(-t/tau) (the lab's fit), on ``sub`` points per
    sample (their midpoints). Returns the fine output ``(n * sub,)``."""
    n = samples.shape[0]
    tt = (np.arange(n * sub) + 0.5) / (RATE * sub)
    step = 1 + sum(a * np.exp(-tt / tau) for a, tau in zip(amplitudes, taus, strict=True))
    jumps = np.diff(np.concatenate([[0.0], samples]))
    out = np.zeros(n * sub)
    for k in np.flatnonzero(jumps):
        out[k * sub:] += jumps[k] * step[:n * sub - k * sub]
    return out


def test_predistorted_export_plays_the_ideal_pulse_through_the_line(tmp_path):
    amps, taus = (0.05, -0.02), (3e-9, 30e-9)
    path = _with(tmp_path, "pre", PINNED, f"""
[[line.q0]]
kind = "exponential"
amplitudes = {list(amps)}
time_constants = ["3 ns", "30 ns"]
[export]
predistort = true
""")
    out = run(path, out=tmp_path / "out", plots_too=False)
    wave = read_waveform(out.folder / "pre.csv")
    assert wave.predistorted and out.report["line"]["predistorted"]
    assert out.report["line"]["predistortion_residual"] < 1e-4
    samples = wave.to_hz(load_recipe(path).system)
    n = samples.shape[0]
    # the file, then the DAC holding zero while the line settles, to the footprint's end
    # (README, "The ring-down and the footprint")
    played = round(out.report["trust"]["output"]["footprint_s"] * RATE)
    assert played > n
    samples = np.concatenate([samples, np.zeros((played - n, 2))])
    sub = 64
    fine = np.stack([settled(samples[:, c], amps, taus, sub) for c in range(2)], axis=1)
    drift, controls = duffing(4, 0.0, -220e6)
    x = np.array([[0, 1], [1, 0]], complex)
    u = np.eye(4, dtype=complex)
    steps = held_exponentials(drift + np.tensordot(fine, controls, axes=1), 1 / (RATE * sub))
    for k, step in enumerate(steps):
        u = step @ u
        if k == n * sub - 1:  # the file's end: the chip has seen the ideal pulse
            infidelity = 1 - pedersen_fidelity(u[:2, :2], x)
    assert infidelity < 1e-5  # the ideal pulse reached 1e-6 at the AWG grid
    # the rotating frame on the recipe's levels, the model re-simulated here, to the end of
    # the footprint: pre-distortion inverts the line inside the file only, and the settling
    # terms' tail after it is in the figures (README, "The ring-down and the footprint")
    footprint = 1 - pedersen_fidelity(u[:2, :2], x)
    assert abs(footprint - out.report["trust"]["rotating_frame"]["infidelity"]) < 1e-6
    # without the pre-distortion the same pulse through the line is far worse
    assert out.report["line"]["without_line"]["infidelity"] > 10 * infidelity


def test_predistortion_of_a_flux_step_through_two_settling_terms():
    # the lab's practice: invert the fitted settling terms so that the line's output is
    # the intended step (common practice, no source); output averaged over each sample
    stages = (Stage("exponential", Settling((0.04, -0.015), (6e-9, 40e-9))),)
    n = 480
    intended = np.zeros(n)
    intended[20:400] = -0.3
    samples, residual = lines.predistort(intended, stages, 1 / RATE, 4, channel="qb_flux")
    matrix = lines.sample_matrix(stages, 1 / RATE, 4, n)
    # independent forward model: the step response 1 + sum A exp(-t/tau), sampled on a
    # 64-point grid per sample and averaged
    sub = 64
    out = settled(samples, (0.04, -0.015), (6e-9, 40e-9), sub)
    per_sample = out.reshape(n, sub).mean(axis=1)
    assert np.max(np.abs(per_sample[21:] - intended[21:])) < 1e-4 * 0.3
    assert residual < 1e-12 and np.allclose(matrix @ samples, intended, atol=1e-12)
    assert np.max(np.abs(samples)) < 0.3 * 1.1  # stable: a few percent of correction
    # after the step the correction dies away with the slow term (40 ns; 80 samples = 33 ns)
    assert abs(samples[-1]) < 0.015 * 0.3 and abs(samples[-1]) < abs(samples[401])


def test_one_sided_flux_and_a_channel_switched_off(tmp_path):
    # the subject is the flux line's range and the switched-off drive, not the gate: the
    # Duffing ladder and held samples (no output filter, so the optimiser's model is the
    # rotating frame), judged in the rotating frame on the recipe's levels (tests/helpers.py,
    # QUICK), a 40 ns pulse and a few iterations (every sample must stay in range all along)
    text = (ROOT / "recipes" / "cz-line.toml").read_text().replace(
        'max_rabi = "40 MHz"', 'max_rabi = {qa = "40 MHz", qb = 0}').replace(
        "max_iterations = 3000", "max_iterations = 5").replace(
        'duration = "100 ns"', 'duration = "40 ns"').replace('name = "cz-line"',
                                                             'name = "czoff"')
    assert 'duration = "40 ns"' in text and "max_iterations = 5" in text
    path = tmp_path / "czoff.toml"
    path.write_text(quick_text(pinned_text(text)))
    recipe = load_recipe(path)
    objective = make_objective(recipe)
    assert objective.layout.shape == (recipe.samples, 3)  # qa_i, qa_q, qb_flux; no qb
    out = run(recipe, out=tmp_path / "out", plots_too=False)
    wave = read_waveform(out.folder / "czoff.csv")
    cols = {c: i for i, c in enumerate(wave.column_names)}
    flux = wave.fractions[:, cols["qb_flux"]] * wave.full_scale_hz["qb_flux"]
    assert np.all(flux <= 0.0) and np.all(flux >= -900e6)
    assert np.any(flux < -1e6)
    assert np.all(wave.fractions[:, cols["qb_i"]] == 0) and np.all(
        wave.fractions[:, cols["qb_q"]] == 0)


def test_mixer_correction_and_integer_codes(tmp_path):
    recipe = load_recipe(_with(tmp_path, "mix", DEMO, """
[export]
full_scale = "100 MHz"
codes = true
[export.mixer.q0]
gain = 1.05
phase_deg = 3.0
offset_i = 0.004
offset_q = -0.002
"""))
    rng = np.random.default_rng(2)
    samples = np.zeros((48, 2))
    samples[1:-1] = rng.normal(scale=15e6, size=(46, 2))
    wave, _ = make_waveform(recipe, samples, recipe.export, RATE)
    # the mixer model (README, "Mixer corrections"; the product of the Q path with the
    # shifted oscillator, common practice, no source) plays the corrected file as intended
    played = Mixer.for_recipe(recipe, wave.full_scale_hz).plays(wave.to_hz(recipe.system))
    assert np.max(np.abs(played - samples)) < 1.0 / 32767 * 100e6  # half a DAC step, twice
    a, b = wave.to_hz(recipe.system).T  # the corrected DAC values, by the formula by hand
    phi, step = math.radians(3.0), 100e6 / 32767
    assert np.allclose(b, samples[:, 1] / (1.05 * math.cos(phi)) + 0.002 * 100e6, atol=step)
    assert np.allclose(a, samples[:, 0] - samples[:, 1] * math.tan(phi) - 0.004 * 100e6,
                       atol=2 * step)
    # integer codes: the file holds whole numbers and reads back to the same fractions
    from shaper.io.writers import write_waveform
    files = write_waveform(tmp_path, "mix", wave, recipe.system, recipe_name="mix",
                           recipe_sha256=recipe.sha256)
    body = files[0].read_text().splitlines()[1:]
    assert all(v.lstrip("-").isdigit() for row in body for v in row.split(",")[1:])
    back = read_waveform(files[0])
    assert back.codes and back.mixer_corrected
    assert np.array_equal(back.fractions, wave.fractions)
    assert json.loads(files[1].read_text())["dac_code_of_full_scale"] == 32767
    # the uncorrected file played through the mixer is far off; the corrected one plays as
    # the same samples would on an ideal mixer (to the DAC's resolution)
    from dataclasses import replace
    plain, _ = make_waveform(recipe, samples, replace(recipe.export, mixer={}), RATE)
    uncorrected = Playback(recipe, plain).played().infidelity
    ideal = Playback(recipe, plain).played(mixer=False).infidelity
    corrected = Playback(recipe, wave).played().infidelity
    assert abs(corrected - ideal) < 1e-6 < abs(uncorrected - ideal)


BAD = [
    ('[[line.q0]]\nkind = "chebyshev"\ncutoff = "100 MHz"\n', "line.q0[0].kind", "chebyshev"),
    ('[[line.q0]]\nkind = "bessel"\norder = 2\ncutoff = "1.5 GHz"\n', "line.q0[0].cutoff",
     "half the sample rate"),
    ('[[line.q0]]\nkind = "bessel"\ncutoff = "100 MHz"\n', "line.q0[0].order", "missing"),
    ('[[line.q7]]\nkind = "bessel"\norder = 2\ncutoff = "100 MHz"\n', "line.q7", "no channel"),
    ('[[line.q0]]\nkind = "exponential"\namplitudes = [0.1]\ntime_constants = []\n',
     "line.q0[0].time_constants", "non-empty"),
    ('[[line.q0]]\nkind = "exponential"\namplitudes = [-1.5]\ntime_constants = ["5 ns"]\n',
     "line.q0[0].amplitudes[0]", "between -1 and 1"),
    ('[line]\noversample = 0\n', "line.oversample", "at least 1"),
    ('[export]\npredistort = true\n', "export.predistort", r"needs a \[line\]"),
    ('[export.mixer.q0]\ngain = 3\n', "export.mixer.q0.gain", "between 0.5 and 2"),
]


@pytest.mark.parametrize("extra,key,words", BAD)
def test_bad_line_input_names_the_key(tmp_path, extra, key, words):
    path = _with(tmp_path, "bad", DEMO, extra)
    with pytest.raises(RecipeError, match=words) as info:
        load_recipe(path)
    assert key in str(info.value) and str(path) in str(info.value)


@pytest.mark.parametrize("rows,words", [
    ("time_s,value\n0,0\n1e-10,nan\n2e-10,1\n", "line 3: expected two finite numbers"),
    ("time_s,value\n0,0\n1e-10,0.5\n3e-10,1\n", "even steps"),
    ("t,v\n0,0\n1e-10,0.5\n2e-10,1\n", "header time_s,value"),
    ("time_s,value\n0,0\n1e-10,0\n2e-10,0\n", "settles to zero"),
])
def test_bad_measured_response_files_exit_2_naming_the_file(tmp_path, rows, words):
    (tmp_path / "resp.csv").write_text(rows)
    path = _with(tmp_path, "resp", DEMO, '[[line.q0]]\nkind = "measured"\nfile = "resp.csv"\n'
                                         'response = "impulse"\n')
    code, _, err = cli("optimize", path, "--out", tmp_path / "o")
    assert code == 2
    assert "resp.csv" in err and "line.q0[0].file" in err and words in err


def test_predistortion_that_would_clip_is_refused(tmp_path):
    # a line that halves the drive (settling term -0.6 over 1 us): the inverse doubles it
    path = _with(tmp_path, "clip", DEMO, """
[[line.q0]]
kind = "exponential"
amplitudes = [-0.6]
time_constants = ["1 us"]
[export]
predistort = true
""")
    recipe = load_recipe(path)
    samples = np.zeros((48, 2))
    samples[1:-1, 0] = 50e6
    with pytest.raises(Exception, match="pre-distortion needs .* of full scale on column q0_i"):
        make_waveform(recipe, samples, recipe.export, RATE)
    code, _, err = cli("optimize", path, "--out", tmp_path / "o", "--no-plots")
    assert code == 2 and "pre-distortion needs" in err and "never clipped" in err


def test_predistort_export_of_a_run_optimised_in_the_loop_is_refused(bessel_runs, tmp_path):
    _, inloop, _ = bessel_runs
    code, _, err = cli("export", inloop.folder, "--out", tmp_path / "x", "--predistort")
    assert code == 2 and "correct twice" in err


def test_bandwidth_per_channel_counts_only_its_channels(tmp_path):
    from shaper.costs.problem import recipe_layout
    from shaper.costs.terms import band_limited
    text = (ROOT / "recipes" / "cz-flux.toml").read_text().replace(
        'bandwidth = "50 MHz"', 'bandwidth = {qb_flux = "50 MHz"}')
    path = tmp_path / "bw.toml"
    path.write_text(text)
    recipe = load_recipe(path)
    iq, bb, cutoffs = band_limited(recipe, recipe_layout(recipe))
    assert recipe.bandwidth_hz == {"qb_flux": 50e6}
    assert iq.shape == (0, 2) and bb.tolist() == [4] and cutoffs.tolist() == [50e6]


def test_an_unstable_inverse_is_refused():
    # a line that passes 1e-4 of a step after it settles: its inverse grows 1e4-fold
    stage = Stage("exponential", Settling((-0.9999,), (1e-6,)))
    with pytest.raises(InputError, match="unstable"):
        lines.predistort(np.ones(2000), (stage,), 1 / RATE, 1, channel="x")


def test_every_stage_reports_its_kind_and_its_own_parameters(tmp_path):
    # each kind's parameters under their own names (SI units), a file's samples left out,
    # as the reports have always shown them (shaper export reads them back)
    path = tmp_path / "step.csv"
    path.write_text("time_s,value\n0,0\n1e-10,0.5\n2e-10,1\n")
    recipe = load_recipe(_with(tmp_path, "kinds", DEMO, f"""
[awg]
filter = "gaussian"
cutoff = "900 MHz"
[line]
q0 = [{{kind = "butterworth", order = 3, cutoff = "300 MHz"}},
      {{kind = "exponential", amplitudes = [0.1], time_constants = ["5 ns"]}},
      {{kind = "measured", file = "{path.name}"}}]
"""))
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    assert [s.summary() for s in recipe.line.stages["q0"]] == [
        {"kind": "butterworth", "order": 3, "cutoff_hz": 300e6},
        {"kind": "exponential", "amplitudes": [0.1], "time_constants_s": [5e-9]},
        {"kind": "measured", "response": "step", "file": str(path.resolve()),
         "sha256": digest}]
    assert recipe.line.awg.summary() == {"filter": "gaussian", "kind": "gaussian",
                                         "cutoff_hz": 900e6, "assumed": False,
                                         "words": "Gaussian low-pass at 900 MHz"}
    assert recipe.line.stages["q0"][2].files() == {str(path.resolve()): digest}
