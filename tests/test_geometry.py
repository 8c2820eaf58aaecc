"""Geometry of closed curves against closed forms, reference libraries and invariance.

Sources are named beside each check. Shapes are built from the project's families, but the
reference values come from outside: elliptic integrals (scipy.special / mpmath), exact
conic geometry, and quadrature by mpmath.
"""

from __future__ import annotations

from functools import partial

import jax
import jax.numpy as jnp
import mpmath
import numpy as np
import pytest
import scipy.special
from hypothesis import given, settings
from hypothesis import strategies as st

from deform.families import Disk, Ellipse, FourierCurve, Polar
from deform.shape import from_family, reflected, reparametrized, rotated, translated
from objectives import geometry
from objectives.curve import Curve

SEED_SETTINGS = settings(derandomize=True, max_examples=12, deadline=None, database=None)


perimeter = jax.jit(geometry.perimeter, static_argnums=1)
area = jax.jit(geometry.area, static_argnums=1)
curvature_moment = jax.jit(geometry.curvature_moment, static_argnums=(1, 2))


ELLIPSE = Ellipse.build(1.0, 1.0)
DISK = Disk.build(1.0)


def ellipse_curve(a: float, b: float) -> Curve:
    """Semi-axes as parameters of one static family (compiled once for all a, b)."""
    return from_family(ELLIPSE).with_params(jnp.array([a, b])).curve()


def disk_curve(radius: float) -> Curve:
    return from_family(DISK).with_params(jnp.array([radius])).curve()


# One static family so that every hypothesis example reuses the compiled functions.
POLAR = Polar.build(1.0, modes=6)


def polar_shape(params):
    return from_family(POLAR).with_params(jnp.asarray(params))


@st.composite
def polar_params(draw):
    """Free parameters of POLAR: radius ~ 1 plus small smooth modes (star-shaped, simple)."""
    radius = draw(st.floats(0.5, 2.0))
    modes = [int(label[4:-1]) for label in POLAR.param_labels[1:]]  # "cos[k]" / "sin[k]"
    rest = [draw(st.floats(-0.3, 0.3)) / k**2 for k in modes]
    return np.array([radius] + [radius * c for c in rest])


# ---------------------------------------------------------------------------------------------
# Closed forms


@pytest.mark.parametrize("a, b", [(1.0, 0.6), (3.5, 2.1), (0.7, 1.3), (2.0, 0.25)])
def test_ellipse_perimeter_area_and_vertex_curvature(a, b):
    curve = ellipse_curve(a, b)
    # Abramowitz & Stegun (1964) 17.3: perimeter = 4a E(m), m = 1 − b²/a² (parameter
    # convention of scipy.special.ellipe, which accepts m < 0 when b > a).
    exact_perimeter = 4.0 * a * scipy.special.ellipe(1.0 - b**2 / a**2)
    res = 1024 if min(a, b) / max(a, b) < 0.3 else 256
    assert abs(float(perimeter(curve, res)) - exact_perimeter) < 1e-12 * exact_perimeter
    # Area of an ellipse πab (classical closed form).
    assert abs(float(area(curve)) - np.pi * a * b) < 1e-13 * a * b
    # Curvature at the vertices: a/b² at (±a, 0) and b/a² at (0, ±b) (do Carmo 1976, §1-5, ex. 1).
    assert abs(float(geometry.curvature(curve, 0.0)) - a / b**2) < 1e-12 * a / b**2
    assert abs(float(geometry.curvature(curve, np.pi / 2)) - b / a**2) < 1e-12 * b / a**2
    assert np.allclose(np.asarray(geometry.centroid(curve)), 0.0, atol=1e-14)


def test_scipy_example_ellipse():
    # scipy.special.ellipe documentation example: a = 3.5, b = 2.1 has circumference
    # 17.868899204378693.
    assert abs(float(perimeter(ellipse_curve(3.5, 2.1))) - 17.868899204378693) < 1e-11


