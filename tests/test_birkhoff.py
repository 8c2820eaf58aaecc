"""Birkhoff invariants τ_k of billiard return maps, checked against outside references.

Convention under test (objectives/birkhoff.py): P = Tⁿ acts as φ ↦ φ + α + τ₁I + τ₂I² + …,
I = enclosed (s, p)-area / 2π, α ∈ (0, π) measured in the sense in which DP rotates by α.
Papers that use the "natural lift" ω₀ ∈ (0, 2π) of the rotation angle agree with this when
ω₀ < π and have the opposite sign of every τ_k when ω₀ > π.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import mpmath
import numpy as np
import pytest
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

from deform.families import Polar
from deform.shape import from_family, reflected, reparametrized, rotated, scaled, translated
from deform.symmetry import Symmetry
from objectives import taylor_map as tm
from objectives.birkhoff import birkhoff_invariants
from objectives.curve import Curve
from objectives.status import Status

ORDER = 3  # one compilation of the boundary-independent algebra serves every test


def ellipse(params, t):
    return jnp.stack([params[0] * jnp.cos(t), params[1] * jnp.sin(t)])


def quartic_oval(params, t):
    """x²/a² + y²/b² + εx⁴ = 1 in polar form (t the polar angle):
    r² = 2 / (B + √(B² + 4ε cos⁴t)), B = cos²t/a² + sin²t/b²."""
    a, b, eps = params[0], params[1], params[2]
    c, s = jnp.cos(t), jnp.sin(t)
    big_b = c * c / a**2 + s * s / b**2
    r = jnp.sqrt(2.0 / (big_b + jnp.sqrt(big_b**2 + 4.0 * eps * c**4)))
    return r * jnp.stack([c, s])


MINOR_AXIS = jnp.array([np.pi / 2, 3 * np.pi / 2])
# a shape with no symmetry: its bouncing ball near the y-axis has odd Taylor terms at both ends
GENERIC = Polar.build(1.0, cos=[0.0, 0.08, 0.02], sin=[0.0, 0.0, 0.015])


# ----------------------------------------------------------------------------- series algebra
def test_series_composition_matches_direct_evaluation():
    # reference: direct evaluation of the composed polynomials in numpy (common practice)
    degree = 5
    rng = np.random.default_rng(7)
    f, a, b = (rng.normal(size=21) for _ in range(3))
    a[0] = b[0] = 0.0
    i, j = tm.exponents(degree)
    value = lambda c, x, y: np.sum(c * x**i * y**j)  # noqa: E731
    composed = np.asarray(tm.compose(jnp.asarray(f), jnp.asarray(a), jnp.asarray(b)))
    second = np.asarray(tm.compose_second(jnp.asarray(f), jnp.asarray(b)))
    root = np.asarray(tm.power_of(jnp.asarray(f).at[0].set(3.0), -0.5))
    for x, y in [(1e-2, -2e-2), (-3e-2, 1e-2)]:
        direct = value(f, value(a, x, y), value(b, x, y))
        assert abs(value(composed, x, y) - direct) < 50 * 0.03**6, "seed 7"
        assert abs(value(second, x, y) - value(f, x, value(b, x, y))) < 50 * 0.03**6, "seed 7"
        g = value(np.concatenate([[3.0], f[1:]]), x, y)
        assert abs(value(root, x, y) - g**-0.5) < 50 * 0.03**6, "seed 7"


# ----------------------------------------------------------------------------- ellipse
def _ellipse_reference(a: float, b: float, order: int = 3) -> list[float]:
    """τ₁..τ_order at the minor axis from the confocal hyperbolic caustics.

    Rotation angle of T² about the minor-axis orbit for the caustic x²/(a²−λ) + y²/(b²−λ) = 1,
    b² < λ < a²: ω = 2π F(arcsin(b/√λ), k)/K(k), k² = (a² − λ)/(a² − b²) (Chang & Friedberg,
    J. Math. Phys. 29 (1988) 1537; Tabachnikov, "Geometry and Billiards", AMS 2005; attribution
    from memory, the formula itself re-derived by separating the flow in elliptic coordinates).
    Action of the invariant curve p² = 1 − λ/D(φ), D = a² sin²φ + b² cos²φ:
    I = (1/π)∫_{D>λ} √(D − λ) dφ = (2/π)√(a² − b²) (E(k) − (1 − k²)K(k)) (elementary:
    substitute cos φ = k sin ψ; checked against the quadrature below). Both are analytic in
    m = k² at the orbit; Taylor coefficients by mpmath, then ω(I) by series reversion.
    """
    mpmath.mp.dps = 40
    a, b = mpmath.mpf(a), mpmath.mpf(b)

    def omega(m):
        lam = a**2 - m * (a**2 - b**2)
        amplitude = mpmath.asin(b / mpmath.sqrt(lam))
        return 2 * mpmath.pi * mpmath.ellipf(amplitude, m) / mpmath.ellipk(m)

    def action(m):
        scale = 2 / mpmath.pi * mpmath.sqrt(a**2 - b**2)
        return scale * (mpmath.ellipe(m) - (1 - m) * mpmath.ellipk(m))

    m_check = mpmath.mpf("0.3")
    lam = a**2 - m_check * (a**2 - b**2)
    phi0 = mpmath.asin(mpmath.sqrt((lam - b**2) / (a**2 - b**2)))
    excess = lambda p: a**2 * mpmath.sin(p)**2 + b**2 * mpmath.cos(p)**2 - lam  # noqa: E731
    quad = mpmath.quad(lambda p: mpmath.sqrt(excess(p)), [phi0, mpmath.pi / 2]) * 2 / mpmath.pi
    assert abs(quad - action(m_check)) < 1e-25

    w = mpmath.taylor(omega, 0, order)
    s = mpmath.taylor(action, 0, order + 1)
    # revert I(m) = s1 m + s2 m² + … to m(I), substitute into ω(m) (undetermined coefficients)
    m_of_i = [mpmath.mpf(0), 1 / s[1]] + [mpmath.mpf(0)] * (order - 1)
    for k in range(2, order + 1):
        composed = _series_power_sum(s, m_of_i, order)
        m_of_i[k] -= composed[k] / s[1]
    tau = _series_power_sum(w, m_of_i, order)
    return [float(tau[k]) for k in range(1, order + 1)]


def _series_power_sum(coeffs, inner, order):
    """Σ_k coeffs[k] inner^k truncated at degree ``order`` (mpmath lists)."""
    out = [mpmath.mpf(0)] * (order + 1)
    power = [mpmath.mpf(1)] + [mpmath.mpf(0)] * order
    for k in range(len(coeffs)):
        if k > 0:
            power = [sum(power[i] * inner[n - i] for i in range(n + 1)) for n in range(order + 1)]
        out = [o + coeffs[k] * p for o, p in zip(out, power)]
    return out


@pytest.mark.parametrize("a,b", [(1.0, 0.6), (1.3, 0.5)])
def test_ellipse_minor_axis_matches_caustic_rotation(a, b):
    result = birkhoff_invariants(Curve(ellipse, jnp.array([a, b])), MINOR_AXIS, order=ORDER)
    reference = _ellipse_reference(a, b, ORDER)
    assert int(result.status) == Status.ok
    # linear angle: cos ω₀ = 2g² − 1, g = 1 − 2b²/a², i.e. ω₀ = 4 arcsin(b/a) (laser-resonator
    # g-factors, A. E. Siegman, "Lasers", 1986, from memory)
    assert abs(float(result.angle) - 4 * np.arcsin(b / a)) < 1e-12
    # τ₁ = 2b/a²: the first-order term of the caustic expansion above, in closed form
    assert abs(float(result.tau[0]) - 2 * b / a**2) < 1e-10
    np.testing.assert_allclose(np.asarray(result.tau), reference, rtol=1e-8)


# ----------------------------------------------------------------------------- x⁴ ovals
@pytest.mark.parametrize("a,b,eps", [(1.0, 0.6, 0.3), (1.0, 0.6, -0.2), (1.0, 0.8, 0.25),
                                     (1.2, 0.5, 0.4)])
def test_doubly_symmetric_twist_formula(a, b, eps):
    """τ₁ of a bouncing ball between two equivalent vertices of a D₂-symmetric oval:
    τ₁ = 2(6R³f₄h + R/4 − h)/(R(R − h)), boundary y = h − x²/2R − f₄x⁴ near the vertex,
    natural-lift orientation ω₀ = 2 arccos(1 − 2h/R). Derived (sympy normal form) and checked
    numerically by a colleague; the procedure is that of S. Oliffson Kamphorst and
    S. Pinto-de-Carvalho, Experimental Math. 14 (2005) 299–306. Table values determined
    numerically: 2.8875, 0.075, 4.93333, 2.78547."""
    result = birkhoff_invariants(Curve(quartic_oval, jnp.array([a, b, eps])), MINOR_AXIS,
                                 order=ORDER)
    # y = b√(1 − x²/a² − εx⁴) = b − (b/2a²)x² − b(ε/2 + 1/8a⁴)x⁴ + O(x⁶)
    h, radius, f4 = b, a**2 / b, b * (eps / 2 + 1 / (8 * a**4))
    tau1 = 2 * (6 * radius**3 * f4 * h + radius / 4 - h) / (radius * (radius - h))
    natural = 2 * np.arccos(1 - 2 * h / radius)
    sign = 1.0 if natural < np.pi else -1.0
    assert int(result.status) == Status.ok
    assert abs(float(result.angle) - min(natural, 2 * np.pi - natural)) < 1e-12
    assert abs(float(result.tau[0]) - sign * tau1) < 1e-9 * max(1.0, abs(tau1))


# ----------------------------------------------------------------------------- invariance
def _reparametrized_parameter(t_old: float, shift: float, warp: float) -> float:
    """t' with t' + shift + warp·sin t' ≡ t_old (mod 2π), the new parameter of the same point."""
    target = np.mod(t_old - shift, 2 * np.pi)
    return brentq(lambda u: u + warp * np.sin(u) - target, -1.0, 2 * np.pi + 1.0)


