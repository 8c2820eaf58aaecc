"""The shared contract suite: every shape family and every registered invariant family.

Walks ``deform.families.FAMILIES`` and ``deform.invariants.REGISTRY`` at collection time, so
families added later are checked automatically: jit equals eager, float64 in and out, finite
gradients that agree with a central difference, invariance under rigid motions, reflection and
reparametrization (a geometric invariant does not see them; common practice), and no
recompilation across calls with new parameters of the same shape.

A family that is too slow at its defaults gets a cheap option set in ``CHEAP_OPTIONS``; one
that is only defined for a restricted class of shapes lists the transformations that keep it
in that class in ``TRANSFORMS``. Nothing is skipped: a new shape family without an example in
``SHAPE_EXAMPLES`` fails ``test_every_shape_family_has_an_example``.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from deform import invariants
from deform.config import Reader, parse_shape
from deform.families import FAMILIES
from deform.shape import from_family, reflected, reparametrized, rotated, translated
from objectives import geometry
from objectives.status import Status

# ------------------------------------------------------------------------------------------
# Shape families

SHAPE_EXAMPLES = {
    "polar": {"family": "polar", "radius": 1.0, "cos": [0.0, 0.1, 0.03], "sin": [0.0, 0.0, 0.02],
              "modes": 4},
    "support": {"family": "support", "mean": 1.0, "cos": [0.0, 0.05, 0.02],
                "sin": [0.0, 0.0, -0.01], "modes": 4},
    "curve": {"family": "curve", "terms": [[1, 1.0, 0.0], [-1, 0.15, 0.05], [2, 0.03, 0.01]]},
    "ellipse": {"family": "ellipse", "a": 1.0, "b": 0.6},
    "disk": {"family": "disk", "radius": 1.3},
}


def example_family(name):
    return parse_shape(Reader(dict(SHAPE_EXAMPLES[name]), "shape"))


def test_every_shape_family_has_an_example():
    assert set(FAMILIES) <= set(SHAPE_EXAMPLES), set(FAMILIES) - set(SHAPE_EXAMPLES)


def _perturbed(params, seed, size=0.01):
    rng = np.random.default_rng(seed)
    return jnp.asarray(np.asarray(params) + size * rng.standard_normal(np.shape(params)))


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_shape_family_contract(name):
    family = example_family(name)
    shape = from_family(family)
    params = shape.params
    assert params.dtype == jnp.float64 and params.shape == (family.n_params,)
    t = jnp.linspace(0.0, 2 * np.pi, 7)

    traces = []

    def points(p):
        traces.append(1)
        return jax.vmap(lambda s: family.boundary(p, s))(t)

    jitted = jax.jit(points)
    for seed in range(3):
        p = _perturbed(params, seed)
        eager, compiled = np.asarray(points(p)), np.asarray(jitted(p))
        assert compiled.dtype == np.float64 and compiled.shape == (t.size, 2)
        assert np.allclose(eager, compiled, rtol=1e-14, atol=1e-14), seed
    assert len(traces) == 4, "recompiled for new parameter values"

    # gradients: area against a central difference in a seeded random direction
    if family.n_params:
        area = jax.jit(lambda p: geometry.area(shape.with_params(p).curve(), 128))
        grad = np.asarray(jax.grad(area)(params))
        assert np.all(np.isfinite(grad))
        v = np.random.default_rng(9).standard_normal(family.n_params)
        h = 1e-6
        fd = (float(area(params + h * v)) - float(area(params - h * v))) / (2 * h)
        assert abs(grad @ v - fd) < 1e-7 * (1 + abs(fd)), (grad @ v, fd)

    # rigid motions, reflection and reparametrization leave area, perimeter and ∮κ² ds unchanged
    def scalars(s):
        c = s.curve()
        return np.array([float(geometry.area(c, 128)), float(geometry.perimeter(c, 128)),
                         float(geometry.curvature_moment(c, 2, 128))])

    moved = reflected(reparametrized(translated(rotated(shape, 0.7), [0.3, -0.2]), 0.4, 0.2))
    assert np.allclose(scalars(shape), scalars(moved), rtol=1e-10)


# ------------------------------------------------------------------------------------------
# Invariant families

# A convex, mirror-symmetric (x-axis) test drum: every invariant family is defined on it.
CONTRACT_SHAPE = {"family": "polar", "radius": 1.0, "cos": [0.0, 0.08, 0.03], "modes": 4,
                  "symmetry": "mirror"}

CHEAP_OPTIONS = {
    "area": {"resolution": 64},
    "perimeter": {"resolution": 64},
    "curvature_moments": {"resolution": 64},
    "heat_dirichlet": {"resolution": 64},
    "heat_neumann": {"resolution": 64},
    "symmetric_orbits": {"max_period": 2, "steps": 4},
    "bouncing_balls": {"count": 1},
    "orbit_lengths": {"max_period": 2},
    "birkhoff": {"order": 1},
    "orbit_traces": {"max_period": 2},
    "wave": {"max_period": 2, "iterates": 1},
    "eigenvalues_dirichlet": {"count": 3},
    "eigenvalues_neumann": {"count": 3},
}

ALL_MOTIONS = ("rotate", "translate", "reparametrize", "reflect")
TRANSFORMS = {
    # orbits are marked by the x-axis mirror and the point t = 0: only the mirror itself and an
    # odd reparametrization (t ↦ t + w sin t fixes t = 0, π) keep the marking
    "symmetric_orbits": ("reflect",),
}

# relative tolerance of the invariance check (quadrature/solver accuracy at the cheap options)
INVARIANCE_RTOL = {"eigenvalues_dirichlet": 1e-6, "eigenvalues_neumann": 1e-6}
FD_RTOL = {"eigenvalues_dirichlet": 1e-4, "eigenvalues_neumann": 1e-4}
# central-difference step: 1e-6 keeps the O(h²) truncation below 1e-8 for the orbit amplitudes
# (third derivatives ~1e4); solver-limited families use a larger step against solver noise
FD_STEP = {"eigenvalues_dirichlet": 1e-5, "eigenvalues_neumann": 1e-5}


def _contract_shape():
    return from_family(parse_shape(Reader(dict(CONTRACT_SHAPE), "shape")))


def _moved(shape, kinds):
    if "rotate" in kinds:
        shape = rotated(shape, 0.7)
    if "translate" in kinds:
        shape = translated(shape, [0.3, -0.2])
    if "reparametrize" in kinds:
        shape = reparametrized(shape, 0.4, 0.2)
    if "reflect" in kinds:
        shape = reflected(shape)
    return shape


def _build(name):
    return invariants.build(name, CHEAP_OPTIONS.get(name, {}))


@pytest.mark.parametrize("name", sorted(invariants.REGISTRY))
def test_invariant_family_contract(name):
    evaluator = _build(name)
    shape = _contract_shape()
    curve = shape.curve()
    state = evaluator.init(curve)

    values, _, status = evaluator.evaluate(curve, state)
    values = np.asarray(values)
    assert values.dtype == np.float64 and values.ndim == 1
    assert len(evaluator.labels) == values.size and all(isinstance(x, str) for x in evaluator.labels)
    assert Status(int(status)) == Status.ok, Status(int(status)).name
    assert np.all(np.isfinite(values))

    traces = []

    def run(s, st):
        traces.append(1)
        return evaluator.evaluate(s.curve(), st)

    jitted = jax.jit(run)
    compiled, _, jstatus = jitted(shape, state)
    assert np.asarray(compiled).dtype == np.float64
    assert np.allclose(np.asarray(compiled), values, rtol=1e-10, atol=1e-12)
    assert int(jstatus) == int(status)
    for seed in (1, 2):
        again, _, _ = jitted(shape.with_params(_perturbed(shape.params, seed, 1e-3)), state)
        assert np.all(np.isfinite(np.asarray(again)))
    assert len(traces) == 1, f"{name}: recompiled for new parameter values"

    # finite gradient, and a directional central difference (seeded direction)
    weights = jnp.asarray(np.random.default_rng(3).standard_normal(values.size))

    def scalar(p):
        return jnp.sum(weights * run(shape.with_params(p), state)[0])

    grad = np.asarray(jax.jit(jax.grad(scalar))(shape.params))
    assert np.all(np.isfinite(grad)), name
    v = np.random.default_rng(4).standard_normal(grad.size)
    h = FD_STEP.get(name, 1e-6)

    def f(p):  # reuses the compiled evaluation
        return float(jnp.sum(weights * jitted(shape.with_params(p), state)[0]))

    fd = (f(shape.params + h * v) - f(shape.params - h * v)) / (2 * h)
    rtol = FD_RTOL.get(name, 1e-6)
    assert abs(grad @ v - fd) <= rtol * (abs(fd) + np.linalg.norm(grad)), (name, grad @ v, fd)

    # invariance under the allowed rigid motions, reflection and reparametrization
    moved = _moved(shape, TRANSFORMS.get(name, ALL_MOTIONS))
    moved_values, _, moved_status = jitted(moved, evaluator.init(moved.curve()))
    assert Status(int(moved_status)) == Status.ok
    rtol = INVARIANCE_RTOL.get(name, 1e-9)
    assert np.allclose(np.asarray(moved_values), values, rtol=rtol, atol=rtol), (
        name, np.asarray(moved_values) - values)


def test_shared_warm_solves_equal_separate_evaluations():
    """Families that share one warm solve (orbit lengths, traces, wave amplitudes of the same
    orbits) give through evaluate_families / linearize_families exactly what each gives alone:
    the same values, states and statuses, and Jacobians equal to each family's own forward-mode
    Jacobian (common practice: a cache must not change results). The orbit families declare one
    lane per orbit, so this also checks the per-lane Jacobian of linearize_families."""
    shape = from_family(parse_shape(Reader(SHAPE_EXAMPLES["polar"], "shape")))
    curve = shape.curve()
    names = ["orbit_lengths", "area", "orbit_traces", "wave", "bouncing_balls"]
    options = {"area": {}, "bouncing_balls": {"count": 2}}
    evaluators = [invariants.build(n, options.get(n, {"max_period": 3})) for n in names]
    assert all((n == "area") == (ev.shared is None)
               for n, ev in zip(names, evaluators))
    assert all(ev.shared.lanes is not None for ev in evaluators if ev.shared is not None)
    # every registered family with lanes is among those checked here
    with_lanes = {n for n in invariants.REGISTRY
                  if (ev := invariants.build(n, CHEAP_OPTIONS.get(n, {}))).shared is not None
                  and ev.shared.lanes is not None}
    assert with_lanes <= set(names), with_lanes - set(names)
    assert evaluators[0].shared.key == evaluators[2].shared.key != evaluators[3].shared.key
    states = invariants.init_families(evaluators, curve)
    assert states[0] is states[2]
    family = shape.family

    def curve_of(p):
        from objectives.curve import Curve

        return Curve(family.boundary, p)

    x = jnp.asarray(family.initial_params())
    values, new_states, codes = jax.jit(
        lambda x, s: invariants.evaluate_families(evaluators, curve_of(x), s))(x, states)
    flat, jac, _, codes_lin = jax.jit(
        lambda x, s: invariants.linearize_families(evaluators, curve_of, x, s))(x, states)
    offset = 0
    for k, (ev, st) in enumerate(zip(evaluators, states)):
        alone, state_alone, status_alone = ev.evaluate(curve_of(x), st)
        np.testing.assert_allclose(values[k], jnp.atleast_1d(alone), rtol=1e-13, atol=1e-15)
        assert int(codes[k]) == int(jnp.max(jnp.atleast_1d(status_alone))) == int(codes_lin[k])
        for a, b in zip(jax.tree_util.tree_leaves(new_states[k]),
                        jax.tree_util.tree_leaves(state_alone)):
            np.testing.assert_allclose(a, b, rtol=1e-13, atol=1e-14)
        own = jax.jacfwd(lambda p, ev=ev, st=st: jnp.atleast_1d(ev.evaluate(curve_of(p), st)[0]))(x)
        size = own.shape[0]
        np.testing.assert_allclose(flat[offset:offset + size], values[k], rtol=1e-13, atol=1e-15)
        np.testing.assert_allclose(jac[offset:offset + size], own, rtol=1e-9,
                                   atol=1e-11 * float(jnp.max(jnp.abs(own))))
        offset += size


def test_pooled_orbit_families_equal_separate_ones():
    """Orbit families joined into one pool (``join_pools``: one cold search up to the largest
    max period, one warm solve holding each orbit once) give the values, statuses and
    Jacobians each family gives alone with its own cold search and warm solve (common
    practice: merging solves must not change results). The selections overlap only in part
    (max orbits up to q = 3, the min-max trace at q = 2, both branches for the wave terms and
    the two bouncing balls, which are the 1/2 orbits again), so the union and the per-family
    row positions and lanes are exercised."""
    shape = from_family(parse_shape(Reader(SHAPE_EXAMPLES["polar"], "shape")))
    family = shape.family
    names = ["orbit_lengths", "area", "orbit_traces", "bouncing_balls", "wave"]
    options = {"orbit_lengths": {"max_period": 3, "branches": ["max"]}, "area": {},
               "orbit_traces": {"max_period": 2, "branches": ["minimax"]},
               "bouncing_balls": {"count": 2}, "wave": {"max_period": 2, "iterates": 1}}
    alone = [invariants.build(n, options[n]) for n in names]
    joined = invariants.join_pools(alone)
    assert len({ev.shared.key for ev in alone if ev.shared is not None}) == 4
    keys = {ev.shared.key for ev in joined if ev.shared is not None}
    assert len(keys) == 1 and joined[1] is alone[1]
    # the pool's state holds the 1/2 and 1/3 max and the 1/2 min-max orbits and the 2 bouncing
    # balls, once each
    state = invariants.init_families(joined, shape.curve())[0]
    assert state.p.shape == (5,)

    def curve_of(p):
        from objectives.curve import Curve

        return Curve(family.boundary, p)

    x = jnp.asarray(family.initial_params())
    results = []
    for evaluators in (alone, joined):
        states = invariants.init_families(evaluators, shape.curve())
        results.append(jax.jit(lambda x, s, evs=evaluators: invariants.linearize_families(
            evs, curve_of, x, s))(x, states))
    (v_alone, j_alone, _, c_alone), (v_joined, j_joined, _, c_joined) = results
    np.testing.assert_allclose(v_joined, v_alone, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(j_joined, j_alone, rtol=1e-9, atol=1e-11 * float(
        jnp.max(jnp.abs(j_alone))))
    np.testing.assert_array_equal(c_joined, c_alone)


def test_pooled_families_report_their_own_orbits(monkeypatch):
    """In a pool each family's status and identity recheck cover its own orbits only (common
    practice: a failure is reported where it happened). A bouncing ball moved off its orbit
    (bounce points shifted by 0.3) is no orbit of the fresh global search: the bouncing-ball
    family reports branch_changed, the lengths of the Birkhoff orbits stay ok; a failed status
    on that orbit is read by the bouncing-ball family alone. The three families' rechecks
    share one global search, also when the states are equal copies (as jitted steps return
    them)."""
    from objectives import orbits

    shape = from_family(parse_shape(Reader(SHAPE_EXAMPLES["polar"], "shape")))
    curve = shape.curve()
    joined = invariants.join_pools([invariants.build("orbit_lengths", {"max_period": 3}),
                                    invariants.build("orbit_traces", {"max_period": 3}),
                                    invariants.build("bouncing_balls", {"count": 1})])
    lengths, traces, bouncing = joined
    state = invariants.init_families(joined, curve)[0]
    assert state.p.shape == (5,)  # 1/2, 1/3 max and min-max, then the longest bouncing ball
    moved = state._replace(t=state.t.at[4].add(0.3),
                           status=state.status.at[4].set(int(Status.solver_failed)))
    searches = []
    same_orbits = orbits.same_orbits
    monkeypatch.setattr(orbits, "same_orbits",
                        lambda *a, **k: searches.append(1) or same_orbits(*a, **k))
    copies = [jax.tree_util.tree_map(jnp.array, state) for _ in joined]
    assert [Status(int(ev.recheck(curve, st)[1])) for ev, st in zip(joined, copies)] == [
        Status.ok] * 3
    assert len(searches) == 1
    assert [Status(int(ev.recheck(curve, moved)[1])) for ev in joined] == [
        Status.ok, Status.ok, Status.branch_changed]
    assert len(searches) == 2
    assert Status(int(lengths.shared.status_of(moved))) == Status.ok
    assert Status(int(traces.shared.status_of(moved))) == Status.ok
    assert Status(int(bouncing.shared.status_of(moved))) == Status.solver_failed
