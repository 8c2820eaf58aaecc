"""Shape families: symmetry classes held exactly by the parametrization, gauge, admissibility.

A curve γ has rotational symmetry Z_n about the origin if γ(t + 2π/n) = R_{2π/n} γ(t) for its
parameter (polar angle, normal angle or Fourier parameter), central symmetry if γ(t + π) = −γ(t),
and mirror symmetry in the x-axis if γ(−t) = conj γ(t): in each case the image of the curve is
the curve itself (elementary, common practice). The negative checks use the Hausdorff distance of
dense point sets (scipy.spatial.cKDTree): a random shape of a class is *not* symmetric under
transformations outside its class.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.spatial

from deform.families import FAMILIES, Disk, Ellipse, FourierCurve, Polar, Support
from deform.shape import Shape, from_family, rotated
from deform.symmetry import Symmetry

CLASSES = [Symmetry("none"), Symmetry("central"), Symmetry("mirror"), Symmetry("rotational", 3),
           Symmetry("dihedral", 4), Symmetry("rotational", 2), Symmetry("dihedral", 5)]
MODES = 10


def build(name: str, symmetry: Symmetry):
    if name == "polar":
        return Polar.build(1.0, modes=MODES, symmetry=symmetry)
    if name == "support":
        return Support.build(1.0, modes=MODES, symmetry=symmetry)
    terms = [(1, 1.0, 0.0)] if symmetry.complex_mode_allowed(1, False) else []
    return FourierCurve.build(terms, modes=MODES, symmetry=symmetry)


def random_shape(family, seed: int) -> Shape:
    """Random free parameters around the base (small enough for a simple convex-ish shape)."""
    rng = np.random.default_rng(seed)
    params = family.initial_params()
    labels = family.param_labels
    for i, label in enumerate(labels):
        k = abs(int(label[label.index("[") + 1:-1])) if "[" in label else 0
        if k >= 2 or (family.name == "curve" and k != 1):
            size = 0.15 + 0.3 * rng.random()  # bounded away from 0: every allowed mode is present
            params[i] += rng.choice([-1.0, 1.0]) * size / k**2
    return from_family(family).with_params(params)


def rotate(points, angle):
    c, s = np.cos(angle), np.sin(angle)
    return points @ np.array([[c, s], [-s, c]])


@pytest.mark.parametrize("name", ["polar", "support", "curve"])
@pytest.mark.parametrize("symmetry", CLASSES, ids=lambda s: s.describe().replace(" ", ""))
def test_every_parameter_vector_stays_in_its_class(name, symmetry):
    family = build(name, symmetry)
    seed = 11
    shape = random_shape(family, seed)
    curve = shape.curve()
    t = jnp.linspace(0.0, 2 * np.pi, 97, endpoint=False)
    points = np.asarray(jax.vmap(curve)(t))
    scale = np.max(np.abs(points))
    n = symmetry.rotation_order
    if n > 1:
        shifted = np.asarray(jax.vmap(curve)(t + 2 * np.pi / n))
        assert np.max(np.abs(shifted - rotate(points, 2 * np.pi / n))) < 1e-14 * scale * 4, seed
    if symmetry.mirrored:
        mirrored = np.asarray(jax.vmap(curve)(-t)) * np.array([1.0, -1.0])
        assert np.max(np.abs(mirrored - points)) < 1e-14 * scale * 4, seed
    # and no symmetry beyond the class: the Hausdorff distance between the dense point set and its
    # image under a transformation outside the class is of the size of the perturbation, far above
    # the sampling error (half the largest node spacing); seed printed on failure
    dense = np.asarray(jax.vmap(curve)(jnp.linspace(0.0, 2 * np.pi, 16384, endpoint=False)))
    tree = scipy.spatial.cKDTree(dense)
    spacing = np.max(np.linalg.norm(np.diff(dense, axis=0), axis=1))
    if not symmetry.mirrored:
        assert np.max(tree.query(dense * [1.0, -1.0])[0]) > 1e-3, seed
    assert np.max(tree.query(rotate(dense, np.pi / n))[0]) > 1e-3, seed
    if n > 1:
        assert np.max(tree.query(rotate(dense, 2 * np.pi / n))[0]) < 0.6 * spacing < 1e-3, seed


@pytest.mark.parametrize("name", ["polar", "support", "curve"])
def test_forbidden_coefficients_are_rejected(name):
    sym = Symmetry("rotational", 3)
    with pytest.raises(ValueError, match=r"must be 0 in the rotational \(order 3\) symmetry class"):
        if name == "polar":
            Polar.build(1.0, cos=[0.0, 0.1], symmetry=sym)  # cos 2θ is not Z₃-invariant
        elif name == "support":
            Support.build(1.0, sin=[0.0, 0.0, 0.0, 0.1], symmetry=sym)
        else:
            FourierCurve.build([(1, 1.0, 0.0), (2, 0.1, 0.0)], symmetry=sym)
    with pytest.raises(ValueError, match="sin"):
        Polar.build(1.0, sin=[0.0, 0.1], symmetry=Symmetry("mirror"))


def test_ellipse_and_disk_symmetries_and_values():
    t = jnp.linspace(0.0, 2 * np.pi, 33, endpoint=False)
    e = from_family(Ellipse.build(1.4, 0.6)).curve()
    p = np.asarray(jax.vmap(e)(t))
    assert np.allclose(np.asarray(jax.vmap(e)(-t)), p * [1, -1], atol=1e-15)       # mirror
    assert np.allclose(np.asarray(jax.vmap(e)(t + np.pi)), -p, atol=1e-15)          # D₂
    assert np.allclose((p[:, 0] / 1.4) ** 2 + (p[:, 1] / 0.6) ** 2, 1.0, atol=1e-15)
    d = from_family(Disk.build(2.0)).curve()
    assert np.allclose(np.linalg.norm(np.asarray(jax.vmap(d)(t)), axis=1), 2.0, atol=1e-15)


def test_gauge_holds_translation_rotation_and_scale():
    """Held entries (DEVELOPERS.md, "Shape families"): k = 1 modes, the sine of the lowest allowed
    mode (rotation) unless mirrored, and the scale entry with fix_scale."""
    p = Polar.build(1.0, modes=4)
    assert p.param_labels == ("radius", "cos[2]", "cos[3]", "cos[4]", "sin[3]", "sin[4]")
    assert Polar.build(1.0, modes=4, fix_scale=True).param_labels[0] == "cos[2]"
    m = Polar.build(1.0, modes=4, symmetry=Symmetry("mirror"))
    assert m.param_labels == ("radius", "cos[2]", "cos[3]", "cos[4]")
    r3 = Support.build(1.0, modes=7, symmetry=Symmetry("rotational", 3))
    assert r3.param_labels == ("mean", "cos[3]", "cos[6]", "sin[6]")
    c = FourierCurve.build([(1, 1.0, 0.0)], modes=2)
    assert "re[0]" not in c.param_labels and "im[1]" not in c.param_labels
    assert "im[-1]" not in c.param_labels and "re[1]" in c.param_labels
    assert "re[1]" not in FourierCurve.build([(1, 1.0, 0.0)], modes=2, fix_scale=True).param_labels
    assert Ellipse.build(1.0, 0.5, fix_scale=True).param_labels == ("b",)
    assert Disk.build(1.0, fix_scale=True).n_params == 0


def test_rotation_gauge_removes_the_rotation_direction():
    """Rotating a shape by a small angle ε changes its polar coefficients by ε·k·(s_k, −c_k);
    with sin[2] held the rotated shape is not representable to first order, i.e. the gauge removes
    the rotation. Checked by least squares: the best fit of the rotated shape within the family
    leaves a residual of order ε (common practice)."""
    family = Polar.build(1.0, cos=[0.0, 0.2, 0.05], modes=3)
    shape = from_family(family)
    theta = np.linspace(0, 2 * np.pi, 64, endpoint=False)
    eps = 1e-4
    target = 1.0 + 0.2 * np.cos(2 * (theta - eps)) + 0.05 * np.cos(3 * (theta - eps))
    basis = np.stack([np.ones_like(theta)] + [np.cos(k * theta) for k in (2, 3)]
                     + [np.sin(3 * theta)], axis=1)   # the free directions
    coef, *_ = np.linalg.lstsq(basis, target, rcond=None)
    residual = np.max(np.abs(basis @ coef - target))
    assert residual > 0.1 * eps * 2 * 0.2
    assert shape.family.n_params == 4


@pytest.mark.parametrize("case, message", [
    (lambda: Polar.build(1.0, cos=[0.0, 1.3]), "radius r(θ) ="),
    (lambda: Support.build(1.0, cos=[0.0, 0.5]), "radius of curvature h + h''"),
    (lambda: FourierCurve.build([(-1, 1.0, 0.0)]), "clockwise"),
])
def test_admissibility_names_where_it_fails(case, message):
    family = case()
    found = family.admissibility(jnp.asarray(family.initial_params()))
    assert found and message in found[0]
    assert "at θ" in found[0] or "at φ" in found[0] or "signed area" in found[0]


def test_every_family_is_in_the_table_and_shapes_are_pytrees():
    assert set(FAMILIES) >= {"polar", "curve", "support", "ellipse", "disk"}
    shape = rotated(from_family(Polar.build(1.0, cos=[0, 0.1], modes=3)), 0.3)
    leaves, tree = jax.tree_util.tree_flatten(shape)
    again = jax.tree_util.tree_unflatten(tree, leaves)
    assert again.family == shape.family and again.transforms[0][0] == "rotate"
    assert all(np.asarray(leaf).dtype == np.float64 for leaf in leaves)
    family = Polar.build(1.0, cos=[0, 0.1], modes=3)
    moved = family.with_params(np.array([2.0, 0.3, 0.0, 0.0]))
    assert moved.base[0] == 2.0 and moved.base[2] == 0.3 and moved.free == family.free


@pytest.mark.parametrize("ks", [tuple(range(1, 65)), tuple(range(-7, 8)), (0, 3, -2, 9)])
def test_harmonics_and_their_derivatives_match_the_closed_form(ks):
    """harmonics() builds e^{ikt} by products of e^{it}; its t-derivatives of order m must be
    k^m cos(kt + mπ/2) and k^m sin(kt + mπ/2) (elementary). Reference: numpy's cos/sin, whose
    own error at |kt| ≈ 400 is ~|kt|·ε ≈ 1e-13 relative to k^m."""
    from deform.families import harmonics

    k = np.asarray(ks, dtype=np.float64)
    for t in (0.0, 0.7, 3.1, 6.25):
        derivs = [lambda s: jnp.stack(harmonics(s, ks))]
        for _ in range(4):
            prev = derivs[-1]
            derivs.append(lambda s, prev=prev: jax.jvp(prev, (s,), (jnp.ones_like(s),))[1])
        for m, d in enumerate(derivs):
            got = np.asarray(d(jnp.asarray(t)))
            want = np.stack([k**m * np.cos(k * t + m * np.pi / 2),
                             k**m * np.sin(k * t + m * np.pi / 2)])
            scale = np.maximum(np.abs(k), 1.0) ** m
            assert np.max(np.abs(got - want) / scale) < 1e-12, (t, m)
        # Taylor mode (jax.experimental.jet) takes its own path: the same derivatives.
        from jax.experimental import jet

        series = [jnp.ones(())] + [jnp.zeros(())] * 3
        _, terms = jet.jet(lambda s: jnp.stack(harmonics(s, ks)), (jnp.asarray(t),), (series,))
        for m, term in enumerate(terms, start=1):
            want = np.stack([k**m * np.cos(k * t + m * np.pi / 2),
                             k**m * np.sin(k * t + m * np.pi / 2)])
            scale = np.maximum(np.abs(k), 1.0) ** m
            assert np.max(np.abs(np.asarray(term) - want) / scale) < 1e-12, (t, m, "jet")
