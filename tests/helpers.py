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


def duffing_collapse(levels, t1_s, t2_s):
    """Collapse operators of one Duffing transmon for its T1 and T2, built here by hand.

    Relaxation ``L = a / sqrt(T1)``: level n decays to n - 1 at rate n / T1, the
    harmonic-oscillator ladder of the weakly anharmonic transmon (Koch et al., Phys. Rev. A
    76, 042319 (2007), from memory). Pure dephasing on the number operator, ``L = sqrt(2
    Gamma_phi) n`` with ``Gamma_phi = 1/T2 - 1/(2 T1)`` (``Gamma_2 = Gamma_1 / 2 + Gamma_phi``:
    Krantz et al., Appl. Phys. Rev. 6, 021318 (2019), from memory): on levels 0 and 1 it is
    ``sqrt(Gamma_phi / 2) sigma_z`` up to the identity, which decays the 0-1 coherence at
    Gamma_phi. T2 alone (no T1) is pure dephasing at 1/T2.
    """
    out = []
    if t1_s is not None:
        a = np.diag(np.sqrt(np.arange(1, levels)), 1).astype(complex)
        out.append(a / np.sqrt(t1_s))
    if t2_s is not None:
        rate_phi = 1 / t2_s - (0.0 if t1_s is None else 1 / (2 * t1_s))
        if rate_phi > 0:
            out.append(np.sqrt(2 * rate_phi) * np.diag(np.arange(levels)).astype(complex))
    return out


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


def lab_frame_unitary(static, drives, frame_hz, excitations, samples, rate, *,
                      t0=0.0, rtol=1e-11) -> np.ndarray:
    """An independent lab-frame integration, no rotating-wave approximation (README, "The
    lab frame"), with scipy's solve_ivp (DOP853) sample by sample.

    ``H_lab/h = static + sum_c eps_c(tau) D_c`` with ``eps_c = I_c cos(2 pi f_c (tau - t0) +
    2 pi f t0) + Q_c sin(...)``: each channel's carrier ``f_c`` starts at the frame's phase
    ``2 pi f t0`` when the pulse starts (lab time ``t0``), and the I/Q of a held sample are
    constant over it. ``drives``: ``[(D_c, f_c, i_column, q_column)]``. Returns
    ``R(t0 + T) U_lab R(t0)^dag`` with ``R(tau) = exp(2 pi i f N tau)``: the gate in the
    frame.
    """
    from scipy.integrate import solve_ivp

    d = static.shape[0]
    dt = 1.0 / rate
    u = np.eye(d, dtype=complex)
    for k, row in enumerate(np.asarray(samples, float)):
        def rhs(tau, y, row=row):
            h = static.astype(complex).copy()
            for op, f_c, i, q in drives:
                phase = 2 * np.pi * (f_c * (tau - t0) + frame_hz * t0)
                h = h + (row[i] * np.cos(phase) + row[q] * np.sin(phase)) * op
            return (-2j * np.pi * h @ y.reshape(d, d)).ravel()
        start = t0 + k * dt
        sol = solve_ivp(rhs, (start, start + dt), u.ravel(), method="DOP853", rtol=rtol,
                        atol=rtol * 1e-2)
        u = sol.y[:, -1].reshape(d, d)

    def frame(tau):
        return np.diag(np.exp(2j * np.pi * frame_hz * np.asarray(excitations) * tau))
    return frame(t0 + len(samples) * dt) @ u @ frame(t0).conj().T


def duffing_lab(levels, qubit_hz, alpha_hz):
    """The lab-frame Duffing transmon (Koch et al. 2007, README "Conventions"): the static
    Hamiltonian, the drive operator a + a^dag and the level numbers, by hand."""
    n = np.arange(levels)
    a = np.diag(np.sqrt(np.arange(1, levels)), 1).astype(complex)
    return np.diag(qubit_hz * n + 0.5 * alpha_hz * n * (n - 1)).astype(complex), \
        a + a.conj().T, n


def verdict_code(report) -> int:
    """The exit code a finished command must give for its report (README, "Commands"): 0
    when the report says the targets are met, 1 when it says they are not."""
    import json

    data = json.loads(Path(report).read_text())
    return 0 if data["targets"]["met"] else 1


def chip_text(name: str, qubits, *, single: str = '["X"]', durations: str = "10ns,12ns",
              optimizer: str = "", couplings=()) -> str:
    """An invented chip file for the tests: ``qubits`` as ``(name, frequency, anharmonicity,
    levels or None)``, ``couplings`` as ``(a, b, strength)``, every drive limited to 60 MHz."""
    text = f'name = "{name}"\n[gates]\nsingle = {single}\nsingle_durations = "{durations}"\n'
    if optimizer:
        text += f"[template.optimizer]\n{optimizer}\n"
    for q, frequency, anharmonicity, levels in qubits:
        text += (f'\n[[qubit]]\nname = "{q}"\nfrequency = "{frequency}"\n'
                 f'anharmonicity = "{anharmonicity}"\nmax_rabi = "60 MHz"\n'
                 + (f"levels = {levels}\n" if levels else ""))
    for a, b, strength in couplings:
        text += f'\n[[coupling]]\nbetween = ["{a}", "{b}"]\nstrength = "{strength}"\n'
    return text
