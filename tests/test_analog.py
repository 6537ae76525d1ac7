"""What reaches the chip (issue 30): the instrument's analog output between and after the
samples, the lab frame played on it to the end of the ring-down, the worst carrier phase,
the second-order model, and the ordinary transmon's kept file.

Every reference is built here from scipy (tests/helpers.py): the filters' step responses in
closed form (scipy.signal.bessel + scipy.signal.residue), or integrated as state space
together with the Schroedinger equation of the lab-frame Duffing transmon (solve_ivp,
DOP853); the charge-model transmon by hand from Koch et al. (2007).
"""

from __future__ import annotations

import tomllib

import numpy as np
import pytest
from helpers import (
    ROOT,
    bessel_step,
    cascade_ss,
    charge_transmon,
    duffing_lab,
    gaussian_step,
    held_output,
    interpolated_step,
    lab_frame_played,
    lowpass_ss,
    pedersen_fidelity,
    settling_ss,
    subspace_leakage,
)

from shaper.io.waveio import Waveform, read_waveform
from shaper.jobs.playback import Playback
from shaper.recipe import load_recipe
from shaper.signal.chain import for_waveform

X = np.array([[0, 1], [1, 0]], complex)
Y = np.array([[0, -1j], [1j, 0]], complex)

# a made-up transmon of our Fenwick Lane lab, Duffing ladder (so that our hand-built model
# is the same model), played at 2.5 GS/s
BASE = {
    "name": "analog",
    "system": {"model": "transmon", "levels": 3, "qubit_frequency": "5.1 GHz",
               "anharmonicity": "-220 MHz", "spectrum": "duffing"},
    "gate": {"target": "X"},
    "pulse": {"duration": "4.8 ns", "sample_rate": "2.5 GS/s", "max_rabi": "300 MHz"},
}


BASE_TEXT = """name = "analog"
[system]
model = "transmon"
levels = 3
qubit_frequency = "5.1 GHz"
anharmonicity = "-220 MHz"
spectrum = "duffing"
[gate]
target = "X"
[pulse]
duration = "4.8 ns"
sample_rate = "2.5 GS/s"
max_rabi = "300 MHz"
"""
assert tomllib.loads(BASE_TEXT) == BASE


def _recipe(**sections):
    return load_recipe({**BASE, **sections})


def _wave(fractions, rate=2.5e9, full_scale=300e6, columns=("q0_i", "q0_q")):
    return Waveform(np.asarray(fractions, float), rate, {"q0": full_scale}, columns)


def _random_wave(n=12, seed=3):
    # arbitrary held samples, the first and the last far from zero (the start and the tail)
    rng = np.random.default_rng(seed)
    fractions = rng.uniform(-0.8, 0.8, size=(n, 2))
    fractions[0] = [0.7, -0.5]
    fractions[-1] = [-0.6, 0.75]
    return _wave(fractions)


OFFSETS = (0.0, 0.137, 0.5, 0.913)  # arbitrary times inside each sample period


def _project_output(recipe, wave):
    """The project's continuous output (drive frame = the outputs themselves: no IF) at
    k + OFFSETS sample periods, and those times (seconds from the first sample)."""
    chain = for_waveform(recipe, wave)
    samples = wave.to_hz(recipe.system)
    before = chain.before(OFFSETS, len(samples))
    values = np.asarray(chain.lab_envelope(samples, OFFSETS))
    times = chain.lab_times(OFFSETS, len(samples), before)
    return samples, values, times, chain


# -- 1. the analog output ---------------------------------------------------------------


def test_default_output_is_a_bessel_at_0_4_fs_against_partial_fractions():
    # the default [awg] (a 4th-order Bessel at 0.4 f_s, issue 30) at arbitrary times inside
    # the samples and through the ring-down after the last one, against the closed form:
    # partial fractions of H(s)/s (scipy.signal.residue) summed over the held steps
    recipe, wave = _recipe(), _random_wave()
    samples, values, times, chain = _project_output(recipe, wave)
    period = 1 / 2.5e9
    assert times[-1] > len(samples) * period + 1e-9  # the ring-down is in it
    reference = held_output(bessel_step(4, 0.4 * 2.5e9), samples, period, times)
    peak = np.max(np.abs(samples))
    assert np.max(np.abs(values - reference)) < 1e-12 * peak
    assert chain.resolution(len(samples)) == 0.0  # closed form: nothing to resolve


