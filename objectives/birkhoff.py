"""Birkhoff normal form of the billiard return map at an elliptic periodic orbit.

Conventions. Phase space (s, p): s arclength along the counter-clockwise boundary, p the
cosine of the angle from the positively oriented tangent to the outgoing ray; the billiard
map T preserves ds∧dp. For a periodic orbit with bounce parameters t_1..t_n the return map
is P = Tⁿ (T² for a bouncing ball). Near an elliptic, non-resonant orbit there are
area-preserving polar coordinates (I, φ) in which

    P : (I, φ) ↦ (I, φ + α + τ₁ I + τ₂ I² + … + τ_K I^K) + O(I^{K+1/2}),

with I the phase-space area enclosed by an invariant curve divided by 2π, α ∈ (0, π) with
cos α = tr(DP)/2, and φ measured in the sense in which DP rotates by +α (angles in radians).
The τ_k are the Birkhoff invariants (G. D. Birkhoff, "Dynamical Systems", 1927; J. Moser,
"Stable and Random Motions in Dynamical Systems", 1973; both from memory).

Method.
1. Arclength charts: at every bounce point the boundary as a series Γ_i(σ) in the arclength
   offset σ, from the curve's t-jet by series reversion of s(t).
2. Each chord map (σ_i, q_i) ↦ (σ_{i+1}, q_{i+1}) (q = p − p_orbit) as a truncated series:
   with h = |Γ_{i+1}(σ') − Γ_i(σ)| the generating function, p = −∂h/∂σ, p' = ∂h/∂σ', the
   first relation is solved for σ' by a series fixed point (exact to the truncation degree).
3. P = composition of the chord maps, to degree 2K + 1.
4. A linear area-preserving change makes DP the rotation by α; in z = u + iv the map is
   z ↦ e^{iα}z + …, and the homological equations are solved degree by degree
   (F∘Φ = Φ∘N with N(w) = w(e^{iα} + Σ c_m |w|^{2m})).
5. The normalizing change Φ need not be symplectic, so the rotation angle θ(|w|²) =
   arg(1 + Σ c_m e^{−iα}|w|^{2m}) is re-expressed in the action I of the invariant curve
   Φ(|w| = r), computed exactly from Φ's coefficients: I = ½ Σ_m m |Z_m(r)|² for
   Φ(r e^{iφ}) = Σ_m Z_m(r) e^{imφ}. This gives the coordinate-free rotation function ω(I).

The orbit's bounce points are refined by Newton's method on the periodic length function
W(t) = Σ|γ(t_{i+1}) − γ(t_i)| under ``stop_gradient`` and then corrected by one Newton step
with a held Jacobian, so derivatives with respect to the curve's parameters follow the
implicit function theorem without differentiating the iterations.
"""

from __future__ import annotations

import functools
import math
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax.experimental import jet

from . import taylor_map as tm
from .curve import Array, Curve
from .status import Status, code, combine

MAX_ORDER = 6
"""Largest K accepted (Taylor degree 2K + 1 = 13)."""


class BirkhoffResult(NamedTuple):
    """Rotation function ω(I) = angle + Σ_k tau[k−1] I^k of the return map at one orbit.

    ``resonance_order``: smallest m ≤ 2·order + 2 with e^{imα} = 1 within tolerance (0 if
    none); τ_k needs m > 2k + 2 and is NaN otherwise. ``trace``: tr DP. ``length``: orbit
    length. ``bounce_params``: the refined t_1..t_n. ``status``: int32 Status code.
    """

    angle: Array
    tau: Array
    resonance_order: Array
    status: Array
    trace: Array
    length: Array
    bounce_params: Array


# ----------------------------------------------------------------------------- orbit
def periodic_length(curve: Curve, t: Array) -> Array:
    """W(t) = Σ_i |γ(t_{i+1}) − γ(t_i)| (cyclic), the length of the closed polygon."""
    points = jax.vmap(curve)(t)
    return jnp.sum(jnp.linalg.norm(jnp.roll(points, -1, axis=0) - points, axis=1))


