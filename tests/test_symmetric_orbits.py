"""Symmetric p/q orbits of mirror-symmetric billiards (objectives.symmetric_orbits).

One polar family instance serves the disk and the perturbed shapes (only its parameters change),
so each jitted function compiles once per family.
"""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy.optimize import minimize

from deform.families import Ellipse, Polar
from deform.shape import Shape, from_family
from deform.symmetry import Symmetry
from objectives import symmetric_orbits as so
from objectives.status import Status

A, B = 1.0, 0.6
ORBITS = so.orbit_list(4)  # 1/2 axis+perp, 1/3 at 0 and π, 1/4 axis+perp
FAMILY = Polar.build(1.0, [], [], modes=6, symmetry=Symmetry("mirror"))  # [radius, cos2..cos6]
DISK = jnp.array([1.0, 0.0, 0.0, 0.0, 0.0, 0.0])
OVAL = jnp.array([1.0, 0.08, 0.04, 0.0, 0.01, 0.0])

solve_cold = jax.jit(lambda curve: so.marked_lengths(curve, ORBITS, None, 48))
lengths_warm = jax.jit(lambda params, guesses: so.marked_lengths(
    Shape(FAMILY, params).curve(), ORBITS, guesses, 6)[0])
jacobian_warm = jax.jit(jax.jacfwd(lambda params, guesses: so.marked_lengths(
    Shape(FAMILY, params).curve(), ORBITS, guesses, 6)[0]))


def _ellipse_curve():
    return from_family(Ellipse.build(A, B)).curve()


def test_layout_is_symmetric():
    # Definition check: t_{c−i} = 2a − t_i (mod 2π·p) for every symmetric layout and every u.
    rng = np.random.default_rng(7)
    for orbit in so.orbit_list(9, all_rotations=True):
        t0, m = so.layout(orbit)
        t = t0 + m @ rng.normal(scale=0.1, size=m.shape[1])
        centre = 1 if orbit.kind == "perp" else 0
        anchor = np.pi if orbit.kind == "π" else 0.0
        for i in range(orbit.q):
            j = (centre - i) % orbit.q
            diff = (t[j] + t[i] - 2 * anchor) / (2 * np.pi)
            assert abs(diff - round(diff)) < 1e-12, (orbit, i)


def test_ellipse_closed_forms():
    lengths, sols, codes = solve_cold(_ellipse_curve())
    got = dict(zip([o.label for o in ORBITS], np.asarray(lengths)))
    assert all(Status(int(c)) is Status.ok for c in codes)
    # Bouncing balls of x²/a² + y²/b² = 1 are the axes: 4a and 4b (classical).
    assert got["L1/2[axis]"] == pytest.approx(4 * A, abs=1e-13)
    assert got["L1/2[perp]"] == pytest.approx(4 * B, abs=1e-12)
    # The 1/4 orbits lie on one confocal caustic with the rhombus through the four vertices,
    # and all orbits on a caustic have equal length (Poncelet porism / Chasles; Tabachnikov,
    # "Geometry and Billiards", AMS 2005, ch. 4, from memory): 4√(a² + b²).
    assert got["L1/4[axis]"] == pytest.approx(4 * np.hypot(A, B), abs=1e-12)
    assert got["L1/4[perp]"] == pytest.approx(4 * np.hypot(A, B), abs=1e-12)
    # 1/3: the maximal-perimeter inscribed triangle is a 3-periodic orbit (Birkhoff, "On the
    # periodic motions of dynamical systems", Acta Math. 50, 1927), computed here with
    # scipy.optimize over all triangles; both symmetric 1/3 orbits share its caustic.
    def neg_perimeter(t):
        p = np.stack([A * np.cos(t), B * np.sin(t)], axis=1)
        return -np.sum(np.linalg.norm(p - np.roll(p, -1, axis=0), axis=1))

    best = min((minimize(neg_perimeter, np.array([0.0, 2.0, 4.0]) + s, method="BFGS",
                         options={"gtol": 1e-12}) for s in (0.0, 0.4, 1.1)),
               key=lambda r: r.fun)
    assert got["L1/3[0]"] == pytest.approx(-best.fun, abs=1e-9)
    assert got["L1/3[π]"] == pytest.approx(-best.fun, abs=1e-9)