def test_gaussian_output_against_its_closed_form():
    # a lone zero-phase Gaussian (non-causal: it plays before the first sample) against
    # Phi(t / sigma), sigma = sqrt(ln 2) / (2 pi f_c) (tests/helpers.py)
    recipe = _recipe(awg={"filter": "gaussian", "cutoff": "0.8 GHz"})
    samples, values, times, _ = _project_output(recipe, _random_wave())
    assert times[0] < 0
    reference = held_output(gaussian_step(0.8e9), samples, 1 / 2.5e9, times)
    assert np.max(np.abs(values - reference)) < 1e-12 * np.max(np.abs(samples))


def test_measured_step_response_against_linear_interpolation(tmp_path):
    # a step response we "measured" (invented: a second-order rise with a small overshoot,
    # settled at 0.97 of the step, sampled every 20 ps), written as the lab would, against
    # linear interpolation of the same points normalised to the settled value
    t = np.arange(0, 151) * 20e-12
    tau = 0.25e-9
    values = 0.97 * (1 - np.exp(-t / tau) * (np.cos(t / tau) + 0.6 * np.sin(t / tau)))
    values[t > 2.4e-9] = 0.97
    (tmp_path / "step.csv").write_text(
        "time_s,value\n" + "".join(f"{a:.12e},{b:.15e}\n" for a, b in zip(t, values,
                                                                         strict=True)))
    path = tmp_path / "measured.toml"
    path.write_text(BASE_TEXT + '[awg]\nfilter = "measured"\nfile = "step.csv"\n'
                                'response = "step"\n')
    recipe = load_recipe(path)
    samples, values_out, times, _ = _project_output(recipe, _random_wave())
    reference = held_output(interpolated_step(t, values), samples, 1 / 2.5e9, times)
    assert np.max(np.abs(values_out - reference)) < 1e-12 * np.max(np.abs(samples))


def test_bessel_then_gaussian_against_a_numerical_convolution():
    # the default output then a Gaussian line stage: the held samples' Bessel output (closed
    # form) convolved with the Gaussian's impulse response (a normal density, sigma as in
    # tests/helpers.py) by quadrature (Gauss-Legendre, 8 nodes on each of 100 panels over
    # +-10 sigma: 3e-3 Hz from an adaptive scipy.integrate.quad_vec), against the project's
    # output at the resolution it claims: its step response moves by at most `resolution`
    # when its grid is halved, and a held input is a sum of steps, so the output may be off
    # by resolution x the input's total variation (measured: 290 Hz of 2.4e8, bound 3600)
    from scipy.special import roots_legendre
    from scipy.stats import norm

    recipe = _recipe(line={"q0": [{"kind": "gaussian", "cutoff": "0.9 GHz"}]})
    samples, values, times, chain = _project_output(recipe, _random_wave())
    period = 1 / 2.5e9
    bessel = bessel_step(4, 1e9)
    sigma = np.sqrt(np.log(2.0)) / (2 * np.pi * 0.9e9)
    x, w = roots_legendre(8)
    edges = np.linspace(-10 * sigma, 10 * sigma, 101)
    half = (edges[1] - edges[0]) / 2
    reference = np.zeros_like(values)
    for left in edges[:-1]:
        v = left + half * (x + 1)
        shifted = held_output(bessel, samples, period, np.subtract.outer(times, v).ravel())
        reference += np.einsum("j,tjc->tc", half * w * norm.pdf(v, scale=sigma),
                               shifted.reshape(len(times), len(v), -1))
    resolution = chain.resolution(len(samples))
    variation = np.abs(np.diff(samples, axis=0, prepend=0, append=0)).sum(axis=0)
    error = np.max(np.abs(values - reference), axis=0)
    assert 0 < resolution < 1e-5
    assert np.all(error <= resolution * variation), (error, resolution * variation)


# -- 2. the lab frame on the continuous output ------------------------------------------

SHORT = tomllib.loads((ROOT / "recipes" / "short-x180.toml").read_text())


def _short_recipe(phase_deg, **sections):
    """The bundled 8 ns pi pulse's recipe (5.1 GHz, -220 MHz, 5 levels, 2.5 GS/s) on the
    Duffing ladder, judged at a fixed carrier phase on its own levels."""
    raw = {**SHORT, "system": {**SHORT["system"], "spectrum": "duffing"},
           "verdict": {"carrier_phase_deg": phase_deg, "extra_levels": 0}, **sections}
    return load_recipe(raw)


