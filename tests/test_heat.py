"""Heat-trace coefficients against the exact spectrum of the unit disk, and their gradients.

The unit disk's eigenvalues are squares of Bessel zeros (Dirichlet: j_{n,m}², Neumann: j'_{n,m}² and
λ₀ = 0; multiplicity 1 for n = 0, 2 for n ≥ 1), from scipy.special.jn_zeros / jnp_zeros (classical
separation of variables; e.g. Courant & Hilbert, "Methods of Mathematical Physics" I, 1953, §V.5).
The sources of the coefficients themselves are listed in objectives/heat.py: Kac 1966 and Pleijel
1954 (c₀, c₁), McKean & Singer 1967 (c₂), Stewartson & Waechter 1971 and Smith 1981 (c₃),
Branson & Gilkey 1990 (c₄), Branson, Gilkey, Kirsten & Vassilevich 1999 (c₅).

The check: Z(t) − Σ_{k≤K} c_k t^{(k−2)/2} must decay like the first omitted term, t^{(K−1)/2}; the
slope of log|remainder| against log t is fitted on a window where the truncated spectrum is complete
(e^{−λ_max t} < 1e-16) and periodic-orbit terms e^{−L²/4t} (shortest orbit L = 4) are far below
round-off. The κ_s² part of c₅ vanishes on the disk; checking it needs thousands of eigenvalues of an
ellipse, too many for the unit-test budget of the spectrum engine (see the note in DEVELOPERS.md).
"""

from __future__ import annotations

from functools import lru_cache

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.special

from deform.families import Disk, Polar
from deform.shape import from_family
from objectives import heat

T_WINDOW = np.geomspace(0.004, 0.02, 9)
LAMBDA_MAX = 40.0 / T_WINDOW[0]          # e^{−40} < 1e-17 relative to the leading term


@lru_cache(maxsize=None)
def disk_spectrum(boundary: str) -> np.ndarray:
    """All unit-disk eigenvalues ≤ LAMBDA_MAX with multiplicity (see module docstring)."""
    k_max = np.sqrt(LAMBDA_MAX)
    values = [0.0] if boundary == "neumann" else []
    zeros = scipy.special.jn_zeros if boundary == "dirichlet" else scipy.special.jnp_zeros
    n = 0
    while True:
        count = int(k_max / np.pi) + 4
        k = zeros(n, count)
        assert k[-1] > k_max  # the list is complete below k_max
        k = k[k <= k_max]
        if k.size == 0:
            break
        values.extend(np.repeat(k**2, 1 if n == 0 else 2))
        n += 1
    return np.sort(np.asarray(values))


def heat_trace(spectrum: np.ndarray, t: np.ndarray) -> np.ndarray:
    # summed from the largest terms' end (small first) to keep round-off at ~1e-16 relative
    return np.array([np.sum(np.exp(-spectrum[::-1] * ti)) for ti in t])


def test_disk_spectrum_matches_reference_zeros():
    # Bessel zeros from mpmath.besseljzero (independent of scipy's algorithm)
    import mpmath

    mpmath.mp.dps = 20
    d = disk_spectrum("dirichlet")
    assert abs(d[0] - float(mpmath.besseljzero(0, 1)) ** 2) < 1e-12
    assert abs(d[1] - float(mpmath.besseljzero(1, 1)) ** 2) < 1e-12 and d[1] == d[2]
    nm = disk_spectrum("neumann")
    assert nm[0] == 0.0
    assert abs(nm[1] - float(mpmath.besseljzero(1, 1, derivative=1)) ** 2) < 1e-12
    # Weyl's law (Weyl 1911): N(λ) ≈ |Ω|λ/4π ∓ |∂Ω|√λ/4π; here |Ω| = π, |∂Ω| = 2π
    lam = LAMBDA_MAX
    for spec, sign in ((d, -1), (nm, 1)):
        weyl = lam / 4 + sign * np.sqrt(lam) / 2
        assert abs(spec.size - weyl) < 0.02 * weyl


@pytest.mark.parametrize("boundary", ["dirichlet", "neumann"])
def test_disk_heat_trace_remainder_decays_at_the_first_omitted_order(boundary):
    curve = from_family(Disk.build(1.0)).curve()
    coeffs = np.asarray(heat.heat_coefficients(curve, boundary))
    z = heat_trace(disk_spectrum(boundary), T_WINDOW)
    log_t = np.log(T_WINDOW)
    for order in range(heat.MAX_ORDER + 1):
        remainder = z - np.asarray(heat.heat_trace_series(jnp.asarray(coeffs[:order + 1]), T_WINDOW))
        slope = np.polyfit(log_t, np.log(np.abs(remainder)), 1)[0]
        expected = (order - 1) / 2  # the first omitted term is c_{order+1} t^{(order−1)/2}
        assert abs(slope - expected) < 0.1, (boundary, order, slope, expected)
    # the remainder after c₅ is O(t²): 2γ₁t² with 2γ₁ ≈ 0.003 (D) / 0.02 (N), determined
    # numerically; so at most ~1e-5 on the window
    assert np.all(np.abs(remainder) < 2e-5), remainder


