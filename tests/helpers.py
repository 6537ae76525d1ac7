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


def pinned(raw: dict, *, duffing: bool = True, staircase: bool = True) -> dict:
    """A recipe dict made to match the hand-built references here: every transmon on the
    Duffing ladder (the default is the charge model) and the instrument playing an ideal
    staircase (the default is a 4th-order Bessel output filter), as this file's
    piecewise-constant ``expm_product`` and ``duffing`` assume."""
    import copy

    raw = copy.deepcopy(raw)
    system = raw.get("system", {})
    if duffing and system.get("model") == "transmon":
        system["spectrum"] = "duffing"
    if duffing and system.get("model") == "transmons":
        for table in system.get("transmon", []):
            table["spectrum"] = "duffing"
    if staircase:
        raw["awg"] = {"filter": "none"}
    return raw


def pinned_text(text: str, *, duffing: bool = True, staircase: bool = True) -> str:
    """:func:`pinned` for recipe text (tests that write a recipe file)."""
    if duffing:
        text = text.replace("[system]\n", '[system]\nspectrum = "duffing"\n', 1) \
            if 'model = "transmon"\n' in text else text
        text = text.replace("[[system.transmon]]\n", '[[system.transmon]]\nspectrum = "duffing"\n')
    if staircase and "\n[awg]" not in text:
        text = text.rstrip("\n") + '\n\n[awg]\nfilter = "none"\n'
    return text


QUICK = {"verdict": {"lab_frame": "off", "extra_levels": 0, "benchmark": False},
         "optimizer": {"escalate": False}}
"""For tests about something other than the verdict's models (files, signals, resuming,
reports): judged in the rotating frame on the recipe's levels, no escalation, no predicted
benchmarking. The lab frame, more levels, escalation and benchmarking have tests of their
own against independent references."""


def quick(raw: dict) -> dict:
    """:data:`QUICK` merged into a recipe dict (keys the recipe sets win)."""
    import copy

    raw = copy.deepcopy(raw)
    for section, keys in QUICK.items():
        raw[section] = {**keys, **raw.get(section, {})}
    return raw


def with_keys(text: str, section: str, keys: dict) -> str:
    """Recipe or chip text with ``keys`` added to its ``[section]`` (created at the end if
    missing; a key the text already sets in that section is kept)."""
    import re
    import tomllib

    table = tomllib.loads(text)
    for part in section.split("."):
        table = table.get(part, {}) if isinstance(table, dict) else {}
    lines = "".join(f"{k} = {_toml_value(v)}\n" for k, v in keys.items() if k not in table)
    header = re.search(rf"^\[{re.escape(section)}\]\n", text, flags=re.M)
    if header:
        return text[:header.end()] + lines + text[header.end():]
    return text.rstrip("\n") + f"\n\n[{section}]\n" + lines


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return f'"{value}"' if isinstance(value, str) else repr(value)


def quick_text(text: str, *, chip: bool = False) -> str:
    """:data:`QUICK` in recipe text (``chip``: in a chip file's ``[template.*]``)."""
    for section, keys in QUICK.items():
        text = with_keys(text, f"template.{section}" if chip else section, keys)
    return text


# a two-transmon chip for the hostile-input tests (test_hostile.py, hostile_cases.py) and its
# coupling
HOSTILE_CHIP = """name = "hostile"
[gates]
single = ["X"]
single_durations = "10ns,12ns"

[template.optimizer]
max_iterations = 20

[[qubit]]
name = "qa"
frequency = "5.0 GHz"
anharmonicity = "-220 MHz"
max_rabi = "60 MHz"
levels = 3

[[qubit]]
name = "qb"
frequency = "5.5 GHz"
anharmonicity = "-210 MHz"
max_rabi = "60 MHz"
flux = true
flux_range = ["-900 MHz", 0]
levels = 3
"""
HOSTILE_PAIR = """
[[coupling]]
between = ["qa", "qb"]
strength = "12 MHz"
"""


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
              optimizer: str = "", couplings=(), pinned: bool = False) -> str:
    """An invented chip file for the tests: ``qubits`` as ``(name, frequency, anharmonicity,
    levels or None)``, ``couplings`` as ``(a, b, strength)``, every drive limited to 60 MHz.
    ``pinned``: Duffing transmons played as held samples, as the references here build
    them (:func:`pinned`)."""
    text = f'name = "{name}"\n[gates]\nsingle = {single}\nsingle_durations = "{durations}"\n'
    if optimizer:
        text += f"[template.optimizer]\n{optimizer}\n"
    if pinned:
        text += '[template.awg]\nfilter = "none"\n'
    for q, frequency, anharmonicity, levels in qubits:
        text += (f'\n[[qubit]]\nname = "{q}"\nfrequency = "{frequency}"\n'
                 f'anharmonicity = "{anharmonicity}"\nmax_rabi = "60 MHz"\n'
                 + (f"levels = {levels}\n" if levels else "")
                 + ('spectrum = "duffing"\n' if pinned else ""))
    for a, b, strength in couplings:
        text += f'\n[[coupling]]\nbetween = ["{a}", "{b}"]\nstrength = "{strength}"\n'
    return text