def _figures(u, target, comp=(0, 1)):
    comp = list(comp)
    return 1 - pedersen_fidelity(u[np.ix_(comp, comp)], target), subspace_leakage(u, comp)


def _duffing_played(levels, samples, rate, filters, end_s, phase_rad, **kw):
    static, drive, n = duffing_lab(levels, 5.1e9, -220e6)
    return lab_frame_played(static, [(drive, 5.1e9, 0, 1)], 5.1e9, n, samples, rate,
                            filters, end_s, phase_rad=phase_rad, **kw)


BESSEL_1GHZ = lowpass_ss("bessel", 4, 1e9)
LINE_1GHZ = {"q0": [{"kind": "bessel", "order": 4, "cutoff": "1 GHz"}]}


@pytest.mark.parametrize("awg, phases", [(None, (0.0, 60.0)), ("none", (135.0,))])
def test_issue_case_a_through_a_1ghz_line_against_solve_ivp_with_the_tail(awg, phases):
    # issue 30, "Done when": the bundled 8 ns pi pulse with a 1 GHz 4th-order Bessel [line]
    # (after the default [awg] output, a 4th-order Bessel at 0.4 f_s = 1 GHz, or with
    # [awg] filter = "none" to isolate the line), judged at the default settings at fixed
    # carrier phases, against our integration of the lab-frame Duffing Hamiltonian
    # (README "Conventions"; Koch et al., Phys. Rev. A 76, 042319 (2007)) driven by our own
    # filters' continuous output of the file's held samples, to the end of the ring-down.
    # The issue's bound is 20 %; measured: 5e-8 relative (1.07e-6 and 2.97e-7 here: this
    # file was optimised without the line; the issue's 9.9e-6 is another file, re-optimised
    # with the line in the loop).
    wave = read_waveform(ROOT / "results" / "short-x180" / "short-x180.csv")
    extra = {} if awg is None else {"awg": {"filter": awg}}
    stages = [BESSEL_1GHZ] if awg == "none" else [BESSEL_1GHZ, BESSEL_1GHZ]
    filters = [cascade_ss(*stages)] * 2
    for degrees in phases:
        play = Playback(_short_recipe(degrees, line=LINE_1GHZ, **extra), wave)
        out = play.output_block()
        assert out["awg"]["assumed"] is (awg is None)
        assert out["ring_down_s"] > 0 and out["settled"]
        ends = [out["footprint_s"], out["footprint_s"] + 4e-9]  # and on: unchanged?
        units = _duffing_played(5, wave.to_hz(play.recipe.system), 2.5e9, filters, ends,
                                np.radians(degrees))
        ours, longer = _figures(units[0], X), _figures(units[1], X)
        # the footprint holds the tail: playing on changes the figure by well under the
        # target (measured: 1e-11 against 1e-5)
        assert abs(longer[0] - ours[0]) < 0.01 * play.recipe.optimizer.target_infidelity
        lab = play.lab
        assert lab.infidelity == pytest.approx(ours[0], rel=0.2)  # the issue's bound
        # what the verdict's convergence figure claims, with room for our 1e-12 tolerance
        assert abs(lab.infidelity - ours[0]) < 1e-9 + 10 * lab.convergence, (lab, ours)
        assert abs(lab.leakage - ours[1]) < 1e-9 + 10 * lab.convergence


def test_staircase_against_held_sample_integration():
    # [awg] filter = "none": the ideal staircase the lab frame used to see, against our
    # integration of the held samples (no filter states). The staircase's counter-rotating
    # error follows the steps: far above what the filtered output of the same file gives
    # (CONVENTIONS section 9: 4.8e-5 against 1.5e-7 for the file of that time).
    wave = read_waveform(ROOT / "results" / "short-x180" / "short-x180.csv")
    for degrees in (0.0, 90.0):
        play = Playback(_short_recipe(degrees, awg={"filter": "none"}), wave)
        out = play.output_block()
        assert out["ring_down_s"] == 0 and out["footprint_s"] == pytest.approx(8e-9)
        assert out["awg"]["filter"] == "none"
        samples = wave.to_hz(play.recipe.system)
        ours = _figures(_duffing_played(5, samples, 2.5e9, [None, None], 8e-9,
                                        np.radians(degrees)), X)
        assert abs(play.lab.infidelity - ours[0]) < 1e-10, (play.lab, ours)
        assert abs(play.lab.leakage - ours[1]) < 1e-10
    # the trust block's staircase bound of the default output, at its judged phase (fixed)
    play = Playback(_short_recipe(90.0), wave)
    assert play.staircase.infidelity == pytest.approx(ours[0], abs=1e-10)
    assert play.staircase.infidelity > play.lab.infidelity  # the steps add error


