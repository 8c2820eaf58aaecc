"""Differential geometry and global measurements of a closed curve.

Conventions: the curve is counter-clockwise, s is arclength, T = γ'/|γ'| the unit
tangent, N = rot90(T) the *inward* unit normal, and κ = det(γ', γ'')/|γ'|³ the signed
curvature (κ = 1/R > 0 on a circle of radius R). Integrals over the boundary use the
trapezoid rule on ``resolution`` equispaced nodes in t, which converges exponentially
for analytic curves.
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp

from .curve import DEFAULT_RESOLUTION, Array, Curve, cross, nodes, safe_norm, sample, taylor


def speed(curve: Curve, t: Array) -> Array:
    """|γ'(t)| = ds/dt."""
    return safe_norm(taylor(curve, t, 1)[1])


def unit_tangent(curve: Curve, t: Array) -> Array:
    d1 = taylor(curve, t, 1)[1]
    return d1 / safe_norm(d1)


def inward_normal(curve: Curve, t: Array) -> Array:
    """N = T rotated by +π/2; points into the domain for a counter-clockwise curve."""
    tx, ty = unit_tangent(curve, t)
    return jnp.stack([-ty, tx])


def curvature(curve: Curve, t: Array) -> Array:
    """Signed curvature κ(t) = det(γ', γ'')/|γ'|³."""
    g = taylor(curve, t, 2)
    return cross(g[1], g[2]) / safe_norm(g[1]) ** 3


def curvature_jet(curve: Curve, t: Array, order: int = 2) -> Array:
    """(κ, dκ/ds, …, d^order κ/ds^order) at a scalar t, by d/ds = |γ'|⁻¹ d/dt."""
    funcs = [lambda s: curvature(curve, s)]
    for _ in range(order):
        prev = funcs[-1]
        funcs.append(
            lambda s, prev=prev: jax.jvp(prev, (s,), (jnp.ones_like(s),))[1] / speed(curve, s)
        )
    return jnp.stack([f(t) for f in funcs])


def _weights(curve: Curve, resolution: int) -> tuple[Array, Array]:
    """Points/derivatives at nodes and the arclength quadrature weights |γ'| 2π/n."""
    g = sample(curve, resolution, order=2)
    return g, safe_norm(g[1]) * (2.0 * jnp.pi / resolution)


def area(curve: Curve, resolution: int = DEFAULT_RESOLUTION) -> Array:
    """Enclosed area ½∮(x dy − y dx) (positive for counter-clockwise curves)."""
    g = sample(curve, resolution, order=1)
    return 0.5 * jnp.sum(cross(g[0], g[1])) * (2.0 * jnp.pi / resolution)


def perimeter(curve: Curve, resolution: int = DEFAULT_RESOLUTION) -> Array:
    """Length ∮ ds."""
    return jnp.sum(_weights(curve, resolution)[1])


def centroid(curve: Curve, resolution: int = DEFAULT_RESOLUTION) -> Array:
    """Centroid of the enclosed region, (1/A)∬(x, y) dA via Green's theorem."""
    g = sample(curve, resolution, order=1)
    h = 2.0 * jnp.pi / resolution
    (x, y), (dx, dy) = g[0].T, g[1].T
    a = 0.5 * jnp.sum(x * dy - y * dx) * h
    return jnp.stack([jnp.sum(x * x * dy), -jnp.sum(y * y * dx)]) * h / (2.0 * a)


def curvature_moment(curve: Curve, power: int, resolution: int = DEFAULT_RESOLUTION) -> Array:
    """∮ κ^power ds."""
    g, w = _weights(curve, resolution)
    kappa = cross(g[1], g[2]) / safe_norm(g[1]) ** 3
    return jnp.sum(kappa**power * w)


def boundary_integral(curve: Curve, integrand, order: int = 2,
                      resolution: int = DEFAULT_RESOLUTION) -> Array:
    """∮ integrand(κ, κ_s, …, κ^(order)) ds for a function of the curvature jet."""
    t = nodes(resolution)
    jets = jax.vmap(lambda s: curvature_jet(curve, s, order))(t)
    w = jax.vmap(lambda s: speed(curve, s))(t) * (2.0 * jnp.pi / resolution)
    return jnp.sum(integrand(*jets.T) * w)


def _refined_min(f, t_grid: Array, values: Array, steps: int = 4) -> tuple[Array, Array]:
    """Minimum of a smooth periodic f: grid argmin, then Newton on f' = 0.

    The location is not differentiated (envelope theorem); the value is f at it.
    """
    t0 = jax.lax.stop_gradient(t_grid[jnp.argmin(values)])
    df = jax.grad(f)
    d2f = jax.grad(df)

    def newton(_, t):
        step = df(t) / d2f(t)
        return jnp.where(jnp.isfinite(step) & (d2f(t) > 0), t - jnp.clip(step, -0.05, 0.05), t)

    t_star = jax.lax.stop_gradient(jax.lax.fori_loop(0, steps, newton, t0))
    better = f(t_star) <= jnp.min(values)
    t_star = jnp.where(better, t_star, t0)
    return f(t_star), t_star


