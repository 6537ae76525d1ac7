"""The static ZZ of two coupled transmons (exact diagonalisation), against the
perturbative formula and an independent build of the Hamiltonian."""

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
from helpers import chip_text

from shaper.physics.transmons import TransmonSpec, coupled_transmons, static_zz

ROOT = Path(__file__).resolve().parents[1]


def duffing_pair(levels, fa, fb, alpha_a, alpha_b, g, *, rwa: bool) -> np.ndarray:
    """Two Duffing transmons (Hz) coupled by g (a + a^dag)(b + b^dag), or its exchange part
    g (a^dag b + a b^dag) with ``rwa``; written out here with numpy (Koch et al., Phys.
    Rev. A 76, 042319 (2007), the Duffing limit)."""
    a = np.diag(np.sqrt(np.arange(1, levels)), 1)
    n = a.T @ a
    eye = np.eye(levels)
    one = lambda f, alpha: f * n + alpha / 2 * n @ (n - eye)  # noqa: E731
    h = np.kron(one(fa, alpha_a), eye) + np.kron(eye, one(fb, alpha_b))
    A, B = np.kron(a, eye), np.kron(eye, a)
    coupling = A.T @ B + A @ B.T if rwa else (A + A.T) @ (B + B.T)
    return h + g * coupling


@pytest.mark.parametrize("fb,alpha_b", [(5.3e9, -210e6), (4.6e9, -230e6)])
def test_static_zz_follows_the_perturbative_formula(fb, alpha_b):
    # zeta = 2 g^2 (alpha_a + alpha_b) / ((Delta + alpha_a)(Delta - alpha_b)), Delta =
    # f_a - f_b, second order in g for the exchange coupling of two transmons (from
    # memory; the standard result for fixed-frequency transmon pairs). At g = 4 MHz and
    # |Delta +- alpha| >= 90 MHz the fourth-order terms are below 1 % of it.
    fa, alpha_a, g = 5.0e9, -220e6, 4e6
    delta = fa - fb
    formula = 2 * g ** 2 * (alpha_a + alpha_b) / ((delta + alpha_a) * (delta - alpha_b))
    zz = static_zz(duffing_pair(5, fa, fb, alpha_a, alpha_b, g, rwa=True), (5, 5))
    assert zz == pytest.approx(formula, rel=0.01)
    assert abs(formula) > 50e3  # a ZZ a lab measures (tens to hundreds of kHz)


def test_the_chip_model_gives_the_zz_of_its_own_hamiltonian():
    # coupled_transmons keeps the coupling's counter-rotating terms (charge coupling):
    # the same ZZ as the full Hamiltonian built here independently, to numerical precision,
    # and within a few % of the exchange-only (RWA) value
    # (the Duffing ladder, as the reference written out here)
    specs = [TransmonSpec(name="qa", levels=4, qubit_frequency_hz=5.0e9, anharmonicity_hz=-220e6,
                          spectrum="duffing"),
             TransmonSpec(name="qb", levels=4, qubit_frequency_hz=5.3e9,
                          anharmonicity_hz=-210e6, spectrum="duffing")]
    system = coupled_transmons(specs, [("qa", "qb", 6e6)])
    ours = static_zz(system.lab.static, system.dims)
    full = static_zz(duffing_pair(4, 5.0e9, 5.3e9, -220e6, -210e6, 6e6, rwa=False), (4, 4))
    exchange = static_zz(duffing_pair(4, 5.0e9, 5.3e9, -220e6, -210e6, 6e6, rwa=True), (4, 4))
    assert ours == pytest.approx(full, rel=1e-9, abs=1e-3)
    assert ours == pytest.approx(exchange, rel=0.05)


def test_a_chip_reports_each_pairs_zz_from_its_own_hamiltonian(tmp_path):
    # the chip's pair as its gate task builds it (4 levels, charge coupling) against the
    # Hamiltonian written out here
    from shaper.jobs.chip_pairs import pair_zz, write_pairs
    from shaper.recipe.chip import load_chip

    path = tmp_path / "chip.toml"
    path.write_text(chip_text("zz", [("qa", "5.0 GHz", "-220 MHz", None),
                                      ("qb", "5.3 GHz", "-210 MHz", None)],
                              couplings=[("qa", "qb", "6 MHz")], pinned=True))
    (pair,) = pair_zz(load_chip(path))
    full = static_zz(duffing_pair(4, 5.0e9, 5.3e9, -220e6, -210e6, 6e6, rwa=False), (4, 4))
    assert pair["pair"] == "qa-qb" and pair["levels"] == "4x4"
    assert pair["static_zz_hz"] == pytest.approx(full, rel=1e-9)
    (tmp_path / "chip.md").write_text("")
    write_pairs(tmp_path, [pair])
    assert f"{full:.6e}" in (tmp_path / "chip-pairs.csv").read_text()
    assert f"{full / 1e3:.1f} kHz" in (tmp_path / "chip.md").read_text()