# -- 3. a settling flux line and its tail ------------------------------------------------

FLUX = {
    # one made-up Duffing transmon with a drive and a flux line; the flux line settles with
    # two terms as labs fit a step response (the bundled cz-line's first term, a shorter
    # second one to keep the test quick); targets of an ordinary single-qubit gate
    "name": "flux-tail",
    "system": {"model": "transmons", "transmon": [
        {"name": "q0", "levels": 2, "qubit_frequency": "5.1 GHz", "anharmonicity": "-220 MHz",
         "spectrum": "duffing", "flux": True}]},
    "gate": {"target": "Y"},
    "pulse": {"duration": "18 ns", "sample_rate": "2 GS/s", "max_rabi": "100 MHz",
              "max_flux": "300 MHz"},
    "line": {"q0_flux": [{"kind": "exponential", "amplitudes": [0.04, -0.015],
                          "time_constants": ["6 ns", "20 ns"]}]},
}


def _flux_wave(flux_first=False):
    """A Gaussian pi pulse about x (20 samples, area 1/2: the Rabi formula of README
    "Conventions") and a sin^2 flux pulse (12 samples) of area 1/2: the flux term u(t) n
    turns |1> by 2 pi x 1/2, a Z, and Z X = i Y (the target), once the flux line has played
    to its end (the DC gain of every stage is 1). The flux pulse after the drive (its tail
    then only adds to the Z: the figure checks its area to the end of the footprint), or
    first (the drive then plays in the flux tail, X Z = -i Y: the figure checks its
    shape)."""
    rate, n = 2e9, 36
    k = np.arange(n)
    first, second = (0, 14) if flux_first else (22, 0)
    drive = np.exp(-0.5 * ((k - second - 9.5) / 5.0) ** 2) * (k > second) * (k < second + 19)
    drive *= 0.5 * rate / drive.sum()
    flux = np.sin(np.pi * (k - first + 1) / 13) ** 2 * (k >= first) * (k < first + 12)
    flux *= 0.5 * rate / flux.sum()
    fractions = np.stack([drive / 100e6, np.zeros(n), flux / 300e6], axis=1)
    return Waveform(fractions, rate, {"q0": 100e6, "q0_flux": 300e6},
                    ("q0_i", "q0_q", "q0_flux"))


def test_settling_flux_line_and_its_tail_against_solve_ivp():
    # the judged figures (rotating frame, and lab frame at a fixed carrier phase) against our
    # integration of the lab-frame Duffing transmon with its flux term u(t) n (README
    # "[system]"), every channel through the default output (4th-order Bessel at 0.4 f_s)
    # and the flux channel then through the settling terms (their step response
    # 1 + sum A_k exp(-t / tau_k), README "[line]"), to the end of the reported footprint
    degrees = 30.0
    recipe = load_recipe({**FLUX, "verdict": {"carrier_phase_deg": degrees,
                                              "extra_levels": 0}})
    static, drive, n = duffing_lab(2, 5.1e9, -220e6)
    output = lowpass_ss("bessel", 4, 0.8e9)
    flux = cascade_ss(output, settling_ss([0.04, -0.015], [6e-9, 20e-9]))
    channels = [(drive, 5.1e9, 0, 1), (np.diag(n).astype(complex), None, 2, None)]

    def ours(wave, ends, rwa=False):
        units = lab_frame_played(static, channels, 5.1e9, n, wave.to_hz(recipe.system), 2e9,
                                 [output, output, flux], ends,
                                 phase_rad=np.radians(degrees), rwa=rwa)
        return [_figures(u, Y) for u in units]

    # the flux pulse after the drive: its tail must be played to the end
    wave = _flux_wave()
    play = Playback(recipe, wave)
    out = play.output_block()
    assert out["settled"] and out["ring_down_s"] > 5 * 20e-9  # tens of ns of tail
    cut, lab, longer = ours(wave, [18e-9, out["footprint_s"], out["footprint_s"] + 50e-9])
    (rotating,) = ours(wave, [out["footprint_s"]], rwa=True)
    # measured: rotating 1.8e-11 both; lab 8.768e-6 both (the Bloch-Siegert shift of the
    # drive, Bloch and Siegert 1940, as a Z error); cut at the last sample 1.7e-4
    assert abs(play.nominal.infidelity - rotating[0]) < 1e-12
    assert abs(play.lab.infidelity - lab[0]) < 1e-10 + 10 * play.lab.convergence
    assert play.lab.infidelity == pytest.approx(lab[0], rel=1e-4)
    target = recipe.optimizer.target_infidelity
    assert cut[0] > 10 * target  # the tail matters ...
    assert abs(longer[0] - lab[0]) < 0.01 * target  # ... and the footprint holds it
    # the flux pulse first: the drive plays while the tail settles (its shape matters)
    wave = _flux_wave(flux_first=True)
    play = Playback(recipe, wave)
    footprint = play.output_block()["footprint_s"]
    (lab,) = ours(wave, [footprint])
    (rotating,) = ours(wave, [footprint], rwa=True)
    assert play.nominal.infidelity == pytest.approx(rotating[0], rel=1e-6)
    assert play.lab.infidelity == pytest.approx(lab[0], rel=1e-6)
    assert play.nominal.leakage == pytest.approx(rotating[1], abs=1e-12)


