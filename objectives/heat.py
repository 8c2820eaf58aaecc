"""Heat-trace invariants of a smooth simply connected planar domain.

Z(t) = Σ_j exp(−λ_j t) ~ Σ_{k≥0} c_k t^{(k−2)/2} as t → 0⁺, for −Δu = λu with Dirichlet
or Neumann conditions (the Neumann spectrum includes λ₀ = 0). Coefficients, with ± meaning
Dirichlet/Neumann and κ_s = dκ/ds:

  c₀ = |Ω|/(4π)                                   Kac 1966
  c₁ = ∓|∂Ω|/(8√π)                                Pleijel 1954; Kac 1966
  c₂ = (1/12π) ∮κ ds  (= 1/6)                      McKean & Singer 1967
  c₃ = (1/256√π) ∮κ² ds     | (5/256√π) ∮κ² ds    Stewartson & Waechter 1971; Smith 1981
  c₄ = (1/315π) ∮κ³ ds      | (1/45π) ∮κ³ ds      Branson & Gilkey 1990 (a₂, flat 2-D)
  c₅ = 2⁻¹⁵π^{-1/2} ∮(37κ⁴ − 8κ_s²) ds | 2⁻¹⁵π^{-1/2} ∮(269κ⁴ − 152κ_s²) ds
                                                  Branson, Gilkey, Kirsten & Vassilevich 1999 (a_{5/2})
"""

from __future__ import annotations

import jax.numpy as jnp

from .curve import DEFAULT_RESOLUTION, Array, Curve, cross, safe_norm, sample
from .geometry import area

BOUNDARIES = ("dirichlet", "neumann")
MAX_ORDER = 5

_SQRT_PI = jnp.sqrt(jnp.pi)
# (sign of c₁, c₃ factor, c₄ factor, c₅ κ⁴ weight, c₅ κ_s² weight)
_TABLE = {
    "dirichlet": (-1.0, 1.0 / (256.0 * _SQRT_PI), 1.0 / (315.0 * jnp.pi), 37.0, -8.0),
    "neumann": (1.0, 5.0 / (256.0 * _SQRT_PI), 1.0 / (45.0 * jnp.pi), 269.0, -152.0),
}


def heat_coefficients(curve: Curve, boundary: str = "dirichlet", order: int = MAX_ORDER,
                      resolution: int = DEFAULT_RESOLUTION) -> Array:
    """(c₀, …, c_order) of the small-t heat-trace expansion (see module docstring)."""
    if boundary not in _TABLE:
        raise ValueError(f"boundary must be one of {BOUNDARIES}, got {boundary!r}")
    if not 0 <= order <= MAX_ORDER:
        raise ValueError(f"order must be between 0 and {MAX_ORDER}, got {order}")
    sign, f3, f4, w4, ws = _TABLE[boundary]
    kappa, kappa_s, speed = _curvature_and_derivative(curve, resolution)
    ds = speed * (2.0 * jnp.pi / resolution)
    length = jnp.sum(ds)
    integral = lambda f: jnp.sum(f * ds)  # noqa: E731
    coeffs = jnp.stack([
        area(curve, resolution) / (4.0 * jnp.pi),
        sign * length / (8.0 * _SQRT_PI),
        integral(kappa) / (12.0 * jnp.pi),
        f3 * integral(kappa**2),
        f4 * integral(kappa**3),
        integral(w4 * kappa**4 + ws * kappa_s**2) / (2.0**15 * _SQRT_PI),
    ])
    return coeffs[: order + 1]


def _curvature_and_derivative(curve: Curve, resolution: int):
    """κ, κ_s and |γ'| at the trapezoid nodes from one Taylor sample (the first three t-derivatives).

    κ = (γ'×γ'')/|γ'|³ and κ_s = |γ'|⁻¹ dκ/dt = [(γ′×γ‴)|γ'|² − 3(γ'×γ'')(γ'·γ'')]/|γ'|⁶,
    the quotient rule written out so the gradient does not differentiate nested derivatives.
    """
    g = sample(curve, resolution, order=3)
    d1, d2, d3 = g[1], g[2], g[3]
    speed = safe_norm(d1)
    cross12 = cross(d1, d2)
    kappa = cross12 / speed**3
    kappa_s = (cross(d1, d3) * speed**2 - 3.0 * cross12 * jnp.sum(d1 * d2, axis=-1)) / speed**6
    return kappa, kappa_s, speed


def heat_trace_series(coefficients: Array, t: Array) -> Array:
    """Σ_k c_k t^{(k−2)/2}, the truncated small-t expansion of Z(t)."""
    k = jnp.arange(coefficients.shape[0])
    t = jnp.asarray(t)[..., None]
    return jnp.sum(coefficients * t ** ((k - 2) / 2.0), axis=-1)