@pytest.mark.parametrize("radius", [0.3, 1.0, 2.5])
def test_disk(radius):
    curve = disk_curve(radius)
    # Circle: area πR², length 2πR, κ = 1/R, ∮κⁿ ds = 2π R^{1−n} (classical).
    assert abs(float(area(curve)) - np.pi * radius**2) < 1e-13
    assert abs(float(perimeter(curve)) - 2 * np.pi * radius) < 1e-13
    jets = np.asarray(jax.jit(jax.vmap(lambda t: geometry.curvature_jet(curve, t, 2)))(
        jnp.array([0.0, 1.1, 4.0])))
    assert np.allclose(jets[:, 0], 1.0 / radius, rtol=1e-12)
    assert np.allclose(jets[:, 1:], 0.0, atol=1e-10)
    for n in (1, 2, 3, 4):
        moment = float(curvature_moment(curve, n))
        assert abs(moment - 2 * np.pi * radius ** (1 - n)) < 1e-11 * max(1, radius ** (1 - n))
    # Chord–arc ratio of a circle: min over pairs of 2 sin(θ/2)/θ = 2/π at antipodes
    # (common practice).
    assert abs(float(jax.jit(geometry.simplicity)(curve).margin) - 2 / np.pi) < 1e-12
    margin, _ = jax.jit(geometry.convexity_margin)(curve)
    assert abs(float(margin) - 1.0 / radius) < 1e-12


def _ellipse_kappa_power_integral(a, b, n):
    """∮κⁿ ds of the ellipse by mpmath quadrature: κ = ab/ρ³, ds = ρ dt, ρ² = a²sin²t + b²cos²t."""
    mpmath.mp.dps = 30
    def integrand(t):
        rho2 = a**2 * mpmath.sin(t) ** 2 + b**2 * mpmath.cos(t) ** 2
        return (a * b) ** n * rho2 ** ((1 - 3 * n) / mpmath.mpf(2))

    quarters = [k * mpmath.pi / 2 for k in range(5)]
    return float(mpmath.quad(integrand, quarters))


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_ellipse_curvature_moments_vs_mpmath(n):
    a, b = 1.0, 0.6
    value = float(curvature_moment(ellipse_curve(a, b), n))
    # Reference: mpmath adaptive quadrature (30 digits) of the closed-form integrand.
    reference = _ellipse_kappa_power_integral(a, b, n)
    assert abs(value - reference) < 1e-12 * abs(reference)
    if n == 1:
        assert abs(value - 2 * np.pi) < 1e-12  # Hopf Umlaufsatz: total curvature 2π


# ---------------------------------------------------------------------------------------------
# Exponential convergence of the trapezoid rule


def test_perimeter_converges_exponentially_at_the_predicted_rate():
    """Trefethen & Weideman, "The exponentially convergent trapezoidal rule", SIAM Rev. 56 (2014),
    Thm 3.2: error O(e^{−n α}) for an integrand analytic in the strip |Im t| < α. The ellipse speed
    √(a² sin²t + b² cos²t) has branch points at Im t = ±atanh(b/a), so α = atanh(b/a)."""
    a, b = 1.0, 0.6
    curve = ellipse_curve(a, b)
    exact = 4.0 * a * scipy.special.ellipe(1.0 - b**2 / a**2)  # A&S 17.3
    ns = np.array([8, 12, 16, 20, 24, 28, 32])
    errors = np.array([abs(float(perimeter(curve, int(n))) - exact) for n in ns])
    rate = -np.polyfit(ns, np.log(errors), 1)[0]
    predicted = np.arctanh(b / a)
    assert 0.85 * predicted < rate < 1.25 * predicted, (rate, predicted, errors)
    assert abs(float(perimeter(curve, 64)) - exact) < 1e-14 * exact


def test_curvature_moment_converges_exponentially():
    """∮κ² ds of a smooth non-polynomial shape: error vs nodes decays like e^{−σ n}; fitted rate
    asserted positive and the finest level at round-off (reference: resolution 2048)."""
    coeffs = np.array([1.0, 0.1, 0.0, 0.02, 0.0, 0.0, 0.03, 0.01, 0.0, 0.0, 0.0])
    shape = polar_shape(coeffs[:POLAR.n_params])
    curve = shape.curve()
    reference = float(curvature_moment(curve, 2, 2048))
    ns = np.array([16, 24, 32, 40, 48])
    errors = np.array([abs(float(curvature_moment(curve, 2, int(n))) - reference) for n in ns])
    rate = -np.polyfit(ns, np.log(errors), 1)[0]
    assert rate > 0.25, (rate, errors)
    assert abs(float(curvature_moment(curve, 2, 256)) - reference) < 1e-12 * reference