# -- 4. the worst carrier phase -------------------------------------------------------------

PHASES_64 = tuple(np.pi * np.arange(64) / 64)  # half a turn: the figures have period pi


def _scan(play):
    """The project's exact lab frame (the verdict's own wiring, `Playback.staircase` runs
    it the same way) at 64 fixed carrier phases over half a turn: (infidelity per phase)."""
    return np.asarray(play._lab(awg=True, phases=PHASES_64).infidelities)


def test_worst_phase_of_the_bundled_short_pulse_and_its_second_order_model():
    # issue 30, "Done when": the judged worst within 5 % of a 64-phase scan, here on the
    # issue's own file as bundled (its recipe's defaults: the charge model, 2 more levels,
    # the default output). The other bundled files are in the report of this test's commit.
    recipe = load_recipe(ROOT / "recipes" / "short-x180.toml")
    play = Playback(recipe, read_waveform(ROOT / "results" / "short-x180" / "short-x180.csv"))
    scan = _scan(play)
    assert play.lab.infidelity == pytest.approx(scan.max(), rel=0.05)
    # the second-order model (trust.second_order, the optimiser's "corrected") at the same
    # 64 phases against the exact lab frame, within a hundredth of the recipe's target at
    # every phase (what the phase search needs of it; measured 1.7e-8 on the file made
    # without it, 1.3e-8 on the file made with it: the third-order Omega^3 / f^2 remains)
    corrected = play.corrected
    assert np.allclose(corrected["phases_rad"], PHASES_64)
    assert np.max(np.abs(corrected["figures"][:, 0] - scan)) < \
        0.01 * recipe.optimizer.target_infidelity
    block = play.trust_block()["second_order"]
    assert block["infidelity"] == pytest.approx(corrected["figures"][:, 0].max(), rel=1e-12)


def _staircase_two_level(degrees=None):
    """Our own case where the phase matters: a two-level system (5 GHz) driven by an ideal
    staircase ([awg] filter = "none") of 12 held samples of 100 MHz at 2.4 GS/s (a pi
    pulse by the Rabi formula, README "Conventions")."""
    verdict = {"extra_levels": 0}
    if degrees is not None:
        verdict["carrier_phase_deg"] = degrees
    recipe = load_recipe({
        "name": "phase", "system": {"model": "transmon", "levels": 2,
                                    "qubit_frequency": "5 GHz", "anharmonicity": "-220 MHz",
                                    "spectrum": "duffing"},
        "gate": {"target": "X"},
        "pulse": {"duration": "5 ns", "sample_rate": "2.4 GS/s", "max_rabi": "100 MHz"},
        "awg": {"filter": "none"}, "verdict": verdict})
    wave = Waveform(np.tile([1.0, 0.0], (12, 1)), 2.4e9, {"q0": 100e6}, ("q0_i", "q0_q"))
    return Playback(recipe, wave)