def refine_bounces(curve: Curve, t: Array, newton_steps: int = 12, tol: float = 1e-10):
    """Critical point of W near ``t``: (t*, status); t* carries implicit derivatives.

    Newton's method under ``stop_gradient``, then t* − H⁻¹∇W(t*) with H held constant,
    which has the exact first derivative of the root with respect to the curve parameters.
    """
    gradient = jax.grad(periodic_length, argnums=1)
    hessian = jax.hessian(periodic_length, argnums=1)
    frozen = jax.lax.stop_gradient(curve)

    def newton(_, s):
        return s - jnp.linalg.solve(hessian(frozen, s), gradient(frozen, s))

    t0 = jax.lax.stop_gradient(jnp.asarray(t, dtype=jnp.float64))
    root = jax.lax.fori_loop(0, newton_steps, newton, t0)
    h = jax.lax.stop_gradient(hessian(frozen, root))
    corrected = root - jnp.linalg.solve(h, gradient(curve, root))
    scale = jnp.max(jnp.abs(h))
    residual = jnp.max(jnp.abs(gradient(frozen, root)))
    singular = jnp.abs(jnp.linalg.det(h)) <= 1e-12 * scale ** h.shape[0]
    status = combine(jnp.where(residual > tol, code(Status.orbit_not_converged), code(Status.ok)),
                     jnp.where(singular, code(Status.degenerate), code(Status.ok)))
    return corrected, status


# ----------------------------------------------------------------------------- charts
def curve_derivatives(curve: Curve, t: Array, order: int) -> Array:
    """(γ, γ', …, γ^(order)) at scalar t by Taylor-mode propagation (jax.experimental.jet).

    Same values as :func:`objectives.curve.taylor`, but the cost grows polynomially with the
    order instead of exponentially like nested jvp (order 8 compiles ~10× faster).
    """
    t = jnp.asarray(t, dtype=jnp.float64)
    series = [jnp.ones_like(t)] + [jnp.zeros_like(t)] * (order - 1)
    point, terms = jet.jet(curve, (t,), (series,))
    return jnp.concatenate([point[None], jnp.stack(terms)])


def arclength_chart(curve: Curve, t: Array, degree: int) -> Array:
    """Coefficients of Γ(σ) = γ(t(σ)), σ the arclength from γ(t), to σ^degree: (degree+1, 2)."""
    factorials = np.asarray([math.factorial(k) for k in range(degree + 1)], dtype=float)
    coeffs = curve_derivatives(curve, t, degree) / factorials[:, None]
    velocity = coeffs[1:] * np.arange(1, degree + 1)[:, None]  # γ'(t + u), degree − 1
    speed = tm.upower_of(tm.umul(velocity[:, 0], velocity[:, 0])
                         + tm.umul(velocity[:, 1], velocity[:, 1]), 0.5)
    arclength = jnp.concatenate([jnp.zeros(1), speed / np.arange(1, degree + 1)])
    u_of_sigma = tm.urevert(arclength)
    return tm.upowers(u_of_sigma, degree).T @ coeffs


def _chord_map(start: Array, end: Array, degree: int):
    """Series (S, Q) of the chord map (σ, q) ↦ (σ', q') between two arclength charts.

    ``start``/``end`` are chart coefficients to degree + 1. Returns S, Q and the orbit's
    outgoing cosine at the start and incoming cosine at the end.
    """
    d = degree
    chord = tm.embed(end.T, 1, d) - tm.embed(start.T, 0, d)  # Γ_end(σ') − Γ_start(σ), (2, M)
    derivative = np.arange(1, d + 2)[:, None]
    tangent_start = tm.embed((start[1:] * derivative).T, 0, d)
    tangent_end = tm.embed((end[1:] * derivative).T, 1, d)
    inverse_length = tm.power_of(tm.mul(chord[0], chord[0]) + tm.mul(chord[1], chord[1]), -0.5)
    cos_start = tm.mul(tm.mul(chord[0], tangent_start[0]) + tm.mul(chord[1], tangent_start[1]),
                       inverse_length)  # p = −∂h/∂σ
    cos_end = tm.mul(tm.mul(chord[0], tangent_end[0]) + tm.mul(chord[1], tangent_end[1]),
                     inverse_length)  # p' = ∂h/∂σ'
    p_start, p_end = cos_start[0], cos_end[0]
    g = cos_start.at[0].set(0.0)
    q = tm.variable(1, d)
    slope = g[tm.index(d, 0, 1)]

    def fixed_point(_, s):
        # each pass fixes one more degree of σ'(σ, q): the linear part is exact
        return s + (q - tm.compose_second(g, s)) / slope

    landing = jax.lax.fori_loop(0, d, fixed_point, q / slope)
    return landing, tm.compose_second(cos_end.at[0].set(0.0), landing), p_start, p_end


def bounce_charts(curve: Curve, t: Array, degree: int) -> Array:
    """Arclength charts at every bounce, to σ^(degree+1): shape (n, degree + 2, 2)."""
    return jax.vmap(lambda s: arclength_chart(curve, s, degree + 1))(t)


