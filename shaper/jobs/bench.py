"""``shaper bench``: the propagator's value and gradient against an exact SciPy reference.

In one process, for each case (system, samples), it times one value-and-gradient
of the average gate infidelity (target X on the first qubit) with

- shaper's jitted JAX path (each propagator method), and
- a reference in plain NumPy/SciPy: ``scipy.linalg.expm_frechet`` per slice and
  control (exact directional derivatives), forward and backward products.

It prints the milliseconds per evaluation, the speed-up ratio, the JIT compile
time (first call, persistent cache off), and the largest gradient difference
relative to the largest gradient entry. The reference lives here, not in the library.
"""

from __future__ import annotations

import platform
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.linalg

from shaper.jobs.bench_user import best_time

DEMO = Path("recipes/demo-x180.toml")  # the bundled demo, seen from the repository's root
SAMPLE_RATE_HZ = 2.4e9
AMPLITUDE_HZ = 20e6


@dataclass(frozen=True)
class Case:
    label: str
    levels: tuple[int, ...]
    samples: int


def cases(quick: bool) -> list[Case]:
    sizes = (100, 400) if quick else (100, 400, 1600)
    systems = [("transmon 3 levels", (3,)), ("transmon 6 levels", (6,)),
               ("two transmons 3x3", (3, 3)), ("two transmons 4x4", (4, 4))]
    return [Case(label, levels, n) for label, levels in systems for n in sizes]


def make_system(levels: tuple[int, ...]):
    from shaper.physics.transmons import TransmonSpec, coupled_transmons

    specs = [TransmonSpec(name=f"q{i}", levels=lv, qubit_frequency_hz=5.1e9 - 0.3e9 * i,
                          anharmonicity_hz=-220e6) for i, lv in enumerate(levels)]
    couplings = [("q0", "q1", 8e6)] if len(levels) == 2 else []
    return coupled_transmons(specs, couplings)


def target_unitary(qubits: int) -> np.ndarray:
    x = np.array([[0, 1], [1, 0]], complex)
    return x if qubits == 1 else np.kron(x, np.eye(2))


def reference_value_and_grad(drift, controls, samples, dt, comp, target):
    """Infidelity and its exact gradient with SciPy only (expm_frechet per slice and control)."""
    n, k = samples.shape
    d = drift.shape[0]
    dc = len(comp)
    slices, derivs = [], []
    for j in range(n):
        a = -2j * np.pi * dt * (drift + np.tensordot(samples[j], controls, axes=1))
        row = []
        for c in range(k):
            u, du = scipy.linalg.expm_frechet(a, -2j * np.pi * dt * controls[c])
            row.append(du)
        slices.append(u)
        derivs.append(row)
    forward = [np.eye(d, dtype=complex)]  # forward[j] = U_{j-1} ... U_0
    for u in slices:
        forward.append(u @ forward[-1])
    backward = [np.eye(d, dtype=complex)] * (n + 1)  # backward[j] = U_{n-1} ... U_{j+1}
    acc = np.eye(d, dtype=complex)
    for j in range(n - 1, -1, -1):
        backward[j] = acc
        acc = acc @ slices[j]
    total = forward[-1]
    v = np.zeros((d, dc))
    v[comp, np.arange(dc)] = 1
    m = target.conj().T @ (v.T @ total @ v)
    tr = np.trace(m)
    fidelity = (np.sum(np.abs(m) ** 2) + abs(tr) ** 2) / (dc * (dc + 1))
    w = v @ (m.conj().T + np.conj(tr) * np.eye(dc)) @ target.conj().T @ v.T
    grad = np.zeros((n, k))
    for j in range(n):
        b = forward[j] @ w @ backward[j]
        for c in range(k):
            grad[j, c] = -2 * np.real(np.trace(b @ derivs[j][c])) / (dc * (dc + 1))
    return 1 - fidelity, grad


def run_case(case: Case, *, methods=("eigh", "pade"), repeats: int = 20,
             reference_repeats: int = 3, seed: int = 0) -> dict:
    import jax
    import jax.numpy as jnp

    from shaper.physics.figures import gate_figures, project
    from shaper.physics.propagator import propagate

    system = make_system(case.levels)
    rng = np.random.default_rng(seed)
    samples = rng.uniform(-AMPLITUDE_HZ, AMPLITUDE_HZ, size=(case.samples,
                                                              len(system.control_names)))
    dt = 1 / SAMPLE_RATE_HZ
    target = target_unitary(len(case.levels))
    comp = system.computational
    ref_value, ref_grad = reference_value_and_grad(system.drift, system.controls, samples, dt,
                                                   comp, target)
    ref_ms = 1e3 * best_time(lambda: reference_value_and_grad(
        system.drift, system.controls, samples, dt, comp, target), reference_repeats)
    row = {"case": case.label, "levels": list(case.levels), "dimension": system.dimension,
           "samples": case.samples, "reference_ms": ref_ms}
    drift, controls = jnp.asarray(system.drift), jnp.asarray(system.controls)
    qubits = len(case.levels)
    for method in methods:
        def infidelity(s, method=method):
            u = propagate(drift, controls, s, dt, method=method)
            return 1 - gate_figures(project(u, comp), target, qubits=qubits).fidelity
        vg = jax.jit(jax.value_and_grad(infidelity))
        x = jnp.asarray(samples)
        t = time.perf_counter()
        value, grad = jax.block_until_ready(vg(x))
        compile_s = time.perf_counter() - t
        ms = 1e3 * best_time(lambda vg=vg, x=x: jax.block_until_ready(vg(x)), repeats)
        scale = float(np.max(np.abs(ref_grad)))
        row[method] = {"ms": ms, "speedup": ref_ms / ms, "compile_s": compile_s,
                       "gradient_difference": float(np.max(np.abs(np.asarray(grad) - ref_grad))
                                                    / scale),
                       "value_difference": abs(float(value) - ref_value)}
    return row