def test_worst_phase_where_the_phase_matters():
    # the figure moves 9x with the carrier phase (1.67e-5 .. 1.50e-4, peaked at pi/2): the
    # judged worst within 5 % of the 64-phase scan, whose peak our own solve_ivp
    # integration confirms
    play = _staircase_two_level()
    scan = _scan(play)
    assert scan.max() > 5 * scan.min()
    assert play.lab.infidelity == pytest.approx(scan.max(), rel=0.05)
    static, drive, n = duffing_lab(2, 5e9, -220e6)
    peak = PHASES_64[int(np.argmax(scan))]
    ours = _figures(lab_frame_played(static, [(drive, 5e9, 0, 1)], 5e9, n,
                                     play.samples, 2.4e9, [None, None], 5e-9,
                                     phase_rad=peak), X)
    assert scan.max() == pytest.approx(ours[0], rel=1e-3)


def test_second_order_model_holds_or_says_so_on_a_staircase():
    # the second-order model (Playback.corrected, the report's trust.second_order, the
    # optimiser's lab_frame = "corrected") either agrees with the exact lab frame at the
    # same phases (to 10 %: it is a second-order expansion in Omega / f_q = 0.02) or is
    # None ("the correction does not hold", its docstring). Measured: 0.444 at every phase
    # where the exact lab frame (and our solve_ivp) gives 1.7e-5 .. 1.5e-4.
    play = _staircase_two_level()
    corrected = play.corrected
    if corrected is not None:
        scan = _scan(play)
        np.testing.assert_allclose(corrected["figures"][:, 0], scan, rtol=0.1)


# -- 5. the second-order model: Bloch-Siegert and a coupled pair -------------------------


def _bloch_siegert_vertex(figure, offsets):
    """The drive frequency (offset from f_q) where a figure is least: a parabola's vertex."""
    a, b, _ = np.polyfit(offsets, figure, 2)
    return -b / (2 * a)


def _rotating_with_shift(samples, rate, end_s, f_q, shift=True):
    """Our reference for the second-order model on two levels: the rotating-wave model of
    README "Conventions" (<1|H|0> = (I + iQ) / 2) plus the Bloch-Siegert shift of the level
    |1> by |Omega(t)|^2 / (4 f_q) (Bloch and Siegert, Phys. Rev. 57, 522 (1940)), with
    Omega(t) = I(t) + i Q(t) the held samples through the default output (a 4th-order
    Bessel at 0.4 f_s, its state space integrated alongside by solve_ivp, DOP853).
    Returns 1 - |<1|U|0>|^2. Times in ns, frequencies in GHz inside."""
    from scipy.integrate import solve_ivp

    a, b, c, _ = lowpass_ss("bessel", 4, 0.4 * rate)
    f = f_q * 1e-9

    def rhs(t, y, held):
        envelope = (c @ y[2:6].real)[0] + 1j * (c @ y[6:10].real)[0]  # GHz
        h = np.array([[0, np.conj(envelope) / 2],
                      [envelope / 2, abs(envelope) ** 2 / (4 * f) if shift else 0.0]])
        out = np.empty_like(y)
        out[:2] = -2j * np.pi * h @ y[:2]
        out[2:6] = a @ y[2:6].real + b[:, 0] * held[0]
        out[6:10] = a @ y[6:10].real + b[:, 0] * held[1]
        return out
    y = np.zeros(10, complex)
    y[0] = 1
    edges = [*(np.arange(len(samples) + 1) * 1e9 / rate), end_s * 1e9]
    for k, (start, stop) in enumerate(zip(edges[:-1], edges[1:], strict=True)):
        held = samples[k] * 1e-9 if k < len(samples) else np.zeros(2)
        y = solve_ivp(rhs, (start, stop), y, args=(held,), method="DOP853", rtol=1e-11,
                      atol=1e-13).y[:, -1]
    return 1 - abs(y[1]) ** 2