@pytest.mark.parametrize("boundary", ["dirichlet", "neumann"])
def test_disk_coefficients_by_fitting_the_remainder(boundary):
    """The leading remainder after c_K, divided by t^{(K−1)/2}, tends to c_{K+1}: fitted as
    a + b√t over the window, its intercept reproduces c₃, c₄, c₅ of the disk to ~1 %."""
    curve = from_family(Disk.build(1.0)).curve()
    coeffs = np.asarray(heat.heat_coefficients(curve, boundary))
    z = heat_trace(disk_spectrum(boundary), T_WINDOW)
    for order in (2, 3, 4):
        remainder = z - np.asarray(heat.heat_trace_series(jnp.asarray(coeffs[:order + 1]), T_WINDOW))
        scaled = remainder / T_WINDOW ** ((order - 1) / 2)
        fit = np.polyfit(np.sqrt(T_WINDOW), scaled, 2)[-1]
        assert abs(fit - coeffs[order + 1]) < 0.01 * abs(coeffs[order + 1]), (order, fit, coeffs)


def test_disk_closed_forms():
    """For the unit disk ∮κⁿ ds = 2π, so c₃ = √π/128 (D) and 5√π/128 (N), c₄ = 2/315 and 2/45,
    c₅ = 37√π/2¹⁴ and 269√π/2¹⁴ (Stewartson & Waechter 1971 give the disk series; from memory)."""
    curve = from_family(Disk.build(1.0)).curve()
    d = np.asarray(heat.heat_coefficients(curve, "dirichlet"))
    n = np.asarray(heat.heat_coefficients(curve, "neumann"))
    sp = np.sqrt(np.pi)
    assert abs(d[0] - 0.25) < 1e-15 and abs(n[0] - 0.25) < 1e-15            # π/(4π)
    assert abs(d[1] + 2 * np.pi / (8 * sp)) < 1e-14 and abs(n[1] - 2 * np.pi / (8 * sp)) < 1e-14
    assert abs(d[2] - 1 / 6) < 1e-14 and abs(n[2] - 1 / 6) < 1e-14
    assert abs(d[3] - sp / 128) < 1e-14 and abs(n[3] - 5 * sp / 128) < 1e-14
    assert abs(d[4] - 2 / 315) < 1e-14 and abs(n[4] - 2 / 45) < 1e-14
    assert abs(d[5] - 37 * sp / 2**14) < 1e-14 and abs(n[5] - 269 * sp / 2**14) < 1e-14


def test_scaling_law():
    """Under Ω ↦ sΩ the spectrum scales by s⁻², so c_k scales by s^{2−k} (dimensional analysis)."""
    family = Polar.build(1.0, cos=[0.0, 0.1, 0.03], sin=[0.0, 0.0, 0.02], modes=4)
    base = from_family(family)
    s = 1.7
    big = base.with_params(np.asarray(base.params) * s)
    c_small = np.asarray(heat.heat_coefficients(base.curve(), "neumann"))
    c_big = np.asarray(heat.heat_coefficients(big.curve(), "neumann"))
    k = np.arange(heat.MAX_ORDER + 1)
    assert np.allclose(c_big, c_small * s ** (2.0 - k), rtol=1e-12)


@pytest.mark.parametrize("boundary", ["dirichlet", "neumann"])
def test_heat_coefficient_gradients_match_central_differences(boundary):
    family = Polar.build(1.0, cos=[0.0, 0.1, 0.03], sin=[0.0, 0.0, 0.02, -0.01], modes=4)
    x0 = family.initial_params()
    shape = from_family(family)
    f = jax.jit(lambda p: heat.heat_coefficients(shape.with_params(p).curve(), boundary, 5, 128))
    jac = np.asarray(jax.jacrev(f)(jnp.asarray(x0)))
    h = 1e-6
    fd = np.stack([(np.asarray(f(jnp.asarray(x0 + h * e))) - np.asarray(f(jnp.asarray(x0 - h * e))))
                   / (2 * h) for e in np.eye(x0.size)], axis=1)
    assert np.allclose(jac, fd, rtol=1e-6, atol=1e-8), np.max(np.abs(jac - fd))
    # c₂ = 1/6 does not depend on the shape (Gauss–Bonnet): zero gradient
    assert np.allclose(jac[2], 0.0, atol=1e-10)


def test_bad_arguments_are_rejected():
    curve = from_family(Disk.build(1.0)).curve()
    with pytest.raises(ValueError, match="boundary"):
        heat.heat_coefficients(curve, "robin")
    with pytest.raises(ValueError, match="order"):
        heat.heat_coefficients(curve, "dirichlet", heat.MAX_ORDER + 1)


def test_c5_on_a_generic_shape_matches_the_curvature_jet_route():
    """c₅ uses κ_s from the quotient rule on (γ′, γ″, γ‴); recompute ∮(wκ⁴ + w_s κ_s²) ds with
    κ_s by nested differentiation of κ along arclength (geometry.curvature_jet), an independent
    route; the weights are those of Branson, Gilkey, Kirsten & Vassilevich 1999 (a_{5/2})."""
    from objectives import geometry

    family = Polar.build(1.0, cos=[0.0, 0.1, 0.03], sin=[0.0, 0.0, 0.02, -0.01], modes=4)
    curve = from_family(family).curve()
    for boundary, (w4, ws) in (("dirichlet", (37.0, -8.0)), ("neumann", (269.0, -152.0))):
        c5 = float(heat.heat_coefficients(curve, boundary)[5])
        integral = float(geometry.boundary_integral(
            curve, lambda k, ks: w4 * k**4 + ws * ks**2, order=1))
        assert abs(c5 - integral / (2**15 * np.sqrt(np.pi))) < 1e-13 * abs(c5) + 1e-15