# ---------------------------------------------------------------------------------------------
# Local graph over the tangent line


def test_boundary_graph_at_ellipse_vertex_closed_form():
    """Near (a, 0) the ellipse is x = a√(1 − y²/b²); over the tangent line (coordinate u = y, depth
    v = a − x along the inward normal) v = a u²/(2b²) + a u⁴/(8b⁴) + …, so f'' = a/b², f''' = 0,
    f'''' = 3a/b⁴ (binomial series of √(1 − w), exact)."""
    a, b = 1.3, 0.7
    f2, f3, f4 = np.asarray(geometry.boundary_graph(ellipse_curve(a, b), 0.0))
    assert abs(f2 - a / b**2) < 1e-12 * a / b**2
    assert abs(f3) < 1e-11
    assert abs(f4 - 3 * a / b**4) < 1e-11 * a / b**4


@pytest.mark.parametrize("t0", [0.3, 1.0, 2.2, 4.0])
def test_boundary_graph_on_ellipse_vs_mpmath_taylor(t0):
    """At a generic point of the ellipse, solve the conic exactly for the graph v(u) over the tangent
    line (smaller root of a quadratic in v) and take its Taylor coefficients with mpmath.taylor at
    40 digits: an independent route from series reversion."""
    a, b = 1.0, 0.6
    mpmath.mp.dps = 40
    t0 = mpmath.mpf(t0)
    a, b = mpmath.mpf(a), mpmath.mpf(b)  # the same binary values JAX sees, in 40 digits
    px, py = a * mpmath.cos(t0), b * mpmath.sin(t0)
    dx, dy = -a * mpmath.sin(t0), b * mpmath.cos(t0)
    speed = mpmath.sqrt(dx**2 + dy**2)
    tx, ty = dx / speed, dy / speed
    nx, ny = -ty, tx

    def depth(u):
        # (px + u tx + v nx)²/a² + (py + u ty + v ny)²/b² = 1 → A v² + B v + C = 0
        qa = nx**2 / a**2 + ny**2 / b**2
        qb = 2 * ((px + u * tx) * nx / a**2 + (py + u * ty) * ny / b**2)
        qc = (px + u * tx) ** 2 / a**2 + (py + u * ty) ** 2 / b**2 - 1
        disc = mpmath.sqrt(qb**2 - 4 * qa * qc)
        return -2 * qc / (qb + mpmath.sign(qb) * disc)  # the root through v(0) = 0

    ref = mpmath.taylor(depth, 0, 4)
    reference = np.array([float(ref[k] * mpmath.factorial(k)) for k in (2, 3, 4)])
    got = np.asarray(geometry.boundary_graph(ellipse_curve(float(a), float(b)), float(t0)))
    assert abs(ref[0]) < 1e-30 and abs(ref[1]) < 1e-30
    assert np.allclose(got, reference, rtol=1e-10, atol=1e-10), (got, reference)


@SEED_SETTINGS
@given(polar_params(), st.floats(0.0, 2 * np.pi))
def test_boundary_graph_matches_curvature_relations(params, t0):
    """do Carmo, "Differential Geometry of Curves and Surfaces" (1976), local canonical form:
    f'' = κ, f''' = κ_s; the fourth-order term f'''' = κ_ss + 3κ³ is checked in closed form on the
    ellipse above (3a/b⁴ at the vertex)."""
    curve = polar_shape(params).curve()
    f2, f3, f4 = np.asarray(geometry.boundary_graph(curve, t0))
    k, ks, kss = np.asarray(geometry.curvature_jet(curve, t0, 2))
    scale = 1.0 + abs(k) ** 3 + abs(kss)
    assert abs(f2 - k) < 1e-11 * (1 + abs(k)), params
    assert abs(f3 - ks) < 1e-10 * (1 + abs(ks)), params
    assert abs(f4 - (kss + 3 * k**3)) < 1e-9 * scale, params


