"""The charge-model transmon (README, "The charge model").

References: Koch et al., Phys. Rev. A 76, 042319 (2007): the Cooper-pair box Hamiltonian
(eq. 2.1), its exact levels as Mathieu characteristic values (eq. 2.6, through
scipy.special), the asymptotic f01 ~ sqrt(8 E_J E_C) - E_C and alpha ~ -E_C, and the
charge dispersion's asymptotic formula (eq. 2.18).
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
import scipy.special
from helpers import ROOT, expm_product, pedersen_fidelity, subspace_leakage

from shaper.errors import RecipeError
from shaper.io.waveio import read_waveform
from shaper.jobs.playback import Playback
from shaper.physics import charge
from shaper.physics.transmons import TransmonSpec, coupled_transmons
from shaper.recipe import load_recipe


def _box(ej, ec, ng=0.0, charges=40):
    """The Cooper-pair box written out here (Koch et al. eq. 2.1), numpy's eigh."""
    n = np.arange(-charges, charges + 1)
    h = np.diag(4 * ec * (n - ng) ** 2) - ej / 2 * (np.eye(n.size, k=1) + np.eye(n.size, k=-1))
    w, v = np.linalg.eigh(h)
    return w - w[0], v, np.diag(n.astype(float))


def test_levels_are_mathieu_characteristic_values():
    # Koch et al. eq. 2.6 at n_g = 0: E = E_C x {a_0, a_2, b_2, a_4, b_4, ...}(q = E_J/2E_C)
    # (the pi-periodic Mathieu solutions; a and b of even order do not depend on q's sign)
    ej, ec = charge.fit(5.1e9, -220e6)
    q = ej / (2 * ec)
    values = sorted([scipy.special.mathieu_a(2 * k, q) for k in range(4)]
                    + [scipy.special.mathieu_b(2 * k, q) for k in range(1, 4)])
    exact = (np.array(values) - values[0]) * ec
    ours = charge.levels(ej, ec, 6).energies_hz
    assert np.allclose(ours, exact[:6], rtol=0, atol=1e-6 * 5.1e9)


def test_fit_gives_back_the_frequencies_and_the_asymptotic_formulas():
    ej, ec = charge.fit(5.1e9, -220e6)
    e = charge.levels(ej, ec, 3).energies_hz
    assert e[1] == pytest.approx(5.1e9, rel=1e-12)
    assert e[2] - 2 * e[1] == pytest.approx(-220e6, rel=1e-9)
    # Koch et al.: f01 ~ sqrt(8 E_J E_C) - E_C and alpha ~ -E_C for E_J/E_C >> 1 (here 88)
    assert math.sqrt(8 * ej * ec) - ec == pytest.approx(5.1e9, rel=2e-3)
    assert ec == pytest.approx(220e6, rel=0.12)
    assert 80 < ej / ec < 95  # E_J/E_C = 89 for these numbers (README's conventions note)


def test_charge_matrix_elements_against_a_diagonalisation_written_here():
    ej, ec = charge.fit(5.1e9, -220e6)
    ours = charge.levels(ej, ec, 4)
    w, v, n = _box(ej, ec)
    matrix = v[:, :4].T @ n @ v[:, :4]
    # equal up to the sign convention of each eigenvector
    assert np.allclose(np.abs(ours.charge_matrix), np.abs(matrix), atol=1e-9)
    # n12/n01 below the harmonic sqrt 2 (1.383 at E_J/E_C = 89, from memory of Koch et al.
    # Fig. 6's trend; computed here by the independent diagonalisation above)
    assert abs(matrix[1, 2] / matrix[0, 1]) == pytest.approx(abs(ours.drive_operator[1, 2]),
                                                             rel=1e-9)
    assert 1.37 < abs(ours.drive_operator[1, 2]) < 1.40
    assert abs(ours.drive_operator[0, 3]) > 1e-3  # n03: small but not zero


@pytest.mark.parametrize("ratio", [30.0, 50.0])
def test_charge_dispersion_follows_the_asymptotic_formula(ratio):
    # Koch et al. eq. 2.18: eps_m = (-1)^m E_C 2^(4m+5)/m! sqrt(2/pi) (E_J/2E_C)^(m/2+3/4)
    # exp(-sqrt(8 E_J/E_C)), the peak-to-peak change of level m from n_g = 0 to 1/2
    # (asymptotic: within 6 % for the ground state at these ratios, closer as they grow)
    ec = 200e6
    ej = ratio * ec
    ground = [charge.levels(ej, ec, 2, offset_charge=ng) for ng in (0.0, 0.5)]
    box = [_box(ej, ec, ng) for ng in (0.0, 0.5)]
    formula = ec * 2 ** 5 * math.sqrt(2 / math.pi) * (ej / (2 * ec)) ** 0.75 * \
        math.exp(-math.sqrt(8 * ej / ec))
    absolute = [np.linalg.eigvalsh(charge.charge_hamiltonian(ej, ec, ng, 40))[0]
                for ng in (0.0, 0.5)]
    assert absolute[1] - absolute[0] == pytest.approx(formula, rel=0.08)
    # level 1's dispersion has the opposite sign (the (-1)^m)
    e1 = [g.energies_hz[1] for g in ground]
    assert (e1[1] - e1[0]) < 0
    assert np.allclose(ground[1].energies_hz, box[1][0][:2], atol=1.0)


