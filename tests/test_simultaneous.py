"""Neighbouring qubits' gates played at the same time, each line leaking into the other
qubit (README, "Chips: simultaneous gates"), against an independent scipy integration."""

from pathlib import Path

import numpy as np
import pytest
import scipy.integrate
import scipy.optimize
from helpers import chip_text, pedersen_fidelity

from shaper.errors import RecipeError

ROOT = Path(__file__).resolve().parents[1]
FA, FB, ALPHA_A, ALPHA_B, G = 5.1e9, 5.35e9, -220e6, -210e6, 5e6
LEAK_AB, LEAK_BA = 0.06 + 0.02j, -0.03 + 0.04j


def chip(extra: str = "") -> str:
    text = chip_text("duo", [("qa", "5.1 GHz", "-220 MHz", 3), ("qb", "5.35 GHz", "-210 MHz",
                                                               3)],
                     couplings=[("qa", "qb", "5 MHz")], pinned=True)
    text = text.replace("[gates]\n", "[gates]\nsimultaneous = true\n")
    return text + extra


CROSSTALK = f"""
[[crosstalk]]
from = "qa"
to = "qb"
ratio = [{LEAK_AB.real}, {LEAK_AB.imag}]

[[crosstalk]]
from = "qb"
to = "qa"
ratio = [{LEAK_BA.real}, {LEAK_BA.imag}]
"""


def _files(folder: Path) -> None:
    """The bundled demo X pulse as each qubit's file (its columns renamed)."""
    demo = ROOT / "results" / "demo-x180"
    for q in ("qa", "qb"):
        for ext in ("csv", "json"):
            text = (demo / f"demo-x180.{ext}").read_text().replace("q0", q)
            (folder / f"{q}.{ext}").write_text(text)


def _rows():
    from shaper.jobs.gateset import GateRow

    return [GateRow(gate="X", derived_from="", phase_deg=0.0, duration_s=2e-8, samples=48,
                    infidelity=1e-5, leakage=1e-6, met=True, waveform=f"{q}.csv", subject=q)
            for q in ("qa", "qb")]


def _independent(leak_ab: complex, leak_ba: complex) -> float:
    """qa and qb (Duffing, Koch et al., Phys. Rev. A 76, 042319 (2007), 3 levels each),
    exchange coupling, the frame at qa's frequency, written in their dressed basis; qa's
    line at FA drives qa and (times leak_ab) qb, qb's line at FB drives qb and (times
    leak_ba) qa: H = sum 0.5 (w(t) e^{-2 pi i (f_c - FA) t} a^dag + h.c.), the held
    envelopes w of the files. Integrated with scipy's DOP853 sample by sample, scored by
    the average gate fidelity of X on both (Pedersen et al., Phys. Lett. A 367, 47
    (2007)) with the best Z frame updates on both qubits found by scipy."""
    from shaper.io.waveio import read_waveform

    levels = 3
    eye = np.eye(levels)
    a = np.diag(np.sqrt(np.arange(1, levels)), 1).astype(complex)
    A, B = np.kron(a, eye), np.kron(eye, a)
    nA, nB = A.conj().T @ A, B.conj().T @ B
    drift = (ALPHA_A / 2 * (nA @ nA - nA) + (FB - FA) * nB + ALPHA_B / 2 * (nB @ nB - nB)
             + G * (A.conj().T @ B + A @ B.conj().T))
    _, vectors = np.linalg.eigh(drift)
    v = np.zeros_like(vectors)
    for k in range(vectors.shape[1]):
        v[:, np.argmax(np.abs(vectors[:, k]))] = vectors[:, k]
    v = v * np.exp(-1j * np.angle(np.diag(v)))
    turn = lambda m: v.conj().T @ m @ v  # noqa: E731
    h0, a_op, b_op = turn(drift), turn(A), turn(B)
    wave = read_waveform(ROOT / "results" / "demo-x180" / "demo-x180.csv")
    w = wave.full_scale_hz["q0"] * (wave.fractions[:, 0] + 1j * wave.fractions[:, 1])
    dt = 1 / wave.sample_rate_hz
    terms = [(w, 0.0, a_op), (w, FB - FA, b_op), (leak_ab * w, 0.0, b_op),
             (leak_ba * w, FB - FA, a_op)]

    def rhs(t, y, k):
        h = h0.copy()
        for env, offset, op in terms:
            z = env[k] * np.exp(-2j * np.pi * offset * t)
            h = h + 0.5 * (z * op.conj().T + np.conj(z) * op)
        return (-2j * np.pi * h @ y.reshape(9, 9)).ravel()

    u = np.eye(9, dtype=complex).ravel()
    for k in range(len(w)):
        u = scipy.integrate.solve_ivp(rhs, (k * dt, (k + 1) * dt), u, args=(k,),
                                      method="DOP853", rtol=1e-11, atol=1e-13).y[:, -1]
    u = u.reshape(9, 9)
    comp = [0, 1, 3, 4]
    p = u[np.ix_(comp, comp)]
    x = np.array([[0, 1], [1, 0]])
    target = np.kron(x, x)
    bits = np.array([[0, 0], [0, 1], [1, 0], [1, 1]])

    def infidelity(angles):
        return 1 - pedersen_fidelity(np.exp(1j * bits @ angles[2:])[:, None] * p
                                     * np.exp(1j * bits @ angles[:2])[None, :], target)

    return min(scipy.optimize.minimize(infidelity, s, method="BFGS",
                                       options={"gtol": 1e-12}).fun
               for s in np.random.default_rng(2).uniform(-np.pi, np.pi, (10, 4)))