def test_coordinate_independence_generic_shape():
    # invariance of τ_k under isometries and reparametrization is part of their definition
    # (Birkhoff, "Dynamical Systems", 1927, from memory); under a dilation by c, I ↦ cI so
    # τ_k ↦ τ_k / c^k (common practice)
    shape = from_family(GENERIC)
    base = birkhoff_invariants(shape.curve(), MINOR_AXIS, order=ORDER)
    assert int(base.status) == Status.ok
    shift, warp, factor = 0.4, 0.3, 1.7
    moved = reparametrized(scaled(translated(rotated(shape, 0.7), (0.3, -0.2)), factor),
                           shift, warp)
    guess = [_reparametrized_parameter(t, shift, warp) for t in np.asarray(base.bounce_params)]
    other = birkhoff_invariants(moved.curve(), jnp.asarray(guess), order=ORDER)
    assert int(other.status) == Status.ok
    assert abs(float(other.angle) - float(base.angle)) < 1e-11
    powers = factor ** np.arange(1, ORDER + 1)
    np.testing.assert_allclose(np.asarray(other.tau) * powers, np.asarray(base.tau),
                               rtol=1e-9, atol=0)
    assert abs(float(other.length) - factor * float(base.length)) < 1e-11


def test_coordinate_independence_under_reflection():
    shape = from_family(Polar.build(1.0, cos=[0.0, -0.08, 0.03, 0.01],
                                    symmetry=Symmetry("mirror")))
    axis = jnp.array([0.0, np.pi])  # the x-axis is the mirror line: a bouncing ball
    base = birkhoff_invariants(shape.curve(), axis, order=ORDER)
    mirrored = birkhoff_invariants(reflected(rotated(shape, 1.1)).curve(), -axis, order=ORDER)
    assert int(base.status) == int(mirrored.status) == Status.ok
    np.testing.assert_allclose(np.asarray(mirrored.tau), np.asarray(base.tau), rtol=1e-9)