def return_map_from_charts(charts: Array, degree: int):
    """Taylor series (S, Q) of P = Tⁿ at the orbit in chart coordinates (σ, q) at t_1."""
    landing, cosine, _, _ = jax.vmap(lambda a, b: _chord_map(a, b, degree))(
        charts, jnp.roll(charts, -1, axis=0))

    def chain(current, maps):
        s, q = maps
        return (tm.compose(s, *current), tm.compose(q, *current)), None

    identity = (tm.variable(0, degree), tm.variable(1, degree))
    (s, q), _ = jax.lax.scan(chain, identity, (landing, cosine))
    return s, q


# ----------------------------------------------------------------------------- normal form
def _rotation_frame(linear: Array, angle: Array) -> Array:
    """M with |det M| = 1 and M⁻¹ A M = rotation by +angle, for elliptic A with cos = tr/2."""
    lam = jnp.exp(1j * angle)
    a, b, c, d = linear[0, 0], linear[0, 1], linear[1, 0], linear[1, 1]
    first = jnp.stack([b + 0j, lam - a])   # both are eigenvectors for e^{iα}
    second = jnp.stack([lam - d, c + 0j])
    v = jnp.where(jnp.linalg.norm(first) >= jnp.linalg.norm(second), first, second)
    frame = jnp.stack([v.real, -v.imag], axis=1)
    return frame / jnp.sqrt(jnp.abs(jnp.linalg.det(frame)))


def _complex_form(s: Array, q: Array, frame: Array) -> Array:
    """The map in z = u + iv, (σ, q) = M(u, v), as a series F(z, z̄) (x ↦ z, y ↦ z̄)."""
    d = tm.degree(s)
    z, zbar = tm.variable(0, d, jnp.complex128), tm.variable(1, d, jnp.complex128)
    u, v = 0.5 * (z + zbar), -0.5j * (z - zbar)
    sigma = frame[0, 0] * u + frame[0, 1] * v
    cosine = frame[1, 0] * u + frame[1, 1] * v
    image = jnp.stack([tm.compose(s + 0j, sigma, cosine), tm.compose(q + 0j, sigma, cosine)])
    back = jnp.linalg.inv(frame) @ image
    return back[0] + 1j * back[1]


def _normalize(series: Array, angle: Array):
    """Solve F∘Φ = Φ∘N degree by degree; returns (Φ, N) with N(w) = w(λ + Σ c_m|w|^{2m})."""
    d = tm.degree(series)
    i, j = tm.exponents(d)
    total = i + j
    lam = jnp.exp(1j * angle)
    twist_term = (i == j + 1)
    divisor = lam - jnp.exp(1j * angle * (i - j))
    divisor = jnp.where(twist_term, 1.0, divisor)
    identity = tm.variable(0, d, jnp.complex128)

    def step(n, carry):
        phi, normal = carry
        error = (tm.compose(series, phi, tm.swap_conjugate(phi))
                 - tm.compose(phi, normal, tm.swap_conjugate(normal)))
        at_degree = total == n
        phi = phi + jnp.where(at_degree & ~twist_term, -error / divisor, 0.0)
        normal = normal + jnp.where(at_degree & twist_term, error, 0.0)
        return phi, normal

    return jax.lax.fori_loop(2, d + 1, step, (identity, lam * identity))


def _action_series(phi: Array, order: int) -> Array:
    """I(ρ) = area/2π of Φ({|w|² = ρ}) as a series in ρ, coefficients ρ^0..ρ^order."""
    d = tm.degree(phi)
    i, j = tm.exponents(d)
    harmonics = np.arange(-d, d + 1)
    # Z_m(r) = Σ_{i−j=m} φ_ij r^{i+j}: scatter coefficients into (harmonic, power of r)
    keep = i + j <= 2 * order  # r^{2K} needs only terms of degree < 2K
    table = jnp.zeros((2 * d + 1, 2 * order + 1), dtype=phi.dtype).at[
        (i - j + d)[keep], (i + j)[keep]].add(phi[keep])
    squared = tm.umul(table, jnp.conj(table)).real  # |Z_m(r)|² to r^{2K}
    area = 0.5 * harmonics @ squared
    return area[0: 2 * order + 1: 2]


def _resonance_order(angle: Array, bound: int, tol: float) -> Array:
    m = jnp.arange(1, bound + 1)
    hit = jnp.abs(jnp.exp(1j * m * angle) - 1.0) < tol
    return jnp.where(jnp.any(hit), m[jnp.argmax(hit)], 0)


def _linear_part(s: Array, q: Array) -> Array:
    d = tm.degree(s)
    return jnp.array([[s[tm.index(d, 1, 0)], s[tm.index(d, 0, 1)]],
                      [q[tm.index(d, 1, 0)], q[tm.index(d, 0, 1)]]])