# ---------------------------------------------------------------------------------------------
# Invariance under rigid motions, reflection and reparametrization


@partial(jax.jit, static_argnums=1)
def _scalars(shape, resolution=256):
    curve = shape.curve()
    return jnp.stack([
        geometry.area(curve, resolution),
        geometry.perimeter(curve, resolution),
        *(geometry.curvature_moment(curve, n, resolution) for n in (1, 2, 3, 4)),
        geometry.convexity_margin(curve, resolution)[0],
        geometry.fourier_decay_rate(curve, resolution),
    ])


@SEED_SETTINGS
@given(polar_params(), st.floats(-np.pi, np.pi), st.floats(-3, 3), st.floats(-3, 3),
       st.floats(0, 2 * np.pi), st.floats(-0.4, 0.4), st.booleans())
def test_geometric_quantities_are_invariant(params, angle, dx, dy, shift, warp, mirror):
    """Area, perimeter, ∮κⁿ ds, min κ and the decay rate are geometric (common practice: they do
    not depend on position, orientation or parametrization); the centroid moves with the shape."""
    shape = polar_shape(params)
    moved = reparametrized(translated(rotated(shape, angle), [dx, dy]), shift, warp)
    if mirror:
        moved = reflected(moved)
    base, other = np.asarray(_scalars(shape)), np.asarray(_scalars(moved))
    # the warped parametrization has a narrower analyticity strip, so its quadrature needs more
    # nodes; min κ is compared after Newton refinement, the decay rate is intrinsic (arclength)
    assert np.allclose(base[:6], other[:6], rtol=1e-10, atol=1e-10), (params, base, other)
    assert abs(base[6] - other[6]) < 1e-7 * max(1.0, abs(base[6])), (params, base[6], other[6])
    if np.isinf(base[7]):  # a circle: nothing beyond k = 1 to fit in either parametrization
        assert np.isinf(other[7]) or other[7] > 5.0, (params, other[7])
    else:
        assert abs(base[7] - other[7]) < 0.1 * base[7], (params, base[7], other[7])
    c0 = np.asarray(geometry.centroid(shape.curve()))
    c1 = np.asarray(geometry.centroid(moved.curve()))
    rot = np.array([[np.cos(angle), -np.sin(angle)], [np.sin(angle), np.cos(angle)]])
    expected = rot @ c0 + np.array([dx, dy])
    if mirror:
        expected = expected * np.array([1.0, -1.0])
    assert np.allclose(c1, expected, atol=1e-11)


def test_pointwise_curvature_follows_the_reparametrization():
    coeffs = np.array([1.0, 0.1, 0.02, 0.0, 0.01, 0.0, 0.03, 0.0, 0.01, 0.0, 0.0])
    shape = polar_shape(coeffs[:POLAR.n_params])
    shift, warp = 0.4, 0.3
    moved = rotated(reparametrized(shape, shift, warp), 0.9)
    for t in (0.0, 1.0, 2.5, 5.0):
        k0 = np.asarray(geometry.curvature_jet(shape.curve(), t + shift + warp * np.sin(t), 2))
        k1 = np.asarray(geometry.curvature_jet(moved.curve(), t, 2))
        assert np.allclose(k0, k1, rtol=1e-11, atol=1e-11)
    # reflection reverses orientation of arclength: κ unchanged, κ_s changes sign, κ_ss unchanged
    mirrored = reflected(shape)
    for t in (0.5, 3.0):
        k0 = np.asarray(geometry.curvature_jet(shape.curve(), -t, 2))
        k1 = np.asarray(geometry.curvature_jet(mirrored.curve(), t, 2))
        assert np.allclose(k1, k0 * np.array([1.0, -1.0, 1.0]), rtol=1e-11, atol=1e-11)


# ---------------------------------------------------------------------------------------------
# Convexity, simplicity, analyticity proxy


