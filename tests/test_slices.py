"""The propagator's slices where the output changes inside them: each slice's mean and
its slope (shaper.signal.chain.Chain.cells) with the fourth-order Magnus term
(shaper.physics.propagator.slope_term), against scipy's solve_ivp.

The fourth-order Magnus integrator in the moments of the Hamiltonian is from Blanes,
Casas and Ros, BIT 40, 434 (2000), and the review of Blanes, Casas, Oteo and Ros,
Phys. Rep. 470, 151 (2009), section 5 (citations from memory; the tests below check the
formula against direct integration, not against the papers).
"""

from __future__ import annotations

import tomllib

import numpy as np
import pytest
from helpers import ROOT, duffing_lab, lab_frame_played, lowpass_ss, subspace_leakage
from scipy.integrate import solve_ivp

from shaper.io.waveio import read_waveform
from shaper.jobs.playback import Playback
from shaper.physics.propagator import propagate
from shaper.physics.simulation import simulate
from shaper.recipe import load_recipe


def _ladder(levels=4, alpha=-0.3e9, frame_offset=-0.5e9):
    """A Duffing ladder (Koch et al., Phys. Rev. A 76, 042319 (2007)) in a frame
    ``frame_offset`` from its qubit: transitions reach GHz from the frame."""
    n = np.arange(levels)
    drift = np.diag(frame_offset * n + 0.5 * alpha * n * (n - 1)).astype(complex)
    a = np.diag(np.sqrt(np.arange(1, levels)), 1)
    return drift, np.stack([(a + a.T) / 2, 1j * (a.T - a) / 2]).astype(complex)


def _drive(t):
    """A smooth two-quadrature drive, Hz, with content near the transitions."""
    return np.stack([80e6 * np.sin(np.pi * t / 6e-9) ** 2 * np.cos(2 * np.pi * 0.7e9 * t),
                     40e6 * np.sin(2 * np.pi * t / 6e-9) * np.sin(2 * np.pi * 0.4e9 * t)],
                    axis=-1)


def _cells(slices, total=6e-9, points=64):
    """Each slice's exact mean and least-squares slope of :func:`_drive` (Gauss-Legendre
    quadrature, numpy's nodes: exact to rounding for this smooth drive)."""
    h = total / slices
    x, w = np.polynomial.legendre.leggauss(points)  # on [-1, 1]
    t = (np.arange(slices)[:, None] + 0.5) * h + 0.5 * h * x[None, :]
    v = _drive(t)  # (slices, points, 2)
    means = 0.5 * np.einsum("p,spk->sk", w, v)
    slopes = 0.5 * np.einsum("p,spk->sk", w * x * (0.5 * h), v) * 12 / h ** 2
    return means, slopes, h


def _reference(drift, controls, total=6e-9):
    def rhs(t, y):
        h = drift + np.einsum("k,kij->ij", _drive(t), controls)
        return (-2j * np.pi * h @ y.reshape(drift.shape)).reshape(-1)
    y0 = np.eye(drift.shape[0], dtype=complex).reshape(-1)
    out = solve_ivp(rhs, (0, total), y0, method="DOP853", rtol=1e-12, atol=1e-12)
    return out.y[:, -1].reshape(drift.shape)


def test_slopes_make_the_slices_fourth_order_against_solve_ivp():
    drift, controls = _ladder()
    exact = _reference(drift, controls)
    errors = {}
    for slices in (15, 30, 60):
        means, slopes, h = _cells(slices)
        with_slopes = np.asarray(propagate(drift, controls, means, h, slopes=slopes))
        held = np.asarray(propagate(drift, controls, means, h))
        errors[slices] = (np.linalg.norm(with_slopes - exact, 2),
                          np.linalg.norm(held - exact, 2))
    for coarse, fine in ((15, 30), (30, 60)):
        # fourth order with the slopes (x16 per halving), second order held (x4)
        assert errors[coarse][0] / errors[fine][0] == pytest.approx(16, rel=0.25)
        assert errors[coarse][1] / errors[fine][1] == pytest.approx(4, rel=0.25)
    # measured: 15 slices (0.4 ns; transitions reach 2 GHz from the frame) with the slopes
    # 1.7e-2, held 1.4e-1; 60 slices 7.1e-5 against 9.1e-3
    assert errors[15][0] < errors[15][1] / 5
    assert errors[60][0] < errors[60][1] / 100


def test_a_staircase_has_no_slopes_and_a_line_slopes_from_its_halves():
    short = tomllib.loads((ROOT / "recipes" / "short-x180.toml").read_text())
    wave = read_waveform(ROOT / "results" / "short-x180" / "short-x180.csv")
    for awg in ("none", "bessel"):
        play = Playback(load_recipe({**short, "awg": {"filter": awg}}), wave)
        chain, samples = play.chain, play.samples
        means, slopes = chain.cells(samples)
        # the slice's mean is the mean of its halves' (each an exact cell mean)
        np.testing.assert_allclose(means, chain(samples), atol=1e-9 * np.abs(means).max())
        if awg == "none":  # held whole samples: nothing changes inside a slice
            assert slopes is None
        else:
            halves = chain.finer(2)(samples)
            np.testing.assert_allclose(slopes * chain.dt_s / 2, halves[1::2] - halves[0::2])
            assert np.abs(slopes).max() > 0


def test_the_optimisers_own_figure_through_the_output_filter_against_solve_ivp():
    # the bundled 8 ns pi pulse (5 levels, transitions to 0.9 GHz from the frame) through
    # the default output (4th-order Bessel at 0.4 f_s), at the optimiser's 2 slices per
    # sample, against our integration of the rotating-frame Duffing ladder driven by the
    # filter's continuous output (tests/helpers.py lab_frame_played, rwa: scipy DOP853)
    short = tomllib.loads((ROOT / "recipes" / "short-x180.toml").read_text())
    raw = {**short, "system": {**short["system"], "spectrum": "duffing"},
           "verdict": {"extra_levels": 0, "lab_frame": "off"}}
    recipe = load_recipe(raw)
    wave = read_waveform(ROOT / "results" / "short-x180" / "short-x180.csv")
    play = Playback(recipe, wave)
    chain = play.chain
    assert chain.steps == 2
    static, drive, n = duffing_lab(5, 5.1e9, -220e6)
    output = lowpass_ss("bessel", 4, 0.4 * 2.5e9)
    (ref,) = lab_frame_played(static, [(drive, 5.1e9, 0, 1)], 5.1e9, n,
                              wave.to_hz(recipe.system), 2.5e9, [output, output],
                              [play.output_block()["footprint_s"]], rwa=True)
    own = play.played(extrapolate=False).unitary  # what the optimiser sees
    means, _ = chain.cells(play.samples)
    held = simulate(recipe.system, recipe.target, means, chain.dt_s).unitary
    worst = {name: np.max(np.abs(np.abs(u) ** 2 - np.abs(ref) ** 2))
             for name, u in (("own", own), ("held", held), ("judged", play.nominal.unitary))}
    # measured: own 1.1e-5, held (the means alone) 4.8e-4, judged (extrapolated) 6.5e-7
    assert worst["own"] < worst["held"] / 20
    assert worst["judged"] < 5e-6
    leak = subspace_leakage(ref, [0, 1])
    assert subspace_leakage(own, [0, 1]) == pytest.approx(leak, rel=0.01)