# --- the instrument's analog output and the line played to its end (issue 30), from scipy
# alone: nothing below calls shaper


def bessel_step(order: int, cutoff_hz: float):
    """The step response ``s(t)`` (t in seconds, 0 before 0) of the analog Bessel low-pass of
    ``order`` with its -3 dB point at ``cutoff_hz`` (scipy.signal.bessel, norm="mag"), in
    closed form: the partial fractions of H(s)/s (scipy.signal.residue), designed at unit
    cutoff (well conditioned) and scaled in time (s(t) = s_1(2 pi f_c t))."""
    import scipy.signal

    b, a = scipy.signal.bessel(order, 1.0, analog=True, norm="mag")
    r, p, k = scipy.signal.residue(b, np.polymul(a, [1.0, 0.0]))
    assert not len(k)  # strictly proper
    w = 2 * np.pi * cutoff_hz

    def step(t):
        x = w * np.asarray(t, float)
        val = np.real(np.exp(np.multiply.outer(np.clip(x, 0.0, None), p)) @ r)
        return np.where(x >= 0, val, 0.0)
    return step


def gaussian_step(cutoff_hz: float):
    """The step response of the zero-phase Gaussian low-pass with |H| = 1/sqrt(2) (-3 dB) at
    ``cutoff_hz``: |H(f)| = exp(-f^2 / (2 s^2)) is the transform of a normal density of
    standard deviation 1 / (2 pi s) in time, and -3 dB at f_c gives s = f_c / sqrt(ln 2), so
    s(t) = Phi(t / sigma) with sigma = sqrt(ln 2) / (2 pi f_c) (common practice, no source)."""
    from scipy.special import ndtr

    sigma = np.sqrt(np.log(2.0)) / (2 * np.pi * cutoff_hz)
    return lambda t: ndtr(np.asarray(t, float) / sigma)


def interpolated_step(times_s, values):
    """A measured step response: linear between the measured points, normalised to its
    settled (last) value, 0 before the first point and settled after the last."""
    times_s, values = np.asarray(times_s, float), np.asarray(values, float)
    return lambda t: np.interp(np.asarray(t, float), times_s, values / values[-1], left=0.0,
                               right=1.0)


def held_output(step, samples, period_s: float, times_s) -> np.ndarray:
    """The output at ``times_s`` of a linear stage with step response ``step`` driven by held
    samples: each sample is a step up at its start and a step down one period later, so
    y(t) = sum_m u_m [s(t - m T) - s(t - (m + 1) T)] (superposition, common practice, no
    source). ``samples`` ``(n,)`` or ``(n, k)``."""
    t = np.subtract.outer(np.asarray(times_s, float), np.arange(len(samples)) * period_s)
    return (step(t) - step(t - period_s)) @ np.asarray(samples, float)


def lowpass_ss(kind: str, order: int, cutoff_hz: float):
    """``(A, B, C, D)`` of an analog low-pass (scipy.signal.bessel with norm="mag", or
    scipy.signal.butter), -3 dB at ``cutoff_hz``, time in nanoseconds."""
    import scipy.signal

    w = 2 * np.pi * cutoff_hz * 1e-9  # rad/ns
    if kind == "bessel":
        b, a = scipy.signal.bessel(order, w, analog=True, norm="mag")
    else:
        b, a = scipy.signal.butter(order, w, analog=True)
    return tuple(np.atleast_2d(np.asarray(m, float)) for m in scipy.signal.tf2ss(b, a))