@pytest.mark.parametrize("extra,leaks", [(CROSSTALK, (LEAK_AB, LEAK_BA)), ("", (0, 0))])
def test_gates_played_together_match_an_independent_integration(tmp_path, extra, leaks):
    from dataclasses import asdict

    from shaper.jobs.chip_simultaneous import mark_rows, play_pair, together_pairs
    from shaper.recipe.chip import load_chip

    (tmp_path / "chip.toml").write_text(chip(extra))
    _files(tmp_path)
    rows = _rows()
    loaded = load_chip(tmp_path / "chip.toml")
    assert together_pairs(loaded) == [("qa", "qb")]
    (found,) = play_pair(loaded, "qa", "qb", [asdict(r) for r in rows], str(tmp_path))
    assert (found["pair"], found["gate"]) == ("qa-qb", "X")
    assert found["infidelity"] == pytest.approx(_independent(*leaks), rel=1e-5)
    assert [complex(*z) for z in found["crosstalk"]] == [leaks[0], leaks[1]]
    mark_rows(rows, [found])
    assert rows[0].simultaneous_infidelity == found["infidelity"]


@pytest.mark.parametrize("text,key", [
    ('[[crosstalk]]\nfrom = "qa"\nto = "qz"\nratio = [0.1, 0]\n', "crosstalk[0].to"),
    ('[[crosstalk]]\nfrom = "qa"\nto = "qa"\nratio = [0.1, 0]\n', "crosstalk[0].to"),
    ('[[crosstalk]]\nfrom = "qa"\nto = "qb"\nratio = 0.1\n', "crosstalk[0].ratio"),
    ('[[crosstalk]]\nfrom = "qa"\nto = "qb"\nratio = [3, 0]\n', "crosstalk[0].ratio"),
    ('[[crosstalk]]\nfrom = "qa"\nto = "qb"\nratio = [0.1, 0]\nphase = 3\n',
     "crosstalk[0].phase"),
])
def test_bad_crosstalk_names_the_key(tmp_path, text, key):
    from shaper.recipe.chip import load_chip

    (tmp_path / "chip.toml").write_text(chip("\n" + text))
    with pytest.raises(RecipeError) as info:
        load_chip(tmp_path / "chip.toml")
    assert info.value.key == key and str(tmp_path / "chip.toml") in str(info.value)