def markdown(rows: list[dict], methods, meta: dict) -> str:
    lines = [f"# shaper bench ({meta['mode']})", "",
             f"{meta['machine']}; jax {meta['jax']}, numpy {meta['numpy']}, scipy {meta['scipy']}"
             f"; {meta['date']}.", "",
             "Value and gradient of the gate infidelity (target X on q0), random "
             f"{AMPLITUDE_HZ / 1e6:.0f} MHz controls at {SAMPLE_RATE_HZ / 1e9} GS/s. "
             "Reference: SciPy expm_frechet per slice and control. Gradient difference: max "
             "|g - g_ref| / max |g_ref|. Times: the fastest of 20 calls (5 for the reference; "
             "quick mode 5 and 2). Compile: first call, persistent cache off.", ""]
    head = "| case | d | n | SciPy ref (ms) |"
    rule = "|---|---|---|---|"
    for m in methods:
        head += f" {m} (ms) | {m} speed-up | {m} compile (s) | {m} grad diff |"
        rule += "---|---|---|---|"
    lines += [head, rule]
    for r in rows:
        line = f"| {r['case']} | {r['dimension']} | {r['samples']} | {r['reference_ms']:.1f} |"
        for m in methods:
            c = r[m]
            line += (f" {c['ms']:.2f} | {c['speedup']:.0f}x | {c['compile_s']:.2f} |"
                     f" {c['gradient_difference']:.1e} |")
        lines.append(line)
    return "\n".join(lines) + "\n"


def _user_rows(recipe: Path | None, quick: bool, echo) -> tuple[list, list, list]:
    """The rows a user feels on ``recipe`` (:mod:`shaper.jobs.bench_user`): objectives,
    whole commands, and (full mode) predicted RB against one verdict."""
    from shaper.jobs import bench_user

    objectives, startup, benchmarking = [], [], []
    if recipe is not None and Path(recipe).exists():
        objectives = bench_user.objective_rows(Path(recipe), repeats=20 if quick else 50)
        if not quick:  # predicted RB: its time against one verdict of one file
            benchmarking = bench_user.benchmarking_rows(Path(recipe), repeats=2)
        for r in objectives + benchmarking:
            echo(f"{r['what']}: {r['ms']:.3f} ms vs {r['baseline_ms']:.3f} ms, "
                 f"{r['ratio']:.2f}x")
        startup = bench_user.startup_rows(Path(recipe), repeats=2 if quick else 3,
                                          full=not quick)
        if not quick:  # a chip's and a night's scale, whole commands (minutes)
            startup += bench_user.scale_rows(Path(recipe).resolve().parents[1])
        for r in startup:
            echo(f"{r['command']}: {r['seconds']:.2f} s, floor {r['floor_s']:.2f} s, "
                 f"{r['ratio']:.2f}x")
    elif recipe is not None:
        echo(f"no {recipe} here: the start-up and objective rows are skipped")
    return objectives, startup, benchmarking


def bench(*, quick: bool = False, out: Path | None = Path("results"),
          methods=None, echo=print, only: list[Case] | None = None,
          recipe: Path | None = None) -> list[dict]:
    """Run every case (or ``only`` these), then the rows a user feels on ``recipe``
    (:mod:`shaper.jobs.bench_user`; skipped when it is None or missing; the CLI's default is
    :data:`DEMO`), print the tables,
    write ``bench.json`` and ``bench.md`` into ``out``. ``methods``: the propagator
    methods to time (default both, quick mode "eigh" only)."""
    import jax

    from shaper.jobs import bench_user
    from shaper.physics import _jax  # noqa: F401

    methods = tuple(methods or (("eigh",) if quick else ("eigh", "pade")))
    was = jax.config.jax_enable_compilation_cache
    jax.config.update("jax_enable_compilation_cache", False)  # measure real compiles...
    try:
        rows = []
        for case in only or cases(quick):
            row = run_case(case, methods=methods, repeats=5 if quick else 20,
                           reference_repeats=2 if quick else 5)
            rows.append(row)
            parts = ", ".join(f"{m} {row[m]['ms']:.2f} ms ({row[m]['speedup']:.0f}x, compile "
                              f"{row[m]['compile_s']:.2f} s, grad diff "
                              f"{row[m]['gradient_difference']:.1e})" for m in methods)
            echo(f"{case.label:>20} n={case.samples:<5} "
                 f"ref {row['reference_ms']:8.1f} ms | {parts}")
        objectives, startup, benchmarking = _user_rows(recipe, quick, echo)
        meta = {"mode": "quick" if quick else "full", "machine": f"{platform.machine()}, "
                f"{__import__('os').cpu_count()} cores", "jax": jax.__version__,
                "numpy": np.__version__, "scipy": scipy.__version__,
                "date": time.strftime("%Y-%m-%d")}
        table = markdown(rows, methods, meta)
        table += "\n".join(bench_user.markdown(startup, objectives, str(recipe),
                                                benchmarking)) + "\n"
        echo("")
        echo(table)
        if out is not None:
            from shaper.io import atomic

            out.mkdir(parents=True, exist_ok=True)
            atomic.write_json(out / "bench.json", {"meta": meta, "rows": rows,
                                                   "startup": startup,
                                                   "objectives": objectives,
                                                   "benchmarking": benchmarking})
            atomic.write_text(out / "bench.md", table)
    finally:  # ...and leave the caller's setting as it was
        jax.config.update("jax_enable_compilation_cache", was)
    return rows