def settling_ss(amplitudes, time_constants_s):
    """``(A, B, C, D)`` (time in ns) of settling terms whose step response is
    ``1 + sum_k A_k exp(-t / tau_k)`` (the README's fit form), by hand: states
    ``z_k' = -z_k / tau_k + u``, output ``(1 + sum A) u - sum (A_k / tau_k) z_k`` (its step
    response: 1 + sum A - sum A_k (1 - exp(-t / tau_k)))."""
    amplitudes = np.asarray(amplitudes, float)
    taus = np.asarray(time_constants_s, float) * 1e9
    return (np.diag(-1.0 / taus), np.ones((len(taus), 1)), (-amplitudes / taus)[None, :],
            np.array([[1.0 + amplitudes.sum()]]))


def cascade_ss(*stages):
    """Stages in series (the first one nearest the DAC): one ``(A, B, C, D)``."""
    a, b, c, d = stages[0]
    for a2, b2, c2, d2 in stages[1:]:
        n1, n2 = a.shape[0], a2.shape[0]
        a = np.block([[a, np.zeros((n1, n2))], [b2 @ c, a2]])
        b = np.vstack([b, b2 @ d])
        c = np.hstack([d2 @ c, c2])
        d = d2 @ d
    return a, b, c, d


def lab_frame_played(static, channels, frame_hz, excitations, samples, rate, filters,
                     end_s, *, phase_rad=0.0, rwa=False, rtol=1e-12) -> np.ndarray:
    """An independent lab-frame integration of a file as the chip receives it: the held
    samples through each column's analog filter, integrated *together with* the
    Schroedinger equation by scipy's solve_ivp (DOP853), one held sample per piece (the
    input is smooth inside it), on to ``end_s`` after the last sample (the ring-down, input
    zero).

    ``H_lab/h = static + sum_c eps_c(t) D_c`` (README "Conventions"): an I/Q channel
    ``(D, f_c, i, q)`` plays ``eps = I(t) cos(2 pi f_c t + phi) + Q(t) sin(2 pi f_c t + phi)``
    (``phi`` the carrier's phase at the first sample's start), a baseband channel
    ``(D, None, u, None)`` plays ``eps = u(t)``; ``I, Q, u`` are the filters' outputs
    (``filters[column]``: ``(A, B, C, D)`` in ns, or None for the held staircase itself).
    Integrated in the frame ``R(t) = exp(i N theta(t))``, ``theta = 2 pi f t + phi``, an
    exact change of variables: ``H' = R H R^dag - f N``, ``(R X R^dag)_mn = X_mn exp(i
    (N_m - N_n) theta)``. ``rwa``: keep only the terms that do not turn (the rotating-wave
    model of "Conventions", every carrier at the frame). Returns the gate in that frame,
    ``R(end) U R(0)^dag`` at ``end_s`` (a list of ends: one gate for each). Times in ns,
    energies in GHz inside.
    """
    from scipy.integrate import solve_ivp

    d = static.shape[0]
    f = frame_hz * 1e-9
    dn = np.subtract.outer(np.asarray(excitations), np.asarray(excitations)).astype(float)
    drift = static * 1e-9 - f * np.diag(np.asarray(excitations, float))
    if rwa:
        drift = np.where(dn == 0, static * 1e-9, 0) - f * np.diag(np.asarray(excitations,
                                                                             float))
    samples = np.asarray(samples, float) * 1e-9  # GHz
    period = 1e9 / rate
    columns = samples.shape[1]
    blocks, offset = [], d * d
    for col in range(columns):
        ss = filters[col]
        size = 0 if ss is None else ss[0].shape[0]
        blocks.append((ss, slice(offset, offset + size)))
        offset += size
    drives = []
    for op, carrier, i, q in channels:
        op = np.asarray(op, complex)
        if carrier is None:
            drives.append((None, op * (dn == 0) if rwa else op, i, q, op))
        else:
            if rwa:
                assert abs(carrier - frame_hz) < 1e-6
            drives.append((carrier * 1e-9, op, i, q, None))

    def rhs(t, y, held):
        values = np.empty(columns)
        for col, (ss, where) in enumerate(blocks):
            if ss is None:
                values[col] = held[col]
            else:
                a, b, c, dd = ss
                x = y[where].real
                values[col] = (c @ x)[0] + dd[0, 0] * held[col]
        theta = 2 * np.pi * f * t + phase_rad
        turn = np.exp(1j * theta * dn)
        h = drift if rwa else static * 1e-9 * turn - f * np.diag(np.asarray(excitations,
                                                                           float))
        h = h.astype(complex)
        for carrier, op, i, q, _ in drives:
            if carrier is None:
                h = h + values[i] * (op if rwa else op * turn)
                continue
            if rwa:
                up = 0.5 * (values[i] + 1j * values[q])
                h = h + up * op * (dn == 1) + np.conj(up) * op * (dn == -1)
                continue
            phase = 2 * np.pi * carrier * t + phase_rad
            eps = values[i] * np.cos(phase) + values[q] * np.sin(phase)
            h = h + eps * op * turn
        out = np.empty_like(y)
        out[:d * d] = (-2j * np.pi * h @ y[:d * d].reshape(d, d)).ravel()
        for col, (ss, where) in enumerate(blocks):
            if ss is not None:
                a, b, c, dd = ss
                out[where] = a @ y[where].real + b[:, 0] * held[col]
        return out

    y = np.zeros(offset, complex)
    y[:d * d] = np.eye(d).ravel()
    ends = [round(e * 1e9, 9) for e in np.atleast_1d(end_s)]
    # pieces: every held sample, then one stretch of zero input to each requested end
    edges = sorted({*(round(k * period, 9) for k in range(len(samples) + 1)), *ends})
    edges = [e for e in edges if e <= max(ends)]
    found = {}
    for start, stop in zip(edges[:-1], edges[1:], strict=True):
        k = int(np.floor(start / period + 1e-9))
        held = samples[k] if k < len(samples) else np.zeros(columns)
        sol = solve_ivp(rhs, (start, stop), y, method="DOP853", rtol=rtol,
                        atol=rtol * 1e-2, args=(held,))
        y = sol.y[:, -1]
        for e in ends:
            if abs(e - stop) < 1e-9:
                found[e] = y[:d * d].reshape(d, d)
    units = [found[e] for e in ends]
    return units if np.ndim(end_s) else units[0]