# ----------------------------------------------------------------------------- dynamics
_GL_X, _GL_W = np.polynomial.legendre.leggauss(24)


def _unit_tangent(curve, t):
    d = jax.jvp(curve, (t,), (jnp.ones_like(t),))[1]
    return d / jnp.linalg.norm(d)


def _bounce(curve, t, p, guess):
    """The billiard map: leave γ(t) with cosine p, hit γ(u) (Newton from ``guess``)."""
    x0, tangent = curve(t), _unit_tangent(curve, t)
    v = p * tangent + jnp.sqrt(1.0 - p * p) * jnp.stack([-tangent[1], tangent[0]])
    side = lambda u: v[0] * (curve(u) - x0)[1] - v[1] * (curve(u) - x0)[0]  # noqa: E731
    u = jax.lax.fori_loop(0, 25, lambda _, u: u - side(u) / jax.grad(side)(u), guess)
    return u, jnp.dot(v, _unit_tangent(curve, u))


def _arclength(curve, t_from, t_to):
    mid, half = 0.5 * (t_from + t_to), 0.5 * (t_to - t_from)
    speed = jax.vmap(lambda x: jnp.linalg.norm(jax.jvp(curve, (x,), (1.0,))[1]))(mid + half * _GL_X)
    return half * jnp.dot(_GL_W, speed)