def test_disk_lengths_and_first_variation():
    # Disk of radius R: L_{1/q} = 2qR sin(π/q) (regular q-gon, classical). First variation of an
    # orbit length under a normal displacement n: δL = Σ_i 2 sin φ_i n(t_i) with φ_i = π/q the
    # angle to the tangent (envelope theorem for the critical value; common practice). For
    # r = R + Σ c_k cos kθ the bounce points t_i give ∂L/∂R = 2q sin(π/q) and
    # ∂L/∂c_k = 2 sin(π/q) Σ_i cos(k t_i).
    lengths, sols, codes = solve_cold(Shape(FAMILY, DISK).curve())
    q = np.array([o.q for o in ORBITS])
    np.testing.assert_allclose(np.asarray(lengths), 2 * q * np.sin(np.pi / q), atol=1e-13)
    assert all(Status(int(c)) is Status.ok for c in codes)
    jac = np.asarray(jacobian_warm(DISK, [s.u for s in sols]))
    ks = [0] + [int(label[4:-1]) for label in FAMILY.param_labels[1:]]
    for row, orbit in zip(jac, ORBITS):
        bounce = so.layout(orbit)[0]  # exact bounce points at the disk (u = 0)
        expected = [2 * np.sin(np.pi / orbit.q) * np.sum(np.cos(k * bounce)) for k in ks]
        np.testing.assert_allclose(row, expected, atol=1e-11, err_msg=orbit.label)


def test_gradient_matches_central_differences():
    # Envelope-theorem derivative against central finite differences (step 1e-6, float64).
    _, sols, codes = solve_cold(Shape(FAMILY, OVAL).curve())
    assert all(Status(int(c)) is Status.ok for c in codes)
    guesses = [s.u for s in sols]
    jac = np.asarray(jacobian_warm(OVAL, guesses))
    h = 1e-6
    fd = np.stack([(np.asarray(lengths_warm(OVAL.at[i].add(h), guesses))
                    - np.asarray(lengths_warm(OVAL.at[i].add(-h), guesses))) / (2 * h)
                   for i in range(OVAL.size)], axis=1)
    np.testing.assert_allclose(jac, fd, atol=2e-8)


def test_free_orbits_degenerate_near_integrable_symmetric_ones_not():
    # In the disk and the ellipse the p/q orbits form one-parameter families (integrable
    # billiards; Tabachnikov, "Geometry and Billiards", 2005, ch. 4, from memory), so the full
    # length Hessian is singular, while the reflection-restricted Hessian is not
    # (De Simoi–Kaloshin–Wei, Ann. of Math. 186, 2017). The ellipse's axes are isolated.
    orbits = so.orbit_list(3)
    free = jax.jit(lambda c: so.marked_lengths(c, orbits, None, 30, free=True))
    for curve, is_disk in ((Shape(FAMILY, DISK).curve(), True), (_ellipse_curve(), False)):
        _, sols, codes = free(curve)
        _, _, sym_codes = solve_cold(curve)
        assert all(Status(int(c)) is Status.ok for c in sym_codes)
        for orbit, sol in zip(orbits, sols):
            if is_disk or orbit.q > 2:
                assert Status(int(sol.status)) is Status.degenerate, orbit
                assert float(sol.family_gap) < 1e-8
            else:
                assert Status(int(sol.status)) is Status.ok, orbit


def test_not_a_mirror_domain_is_reported():
    # A sine mode breaks the x-axis mirror: the symmetric configuration is no longer critical.
    shape = from_family(Polar.build(1.0, [0.0, 0.05], [0.0, 0.0, 0.05], modes=3))
    orbit = so.SymmetricOrbit(1, 3, "0")
    sol = jax.jit(lambda c: so.solve(c, orbit, so.initial_guess(orbit), 30))(shape.curve())
    assert Status(int(sol.status)) is Status.orbit_not_converged
    assert float(sol.residual) > 1e-4