NEIGHBOURS = chip_text("pairchip", [("q0", "5.1 GHz", "-220 MHz", None),
                                     ("q1", "5.4 GHz", "-210 MHz", None)],
                       couplings=[("q0", "q1", "5 MHz")], pinned=True).replace(
    "[gates]\n", "[gates]\nneighbour_levels = 4\n")


def test_a_gate_with_its_neighbour_present_matches_an_independent_simulation(tmp_path):
    # the bundled demo X pulse (made for an isolated 5.1 GHz transmon) played on it with a
    # neighbour at 5.4 GHz coupled by 5 MHz: rotating frame of q0, exchange coupling, both
    # written in their dressed basis (eigenvectors of the drift, each named after the bare
    # state it overlaps most), re-simulated here with scipy's expm and scored by the
    # average gate fidelity of X on q0, identity on q1 (Pedersen et al. 2007)
    from helpers import pedersen_fidelity, subspace_leakage

    from shaper.io.waveio import read_waveform
    from shaper.jobs.chip_pairs import played_elsewhere, task_of
    from shaper.jobs.gateset import GateRow
    from shaper.recipe.chip import load_chip

    (tmp_path / "chip.toml").write_text(NEIGHBOURS)
    chip = load_chip(tmp_path / "chip.toml")
    demo = ROOT / "results" / "demo-x180"
    row = GateRow(gate="X", derived_from="", phase_deg=0.0, duration_s=0.0, samples=0,
                  infidelity=0.0, leakage=0.0, met=True, waveform="demo-x180.csv",
                  subject="q0")
    where, playback = played_elsewhere(task_of(chip, row), row, demo)
    assert where == "near" and playback.recipe.system.qubit_names == ("q0", "q1")
    ours = playback.nominal  # the chip's 4 levels each, the virtual Z it chose

    levels = 4
    a = np.diag(np.sqrt(np.arange(1, levels)), 1).astype(complex)
    n, eye = a.conj().T @ a, np.eye(levels)
    one = lambda f, alpha: f * n + alpha / 2 * n @ (n - eye)  # noqa: E731
    A, B = np.kron(a, eye), np.kron(eye, a)
    drift = (np.kron(one(0.0, -220e6), eye) + np.kron(eye, one(0.3e9, -210e6))
             + 5e6 * (A.conj().T @ B + A @ B.conj().T))  # frame of q0 (5.1 GHz)
    controls = [0.5 * (A + A.conj().T), 0.5j * (A.conj().T - A)]
    _, vectors = np.linalg.eigh(drift)
    v = np.zeros_like(vectors)
    for k in range(vectors.shape[1]):
        v[:, np.argmax(np.abs(vectors[:, k]))] = vectors[:, k]
    v = v * np.exp(-1j * np.angle(np.diag(v)))
    wave = read_waveform(demo / "demo-x180.csv")
    samples = wave.fractions * wave.full_scale_hz["q0"]
    u = np.eye(levels ** 2, dtype=complex)
    for row_hz in samples:
        h = v.conj().T @ (drift + row_hz[0] * controls[0] + row_hz[1] * controls[1]) @ v
        u = scipy.linalg.expm(-2j * np.pi * h / wave.sample_rate_hz) @ u
    comp = [0, 1, levels, levels + 1]
    x_on_q0 = np.kron(np.array([[0, 1], [1, 0]]), np.eye(2))
    # the frame updates it reports, as Z(phi) = diag(1, e^{i phi}) on each qubit
    bits = np.array([[0, 0], [0, 1], [1, 0], [1, 1]])
    before = np.diag(np.exp(1j * bits @ np.asarray(ours.frame_before_rad)))
    after = np.diag(np.exp(1j * bits @ np.asarray(ours.frame_after_rad)))
    fidelity = pedersen_fidelity(after @ u[np.ix_(comp, comp)] @ before, x_on_q0)
    assert ours.infidelity == pytest.approx(1 - fidelity, rel=1e-6, abs=1e-10)
    assert ours.leakage == pytest.approx(subspace_leakage(u, comp), rel=1e-6, abs=1e-10)
    # no frame update does better than the ones it chose; the neighbour costs this pulse far
    # more than its isolated 5e-9 (rotating frame)
    assert 1 - pedersen_fidelity(u[np.ix_(comp, comp)], x_on_q0) >= ours.infidelity - 1e-12
    assert ours.infidelity > 1e-6