def _iterates(curve, t_orbit, offsets, count):
    """(σ, p − p₁) of P^k(start), k = 1..count, P = Tⁿ for the n-periodic orbit t_orbit,
    from starts (t₁ + δ, p₁); σ is the arclength from γ(t₁)."""
    t_orbit = jnp.asarray(t_orbit)
    n = t_orbit.shape[0]
    chord = curve(t_orbit[1]) - curve(t_orbit[0])
    p_orbit = jnp.dot(chord / jnp.linalg.norm(chord), _unit_tangent(curve, t_orbit[0]))

    def one(offset):
        def step(state, _):
            t, p = state
            for i in range(n):  # bounce i → i+1 (cyclic), Newton guess shifted like t
                t, p = _bounce(curve, t, p, t_orbit[(i + 1) % n] + (t - t_orbit[i]))
            t = t_orbit[0] + jnp.mod(t - t_orbit[0] + np.pi, 2 * np.pi) - np.pi
            return (t, p), (t, p)

        start = (t_orbit[0] + offset, p_orbit)
        _, (ts, ps) = jax.lax.scan(step, start, None, length=count)
        return jax.vmap(lambda t: _arclength(curve, t_orbit[0], t))(ts), ps - p_orbit

    return jax.jit(jax.vmap(one))(jnp.asarray(offsets))


def _rotation_and_action(sigma, p):
    """Rotation angle by a weighted Birkhoff average of angle increments (weight
    exp(−1/(x(1−x))): Das, Sander & Yorke, Nonlinearity 30 (2017) 4111, from memory);
    action = area/2π of the invariant curve from a periodic cubic spline of r²(φ)
    (area = ½∮r² dφ)."""
    angle = np.arctan2(p, sigma)
    steps = np.mod(np.diff(angle), 2 * np.pi)
    x = (np.arange(steps.size) + 0.5) / steps.size
    weight = np.exp(-1.0 / (x * (1.0 - x)))
    rotation = np.sum(weight * steps) / np.sum(weight)
    order = np.argsort(angle)
    phi, r2 = angle[order], (sigma**2 + p**2)[order]
    phi, r2 = np.append(phi, phi[0] + 2 * np.pi), np.append(r2, r2[0])
    area = 0.5 * CubicSpline(phi, r2, bc_type="periodic").integrate(phi[0], phi[-1])
    return rotation, area / (2 * np.pi)


