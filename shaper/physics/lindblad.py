"""Open-system propagation of piecewise-constant samples: the Lindblad master equation.

The state is a density matrix ``rho`` (d x d); each slice evolves it under the Lindblad
generator (Lindblad, Commun. Math. Phys. 48, 119 (1976)), in Hz and 1/s:

    d rho / dt = -2 pi i [H, rho] + sum_k (L_k rho L_k^dag - 1/2 {L_k^dag L_k, rho})

Vectorised column by column (``vec(A X B) = (B^T kron A) vec(X)``), the generator is a
d^2 x d^2 matrix ``G = G_drift + sum_c u_c G_c + D`` and a slice of length dt is
``exp(G dt)``, exact for piecewise-constant samples. ``G`` is not Hermitian (nor normal),
so the eigendecomposition of the unitary propagator does not apply: each slice is a
scaled-and-squared Taylor exponential (chosen by measurement, see ``TAYLOR_ORDER``),
differentiated by JAX, and the slices are multiplied pairwise like the unitary ones.
Float64 throughout.

Transmon noise (README, "Decoherence"): level n decays to n - 1 at rate n / T1
(``L = a / sqrt(T1)``, the harmonic-oscillator scaling of the Duffing model, common
practice), and the number operator dephases (``L = sqrt(2 / T_phi) n``), so the coherence
between levels m and n decays at ``(m - n)^2 / T_phi`` on top of the decay, with
``1 / T_phi = 1 / T2 - 1 / (2 T1)``: the 0-1 coherence then decays at 1 / T2.
"""

from __future__ import annotations

from collections.abc import Sequence

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike

from shaper.errors import InputError
from shaper.physics import _jax  # noqa: F401
from shaper.physics.propagator import ordered_product, with_slope_term


def hamiltonian_superoperator(h: ArrayLike) -> jax.Array:
    """``-2 pi i (I kron H - H^T kron I)``: the commutator part for column-stacked rho."""
    h = jnp.asarray(h)
    eye = jnp.eye(h.shape[-1], dtype=h.dtype)
    return -2j * jnp.pi * (jnp.kron(eye, h) - jnp.kron(h.T, eye))


def dissipator(collapse: Sequence[np.ndarray], d: int) -> np.ndarray:
    """``sum_k conj(L) kron L - 1/2 I kron L^dag L - 1/2 (L^dag L)^T kron I`` (1/s)."""
    eye = np.eye(d)
    out = np.zeros((d * d, d * d), complex)
    for op in collapse:
        op = np.asarray(op, complex)
        if op.shape != (d, d) or not np.all(np.isfinite(op)):
            raise InputError(f"a collapse operator must be a finite {d}x{d} matrix, got "
                             f"shape {op.shape}")
        ldl = op.conj().T @ op
        out += np.kron(op.conj(), op) - 0.5 * np.kron(eye, ldl) - 0.5 * np.kron(ldl.T, eye)
    return out


# The slice exponential: Taylor to this order after scaling the generator to a 1-norm of at
# most TAYLOR_NORM, then squaring. Remainder <= 0.5^15 / 15! e^0.5 ~ 4e-17 per slice before
# the squarings. Measured against jax.scipy.linalg.expm (Pade 13 with scaling and squaring,
# the first version) on the value and gradient of the channel infidelity, 4 levels, 48
# samples: 8.7 ms against 27 ms, values equal to 4e-15 and gradients to 3e-14 relative.
# Matrix products only: no LAPACK call in an open-system program (DEVELOPERS.md, "One
# eigendecomposition per program").
TAYLOR_ORDER = 14
TAYLOR_NORM = 0.5


def squarings(norm_bound: float) -> int:
    """How often to square so that the scaled generator's 1-norm is at most TAYLOR_NORM."""
    return max(0, int(np.ceil(np.log2(max(norm_bound, 1e-300) / TAYLOR_NORM))))


def taylor_exponential(gens: jax.Array, scalings: int) -> jax.Array:
    """``exp(A)`` of a stack of matrices whose 1-norms are at most TAYLOR_NORM 2^scalings."""
    a = gens / (2.0 ** scalings)
    eye = jnp.eye(a.shape[-1], dtype=a.dtype)
    term, out = eye, eye
    for k in range(1, TAYLOR_ORDER + 1):
        term = (term @ a) / k
        out = out + term
    for _ in range(scalings):
        out = out @ out
    return out


def norm_bound(drift, controls, limits_hz, noise, dt: float, detuning_hz: float = 0.0,
               scale: float = 1.0) -> float:
    """A bound on ``||G dt||_1`` for any samples within ``limits_hz`` (one per control
    column), a detuning offset up to ``detuning_hz`` on every subsystem and amplitude
    scales up to ``scale``: what fixes the number of squarings before tracing."""
    d = np.asarray(drift).shape[-1]
    h0 = np.asarray(hamiltonian_superoperator(np.asarray(drift))) + np.asarray(noise)
    total = np.abs(h0).sum(axis=0).max()
    total += 4 * np.pi * abs(detuning_hz) * d  # |[n, .]| superoperator, n <= d - 1 levels
    for op, limit in zip(np.asarray(controls), np.asarray(limits_hz, float), strict=True):
        gc = np.asarray(hamiltonian_superoperator(op))
        total += scale * limit * np.abs(gc).sum(axis=0).max()
    return float(total * dt)


