"""Shape distance modulo rigid motions, reflection and reparametrization.

Definition (objectives/distance.py): arclength samples a(u), b(u), u = s/L ∈ [0, 1), centred;
D² = min over shift, rotation and reflection of ∫₀¹ |a(u) − R b(u + σ)|² du.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from deform.families import Disk, Ellipse, FourierCurve, Polar
from deform.shape import from_family, reflected, reparametrized, rotated, scaled, translated
from objectives.distance import shape_distance

distance = jax.jit(shape_distance, static_argnames=("points", "resolution", "smooth"))

POLAR = Polar.build(1.0, cos=[0.0, 0.12, 0.04, 0.01], sin=[0.0, 0.0, 0.05, -0.02], modes=5)
CURVE = FourierCurve.build([(1, 1.0, 0.0), (-1, 0.2, 0.1), (2, 0.05, -0.03), (-3, 0.04, 0.02)])


@pytest.mark.parametrize("family", [POLAR, CURVE], ids=["polar", "curve"])
def test_zero_for_congruent_copies(family):
    """Zero up to the band-limited resampling of the arclength samples, which converges
    exponentially in the number of points (trapezoid/Fourier interpolation of an analytic
    periodic function; Trefethen & Weideman, SIAM Rev. 56 (2014))."""
    shape = from_family(family)
    copies = {
        "rotated+translated": translated(rotated(shape, 1.234), [0.7, -2.1]),
        "reflected+reparametrized": reflected(reparametrized(shape, 0.8, 0.35)),
        "all": reflected(reparametrized(translated(rotated(shape, -2.0), [3.0, 1.0]), 2.0, -0.3)),
    }
    for name, copy in copies.items():
        d = float(distance(shape.curve(), copy.curve()))
        assert d < 1e-6, (name, d)
    errors = [float(distance(shape.curve(), copies["all"].curve(), points=n)) for n in (32, 64, 128)]
    assert errors[2] < 1e-6 and errors[1] < errors[0] and errors[2] < 0.1 * errors[1], errors


@pytest.mark.parametrize("k", [2, 3, 5])
def test_small_deformation_of_a_circle_has_the_predicted_size(k):
    """r = 1 + δ cos kθ: in arclength u the displacement from the circle is
    δ e^{2πiu}(cos 2πku − i sin(2πku)/k) + O(δ²) (normal part, plus the tangential shift from the
    arclength change), orthogonal to rotations and translations for k ≥ 2, so
    D = δ √((1 + 1/k²)/2) + O(δ²) (first-order expansion derived here, common practice).
    The normal L² displacement alone is δ/√2 ≤ D."""
    family = Polar.build(1.0, modes=k)
    circle = from_family(family)
    index = family.param_labels.index(f"cos[{k}]")
    for delta in (1e-3, 1e-4):
        bumped = circle.with_params(circle.params.at[index].set(delta))
        d = float(distance(circle.curve(), bumped.curve()))
        predicted = delta * np.sqrt((1 + 1 / k**2) / 2)
        assert abs(d - predicted) < 0.01 * predicted, (k, delta, d, predicted)
        assert d >= delta / np.sqrt(2) * 0.999


def test_linear_in_the_deformation_size_and_symmetric():
    shape = from_family(POLAR)
    rng = np.random.default_rng(5)
    direction = rng.standard_normal(POLAR.n_params)
    direction /= np.linalg.norm(direction)
    base = shape.curve()
    d1 = float(distance(base, shape.with_params(shape.params + 1e-4 * direction).curve()))
    d2 = float(distance(base, shape.with_params(shape.params + 2e-4 * direction).curve()))
    assert d1 > 1e-6, "seed 5"
    assert abs(d2 / d1 - 2.0) < 0.01, ("seed 5", d1, d2)
    other = shape.with_params(shape.params + 0.05 * direction).curve()
    assert abs(float(distance(base, other)) - float(distance(other, base))) < 1e-10


def test_positive_for_different_shapes_and_scales_with_size():
    ellipse = from_family(Ellipse.build(1.0, 0.6))
    egg = from_family(POLAR)
    d = float(distance(ellipse.curve(), egg.curve()))
    assert d > 0.05
    # D is in length units: D(sA, sB) = s D(A, B)
    d_scaled = float(distance(scaled(ellipse, 2.5).curve(), scaled(egg, 2.5).curve()))
    assert abs(d_scaled - 2.5 * d) < 1e-9
    # triangle inequality (D is a metric on congruence classes; common practice)
    disk = from_family(Disk.build(0.9))
    d_ab = float(distance(ellipse.curve(), disk.curve()))
    d_bc = float(distance(disk.curve(), egg.curve()))
    assert d <= d_ab + d_bc + 1e-12
    # a shape and its mirror image are at distance zero (reflection is quotiented out)
    assert float(distance(egg.curve(), reflected(egg).curve())) < 1e-7


def test_smooth_version_is_the_squared_distance_with_a_correct_gradient():
    shape = from_family(POLAR)
    target = reflected(rotated(shape.with_params(shape.params + 0.03), 0.4)).curve()
    d = float(distance(shape.curve(), target))
    d2 = float(distance(shape.curve(), target, smooth=True))
    assert abs(d2 - d**2) < 1e-12

    f = jax.jit(lambda p: shape_distance(shape.with_params(p).curve(), target, smooth=True))
    x0 = np.asarray(shape.params)
    grad = np.asarray(jax.grad(f)(jnp.asarray(x0)))
    h = 1e-6
    fd = np.array([(float(f(jnp.asarray(x0 + h * e))) - float(f(jnp.asarray(x0 - h * e)))) / (2 * h)
                   for e in np.eye(x0.size)])
    assert np.allclose(grad, fd, rtol=1e-5, atol=1e-8), (grad, fd)
    # at congruence D² has a minimum: zero gradient (finite, not NaN)
    g0 = np.asarray(jax.jit(jax.grad(lambda p: shape_distance(
        shape.with_params(p).curve(), rotated(shape, 0.3).curve(), smooth=True)))(shape.params))
    assert np.all(np.isfinite(g0)) and np.max(np.abs(g0)) < 1e-6