def convexity_margin(curve: Curve, resolution: int = DEFAULT_RESOLUTION) -> tuple[Array, Array]:
    """(min κ, t where it is attained). Strictly convex iff the margin is > 0."""
    t = nodes(resolution)
    kappa = jax.vmap(lambda s: curvature(curve, s))(t)
    return _refined_min(lambda s: curvature(curve, s), t, kappa)


class Simplicity(NamedTuple):
    """Chord–arc margin min |γ(t₁)−γ(t₂)| / arc(t₁, t₂) over node pairs, in (0, 1].

    It is 2/π for a circle and tends to 0 as the curve approaches itself; ``crossing``
    is True when two polygon edges through the nodes intersect (a self-intersection).
    """

    margin: Array
    t_first: Array
    t_second: Array
    crossing: Array


def simplicity(curve: Curve, resolution: int = DEFAULT_RESOLUTION) -> Simplicity:
    """Self-intersection check with the closest non-adjacent pair reported."""
    t = nodes(resolution)
    g, w = _weights(curve, resolution)
    p = g[0]
    s = jnp.concatenate([jnp.zeros(1), jnp.cumsum(w)[:-1]])
    length = jnp.sum(w)
    ds = jnp.abs(s[:, None] - s[None, :])
    arc = jnp.minimum(ds, length - ds)
    chord = safe_norm(p[:, None, :] - p[None, :, :])
    off_diag = ~jnp.eye(resolution, dtype=bool)
    ratio = jnp.where(off_diag, chord / jnp.where(off_diag, arc, 1.0), jnp.inf)
    flat = jnp.argmin(ratio)
    i, j = jnp.unravel_index(flat, ratio.shape)
    return Simplicity(ratio[i, j], t[i], t[j], _polygon_crosses(p))


def polygon_convex(p: Array) -> Array:
    """Whether the closed polygon p turns left at every vertex with total turning 2π.

    Such a polygon is convex, hence simple and counter-clockwise (elementary; common practice):
    an O(n) certificate that spares the O(n²) :func:`simplicity` test on convex shapes.
    """
    e = jnp.roll(p, -1, axis=0) - p
    nxt = jnp.roll(e, -1, axis=0)
    turn = jnp.arctan2(cross(e, nxt), jnp.sum(e * nxt, axis=-1))
    return jnp.all(turn > 0.0) & (jnp.abs(jnp.sum(turn) - 2.0 * jnp.pi) < 1e-6)


def _polygon_crosses(p: Array) -> Array:
    """Whether any two non-adjacent edges of the closed polygon p intersect."""
    n = p.shape[0]
    a, b = p, jnp.roll(p, -1, axis=0)
    d = b - a
    r = a[None, :, :] - a[:, None, :]
    denom = cross(d[:, None, :], d[None, :, :])
    u = cross(r, d[None, :, :]) / jnp.where(denom == 0, 1.0, denom)
    v = cross(r, d[:, None, :]) / jnp.where(denom == 0, 1.0, denom)
    idx = jnp.arange(n)
    gap = jnp.abs(idx[:, None] - idx[None, :])
    non_adjacent = (gap > 1) & (gap < n - 1)
    hit = (denom != 0) & (u >= 0) & (u <= 1) & (v >= 0) & (v <= 1) & non_adjacent
    return jnp.any(hit)


def boundary_graph(curve: Curve, t: Array) -> Array:
    """(f'', f''', f'''') at 0 of the boundary written as a graph y = f(x) over its tangent.

    x runs along T and y along the inward normal N at γ(t), so f(0) = f'(0) = 0 and
    f'' = κ, f''' = κ_s, f'''' = κ_ss + 3κ³. Computed by series reversion of the Taylor
    expansion of γ, independently of the curvature formulas.
    """
    g = taylor(curve, t, 4)
    tangent = g[1] / safe_norm(g[1])
    normal = jnp.stack([-tangent[1], tangent[0]])
    fact = jnp.array([1.0, 1.0, 2.0, 6.0, 24.0])
    x = (g @ tangent) / fact
    y = (g @ normal) / fact
    a1 = 1.0 / x[1]
    a2 = -x[2] * a1**3
    a3 = (2.0 * x[2] ** 2 - x[1] * x[3]) * a1**5
    b2 = y[2] * a1**2
    b3 = 2.0 * y[2] * a1 * a2 + y[3] * a1**3
    b4 = y[2] * (a2**2 + 2.0 * a1 * a3) + 3.0 * y[3] * a1**2 * a2 + y[4] * a1**4
    return jnp.stack([2.0 * b2, 6.0 * b3, 24.0 * b4])