def scalings_for(drift, controls, samples, dt, noise) -> int:
    """The squarings that concrete samples need (NumPy, before tracing)."""
    g0 = np.asarray(hamiltonian_superoperator(np.asarray(drift))) + np.asarray(noise)
    gc = np.array([np.asarray(hamiltonian_superoperator(op)) for op in np.asarray(controls)])
    gens = (g0 + np.einsum("nk,kij->nij", np.asarray(samples, float), gc)) \
        * np.reshape(np.asarray(dt, float), (-1, 1, 1))
    return squarings(float(np.abs(gens).sum(axis=-2).max()))


def slice_channels(drift: ArrayLike, controls: ArrayLike, samples: ArrayLike, dt: ArrayLike,
                   noise: ArrayLike, *, scalings: int | None = None,
                   extra: ArrayLike | None = None,
                   slopes: ArrayLike | None = None) -> jax.Array:
    """``exp(G_j dt_j)`` of every slice, ``(n, d^2, d^2)``; ``noise`` is the dissipator.

    ``scalings`` (static) must cover every slice's generator (:func:`norm_bound`,
    :func:`squarings`); None: taken from the samples, which must then be concrete.
    ``extra``: ``(n, d, d)`` Hermitian, Hz, added to each slice's Hamiltonian (the lab
    frame's second-order term, :mod:`shaper.physics.effective`). ``slopes``: the controls'
    rates of change across each slice; their fourth-order term
    (:func:`shaper.physics.propagator.slope_term`) joins the Hamiltonian (its commutator
    with the dissipator, smaller by the decay rate times the slice, is left out).
    """
    extra = with_slope_term(drift, controls, samples, slopes, dt, extra)
    g0 = hamiltonian_superoperator(drift) + noise
    gc = jax.vmap(hamiltonian_superoperator)(jnp.asarray(controls))
    gens = g0 + jnp.einsum("nk,kij->nij", jnp.asarray(samples).astype(gc.dtype), gc)
    if extra is not None:
        gens = gens + jax.vmap(hamiltonian_superoperator)(jnp.asarray(extra))
    gens = gens * jnp.reshape(jnp.asarray(dt), (-1, 1, 1))
    if scalings is None:
        if isinstance(gens, jax.core.Tracer):
            raise InputError("inside jit, give scalings (from norm_bound) for the open "
                             "propagator")
        scalings = squarings(float(jnp.max(jnp.sum(jnp.abs(gens), axis=-2))))
    return taylor_exponential(gens, scalings)


def propagate_open(drift: ArrayLike, controls: ArrayLike, samples: ArrayLike, dt: ArrayLike,
                   noise: ArrayLike, *, scalings: int | None = None,
                   extra: ArrayLike | None = None,
                   slopes: ArrayLike | None = None) -> jax.Array:
    """The total channel ``S = S_{n-1} ... S_0`` of a piecewise-constant pulse (d^2 x d^2).

    Args: as :func:`shaper.physics.propagator.propagate`, plus ``noise``, the ``(d^2, d^2)``
    dissipator of :func:`dissipator`. With ``noise = 0`` the result is
    ``conj(U) kron U`` of the unitary propagator.
    """
    return ordered_product(slice_channels(drift, controls, samples, dt, noise,
                                          scalings=scalings, extra=extra, slopes=slopes))


def channel_block(s: ArrayLike, computational: ArrayLike, d: int) -> jax.Array:
    """The channel restricted to the computational subspace, ``(d_c^2, d_c^2)``: inputs
    and outputs ``|i><j|`` with i, j computational (column-stacked index ``i + d j``)."""
    idx = jnp.asarray(computational)
    flat = (idx[:, None] + d * idx[None, :]).T.reshape(-1)  # vec order: column j, row i
    return jnp.asarray(s)[flat[:, None], flat[None, :]]


