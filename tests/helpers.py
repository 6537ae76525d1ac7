"""Independent references for the tests: nothing here calls shaper's propagator."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import scipy.linalg

ROOT = Path(__file__).resolve().parents[1]


def demo_text(name: str) -> str:
    """The bundled demo recipe (recipes/demo-x180.toml) under another name: a base for
    recipes that add a section to it."""
    return (ROOT / "recipes" / "demo-x180.toml").read_text().replace(
        'name = "demo-x180"', f'name = "{name}"')


def expm_product(drift, controls, samples, dt) -> np.ndarray:
    """U = U_{n-1} ... U_0 with U_j = scipy.linalg.expm(-2 pi i dt H_j) (README, "Conventions")."""
    u = np.eye(drift.shape[0], dtype=complex)
    for row in np.asarray(samples, float):
        h = drift + np.tensordot(row, controls, axes=1)
        u = scipy.linalg.expm(-2j * np.pi * dt * h) @ u
    return u


def pedersen_fidelity(p, target) -> float:
    """Average gate fidelity, Pedersen, Moller, Molmer, Phys. Lett. A 367, 47 (2007), eq. for
    F = [Tr(M M^dag) + |Tr M|^2] / [d(d+1)], written out independently of shaper."""
    m = target.conj().T @ p
    d = p.shape[0]
    return float((np.trace(m @ m.conj().T).real + abs(np.trace(m)) ** 2) / (d * (d + 1)))


def subspace_leakage(u, comp) -> float:
    """Wood and Gambetta, Phys. Rev. A 97, 032306 (2018): 1 - Tr(P P^dag)/d."""
    p = u[np.ix_(comp, comp)]
    return float(1 - np.trace(p @ p.conj().T).real / len(comp))


def duffing(levels, detuning_hz, alpha_hz):
    """The Duffing transmon of Koch et al., Phys. Rev. A 76, 042319 (2007), drive frame,
    built here by hand: drift and the I, Q operators of the README's "Conventions"."""
    n = np.arange(levels)
    drift = np.diag(detuning_hz * n + 0.5 * alpha_hz * n * (n - 1)).astype(complex)
    a = np.diag(np.sqrt(np.arange(1, levels)), 1).astype(complex)
    return drift, np.array([0.5 * (a + a.conj().T), 0.5j * (a.conj().T - a)])


def random_hermitian(rng, d, scale=1.0):
    a = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    return scale * (a + a.conj().T) / 2


# a run that cannot meet its target (5 MHz cannot make a pi pulse in 40 ns), so it goes
# on until its iteration limit: long enough to be killed in the middle
LONG = """name = "long"
[system]
model = "transmon"
levels = 4
qubit_frequency = "5 GHz"
anharmonicity = "-200 MHz"
[gate]
target = "X"
[pulse]
duration = "40 ns"
sample_rate = "5 GS/s"
max_rabi = "5 MHz"
[optimizer]
method = "METHOD"
max_iterations = ITERATIONS
stall_iterations = 1000000
"""


def write_long(tmp_path, method, iterations):
    path = tmp_path / f"long-{method}.toml"
    path.write_text(LONG.replace("METHOD", method).replace("ITERATIONS", str(iterations)))
    return path


def run_cli(*args):
    """Run the command's entry point in this process; return (code, stdout, stderr)."""
    import contextlib
    import io

    from shaper.cli.main import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in args])
    return code, out.getvalue(), err.getvalue()


# a qutrit given as matrices (MHz), for the recipe-reading tests
QUTRIT_MATRICES = """name = "mat"
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