def test_convexity_margin_locates_the_minimum_of_curvature():
    # Ellipse: min κ = b/a² at t = π/2 or 3π/2 (do Carmo 1976, §1-5).
    margin, t_min = geometry.convexity_margin(ellipse_curve(1.0, 0.6))
    assert abs(float(margin) - 0.6) < 1e-13
    assert min(abs(float(t_min) - np.pi / 2), abs(float(t_min) - 3 * np.pi / 2)) < 1e-6
    # A non-convex polar shape has a negative margin.
    dent = polar_shape(np.array([1.0, 0.25] + [0.0] * (POLAR.n_params - 2)))
    assert float(geometry.convexity_margin(dent.curve())[0]) < 0


def test_simplicity_detects_a_self_intersection_and_reports_the_pair():
    # z = e^{it} + 0.7 e^{−2it}: |2·0.7| > 1 so the curve has loops (a self-crossing trefoil-like
    # epicycle; common practice) – the polygon test must see the crossing.
    looped = from_family(FourierCurve.build([(1, 1.0, 0.0), (-2, 0.7, 0.0)])).curve()
    s = geometry.simplicity(looped, 256)
    assert bool(s.crossing)
    assert float(s.margin) < 1e-2
    # The reported pair is a genuine near-meeting: the two points are close in the plane.
    p = np.asarray(jax.vmap(looped)(jnp.array([s.t_first, s.t_second])))
    assert np.linalg.norm(p[0] - p[1]) < 0.05
    # A thin but simple dumbbell: no crossing, small positive margin.
    thin = from_family(FourierCurve.build([(1, 1.0, 0.0), (-1, 0.8, 0.0)])).curve()
    st_ = geometry.simplicity(thin, 256)
    assert not bool(st_.crossing)
    # ellipse 1 × 0.2: chord/arc at the closest pair ≈ 0.4/(perimeter/2) (common practice)
    assert 0.0 < float(st_.margin) < 0.2


def test_fourier_decay_rate_recovers_a_known_strip():
    """A curve given directly in arclength: z'(s) = e^{is}(1 − q e^{2is})/(1 − q e^{−2is}) has
    |z'| = 1 on the real axis, odd frequencies only (so it closes, with length 2π), and
    z(s) = −q e^{3is}/(3i) + (1 − q²)/i · Σ_{J≥0} q^J e^{i(1−2J)s}/(1 − 2J) (geometric series; derived
    here, common practice). Its arclength coefficients |ẑ_k| = (1 − q²) q^{(|k|−1)/2}/|k| (k < 0 odd)
    decay at σ = −log(q)/2, the half-width of the strip (Paley–Wiener). The curve is handed over in
    a warped parameter, so the arclength resampling is exercised."""
    q = np.exp(-1.2)
    terms = np.arange(0, 120)

    def fn(warp, t):
        w = jnp.exp(1j * (t + warp * jnp.sin(t)))
        series = jnp.sum(q**terms * w ** (1 - 2 * terms) / (1 - 2 * terms))
        z = -q * w**3 / 3j + (1 - q**2) / 1j * series
        return jnp.stack([z.real, z.imag])

    rate = jax.jit(geometry.fourier_decay_rate)
    sigma = [float(rate(Curve(fn, jnp.asarray(warp)))) for warp in (0.0, 0.3)]
    # the same least-squares fit applied to the exact coefficients
    k = np.arange(2, 128)
    mag = np.where(k % 2 == 1, (1 - q**2) * q ** ((k - 1) / 2) / k, 0.0)
    mag[k == 3] = max(mag[k == 3][0], q / 3)
    use = mag > 1e-13 * (1 - q**2)
    exact_fit = -np.polyfit(k[use], np.log(mag[use]), 1)[0]
    assert abs(sigma[0] - sigma[1]) < 1e-4, sigma
    assert abs(sigma[0] - exact_fit) < 0.03 * exact_fit, (sigma, exact_fit)
    # within 15 % of the true strip: the 1/|k| prefactor biases a log-linear fit
    assert abs(sigma[0] + np.log(q) / 2) < 0.15 * (-np.log(q) / 2), sigma
    # a circle has no modes beyond k = 1 in arclength: nothing to fit, +inf; an ellipse in arclength
    # is no longer a trigonometric polynomial: finite, and rounder ellipses have wider strips
    assert np.isinf(float(rate(disk_curve(1.3))))
    sigmas = [float(rate(ellipse_curve(1.0, b))) for b in (0.5, 0.7, 0.9)]
    assert 0 < sigmas[0] < sigmas[1] < sigmas[2], sigmas