def rotation_function(s: Array, q: Array, order: int):
    """(tr DP, α, τ₁..τ_K) from the return map's series (S, Q); α = arccos(tr/2).

    Values are meaningless unless |tr| < 2 and α is non-resonant to order 2K + 2: the
    callers mask them (see :func:`birkhoff_invariants`).
    """
    linear = _linear_part(s, q)
    trace = jnp.trace(linear)
    half = trace / 2.0
    angle = jnp.arccos(jnp.where(jnp.abs(half) < 1.0, half, 0.0))
    frame = _rotation_frame(linear, angle)
    phi, normal = _normalize(_complex_form(s, q, frame), angle)
    d = tm.degree(s)
    lam = jnp.exp(1j * angle)
    twist = jnp.stack([normal[tm.index(d, m + 1, m)] for m in range(1, order + 1)]) / lam
    multiplier = jnp.concatenate([jnp.zeros(1, dtype=twist.dtype), twist])  # |w|^{2m} terms
    theta = tm.ulog1p(multiplier).imag  # θ(ρ) − α, ρ = |w|²
    action = _action_series(phi, order)
    rho_of_action = tm.urevert(action)
    tau = tm.ucompose(theta, rho_of_action)[1:]
    return trace, angle, tau


@functools.partial(jax.jit, static_argnums=0)
def invariants_from_charts(order: int, charts: Array):
    """(tr DP, α, τ) from the bounce charts (see :func:`bounce_charts`, degree 2·order + 1).

    Jitted on its own: it does not depend on the boundary function, so every curve family
    shares one compilation per (order, number of bounces) when called outside a jit.
    """
    s, q = return_map_from_charts(charts, 2 * order + 1)
    return rotation_function(s, q, order)


# jitted pieces, so eager calls compile each once per boundary function (and the
# boundary-independent algebra once per order); inside an outer jit they are inlined
_refine_jit = jax.jit(refine_bounces, static_argnums=(2, 3))
_charts_jit = jax.jit(bounce_charts, static_argnums=2)


def birkhoff_invariants(curve: Curve, bounce_params: Array, order: int = 3, *,
                        newton_steps: int = 12, resonance_tol: float = 1e-8,
                        orbit_tol: float = 1e-10) -> BirkhoffResult:
    """Birkhoff invariants τ₁..τ_order of the periodic orbit through ``bounce_params``.

    ``bounce_params`` t_1..t_n (n ≥ 2) are refined to the nearby critical point of the
    periodic length (Newton, ``newton_steps``). Status: ``not_elliptic`` if |tr DP| ≥ 2
    (angle and τ are NaN), ``degenerate`` if the orbit's Hessian is singular, ``resonant`` if
    e^{imα} = 1 for some m ≤ 2·order + 2 (τ_k with m ≤ 2k + 2 are NaN),
    ``orbit_not_converged``, ``nonfinite``. Jittable with ``order`` static.
    """
    if not isinstance(order, (int, np.integer)) or not 1 <= order <= MAX_ORDER:
        raise ValueError(f"order: expected an integer in 1..{MAX_ORDER}, got {order!r}")
    t = jnp.asarray(bounce_params, dtype=jnp.float64)
    if t.ndim != 1 or t.shape[0] < 2:
        raise ValueError("bounce_params: expected a 1-D array of at least 2 curve parameters")
    t, orbit_status = _refine_jit(curve, t, newton_steps, orbit_tol)
    trace, angle, tau = invariants_from_charts(order, _charts_jit(curve, t, 2 * order + 1))
    elliptic = jnp.abs(trace) < 2.0
    resonance = jnp.where(elliptic, _resonance_order(angle, 2 * order + 2, resonance_tol), 0)
    allowed = (resonance == 0) | (resonance > 2 * np.arange(1, order + 1) + 2)
    tau = jnp.where(allowed & elliptic, tau, jnp.nan)
    angle = jnp.where(elliptic, angle, jnp.nan)
    nf_status = jnp.where(~elliptic, code(Status.not_elliptic),
                          jnp.where(resonance > 0, code(Status.resonant), code(Status.ok)))
    length = periodic_length(curve, t)
    status = combine(orbit_status, nf_status)
    bad = (nf_status == code(Status.ok)) & ~jnp.all(jnp.isfinite(tau))
    status = jnp.where(bad | ~jnp.isfinite(length), code(Status.nonfinite), status)
    return BirkhoffResult(angle, tau, resonance, status, trace, length, t)
