"""Textbook pulses to compare an optimised one against, calibrated as a lab would.

For a one-qubit rotation on a transmon the report shows what the plain shapes reach at
the same length: the Gaussian of :func:`shaper.signal.pulses.gaussian_shape` with its amplitude
calibrated, and the DRAG pulse (Motzoi, Gambetta, Rebentrost and Wilhelm, Phys. Rev. Lett.
103, 110501 (2009)) with its amplitude, DRAG coefficient and drive detuning calibrated
together (the detuning absorbs the AC Stark shift that first-order DRAG leaves). Each is
a few hundred evaluations of one jitted function, so the comparison stays cheap; systems
of more than :data:`MAX_LEVELS` levels are skipped.
"""

from __future__ import annotations

import hashlib
import pickle

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize

from shaper.costs import evaluate
from shaper.signal.pulses import Layout, drag_quadrature, gaussian_shape, rotation_area

MAX_LEVELS = 12
MAX_EVALUATIONS = 300
MAX_SECONDS = 60.0  # the comparison is skipped (and says why) where it would take longer


def textbook_pulses(recipe, layout: Layout, qubits: int) -> dict:
    """Calibrated Gaussian and DRAG pulses for a one-qubit rotation recipe.

    Returns an empty dict when the recipe is not a one-qubit rotation on a transmon, and
    ``{"skipped": reason}`` for systems too large to be worth the time.

    Each entry: infidelity, leakage, the calibrated ``amplitude_scale`` (of the pulse with
    the rotation's area), ``drag_coefficient`` (multiple of the first-order correction,
    :func:`~shaper.signal.pulses.drag_quadrature`), ``detuning_hz`` (the drive moved to
    ``f_d + detuning``, i.e. the samples turned by ``exp(-2 pi i detuning t)``),
    ``peak_rabi_hz`` and whether it stays within the recipe's limit.
    """
    label = recipe.target.label.upper()
    if qubits != 1 or label not in ("X", "Y", "X/2", "Y/2") or not recipe.target.is_gate:
        return {}
    freqs = recipe.system.transition_frequencies
    if not freqs or len(recipe.system.channels) != 1:
        return {}
    too_big = _too_big(recipe)
    if too_big:
        return {"skipped": too_big}
    from shaper.costs.problem import chain_problem
    from shaper.signal.chain import for_recipe

    chain = for_recipe(recipe)  # played as the optimised pulse is: IF, line
    problem = chain_problem(recipe, chain)
    channel = recipe.system.channels[0]
    tf = freqs[channel.name]
    alpha = tf["f12_hz"] - tf["f01_hz"]
    n, dt = recipe.samples, recipe.dt
    main = rotation_area(label) * gaussian_shape(n, dt) * layout.envelope[:n]
    shapes = (main, drag_quadrature(main, dt, alpha) if alpha else np.zeros(n),
              (np.arange(n) + 0.5) * dt)
    form = (layout.controls, tuple(channel.columns), label.startswith("Y"))
    program = _program(form, dict(virtual_z=recipe.virtual_z,
                                  drive=None if chain.identity else chain))

    def figures(theta):
        return program(np.asarray(theta, float), *shapes, problem)

    def loss(theta):
        return 1.0 - float(figures(theta)[0])

    gauss = scipy.optimize.minimize_scalar(lambda s: loss([s, 0.0, 0.0]), bounds=(0.5, 1.5),
                                           method="bounded",
                                           options={"xatol": 1e-6, "maxiter": 100})
    drag = scipy.optimize.minimize(loss, [gauss.x, 1.0 if alpha else 0.0, 0.0],
                                   method="Nelder-Mead",
                                   options={"maxfev": MAX_EVALUATIONS, "xatol": 1e-7,
                                            "fatol": 1e-14})
    return {kind: _entry(figures(theta), theta, shapes, form, channel,
                         recipe.limits_hz[channel.name])
            for kind, theta in (("gaussian", [gauss.x, 0.0, 0.0]), ("drag", list(drag.x)))}


def _entry(figures, theta, shapes, form, channel, limit_hz: float) -> dict:
    """One calibrated pulse's report entry: its figures, parameters and peak."""
    fid, leak = figures
    played = _samples(np.asarray(theta, float), *shapes, form, np)
    i_col, q_col = channel.columns
    peak = float(np.max(np.hypot(played[:, i_col], played[:, q_col])))
    return {"infidelity": float(1 - fid), "leakage": float(leak),
            "amplitude_scale": float(theta[0]), "drag_coefficient": float(theta[1]),
            "detuning_hz": float(theta[2]) * 1e6, "peak_rabi_hz": peak,
            "within_limit": bool(peak <= limit_hz)}


def _too_big(recipe) -> str | None:
    """Why the comparison is not worth its time here (None: it is): too many levels, or
    so many propagator slices that its evaluations would take longer than
    :data:`MAX_SECONDS` (a floor, :func:`shaper.recipe.memory.slice_seconds`)."""
    if recipe.system.dimension > MAX_LEVELS:
        return f"more than {MAX_LEVELS} levels: not worth the time"
    from shaper.recipe.memory import minutes, need_bytes, slice_seconds
    line = recipe.line
    slices = need_bytes(recipe.system, recipe.samples, recipe.sample_rate_hz, 0, recipe.export,
                        line.oversample if line.active and not recipe.export.predistort
                        else 1)[1]
    seconds = (2 * MAX_EVALUATIONS) * slices * slice_seconds(recipe.system.dimension)
    if seconds > MAX_SECONDS:  # a comparison must not cost more than the report around it
        return (f"{slices} propagator slices: calibrating them would take at least "
                f"{minutes(seconds)}")
    return None


def _samples(theta, main, quad, t, form, xp=jnp):
    """The calibrated pulse's samples: ``theta`` = (scale, DRAG coefficient, detuning in
    MHz); ``form`` = (controls, (I column, Q column), a Y rotation). NumPy for the files
    and the report: no JAX op outside jit."""
    controls, (i_col, q_col), is_y = form
    scale, beta, detuning_mhz = theta[0], theta[1], theta[2]
    z = scale * (main + 1j * beta * quad) * (1j if is_y else 1.0) \
        * xp.exp(-2j * np.pi * detuning_mhz * 1e6 * t)
    columns = [xp.zeros(main.shape[0])] * controls
    columns[i_col], columns[q_col] = xp.real(z), xp.imag(z)
    return xp.stack(columns, axis=1)


_PROGRAMS: dict[str, object] = {}


def _program(form: tuple, flags: dict):
    """The jitted ``(theta, main, quad, t, problem) -> (fidelity, leakage)`` for one pulse
    form and evaluation flags, built once per process (a second run of the same recipe
    traces nothing), keyed by an exact digest of what it closes over."""
    key = hashlib.sha256(pickle.dumps((form, flags))).hexdigest()
    if key not in _PROGRAMS:
        def figures(theta, main, quad, t, problem):
            f = evaluate(_samples(theta, main, quad, t, form), problem, qubits=1,
                         is_gate=True, **flags)
            return f.fidelity, f.leakage
        _PROGRAMS[key] = jax.jit(figures)
    return _PROGRAMS[key]

