"""The propagator of a piecewise-constant driven Hamiltonian, with exact gradients.

Slice j holds ``H_j = drift + sum_k samples[j, k] * controls[k]`` (Hz) for ``dt``
seconds, so its propagator is ``U_j = exp(-2 pi i H_j dt)`` and the total is
``U = U_{n-1} ... U_1 U_0`` (README, "Conventions").

Two ways to exponentiate a slice, chosen with ``method=``:

- ``"eigh"`` (default): one Hermitian eigendecomposition per slice, with a custom
  derivative (Daleckii-Krein) written so that it stays exact where eigenvalues
  meet. Autodiff through ``jnp.linalg.eigh`` gives NaN at zero controls on a
  transmon, whose levels 0 and 1 are degenerate on resonance; this does not.
- ``"pade"``: ``jax.scipy.linalg.expm`` (Pade with scaling and squaring) and
  plain autodiff. Slower (see ``shaper bench``); kept as an independent check.

The slices are multiplied pairwise (a tree of depth log2 n), which is both
faster and more accurate than a sequential product.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike

from shaper.errors import InputError
from shaper.physics import _jax  # noqa: F401  (float64 and the compilation cache)
from shaper.physics.systems import assert_hermitian

PROPAGATORS = ("eigh", "pade")  # optimizer.propagator: how each slice is exponentiated
# Up to this size a batched product is faster as a broadcast multiply-and-sum, which XLA
# fuses, than as a batched matmul call: measured 1.5-2.5x on value-and-gradient at d = 2-4,
# slower from d = 5 (shaper bench, 2-core CPU).
SMALL_MATRIX = 4


def _matmul(a: jax.Array, b: jax.Array) -> jax.Array:
    if a.shape[-1] <= SMALL_MATRIX:
        return jnp.sum(a[..., :, :, None] * b[..., None, :, :], axis=-2)
    return a @ b


@jax.custom_jvp
def cycle_exponential(phases: ArrayLike) -> jax.Array:
    """``exp(-2 pi i X)`` for a stack of Hermitian matrices ``X = H dt`` (in cycles).

    Args:
        phases: ``(..., d, d)`` complex128 Hermitian matrices, dimensionless.

    Returns:
        ``(..., d, d)`` unitaries.

    References:
        The derivative is the Daleckii-Krein formula for the Frechet derivative of a
        matrix function (Daleckii and Krein, 1965): for ``X = v diag(x) v^dag``,
        ``dU = v (G o (v^dag dX v)) v^dag`` with
        ``G_mn = -2 pi i exp(-i pi (x_m + x_n)) sinc(x_m - x_n)``, which equals the
        divided difference for distinct eigenvalues and its limit where they meet.
    """
    x, v = jnp.linalg.eigh(phases, symmetrize_input=False)
    return _matmul(v * jnp.exp(-2j * jnp.pi * x)[..., None, :], jnp.conj(jnp.swapaxes(v, -1, -2)))


def taylor_exponential(phases: ArrayLike, degree: int = 18, squarings: int = 4) -> jax.Array:
    """``exp(-2 pi i X)`` by a Taylor polynomial with scaling and squaring: matrix products
    only, no LAPACK call (so it may run beside the one eigendecomposition of a program,
    DEVELOPERS.md "One eigendecomposition per program"). For small generators (the lab
    frame's kicks): with ``|2 pi X| <= 2^squarings`` each scaled factor's remainder is
    below ``e / (degree + 1)!`` (Taylor's theorem; 2e-17 with the defaults), about 1e-16
    after the squarings."""
    a = (-2j * jnp.pi / 2 ** squarings) * jnp.asarray(phases)
    eye = jnp.broadcast_to(jnp.eye(a.shape[-1], dtype=a.dtype), a.shape)
    out = eye
    for k in range(degree, 0, -1):  # Horner: I + a/1 (I + a/2 (I + ...))
        out = eye + _matmul(a, out) / k
    for _ in range(squarings):
        out = _matmul(out, out)
    return out


@cycle_exponential.defjvp
def _cycle_exponential_jvp(primals, tangents):
    (phases,), (dphases,) = primals, tangents
    x, v = jnp.linalg.eigh(phases, symmetrize_input=False)
    vh = jnp.conj(jnp.swapaxes(v, -1, -2))
    half = jnp.exp(-1j * jnp.pi * x)  # N exponentials; G is their outer product times sinc
    u = _matmul(v * (half * half)[..., None, :], vh)
    g = (-2j * jnp.pi) * half[..., :, None] * half[..., None, :] * jnp.sinc(
        x[..., :, None] - x[..., None, :])
    du = _matmul(_matmul(v, g * _matmul(_matmul(vh, dphases), v)), vh)
    return u, du


def _pade_exponential(phases: jax.Array) -> jax.Array:
    flat = phases.reshape((-1,) + phases.shape[-2:])
    out = jax.vmap(jax.scipy.linalg.expm)(-2j * jnp.pi * flat)
    return out.reshape(phases.shape)


def slice_unitaries(drift: ArrayLike, controls: ArrayLike, samples: ArrayLike, dt: ArrayLike,
                    *, method: str = "eigh", extra: ArrayLike | None = None,
                    slopes: ArrayLike | None = None) -> jax.Array:
    """The propagator of every slice, ``(n, d, d)``, first slice first.

    Args: as :func:`propagate`; ``extra``: ``(n, d, d)`` Hermitian, Hz, added to each
    slice's Hamiltonian (a term that is not linear in the controls, such as the lab
    frame's second-order correction, :mod:`shaper.physics.effective`); ``slopes``: each
    control's rate of change across each slice (:func:`slope_term`).
    """
    hamiltonians = drift + jnp.einsum("nk,kij->nij", samples.astype(controls.dtype), controls)
    if extra is not None:
        hamiltonians = hamiltonians + extra
    if slopes is not None:
        hamiltonians = hamiltonians + slope_term(hamiltonians, controls, slopes, dt)
    phases = hamiltonians * dt
    if method == "eigh":
        return cycle_exponential(phases)
    return _pade_exponential(phases)


def slope_term(hamiltonians: ArrayLike, controls: ArrayLike, slopes: ArrayLike,
               dt: ArrayLike) -> jax.Array:
    """The fourth-order Magnus term of controls that change across their slices, Hz.

    A slice whose Hamiltonian is ``Hbar + (t - t_mid) Vdot`` over ``h`` seconds
    (``Hbar``: the slice's mean, ``hamiltonians``; ``Vdot = sum_k slopes[:, k]
    controls[k]``, Hz/s) has, to fourth order in ``h``, the propagator
    ``exp(-2 pi i h (Hbar + K))`` with ``K = -i (pi h^2 / 6) [Vdot, Hbar]`` (Hermitian).
    Holding the mean alone (``K = 0``) is second order, and its error grows with the
    frame's transition frequencies times ``h``: on a 6x6-level cross-resonance pair whose
    transitions reach 1.3 GHz from the frame, 2 slices per 2.4 GS/s sample put the
    leakage 20x low; with ``K`` it is within 1 % there (README, "Slices").

    References:
        The fourth-order Magnus integrator with the moments of ``A(t) = -2 pi i H(t)``:
        ``Omega = B0 + [B1, B0]``, ``B0 = int A``, ``B1 = (1/h) int (t - t_mid) A``
        (Blanes, Casas and Ros, BIT 40, 434 (2000); Blanes, Casas, Oteo and Ros,
        Phys. Rep. 470, 151 (2009), section 5). With a linear slope, ``B1 = -2 pi i
        (h^2 / 12) Vdot``, and ``[B1, B0] = -2 pi i h K``.
    """
    vdot = jnp.einsum("nk,kij->nij", jnp.asarray(slopes).astype(controls.dtype), controls)
    h = jnp.reshape(jnp.asarray(dt), (-1, 1, 1))
    return (-1j * jnp.pi / 6) * h * h * (_matmul(vdot, hamiltonians)
                                         - _matmul(hamiltonians, vdot))


def with_slope_term(drift, controls, samples, slopes, dt, extra=None):
    """``extra`` plus :func:`slope_term` of the slices' mean Hamiltonians (``drift``, the
    samples on ``controls`` and ``extra``), for a propagator that takes an extra term
    rather than slopes (the Lindblad channel, a map); ``extra`` itself without slopes."""
    if slopes is None:
        return extra
    controls = jnp.asarray(controls)
    mean = jnp.asarray(drift) + jnp.einsum("nk,kij->nij",
                                           jnp.asarray(samples).astype(controls.dtype), controls)
    mean = mean if extra is None else mean + extra
    term = slope_term(mean, controls, slopes, dt)
    return term if extra is None else extra + term


def ordered_product(unitaries: jax.Array) -> jax.Array:
    """``U_{n-1} ... U_1 U_0`` of a stack ``(n, d, d)``, multiplied pairwise."""
    while unitaries.shape[0] > 1:
        if unitaries.shape[0] % 2:
            eye = jnp.eye(unitaries.shape[-1], dtype=unitaries.dtype)
            unitaries = jnp.concatenate([unitaries, eye[None]], axis=0)
        unitaries = _matmul(unitaries[1::2], unitaries[0::2])
    return unitaries[0]


def propagate(drift: ArrayLike, controls: ArrayLike, samples: ArrayLike, dt: ArrayLike, *,
              method: str = "eigh", history: bool = False,
              slopes: ArrayLike | None = None) -> jax.Array:
    """The total propagator of a piecewise-constant pulse.

    Args:
        drift: ``(d, d)`` Hermitian, Hz (H/h in the drive frame).
        controls: ``(k, d, d)`` Hermitian, dimensionless; sample ``u`` of control ``k``
            adds ``u * controls[k]`` (Hz) to the Hamiltonian.
        samples: ``(n, k)`` real float64, Hz; row j is held over ``[j dt, (j+1) dt)``.
        dt: slice length in seconds (a scalar).
        method: ``"eigh"`` (default, fastest measured) or ``"pade"``.
        history: if True, return the ``(n + 1, d, d)`` products after 0, 1, ..., n
            slices (the first is the identity) instead of the total.
        slopes: ``(n, k)`` Hz/s, each control's rate of change across its slice, where
            ``samples`` are the slices' means of a changing output (:func:`slope_term`).

    Returns:
        ``(d, d)`` unitary, or ``(n + 1, d, d)`` with ``history=True``.

    Raises:
        InputError: wrong shapes or dtypes, float32, non-Hermitian matrices, unknown method.

    Examples:
        A pi pulse on a qubit (2 levels): I = 50 MHz for 10 ns is a rotation by pi.

        >>> import numpy as np
        >>> x = np.array([[0, 0.5], [0.5, 0]])  # (a + a^dag)/2 on two levels
        >>> u = propagate(np.zeros((2, 2)), x[None], np.full((10, 1), 50e6), 1e-9)
        >>> np.round(abs(np.asarray(u)) ** 2, 12)
        array([[0., 1.],
               [1., 0.]])
    """
    drift, controls, samples = check_arrays(drift, controls, samples, dt, method=method)
    unitaries = slice_unitaries(drift, controls, samples, dt, method=method,
                                slopes=None if slopes is None else jnp.asarray(slopes, float))
    if not history:
        return ordered_product(unitaries)
    products = jax.lax.associative_scan(lambda early, late: late @ early, unitaries)
    eye = jnp.eye(drift.shape[-1], dtype=products.dtype)
    return jnp.concatenate([eye[None], products], axis=0)


def _is_concrete(x) -> bool:
    return not isinstance(x, jax.core.Tracer)


def check_arrays(drift, controls, samples, dt, *, method: str = "eigh"):
    """Validate and convert the propagator's inputs; return (drift, controls, samples).

    Shapes and dtypes are always checked; values (Hermiticity, finiteness) only when
    the arrays are concrete, i.e. outside ``jit``.
    """
    if method not in PROPAGATORS:
        raise InputError(f"unknown propagator method {method!r}; choose one of {PROPAGATORS}")
    for name, arr in (("drift", drift), ("controls", controls), ("samples", samples)):
        dtype = getattr(arr, "dtype", None)
        if dtype is not None and dtype in (np.float32, np.complex64, np.float16):
            raise InputError(
                f"{name} is {dtype}; shaper needs float64/complex128 (float32 gets infidelities "
                f"wrong by 1e-7 or more). Convert with .astype(np.float64) or complex128.")
    samples = jnp.asarray(samples)
    if jnp.iscomplexobj(samples):
        raise InputError("samples must be real (Hz); split a complex I + iQ into two columns")
    samples = samples.astype(jnp.float64)
    drift = jnp.asarray(drift).astype(jnp.complex128)
    controls = jnp.asarray(controls).astype(jnp.complex128)
    if drift.ndim != 2 or drift.shape[0] != drift.shape[1]:
        raise InputError(f"drift must be a square (d, d) matrix, got shape {drift.shape}")
    d = drift.shape[0]
    if controls.ndim != 3 or controls.shape[1:] != (d, d):
        raise InputError(f"controls must have shape (k, {d}, {d}) to match the drift, "
                         f"got {controls.shape}")
    if samples.ndim != 2 or samples.shape[1] != controls.shape[0]:
        raise InputError(f"samples must have shape (n, {controls.shape[0]}): one column per "
                         f"control, got {samples.shape}")
    if samples.shape[0] < 1:
        raise InputError("samples must hold at least one slice")
    if _is_concrete(dt) and not (np.ndim(dt) == 0 and float(dt) > 0):
        raise InputError(f"dt must be a positive number of seconds, got {dt!r}")
    if all(_is_concrete(a) for a in (drift, controls, samples)):
        if not bool(jnp.all(jnp.isfinite(samples))):
            raise InputError("samples contain NaN or infinite values")
        assert_hermitian(np.asarray(drift), "drift")
        for k in range(controls.shape[0]):
            assert_hermitian(np.asarray(controls[k]), f"controls[{k}]")
    return drift, controls, samples