def _measured_rotation(curve, result, offsets, count):
    sigma, p = (np.asarray(x) for x in _iterates(curve, result.bounce_params, offsets, count))
    measured = np.array([_rotation_and_action(s, q) for s, q in zip(sigma, p)])
    omega, action = measured[:, 0], measured[:, 1]
    if np.mean(omega) > np.pi:  # measured clockwise in (σ, p): use the sense of DP's rotation
        omega = 2 * np.pi - omega
    return omega, action


def test_rotation_of_iterated_billiard_map_matches_normal_form():
    """Iterate the actual billiard map near the orbit, measure ω(I) on invariant curves, and
    compare with α + τ₁I + τ₂I² + τ₃I³: the residual must decay like I⁴ (fitted rate), and
    a fit of the measured ω(I) must reproduce τ₁ and, loosely, τ₂."""
    curve = from_family(GENERIC).curve()
    result = birkhoff_invariants(curve, MINOR_AXIS, order=ORDER)
    omega, action = _measured_rotation(curve, result, np.geomspace(0.015, 0.05, 6), 2500)
    alpha, tau = _assert_quartic_remainder(result, omega, action)
    fit = np.polyfit(action, omega - alpha, 4)[::-1]  # ω − α = c₀ + c₁I + … (c₀ ≈ 0)
    assert abs(fit[1] - tau[0]) < 1e-4 * abs(tau[0]), (fit, tau)
    assert abs(fit[2] - tau[1]) < 0.05 * abs(tau[1]), (fit, tau)



def _assert_quartic_remainder(result, omega, action):
    """ω(I) − (α + τ₁I + … + τ_K I^K) must decay like I^{K+1} (fitted log-log slope)."""
    alpha, tau = float(result.angle), np.asarray(result.tau)
    predicted = alpha + sum(tau[k] * action ** (k + 1) for k in range(ORDER))
    residual = np.abs(omega - predicted)
    rate = np.polyfit(np.log(action), np.log(residual), 1)[0]
    assert 3.5 < rate < 4.6, (rate, residual, action)
    assert np.all(residual < 1e-3 * np.abs(omega - alpha)), residual
    return alpha, tau

def test_three_periodic_orbit_against_iterated_map():
    """The same dynamical measurement for the elliptic 1/3 min-max orbit of a near-circle
    (P = T³, odd terms at every bounce): ω(I) − (α + τ₁I + τ₂I² + τ₃I³) decays like I⁴."""
    curve = from_family(Polar.build(1.0, cos=[0.0, 0.03, 0.01])).curve()
    result = birkhoff_invariants(curve, jnp.array([np.pi, 5.33, 7.24]), order=ORDER)
    assert int(result.status) == Status.ok
    omega, action = _measured_rotation(curve, result, np.geomspace(0.035, 0.09, 5), 1500)
    _assert_quartic_remainder(result, omega, action)


# ----------------------------------------------------------------------------- derivatives
def test_derivative_matches_central_differences():
    """Directional derivative of τ₁, τ₂ with respect to the shape coefficients (forward mode;
    reverse mode is its transpose) against central differences, float64 (common practice).
    The orbit moves with the shape, so this also checks the implicit-function correction.
    The step 1e-6 makes the O(h²) error ~5e-7 relative here (it was seen to fall 100× per
    10× smaller step)."""
    shape = from_family(GENERIC)
    params = shape.params
    rng = np.random.default_rng(3)
    direction = jnp.asarray(rng.normal(size=params.shape))

    def taus(x):
        return birkhoff_invariants(shape.with_params(x).curve(), MINOR_AXIS, order=ORDER).tau[:2]

    _, derivative = jax.jvp(taus, (params,), (direction,))
    step = 1e-6
    central = (taus(params + step * direction) - taus(params - step * direction)) / (2 * step)
    np.testing.assert_allclose(np.asarray(derivative), np.asarray(central), rtol=5e-6,
                               err_msg="seed 3")