def channel_figures(block: ArrayLike, target: ArrayLike) -> tuple[jax.Array, jax.Array]:
    """Average gate fidelity and leakage of a (possibly leaky) channel on the subspace.

    For Kraus operators K_k of the restricted map E and target U (d = d_c):
    ``F = [sum_k |Tr(U^dag K_k)|^2 + sum_k Tr(K_k^dag K_k)] / (d (d + 1))``, which is
    Nielsen's formula (Phys. Lett. A 303, 249 (2002); Horodecki et al., Phys. Rev. A 60,
    1888 (1999)) extended to maps that lose population, and equals Pedersen's formula for
    a single Kraus operator. In the column-stacked Liouville form
    ``sum_k |Tr(U^dag K_k)|^2 = Tr(S_U^dag S)`` with ``S_U = conj(U) kron U``, and
    ``sum_k Tr(K_k^dag K_k) = sum_i Tr E(|i><i|) = d (1 - L)`` with L the leakage
    (Wood and Gambetta, Phys. Rev. A 97, 032306 (2018)).
    """
    block = jnp.asarray(block)
    u = jnp.asarray(target)
    d = u.shape[-1]
    s_target = jnp.kron(jnp.conj(u), u)
    overlap = jnp.real(jnp.trace(jnp.conj(s_target).T @ block))
    diag = jnp.arange(d) * (d + 1)  # vec index of |i><i|
    kept = jnp.real(jnp.sum(block[diag[:, None], diag[None, :]]))  # sum_i Tr E(|i><i|)
    fidelity = (overlap + kept) / (d * (d + 1))
    return fidelity, 1.0 - kept / d


def _frame_superop(angles: jax.Array, bits: jax.Array) -> jax.Array:
    """Diagonal of the superoperator of ``Z(angles)`` on the subspace (column-stacked)."""
    z = jnp.exp(1j * (bits @ angles))
    return (z[:, None] * jnp.conj(z)[None, :]).T.reshape(-1)


def framed_overlap(block: jax.Array, target: jax.Array, before: jax.Array, after: jax.Array,
                   bits: jax.Array) -> jax.Array:
    """``Re Tr(S_U^dag S_Z(after) S S_Z(before))``: the only part of the channel fidelity
    that frame updates change."""
    framed = _frame_superop(after, bits)[:, None] * block * _frame_superop(before, bits)[None, :]
    s_target = jnp.kron(jnp.conj(target), target)
    return jnp.real(jnp.sum(jnp.conj(s_target) * framed))


def best_channel_angles(block: ArrayLike, target: ArrayLike, qubits: int, *,
                        steps: int = 16) -> tuple[jax.Array, jax.Array]:
    """Frame angles (before, after) that maximise the channel's fidelity to ``target``.

    Newton's method on the 2q angles from a few fixed starts, the best kept. Each step is
    monotone: the best of the Newton step and a few gradient steps (0.3 to 0.003 rad)
    if it improves the fidelity, else no move; at the optimum the search stays there
    (a fixed step taken when Newton's did not improve moved a converged search 0.1 rad
    off, and a budget ending on that step put ring-5's q0 X/2 budget 10x high). Like the
    unitary search it carries no gradient (the envelope theorem); the canonical choice of
    :func:`shaper.physics.figures.canonical_angles` is applied to the result.
    """
    from shaper.physics.figures import _STARTS, canonical_angles, qubit_bits

    block = jax.lax.stop_gradient(jnp.asarray(block))
    target = jnp.asarray(target)
    bits = jnp.asarray(qubit_bits(qubits))

    def value(theta):
        return framed_overlap(block, target, theta[qubits:], theta[:qubits], bits)

    grad, hess = jax.grad(value), jax.hessian(value)

    sizes = jnp.asarray([0.3, 0.1, 0.03, 0.01, 0.003])

    def newton(theta, _):
        g = grad(theta)
        h = hess(theta) - 1e-12 * jnp.eye(theta.shape[0])
        along = g / (jnp.linalg.norm(g) + 1e-300)
        candidates = jnp.concatenate([(theta - jnp.linalg.solve(h, g))[None],
                                      theta[None] + sizes[:, None] * along[None]])
        values = jax.vmap(value)(candidates)
        best = jnp.argmax(values)
        return jnp.where(values[best] > value(theta), candidates[best], theta), None

    def run(start):
        theta, _ = jax.lax.scan(newton, jnp.full(2 * qubits, start), None, length=steps)
        return theta, value(theta)

    thetas, values = jax.vmap(run)(jnp.asarray(_STARTS))
    theta = thetas[jnp.argmax(values)]
    return canonical_angles(theta[qubits:], theta[:qubits],
                            lambda b, a: framed_overlap(block, target, b, a, bits))


def open_figures(drift, controls, samples, dt, noise, computational, target, *, qubits: int,
                 virtual_z: bool, scalings: int | None = None, slopes=None):
    """Channel fidelity, leakage and frame angles of a pulse on an open system.

    Returns:
        ``Figures`` (fidelity, leakage, frame_before, frame_after) of the channel restricted
        to the computational subspace.
    """
    from shaper.physics.figures import Figures, qubit_bits

    d = jnp.asarray(drift).shape[-1]
    s = propagate_open(drift, controls, samples, dt, noise, scalings=scalings, slopes=slopes)
    block = channel_block(s, computational, d)
    zeros = jnp.zeros(qubits)
    if virtual_z:
        before, after = best_channel_angles(block, target, qubits)
        bits = jnp.asarray(qubit_bits(qubits))
        block = (_frame_superop(after, bits)[:, None] * block
                 * _frame_superop(before, bits)[None, :])
    else:
        before, after = zeros, zeros
    fidelity, leak = channel_figures(block, target)
    return Figures(fidelity, leak, before, after)
