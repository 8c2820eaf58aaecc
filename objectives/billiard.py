"""Billiard primitives: chords, bounce cosines, the periodic length function and its
linearization, the billiard map itself.

Conventions (see DEVELOPERS.md): the boundary γ(t) is counter-clockwise, s is arclength,
T the unit tangent, N = rot90(T) the inward normal. Phase space is (s, p) with
p = cos θ = ⟨v, T⟩ for the outgoing unit velocity v; the billiard map preserves ds∧dp.

A configuration of n bounces is an array t of curve parameters; chord i runs from t_i to
t_{i+1} (indices cyclic). Functions taking ``period`` accept arrays padded beyond the first
``period`` entries: only bounces 0..period−1 are used and chord period−1 closes the orbit
back to bounce 0, so one code path (and one compilation) serves every period.

The periodic length function is W(t) = Σ_i |γ(t_{i+1}) − γ(t_i)|. With h(s, s') the chord
length, ∂h/∂s = −p and ∂h/∂s' = p' (generating function of the billiard map), and

    a = ∂²h/∂s² = sin²θ/h − κ sin θ,  c = ∂²h/∂s'² = sin²θ'/h − κ' sin θ',
    b = ∂²h/∂s∂s' = sin θ sin θ'/h,
    DT = (1/b) [[−a, −1], [b² − ac, −c]],  det DT = 1,

for the linearized map (δs, δp) ↦ (δs', δp') (a standard consequence of the generating
function; e.g. S. Tabachnikov, "Geometry and Billiards", AMS 2005, ch. 2 and 6, from memory).
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp

from .curve import Array, Curve, cross, safe_norm, taylor


class Jets(NamedTuple):
    """γ, γ', γ'' at each bounce parameter (arrays of shape (n, 2))."""

    point: Array
    velocity: Array
    acceleration: Array


class Chords(NamedTuple):
    """Per-chord data for the chord i → next(i) (arrays of shape (n,)).

    ``length`` h_i; ``cos_out`` p_i = ⟨u_i, T_i⟩ at the start; ``cos_in`` ⟨u_i, T_{i+1}⟩ at
    the end (equal to the outgoing cosine there after reflection); ``sin_out``, ``sin_in``
    the sines of the angles to the tangent (positive when the chord enters the domain);
    ``a``, ``b``, ``c`` the second derivatives of h in arclength; ``active`` the mask of
    chords that belong to the orbit.
    """

    length: Array
    cos_out: Array
    cos_in: Array
    sin_out: Array
    sin_in: Array
    a: Array
    b: Array
    c: Array
    active: Array


def next_index(size: int, period) -> Array:
    """Cyclic successor of each slot of a padded configuration: i+1, or 0 at i = period−1."""
    idx = jnp.arange(size)
    return jnp.where(idx + 1 < period, idx + 1, 0)


def _jet2(curve: Curve, s: Array):
    def first(x):
        return jax.jvp(curve, (x,), (jnp.ones_like(x),))

    (g0, g1), (_, g2) = jax.jvp(first, (s,), (jnp.ones_like(s),))
    return g0, g1, g2


def bounce_jets(curve: Curve, t: Array) -> Jets:
    """(γ, γ', γ'') at every entry of the 1-D array ``t`` (one nested forward pass)."""
    return Jets(*jax.vmap(lambda s: _jet2(curve, s))(t))