# ----------------------------------------------------------------------------- refusals
def test_resonances_and_instability_are_reported():
    # resonance orders from ω₀ = 4 arcsin(b/a): b/a = sin(π/6) gives α = 2π/3 (m = 3),
    # b/a = sin(π/10) gives α = 2π/5 (m = 5): τ_k needs m > 2k + 2 (Birkhoff 1927, from memory)
    third = birkhoff_invariants(Curve(ellipse, jnp.array([1.0, 0.5])), MINOR_AXIS, order=ORDER)
    assert int(third.resonance_order) == 3 and int(third.status) == Status.resonant
    assert np.all(np.isnan(np.asarray(third.tau)))
    fifth = birkhoff_invariants(Curve(ellipse, jnp.array([1.0, np.sin(np.pi / 10)])),
                                MINOR_AXIS, order=ORDER)
    assert int(fifth.resonance_order) == 5 and int(fifth.status) == Status.resonant
    assert abs(float(fifth.tau[0]) - 2 * np.sin(np.pi / 10)) < 1e-8  # τ₁ = 2b/a² still defined
    assert np.all(np.isnan(np.asarray(fifth.tau[1:])))
    # the major axis is hyperbolic (tr P = 81.0123 for a = 1, b = 0.6, g-factors as above)
    major = birkhoff_invariants(Curve(ellipse, jnp.array([1.0, 0.6])), jnp.array([0.0, np.pi]),
                                order=ORDER)
    assert abs(float(major.trace) - (4 * (1 - 2 / 0.36) ** 2 - 2)) < 1e-9
    assert int(major.status) == Status.not_elliptic and np.isnan(float(major.angle))
    with pytest.raises(ValueError, match="order"):
        birkhoff_invariants(Curve(ellipse, jnp.array([1.0, 0.6])), MINOR_AXIS, order=0)
    with pytest.raises(ValueError, match="bounce_params"):
        birkhoff_invariants(Curve(ellipse, jnp.array([1.0, 0.6])), jnp.array([0.1]))


# ----------------------------------------------------------------------------- wiring
def test_invariant_family_and_options():
    from deform.errors import ConfigError
    from deform.invariants import build

    with pytest.raises(ConfigError, match="invariants.birkhoff.order"):
        build("birkhoff", {"order": 9})
    with pytest.raises(ConfigError, match="invariants.birkhoff.orbits"):
        build("birkhoff", {"orbits": ["two,max"]})
    evaluator = build("birkhoff", {"order": ORDER})
    assert evaluator.labels == ("τ1[1/2,minimax]", "τ2[1/2,minimax]", "τ3[1/2,minimax]")
    curve = Curve(ellipse, jnp.array([1.0, 0.6]))
    state = evaluator.init(curve)
    values, _, status = evaluator.evaluate(curve, state)
    assert int(status) == Status.ok
    # τ₁ = 2b/a² and the caustic-family τ₂, τ₃ (Chang & Friedberg 1988, as above)
    np.testing.assert_allclose(np.asarray(values), _ellipse_reference(1.0, 0.6), rtol=1e-8)


def test_measure_section_reports_elliptic_orbits():
    from deform.birkhoff_report import birkhoff_section
    from deform.families import Ellipse
    from deform.measure import MeasureOptions

    shape = from_family(Ellipse.build(1.0, 0.6))
    data, rows = birkhoff_section(shape, MeasureOptions(max_period=2))
    (item,) = data["birkhoff"]  # the minor axis; the major axis is hyperbolic
    assert (item["p"], item["q"], item["resonance_order"], item["status"]) == (1, 2, 0, "ok")
    assert abs(item["length"] - 2.4) < 1e-12 and abs(item["angle"] - 4 * np.arcsin(0.6)) < 1e-12
    np.testing.assert_allclose(item["tau"], _ellipse_reference(1.0, 0.6), rtol=1e-8)
    assert any("τ = [" in text for _, text in rows)