def test_demo_pulse_on_the_charge_model_against_an_independent_box():
    # the bundled demo pulse played on a Cooper-pair box fitted to the same f01 and alpha,
    # built here (Koch et al. 2007) and re-simulated with scipy's expm
    raw = tomllib.loads((ROOT / "recipes" / "demo-x180.toml").read_text())
    raw["system"]["spectrum"] = "charge"
    raw["verdict"] = {"lab_frame": "off", "extra_levels": 0}
    raw["awg"] = {"filter": "none"}  # the held samples themselves, as expm_product plays
    recipe = load_recipe(raw)
    wave = read_waveform(ROOT / "results" / "demo-x180" / "demo-x180.csv")
    play = Playback(recipe, wave)
    ej, ec = charge.fit(5.1e9, -220e6)
    w, v, n = _box(ej, ec)
    m = v[:, :4].T @ n @ v[:, :4]
    signs = np.ones(4)
    for i in range(1, 4):  # <i-1|n|i> > 0
        signs[i] = signs[i - 1] * np.sign(m[i - 1, i])
    m = signs[:, None] * m * signs[None, :]
    lower = np.triu(np.tril(m / m[0, 1], 1), 1)
    drift = np.diag(w[:4] - 5.1e9 * np.arange(4)).astype(complex)
    controls = np.array([0.5 * (lower + lower.T), 0.5j * (lower.T - lower)])
    u = expm_product(drift, controls, wave.to_hz(recipe.system), 1 / wave.sample_rate_hz)
    infidelity = 1 - pedersen_fidelity(u[:2, :2], np.array([[0, 1], [1, 0]], complex))
    assert play.nominal.infidelity == pytest.approx(infidelity, abs=1e-12)
    assert play.nominal.leakage == pytest.approx(subspace_leakage(u, [0, 1]), abs=1e-12)
    assert infidelity < 1e-6  # the bundled demo is made on the charge model (the default)


def test_coupled_charge_transmons_keep_the_rwa_of_the_charge_coupling():
    # g n_a n_b / (n01_a n01_b): its energy-conserving part is the drift's coupling
    specs = [TransmonSpec(name=x, levels=3, qubit_frequency_hz=f, anharmonicity_hz=-200e6,
                          spectrum="charge") for x, f in (("a", 5.0e9), ("b", 5.3e9))]
    s = coupled_transmons(specs, [("a", "b", 10e6)])
    da, db = s.lab.drives["a"], s.lab.drives["b"]
    full = 10e6 * da @ db
    assert np.allclose(s.drift[1, 3], full[1, 3])  # |01> <-> |10>: g n01_a n01_b = g
    assert abs(s.drift[1, 3]) == pytest.approx(10e6, rel=1e-12)
    assert s.drift[0, 4] == 0  # |00> <-> |11>: counter-rotating, only in the lab frame
    assert abs(full[0, 4]) == pytest.approx(10e6, rel=1e-12)


def test_spectrum_keys_are_checked():
    raw = tomllib.loads((ROOT / "recipes" / "demo-x180.toml").read_text())
    with pytest.raises(RecipeError, match=r"system\.spectrum.*duffing, charge"):
        load_recipe({**raw, "system": {**raw["system"], "spectrum": "mathieu"}})
    with pytest.raises(RecipeError, match=r"system\.offset_charge.*spectrum = \"charge\""):
        load_recipe({**raw, "system": {**raw["system"], "spectrum": "duffing",
                                       "offset_charge": 0.2}})
    # the charge model is the default: an offset charge needs no spectrum key
    assert load_recipe({**raw, "system": {**raw["system"], "offset_charge": 0.2}}) \
        .system.models["q0"]["spectrum"] == "charge"
    with pytest.raises(RecipeError, match=r"system.*no transmon has"):
        load_recipe({**raw, "system": {**raw["system"], "spectrum": "charge",
                                       "anharmonicity": "-2 MHz"}})