def chords_from_jets(jets: Jets, period) -> Chords:
    """Chord geometry and generating-function second derivatives (module docstring)."""
    n = jets.point.shape[0]
    nxt = next_index(n, period)
    active = jnp.arange(n) < period
    d = jets.point[nxt] - jets.point
    h = safe_norm(d)
    h_safe = jnp.where(active & (h > 0), h, 1.0)
    u = d / h_safe[:, None]
    speed = safe_norm(jets.velocity)
    tangent = jets.velocity / speed[:, None]
    kappa = cross(jets.velocity, jets.acceleration) / speed**3
    t_end, k_end = tangent[nxt], kappa[nxt]
    cos_out = jnp.sum(u * tangent, axis=-1)
    cos_in = jnp.sum(u * t_end, axis=-1)
    sin_out = cross(tangent, u)
    sin_in = cross(u, t_end)
    a = sin_out**2 / h_safe - kappa * sin_out
    c = sin_in**2 / h_safe - k_end * sin_in
    b = sin_out * sin_in / h_safe
    zero = jnp.zeros_like(h)
    mask = lambda x: jnp.where(active, x, zero)  # noqa: E731
    return Chords(mask(h), mask(cos_out), mask(cos_in), mask(sin_out), mask(sin_in),
                  mask(a), mask(b), mask(c), active)


def chord_lengths(curve: Curve, t: Array, period=None) -> Array:
    """h_i = |γ(t_{i+1}) − γ(t_i)| for the active chords (zero on padding)."""
    period = t.shape[0] if period is None else period
    p = jax.vmap(curve)(t)
    n = t.shape[0]
    h = safe_norm(p[next_index(n, period)] - p)
    return jnp.where(jnp.arange(n) < period, h, 0.0)


def periodic_length(curve: Curve, t: Array, period=None) -> Array:
    """W(t_1..t_n) = Σ_i |γ(t_{i+1}) − γ(t_i)|, the total length of the closed polygon."""
    return jnp.sum(chord_lengths(curve, t, period))


def outgoing_cosines(curve: Curve, t: Array, period=None) -> Array:
    """p_i = ⟨u_i, T(t_i)⟩, the cosine of the outgoing chord with the positive tangent."""
    period = t.shape[0] if period is None else period
    return chords_from_jets(bounce_jets(curve, t), period).cos_out


def length_gradient_from(jets: Jets, chords: Chords, period) -> Array:
    """∂W/∂t_i = |γ'(t_i)| (p_in,i − p_out,i), with p_in,i the cosine of the arriving chord."""
    n = jets.point.shape[0]
    prev = jnp.where(jnp.arange(n) == 0, period - 1, jnp.arange(n) - 1)
    speed = safe_norm(jets.velocity)
    grad_s = chords.cos_in[prev] - chords.cos_out
    return jnp.where(chords.active, speed * grad_s, 0.0)


def arclength_hessian_from(chords: Chords, period) -> Array:
    """Cyclic Hessian of W in the arclengths s_i (n × n; zero rows/columns on padding).

    Diagonal a_i + c_{i−1}; off-diagonal b_i between i and i+1 (for period 2 the two chords
    add: b₁ + b₂).
    """
    n = chords.length.shape[0]
    idx = jnp.arange(n)
    nxt = next_index(n, period)
    hess = jnp.zeros((n, n))
    hess = hess.at[idx, idx].add(chords.a)
    hess = hess.at[nxt, nxt].add(chords.c)
    hess = hess.at[idx, nxt].add(chords.b)
    hess = hess.at[nxt, idx].add(chords.b)
    return hess


def length_hessian_from(jets: Jets, chords: Chords, period) -> Array:
    """Hessian of W in the curve parameters t_i (exact, also away from critical points).

    ∂²W/∂t_i∂t_j = s'_i s'_j ∂²W/∂s_i∂s_j + δ_ij s''_i ∂W/∂s_i with s' = |γ'|,
    s'' = ⟨γ', γ''⟩/|γ'|.
    """
    speed = safe_norm(jets.velocity)
    accel_s = jnp.sum(jets.velocity * jets.acceleration, axis=-1) / speed
    n = speed.shape[0]
    prev = jnp.where(jnp.arange(n) == 0, period - 1, jnp.arange(n) - 1)
    grad_s = jnp.where(chords.active, chords.cos_in[prev] - chords.cos_out, 0.0)
    hess_s = arclength_hessian_from(chords, period)
    return speed[:, None] * hess_s * speed[None, :] + jnp.diag(accel_s * grad_s)