def test_a_gate_beside_its_neighbours_in_the_lab_frame_matches_an_independent_integration():
    # ring-5's q1 X (made beside q0 and q2 in the rotating frame) in the lab frame: the
    # Duffing transmons (Koch et al., Phys. Rev. A 76, 042319 (2007)) with their charge
    # couplings g (a + a^dag)(b + b^dag) and the drive eps(t) (a + a^dag) of q1, eps =
    # Re[w(t) e^{-2 pi i f t}] (carrier phase 0), integrated here in the lab frame with
    # scipy's DOP853 sample by sample, turned into q1's frame and the dressed basis of the
    # rotating-wave drift, and scored by the average gate fidelity of X on q1 (Pedersen et
    # al. 2007) with the best Z frame updates found by scipy
    import copy

    import scipy.integrate
    import scipy.optimize
    from helpers import pedersen_fidelity, pinned
    from scipy.optimize import linear_sum_assignment

    from shaper.io.waveio import read_waveform
    from shaper.jobs.playback import Playback
    from shaper.recipe import load_recipe
    from shaper.recipe.chip import load_chip

    chip = load_chip(ROOT / "recipes" / "chips" / "ring-5.toml")
    task = next(t for t in chip.tasks if t.id == "q1-x")
    # the run's own file, whatever name the chip gave it when it was made
    folder = ROOT / "results" / "ring-5" / "gates" / "q1-x" / "shortest"
    wave = read_waveform(next(folder.glob("*-q1-x.csv")))
    raw = pinned(copy.deepcopy(task.recipe))  # Duffing, held samples, as built below
    raw["verdict"] = {"lab_frame": "on", "extra_levels": 0, "carrier_phase_deg": 0}
    ours = Playback(load_recipe(raw), wave).lab

    dims, f, alpha = (4, 3, 3), (5.45e9, 4.95e9, 5.00e9), (-210e6, -330e6, -220e6)

    def lower(k):
        mats = [np.eye(d) for d in dims]
        mats[k] = np.diag(np.sqrt(np.arange(1, dims[k])), 1)
        return np.kron(np.kron(mats[0], mats[1]), mats[2]).astype(complex)
    a = [lower(k) for k in range(3)]
    n = [x.conj().T @ x for x in a]
    d = [x + x.conj().T for x in a]
    ladder = sum(alpha[k] / 2 * (n[k] @ n[k] - n[k]) for k in range(3))
    lab = ladder + sum(f[k] * n[k] for k in range(3)) + 12e6 * (d[0] @ d[1] + d[0] @ d[2])
    rwa = ladder + sum((f[k] - f[0]) * n[k] for k in range(3)) + 12e6 * sum(
        a[0].conj().T @ a[k] + a[0] @ a[k].conj().T for k in (1, 2))
    _, vectors = np.linalg.eigh(rwa)
    v = np.zeros_like(vectors)
    for bare, k in zip(*linear_sum_assignment(-np.abs(vectors) ** 2), strict=True):
        v[:, bare] = vectors[:, k] * np.exp(-1j * np.angle(vectors[bare, k]))
    w = wave.full_scale_hz["q1"] * (wave.fractions[:, 0] + 1j * wave.fractions[:, 1])
    dt = 1 / wave.sample_rate_hz

    def rhs(t, y, k):
        eps = np.real(w[k] * np.exp(-2j * np.pi * f[0] * t))
        return (-2j * np.pi * (lab + eps * d[0]) @ y.reshape(36, 36)).ravel()
    u = np.eye(36, dtype=complex).ravel()
    for k in range(len(w)):
        u = scipy.integrate.solve_ivp(rhs, (k * dt, (k + 1) * dt), u, args=(k,),
                                      method="DOP853", rtol=1e-10, atol=1e-12).y[:, -1]
    frame = np.exp(2j * np.pi * f[0] * np.real(np.diag(sum(n))) * len(w) * dt)
    u = v.conj().T @ (frame[:, None] * u.reshape(36, 36)) @ v
    comp = [i * 9 + j * 3 + k for i, j, k in np.ndindex(2, 2, 2)]
    p = u[np.ix_(comp, comp)]
    target = np.kron(np.array([[0, 1], [1, 0]]), np.eye(4))
    bits = np.array(list(np.ndindex(2, 2, 2)))

    def infidelity(x):
        return 1 - pedersen_fidelity(np.exp(1j * bits @ x[3:])[:, None] * p
                                     * np.exp(1j * bits @ x[:3])[None, :], target)
    best = min((scipy.optimize.minimize(infidelity, s, method="BFGS", options={"gtol": 1e-12})
                for s in np.random.default_rng(1).uniform(-np.pi, np.pi, (12, 6))),
               key=lambda r: r.fun)
    assert ours.infidelity == pytest.approx(best.fun, rel=1e-5)
    assert ours.leakage == pytest.approx(1 - np.trace(p @ p.conj().T).real / 8, rel=1e-5)
    # the file was made and judged on the chip's own model (charge transmons, the
    # instrument's output filter) and meets 1e-4 there, beside these neighbours in the lab
    # frame (8.1e-5); played here as a held staircase on Duffing transmons it does not
    # (2.5e-4, measured): the model it is judged in matters (README, "Chips: neighbours")
    assert ours.infidelity > 1e-4