def charge_transmon(levels, qubit_hz, alpha_hz, *, offset_charge=0.0, cutoff=25):
    """The Cooper-pair box of Koch et al., Phys. Rev. A 76, 042319 (2007), by hand:
    ``H = 4 E_C (n - n_g)^2 - E_J cos(phi)`` in the charge basis ``n = -cutoff..cutoff``
    (``cos phi`` couples n and n + 1 with 1/2), E_J and E_C solved (scipy.optimize.fsolve,
    from the asymptotic f01 ~ sqrt(8 E_J E_C) - E_C, alpha ~ -E_C) so that the exact f01 and
    alpha are the given ones. Returns ``(E_J, E_C, energies (levels,), D)`` with ``D =
    n / <0|n|1>`` in the eigenbasis, each eigenvector signed so that ``<k|n|k+1> > 0``."""
    from scipy.optimize import fsolve

    n = np.arange(-cutoff, cutoff + 1, dtype=float)

    def solve(ej, ec):
        h = np.diag(4 * ec * (n - offset_charge) ** 2) - 0.5 * ej * (
            np.eye(len(n), k=1) + np.eye(len(n), k=-1))
        return scipy.linalg.eigh(h)

    def mismatch(x):
        e = solve(*x)[0]
        return [(e[1] - e[0]) - qubit_hz, (e[2] - e[1]) - (e[1] - e[0]) - alpha_hz]

    ec0 = -alpha_hz
    ej0 = (qubit_hz + ec0) ** 2 / (8 * ec0)
    ej, ec = fsolve(mismatch, [ej0, ec0], xtol=1e-14)
    energies, vectors = solve(ej, ec)
    vectors = vectors[:, :levels].copy()
    charge = vectors.T @ np.diag(n - offset_charge) @ vectors
    for k in range(1, levels):  # sign each vector so that <k-1|n|k> > 0
        if charge[k - 1, k] < 0:
            vectors[:, k] *= -1
            charge = vectors.T @ np.diag(n - offset_charge) @ vectors
    return ej, ec, energies[:levels] - energies[0], (charge / charge[0, 1]).astype(complex)