def test_second_order_model_reproduces_the_bloch_siegert_shift():
    # Bloch and Siegert, Phys. Rev. 57, 522 (1940): a linearly polarised drive of Rabi
    # frequency Omega shifts a two-level resonance up by Omega^2 / (4 f_q) (8 MHz for 400
    # MHz on 5 GHz). A held 400 MHz drive (a 5 pi rotation) through the default output,
    # detuned by s from the qubit by turning its I/Q phase (-2 pi s t at each sample's
    # middle); with virtual Z the figure depends only on the transfer |<1|U|0>|, least
    # where the drive sits on the shifted resonance. The second-order model's vertex (the
    # mean over its 64 phases, where the phase-dependent kicks average out) against our
    # rotating-wave model with the shift |Omega(t)|^2 / (4 f_q) of the played envelope:
    # measured 9.0187 MHz both (the Bessel's edges, where the shift is smaller, move it
    # from 8 MHz; our exact lab-frame solve_ivp: 8.99 MHz); without the shift our model's
    # vertex is at 0.
    f_q, omega, rate, n = 5.0e9, 400e6, 2.4e9, 15
    shift = omega ** 2 / (4 * f_q)
    recipe = load_recipe({
        "name": "bloch-siegert",
        "system": {"model": "transmon", "levels": 2, "qubit_frequency": f_q,
                   "anharmonicity": "-220 MHz", "spectrum": "duffing"},
        "gate": {"target": "X", "virtual_z": True},
        "pulse": {"duration": n / rate, "sample_rate": rate, "max_rabi": omega},
        "verdict": {"extra_levels": 0}})
    offsets = shift + np.array([-3e6, 0.0, 3e6])
    figures, ours, unshifted = [], [], []
    for offset in offsets:
        turn = -2 * np.pi * offset * (np.arange(n) + 0.5) / rate
        wave = Waveform(np.stack([np.cos(turn), np.sin(turn)], axis=1), rate,
                        {"q0": omega}, ("q0_i", "q0_q"))
        play = Playback(recipe, wave)
        figures.append(play.corrected["figures"][:, 0].mean())
        end = play.output_block()["footprint_s"]
        samples = wave.to_hz(recipe.system)
        ours.append(_rotating_with_shift(samples, rate, end, f_q))
        unshifted.append(_rotating_with_shift(samples, rate, end, f_q, shift=False))
    vertex = _bloch_siegert_vertex(figures, offsets)
    expected = _bloch_siegert_vertex(ours, offsets)
    assert abs(_bloch_siegert_vertex(unshifted, offsets)) < 0.05 * shift
    assert 0.8 * shift < expected < 1.25 * shift
    assert vertex == pytest.approx(expected, rel=0.01), (vertex, expected, shift)


def test_optimiser_in_the_second_order_model_removes_the_bloch_siegert_error():
    # optimizer.lab_frame = "corrected": a 4 ns pi pulse on a two-level system (5 GHz, up to
    # 300 MHz, 2 GS/s, the default output) optimised in the rotating frame ("off") misses
    # in the lab frame by the Bloch-Siegert shift Omega^2 / (4 f_q) it does not know (Bloch
    # and Siegert, Phys. Rev. 57, 522 (1940)); optimised in the second-order model it
    # holds. Both judged by our own solve_ivp of the lab frame through our Bessel, to 3 ns
    # after the file, at one carrier phase (measured: 6.8e-5 and 3.5e-9 at every phase).
    from shaper import optimize

    static, drive, n = duffing_lab(2, 5e9, -220e6)
    output = lowpass_ss("bessel", 4, 0.8e9)
    worst = {}
    for mode in ("off", "corrected"):
        result = optimize({
            "name": "second-order", "system": {
                "model": "transmon", "levels": 2, "qubit_frequency": "5 GHz",
                "anharmonicity": "-220 MHz", "spectrum": "duffing"},
            "gate": {"target": "X"},
            "pulse": {"duration": "4 ns", "sample_rate": "2 GS/s", "max_rabi": "300 MHz"},
            "optimizer": {"lab_frame": mode, "escalate": False},
            "verdict": {"extra_levels": 0}})
        worst[mode] = max(_figures(lab_frame_played(
            static, [(drive, 5e9, 0, 1)], 5e9, n, result.samples, 2e9, [output, output],
            len(result.samples) / 2e9 + 3e-9, phase_rad=phase), X)[0]
            for phase in (0.0,))
    assert worst["off"] > 1e-5
    assert worst["corrected"] < 1e-7, worst