# ---------------------------------------------------------------------------------------------
# Gradients and jit


def _central_difference(f, x, h=1e-6):
    x = np.asarray(x, dtype=np.float64)
    out = np.zeros_like(x)
    for i in range(x.size):
        e = np.zeros_like(x)
        e[i] = h
        out[i] = (f(x + e) - f(x - e)) / (2 * h)
    return out


@pytest.mark.parametrize("name", ["area", "perimeter", "k2", "k3", "min_kappa", "centroid_x"])
def test_gradients_match_central_differences(name):
    """Reverse-mode gradients against central differences, step 1e-6 (common practice, float64)."""
    funcs = {
        "area": lambda c: geometry.area(c),
        "perimeter": lambda c: geometry.perimeter(c),
        "k2": lambda c: geometry.curvature_moment(c, 2),
        "k3": lambda c: geometry.curvature_moment(c, 3),
        "min_kappa": lambda c: geometry.convexity_margin(c)[0],
        "centroid_x": lambda c: geometry.centroid(c)[0],
    }
    x0 = np.array([1.0, 0.06, 0.01, 0.02, 0.0, 0.01, 0.03, -0.01, 0.0, 0.0, 0.0])[:POLAR.n_params]
    f = jax.jit(lambda p: funcs[name](polar_shape(p).curve()))
    grad = np.asarray(jax.grad(f)(jnp.asarray(x0)))
    fd = _central_difference(lambda p: float(f(jnp.asarray(p))), x0)
    assert np.allclose(grad, fd, rtol=1e-6, atol=1e-7), (grad, fd)


def test_jit_equals_eager_and_no_recompilation():
    traces = []

    def measure(params):
        traces.append(1)
        curve = polar_shape(params).curve()
        return jnp.stack([geometry.area(curve, 64), geometry.perimeter(curve, 64),
                          geometry.curvature_moment(curve, 2, 64)])

    jitted = jax.jit(measure)
    rng = np.random.default_rng(7)
    for _ in range(3):
        p = np.concatenate([[1.0], 0.05 * rng.standard_normal(POLAR.n_params - 1)])
        eager = np.asarray(measure(jnp.asarray(p)))
        compiled = np.asarray(jitted(jnp.asarray(p)))
        assert compiled.dtype == np.float64
        assert np.allclose(eager, compiled, rtol=1e-13, atol=1e-14)
    # three eager calls trace three times; the jitted function traced exactly once more
    assert len(traces) == 4


def test_polygon_convex_certifies_only_convex_counter_clockwise_polygons():
    """A polygon turning left at every vertex with total turning 2π is convex and simple
    (elementary). Counter-examples: a clockwise hexagon, a pentagram (left turns, total 4π),
    a twice-traversed circle (4π), a figure eight (turns of both signs), a non-convex star."""
    from objectives.geometry import polygon_convex

    t = 2 * np.pi * np.arange(6) / 6
    hexagon = np.stack([np.cos(t), np.sin(t)], axis=1)
    assert bool(polygon_convex(jnp.asarray(hexagon)))
    assert not bool(polygon_convex(jnp.asarray(hexagon[::-1])))
    star = np.stack([np.cos(4 * np.pi * np.arange(5) / 5),
                     np.sin(4 * np.pi * np.arange(5) / 5)], axis=1)
    assert not bool(polygon_convex(jnp.asarray(star)))
    s = 2 * np.pi * np.arange(64) / 32
    assert not bool(polygon_convex(jnp.asarray(np.stack([np.cos(s), np.sin(s)], axis=1))))
    s = 2 * np.pi * np.arange(64) / 64
    eight = np.stack([np.sin(s), np.sin(s) * np.cos(s)], axis=1)
    assert not bool(polygon_convex(jnp.asarray(eight)))
    r = 1 + 0.3 * np.cos(5 * s)
    assert not bool(polygon_convex(jnp.asarray(np.stack([r * np.cos(s), r * np.sin(s)], 1))))