def map_jacobians(chords: Chords) -> Array:
    """DT_i for every chord, shape (n, 2, 2); the identity on padded chords."""
    b = jnp.where(chords.active, chords.b, 1.0)
    a, c = chords.a, chords.c
    dt = jnp.stack([jnp.stack([-a, -jnp.ones_like(a)], -1),
                    jnp.stack([b * b - a * c, -c], -1)], -2) / b[:, None, None]
    return jnp.where(chords.active[:, None, None], dt, jnp.eye(2))


def monodromy_from(chords: Chords) -> Array:
    """P = DT_{n−1} ⋯ DT_0, the linearized return map at bounce 0 in (s, p)."""
    dts = map_jacobians(chords)

    def step(i, prod):
        return dts[i] @ prod

    return jax.lax.fori_loop(0, dts.shape[0], step, jnp.eye(2))


def monodromy(curve: Curve, t: Array, period=None) -> Array:
    """Linearized return map of the closed polygon t (a periodic orbit) in (s, p) at t_0."""
    period = t.shape[0] if period is None else period
    return monodromy_from(chords_from_jets(bounce_jets(curve, t), period))


def billiard_map(curve: Curve, t: Array, p: Array, samples: int = 512,
                 newton_steps: int = 30) -> tuple[Array, Array]:
    """One bounce of the actual billiard map in (t, p): returns (t', p').

    The ray leaves γ(t) with velocity v = p T + √(1 − p²) N and hits the boundary first at
    γ(t'); p' = ⟨v, T(t')⟩ (reflection keeps the tangential component). The hit is
    bracketed on ``samples`` nodes and polished by safeguarded Newton on ⟨v^⊥, γ(t') − γ(t)⟩.
    Valid for simple curves; used for checks and dynamical measurements, not in solvers.
    """
    g = taylor(curve, t, 1)
    x0, tangent = g[0], g[1] / safe_norm(g[1])
    normal = jnp.stack([-tangent[1], tangent[0]])
    v = p * tangent + jnp.sqrt(jnp.maximum(1.0 - p * p, 0.0)) * normal
    grid = t + 2.0 * jnp.pi * (jnp.arange(1, samples) / samples)
    pts = jax.vmap(curve)(grid)
    side = cross(v, pts - x0)
    ahead = jnp.sum((pts - x0) * v, axis=-1)
    change = (jnp.sign(side[:-1]) != jnp.sign(side[1:])) & (ahead[:-1] > 0) & (ahead[1:] > 0)
    dist = jnp.where(change, 0.5 * (ahead[:-1] + ahead[1:]), jnp.inf)
    k = jnp.argmin(dist)
    lo, hi = grid[k], grid[k + 1]
    f = lambda s: cross(v, curve(s) - x0)  # noqa: E731
    df = jax.grad(f)
    f_lo = f(lo)

    def newton(_, state):
        lo, hi, f_lo, s = state
        fs = f(s)
        same = jnp.sign(fs) == jnp.sign(f_lo)
        lo, hi = jnp.where(same, s, lo), jnp.where(same, hi, s)
        f_lo = jnp.where(same, fs, f_lo)
        trial = s - fs / df(s)
        inside = (trial >= jnp.minimum(lo, hi)) & (trial <= jnp.maximum(lo, hi))
        nxt = jnp.where(inside & jnp.isfinite(trial), trial, 0.5 * (lo + hi))
        return lo, hi, f_lo, jnp.where(fs == 0.0, s, nxt)

    s_hit = jax.lax.fori_loop(0, newton_steps, newton, (lo, hi, f_lo, 0.5 * (lo + hi)))[3]
    g1 = taylor(curve, s_hit, 1)[1]
    p_next = jnp.sum(v * g1) / safe_norm(g1)
    return jnp.mod(s_hit, 2.0 * jnp.pi), p_next