def fourier_decay_rate(curve: Curve, resolution: int = DEFAULT_RESOLUTION,
                       floor: float = 1e-13) -> Array:
    """Analyticity proxy: σ in |ẑ_k| ≈ C e^{-σ|k|}, fitted over |k| ≥ 2 above ``floor``.

    ẑ_k are the Fourier coefficients of z = x + iy in the normalized arclength 2πs/L, so σ
    is a property of the shape (not of its parametrization): it estimates the half-width of
    the strip of analyticity of the arclength parametrization. +inf when no coefficient with
    |k| ≥ 2 rises above the floor (a circle). For shapes given as trigonometric polynomials
    (an ellipse) the arclength reparametrization is what produces the decay.
    """
    p = jax.vmap(curve)(arclength_parameters(curve, resolution, resolution))
    z_hat = jnp.fft.fft(p[:, 0] + 1j * p[:, 1]) / resolution
    k = jnp.arange(2, resolution // 2)
    mag = jnp.maximum(jnp.abs(z_hat[k]), jnp.abs(z_hat[-k]))
    scale = jnp.max(jnp.abs(z_hat))
    use = mag > floor * scale
    wgt = use.astype(mag.dtype)
    logm = jnp.log(jnp.where(use, mag, 1.0))
    n = jnp.sum(wgt)
    km = jnp.sum(wgt * k) / jnp.maximum(n, 1.0)
    lm = jnp.sum(wgt * logm) / jnp.maximum(n, 1.0)
    cov = jnp.sum(wgt * (k - km) * (logm - lm))
    var = jnp.sum(wgt * (k - km) ** 2)
    slope = cov / jnp.where(var > 0, var, 1.0)
    return jnp.where(n >= 2, -slope, jnp.inf)


def arclength_parameters(curve: Curve, count: int, resolution: int = DEFAULT_RESOLUTION,
                         newton_steps: int = 8) -> Array:
    """Curve parameters t_j with s(t_j) = j·L/count, s measured from t = 0.

    s(t) is integrated spectrally from the Fourier series of |γ'|; the roots are found by
    Newton's method from linear interpolation of s at the quadrature nodes (at most
    ``newton_steps`` steps, fewer once every step is below 1e-10) and differentiated implicitly
    (one last correction step through stop_gradient, which also brings t to round-off).
    """
    h = 2.0 * jnp.pi / resolution
    sp = jax.vmap(lambda s: speed(curve, s))(nodes(resolution))
    coef = jnp.fft.rfft(sp) / resolution
    k = jnp.arange(coef.shape[0])
    length = jnp.sum(sp) * h
    # s(t) = c0 t + Σ_{k≥1} 2 Re[c_k (e^{ikt} − 1)/(ik)]; the Nyquist term carries weight 1.
    mult = jnp.where((k == 0) | ((resolution % 2 == 0) & (k == resolution // 2)), 1.0, 2.0)
    wave = mult[1:] * coef[1:] / (1j * k[1:])

    def s_of(t, c0=coef[0].real, wave=wave):
        return c0 * t + jnp.sum((wave * (jnp.exp(1j * k[1:] * t) - 1.0)).real)

    targets = length * jnp.arange(count) / count
    # s at the nodes is the same series, summed by one inverse FFT
    periodic = (jnp.fft.ifft(jnp.zeros(resolution, wave.dtype).at[1:k.shape[0]].set(wave))
                * resolution).real
    t_nodes = jnp.append(nodes(resolution), 2.0 * jnp.pi)
    s_nodes = jnp.append(coef[0].real * t_nodes[:-1] + periodic - periodic[0], length)
    # the loop sees constants only (no derivative flows through its iterations)
    frozen, c0, frozen_wave, frozen_targets = jax.lax.stop_gradient(
        (curve, coef[0].real, wave, targets))

    def newton_step(state):
        i, t, _ = state
        step = (jax.vmap(lambda u: s_of(u, c0, frozen_wave))(t) - frozen_targets) / jax.vmap(
            lambda u: speed(frozen, u))(t)
        return i + 1, t - step, jnp.max(jnp.abs(step))

    t0 = jax.lax.stop_gradient(jnp.interp(targets, s_nodes, t_nodes))
    _, t_star, _ = jax.lax.while_loop(
        lambda state: (state[0] < newton_steps) & (state[2] > 1e-10), newton_step,
        (jnp.asarray(0), t0, jnp.asarray(jnp.inf)))
    return t_star - (jax.vmap(s_of)(t_star) - targets) / jax.lax.stop_gradient(
        jax.vmap(lambda u: speed(curve, u))(t_star))