def test_second_order_model_on_a_coupled_pair_against_the_exact_lab_frame():
    # two coupled Duffing transmons (charge coupling g D_a D_b, README "[system]"; dressed
    # basis), a 12 ns pi pulse on the first through the default output: the second-order
    # model's per-phase figures against the exact lab frame at the same phases (the exact
    # one checked against solve_ivp above and in tests/test_labframe.py). Judged on what
    # the counter-rotating terms add to the rotating frame (measured 3.7e-6 .. 4.9e-6,
    # moving with the phase; the second-order model within 2e-8 of it)
    recipe = load_recipe({
        "name": "pair", "system": {
            "model": "transmons", "basis": "dressed",
            "transmon": [{"name": "qa", "levels": 2, "qubit_frequency": "5.0 GHz",
                          "anharmonicity": "-220 MHz", "spectrum": "duffing"},
                         {"name": "qb", "levels": 3, "qubit_frequency": "5.4 GHz",
                          "anharmonicity": "-210 MHz", "spectrum": "duffing"}],
            "coupling": [{"between": ["qa", "qb"], "strength": "3 MHz"}]},
        "gate": {"target": "X", "on": ["qa"], "virtual_z": True},
        "pulse": {"duration": "12 ns", "sample_rate": "2.5 GS/s", "max_rabi": "200 MHz"},
        "verdict": {"extra_levels": 0}})
    k = np.arange(30)
    drive = np.sin(np.pi * (k + 0.5) / 30) ** 2
    drive *= 0.5 * 2.5e9 / drive.sum() / 200e6
    fractions = np.zeros((30, 4))
    fractions[:, 0] = drive
    names = recipe.system.control_names
    wave = Waveform(fractions, 2.5e9, {"qa": 200e6, "qb": 200e6}, tuple(names))
    play = Playback(recipe, wave)
    corrected = play.corrected
    picked = corrected["phases_rad"][::32]
    exact = np.asarray(play._lab(awg=True, phases=tuple(picked)).infidelities)
    added = exact - play.nominal.infidelity
    assert np.all(np.abs(added) > 1e-6)
    assert np.all(np.abs(corrected["figures"][::32, 0] - exact) < 0.05 * np.abs(added))


# -- 6. the ordinary transmon of issue 30: the kept file, checked independently ----------


def test_ordinary_transmon_sweep_keeps_a_file_that_meets_its_targets_on_the_chip():
    # results/ordinary-x180-sweep/shortest: the file the sweep kept, played through the
    # output filter its report states (trust.output.awg) on our own charge-model transmon
    # (Koch et al. 2007, tests/helpers.py; E_J, E_C as the report's system_model) with the
    # verdict's levels, in the lab frame to the end of the stated footprint: it meets the
    # recipe's targets at the judged worst phase and a quarter turn on, and agrees with the
    # report's judged figure
    import json

    folder = ROOT / "results" / "ordinary-x180-sweep" / "shortest"
    report = json.loads((folder / "report.json").read_text())
    recipe = load_recipe(ROOT / "recipes" / "ordinary-x180.toml")
    wave = read_waveform(folder / "ordinary-x180.csv")
    trust = report["trust"]
    awg = trust["output"]["awg"]
    assert awg["kind"] == "bessel" and awg["order"] == 4
    assert awg["cutoff_hz"] == pytest.approx(0.4 * 2e9)  # the default, said as assumed
    levels = trust["lab_frame"]["levels"][0]
    ej, ec, energies, drive = charge_transmon(levels, 4.37e9, -262e6)
    assert ej == pytest.approx(report["system_model"]["transmons"]["q0"]["ej_hz"], rel=1e-9)
    assert ec == pytest.approx(report["system_model"]["transmons"]["q0"]["ec_hz"], rel=1e-9)
    output = lowpass_ss(awg["kind"], awg["order"], awg["cutoff_hz"])
    worst = trust["lab_frame"]["worst_phase_rad"]
    for phase in (worst, worst + np.pi / 2):
        u = lab_frame_played(np.diag(energies).astype(complex), [(drive, 4.37e9, 0, 1)],
                             4.37e9, np.arange(levels), wave.to_hz(recipe.system), 2e9,
                             [output, output], trust["output"]["footprint_s"],
                             phase_rad=phase)
        infidelity, leakage = _figures(u, X)
        assert infidelity <= report["targets"]["infidelity"]
        assert leakage <= report["targets"]["leakage"]
        if phase == worst:  # the report's worst infidelity; its leakage is the worst of
            # its own (here at another phase), so compare the leakage at this phase
            lab = trust["lab_frame"]
            at = lab["phases_rad"].index(worst)
            assert infidelity == pytest.approx(trust["infidelity"], rel=1e-3, abs=1e-11)
            assert leakage == pytest.approx(lab["leakage_per_phase"][at], rel=1e-3,
                                            abs=1e-11)
