"""Named invariant families that searches keep or move and scans differentiate.

A family is looked up by name (``area``, ``heat_dirichlet``, …) and built with options
into an :class:`Evaluator`: labels for its entries, a cold ``init`` (may run global
searches, not jitted) and a warm ``evaluate(curve, state) -> (values, state, status)``
that is jittable and differentiable with respect to the curve's parameters. State is
what a family carries from step to step (e.g. orbits to warm-start from); stateless
families use ``None``. Capabilities add families with :func:`register`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from objectives import geometry, heat
from objectives.curve import Curve
from objectives.status import Status, code, finite_or

from .errors import ConfigError


class Shared(NamedTuple):
    """A warm computation several families read from: ``advance(curve, state) -> (state,
    status)`` runs once per evaluation for all evaluators with an equal ``key`` (which must
    determine ``init`` too), ``read(state) -> values`` gives each family its entries.

    Optional lane structure (e.g. one lane per orbit): ``advance_lanes`` is ``advance`` for a
    curve whose parameters carry a leading axis with one copy per lane (the leading axis of
    every state leaf), lane k reading copy k only; ``lanes[j]`` is the lane entry j of ``read``
    depends on. :func:`linearize_families` then needs one reverse pass per entry of a lane
    instead of one per entry.

    ``status_of(state)`` (optional) is the family's own status from the advanced state, when
    the solve serves families that read different parts of it (default: ``advance``'s)."""

    key: Any
    advance: Callable[[Curve, Any], tuple[Any, Any]]
    read: Callable[[Any], Any]
    advance_lanes: Callable[[Curve, Any], tuple[Any, Any]] | None = None
    lanes: tuple[int, ...] | None = None
    pool: Pool | None = None
    status_of: Callable[[Any], Any] | None = None


class Pool(NamedTuple):
    """Families whose warm solves can merge into one (e.g. every orbit family tracking orbits
    with equal iterates, whatever their max period): :func:`join_pools` hands the evaluators
    whose ``Shared.pool`` has an equal ``key`` to ``join(evaluators) -> evaluators``, which
    rebuilds them (same labels and values) around one shared solve; ``need`` is what each one
    asks of the pool, read by ``join``."""

    key: Any
    join: Callable[[list], list]
    need: Any


class Evaluator(NamedTuple):
    """``recheck(curve, state) -> (state, status)`` is an optional cheap identity re-check
    (e.g. re-running a global orbit search) that searches call every few accepted steps and
    at the end, outside jit; a non-ok status (``branch_changed``…) stops the search.
    ``shared`` (optional) lets :func:`evaluate_families` run one warm solve for several
    families, e.g. orbit lengths and traces of the same orbits."""

    labels: tuple[str, ...]
    init: Callable[[Curve], Any]
    evaluate: Callable[[Curve, Any], tuple[Any, Any, Any]]
    recheck: Callable[[Curve, Any], tuple[Any, Any]] | None = None
    shared: Shared | None = None


def join_pools(evaluators) -> tuple:
    """The evaluators with every pool of two or more members rebuilt by its ``join`` around
    one shared solve (one cold search, one warm solve per evaluation, one search per recheck),
    in the same order. Pure: the result depends only on the evaluators' specs, not on any
    shape."""
    evaluators = list(evaluators)
    pools: dict[Any, list[int]] = {}
    for i, ev in enumerate(evaluators):
        if ev.shared is not None and ev.shared.pool is not None:
            pools.setdefault(ev.shared.pool.key, []).append(i)
    for members in pools.values():
        if len(members) < 2:
            continue
        joined = evaluators[members[0]].shared.pool.join([evaluators[i] for i in members])
        for i, ev in zip(members, joined):
            evaluators[i] = ev
    return tuple(evaluators)


def state_slots(evaluators) -> tuple[int, ...]:
    """Slot of each evaluator's warm state when families that share a solve keep one copy
    (their states are equal by construction): see :func:`compact_states`."""
    seen: dict[Any, int] = {}
    return tuple(seen.setdefault(("alone", i) if ev.shared is None else ev.shared.key, len(seen))
                 for i, ev in enumerate(evaluators))


def compact_states(states, slots: tuple[int, ...]) -> tuple:
    """One state per slot (the first family's), so a carried state holds no duplicates."""
    first = {s: i for i, s in reversed(list(enumerate(slots)))}
    return tuple(states[first[s]] for s in range(len(first)))


def expand_states(compact, slots: tuple[int, ...]) -> tuple:
    """Per-family states from :func:`compact_states`."""
    return tuple(compact[s] for s in slots)


def init_families(evaluators, curve: Curve) -> tuple:
    """Cold states of several evaluators; families with one shared key run ``init`` once."""
    done, states = {}, []
    for ev in evaluators:
        key = None if ev.shared is None else ev.shared.key
        if key is None or key not in done:
            state = ev.init(curve)
            if key is not None:
                done[key] = state
        states.append(state if key is None else done[key])
    return tuple(states)


def evaluate_families(evaluators, curve: Curve, states) -> tuple[list, tuple, Any]:
    """Warm evaluation of several evaluators: (values per family as 1-d arrays, new states,
    per-family status codes). Shared warm solves run once (jittable; the states of families
    with one key are equal by construction, so the first one's is advanced)."""
    advanced, values, new_states, codes = {}, [], [], []
    for ev, state in zip(evaluators, states):
        if ev.shared is None:
            v, st, status = ev.evaluate(curve, state)
        else:
            if ev.shared.key not in advanced:
                advanced[ev.shared.key] = ev.shared.advance(curve, state)
            st, status = advanced[ev.shared.key]
            if ev.shared.status_of is not None:
                status = ev.shared.status_of(st)
            v = ev.shared.read(st)
            status = finite_or(jnp.atleast_1d(v), status)
        values.append(jnp.atleast_1d(v).astype(jnp.float64))
        new_states.append(st)
        codes.append(jnp.max(jnp.atleast_1d(jnp.asarray(status, dtype=jnp.int32))))
    return values, tuple(new_states), jnp.stack(codes)


@dataclass(frozen=True)
class InvariantFamily:
    """``options`` lists (key, default) pairs accepted in ``[invariants.<name>]``."""

    name: str
    doc: str
    build: Callable[..., Evaluator]
    options: tuple[tuple[str, Any], ...] = ()


REGISTRY: dict[str, InvariantFamily] = {}


def register(family: InvariantFamily) -> InvariantFamily:
    REGISTRY[family.name] = family
    return family


def stateless(labels: tuple[str, ...], fn: Callable[[Curve], Any]) -> Evaluator:
    """Evaluator for a pure function of the curve (no warm-start state)."""

    def evaluate(curve, state):
        values = jnp.atleast_1d(fn(curve))
        return values, state, finite_or(values, code(Status.ok))

    return Evaluator(labels, lambda curve: None, evaluate)


def build(name: str, options: dict | None = None, where: str = "keep") -> Evaluator:
    """Evaluator for a registered family; unknown names/options raise ConfigError."""
    if name not in REGISTRY:
        raise ConfigError(f"{where}: unknown invariant {name!r} (expected one of: "
                          f"{', '.join(sorted(REGISTRY))})")
    family = REGISTRY[name]
    allowed = dict(family.options)
    options = dict(options or {})
    for key in options:
        if key not in allowed:
            hint = ", ".join(allowed) or "none"
            raise ConfigError(f"invariants.{name}.{key}: unknown option (expected one of: {hint})")
    return family.build(**{**allowed, **options})


def linearize_families(evaluators, curve_of: Callable[[Any], Curve], x, states):
    """(values, ∂values/∂x, new states, per-family codes) with ``curve_of(x)`` the curve.

    Each group of families that shares a warm solve (or each family alone) is differentiated
    on its own, in reverse mode when it has fewer entries than parameters and in forward mode
    otherwise: one reverse pass over all families would push every row's cotangent through
    every family (measured 3-5× slower than per-group passes on a 50-value orbit/heat set).
    """
    groups: dict[int, list[int]] = {}
    for i, slot in enumerate(state_slots(evaluators)):
        groups.setdefault(slot, []).append(i)
    values, jacobians = [None] * len(evaluators), [None] * len(evaluators)
    new_states, codes = [None] * len(evaluators), [None] * len(evaluators)
    for members in groups.values():
        evs = [evaluators[i] for i in members]
        sts = [states[i] for i in members]
        if all(ev.shared is not None and ev.shared.lanes is not None for ev in evs):
            J, (v, st, c) = _lane_jacobian(evs, curve_of, x, sts[0])
        else:
            def group_values(p, evs=evs, sts=sts):
                v, st, c = evaluate_families(evs, curve_of(p), sts)
                flat = jnp.concatenate(v)
                return flat, (v, st, c)

            rows = sum(len(ev.labels) for ev in evs)
            jacobian = jax.jacrev if rows < jnp.size(x) else jax.jacfwd
            J, (v, st, c) = jacobian(group_values, has_aux=True)(x)
        offset = 0
        for k, i in enumerate(members):
            size = v[k].shape[0]
            values[i], jacobians[i] = v[k], J[offset:offset + size]
            new_states[i], codes[i] = st[k], c[k]
            offset += size
    return (jnp.concatenate(values), jnp.concatenate(jacobians), tuple(new_states),
            jnp.stack(codes))


def _lane_jacobian(evs, curve_of, x, state):
    """(J, (values per family, states, codes)) of a shared group with lane structure: the
    parameters are copied per lane and entry j's row is the gradient on copy lanes[j]; seeds
    that put the cotangent on the r-th entry of every lane at once give every lane's r-th row
    in one reverse pass."""
    count = jax.tree_util.tree_leaves(state)[0].shape[0]
    # the same shared evaluation, advanced on the per-lane copies
    per_lane = [ev._replace(shared=ev.shared._replace(advance=ev.shared.advance_lanes))
                for ev in evs]

    def lane_values(x_lanes):
        v, st, c = evaluate_families(per_lane, jax.vmap(curve_of)(x_lanes),
                                     [state] * len(evs))
        return jnp.concatenate(v), (v, st, c)

    lane = np.concatenate([np.asarray(ev.shared.lanes, dtype=int) for ev in evs])
    rank = np.zeros_like(lane)
    for k in range(count):
        rank[lane == k] = np.arange(np.sum(lane == k))
    flat, pullback, aux = jax.vjp(lane_values, jnp.broadcast_to(x, (count,) + jnp.shape(x)),
                                  has_aux=True)
    seeds = jnp.asarray(rank[None, :] == np.arange(rank.max(initial=-1) + 1)[:, None],
                        dtype=flat.dtype)
    rows = jax.vmap(pullback)(seeds)[0]            # (rank, lane, parameters)
    return rows[rank, lane], aux


def _integer_option(family: str, key: str, value, low: int, high: int) -> int:
    """An integer option in [low, high], else a one-line ConfigError naming it."""
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise ConfigError(f"invariants.{family}.{key}: expected an integer between {low} and "
                          f"{high}, got {value!r}")
    return value


def _quadrature(family: str, resolution) -> int:
    return _integer_option(family, "resolution", resolution, 16, 8192)


register(InvariantFamily(
    "area", "enclosed area |Ω|",
    lambda resolution: stateless(("area",), lambda c, n=_quadrature("area", resolution):
                                 geometry.area(c, n)),
    (("resolution", 256),)))

register(InvariantFamily(
    "perimeter", "boundary length |∂Ω|",
    lambda resolution: stateless(("perimeter",), lambda c, n=_quadrature("perimeter", resolution):
                                 geometry.perimeter(c, n)),
    (("resolution", 256),)))


def _moments(max_power, resolution):
    _integer_option("curvature_moments", "max_power", max_power, 2, 16)
    _quadrature("curvature_moments", resolution)
    powers = tuple(range(2, max_power + 1))
    return stateless(tuple(f"∮κ^{n}ds" for n in powers), lambda c: jnp.stack(
        [geometry.curvature_moment(c, n, resolution) for n in powers]))


register(InvariantFamily(
    "curvature_moments", "∮κⁿ ds for n = 2..max_power", _moments,
    (("max_power", 4), ("resolution", 256))))


def _heat(boundary):
    def make(order, resolution):
        _integer_option(f"heat_{boundary}", "order", order, 0, heat.MAX_ORDER)
        _quadrature(f"heat_{boundary}", resolution)
        labels = tuple(f"heat_{boundary[0].upper()}_c{k}" for k in range(order + 1))
        return stateless(labels, lambda c: heat.heat_coefficients(c, boundary, order, resolution))

    return make


for _b in heat.BOUNDARIES:
    register(InvariantFamily(
        f"heat_{_b}", f"{_b.capitalize()} heat-trace coefficients c₀..c_order",
        _heat(_b), (("order", heat.MAX_ORDER), ("resolution", 256))))


def _symmetric_orbits(max_period, all_rotations, kinds, steps, tol, degenerate_tol, free):
    """Marked symmetric p/q orbit lengths of a mirror-symmetric domain (x-axis mirror)."""
    from objectives import symmetric_orbits as so

    if not isinstance(max_period, int) or max_period < 2:
        raise ConfigError(f"invariants.symmetric_orbits.max_period: expected an integer >= 2, "
                          f"got {max_period!r}")
    if not kinds or any(k not in ("A", "B") for k in kinds):
        raise ConfigError("invariants.symmetric_orbits.kinds: expected a non-empty list of "
                          "\"A\" (bounce on the axis at t = 0) and \"B\" (the other symmetric orbit)")
    orbits = so.orbit_list(max_period, bool(all_rotations), tuple(kinds))

    def solve_all(curve, guesses, n_steps):
        lengths, sols, codes = so.marked_lengths(curve, orbits, guesses, n_steps, tol,
                                                 degenerate_tol, bool(free))
        return lengths, tuple(s.u for s in sols), codes

    def best_of_two(curve):
        # two cold starts (bounce points equally spaced in arclength, and in t); per orbit the
        # longer local maximum of the reduced length is kept
        first = solve_all(curve, None, 6 * steps)
        second = solve_all(curve, [so.initial_guess(o) for o in orbits], 6 * steps)
        pick = (second[0] > first[0]) & (second[2] == 0)
        lengths = jnp.where(pick, second[0], first[0])
        us = tuple(jnp.where(pk, b, a) for pk, a, b in zip(pick, first[1], second[1]))
        return lengths, us, jnp.where(pick, second[2], first[2])

    cold = jax.jit(best_of_two)

    def init(curve):
        return cold(curve)[1]

    def evaluate(curve, state):
        lengths, new_state, codes = solve_all(curve, state, steps)
        # a warm start that jumps by a sizeable fraction of the bounce spacing is another orbit
        jumped = [jnp.any(jnp.abs(u - u0) > jnp.pi / (4 * o.q)) if u.size else False
                  for u, u0, o in zip(new_state, state, orbits)]
        codes = jnp.where(jnp.asarray(jumped), code(Status.branch_changed), codes)
        return lengths, new_state, finite_or(lengths, jnp.max(codes))

    tracked = jax.jit(lambda curve, state: solve_all(curve, state, steps)[0])

    def recheck(curve, state):
        # each kind's orbit is the maximum of the reduced length: a cold search that finds a
        # longer symmetric orbit means the tracked one is no longer that maximum
        fresh, now = cold(curve)[0], tracked(curve, state)
        longer = bool(jnp.any(fresh > now * (1.0 + 1e-9)))
        return state, code(Status.branch_changed if longer else Status.ok)

    return Evaluator(tuple(o.label for o in orbits), init, evaluate, recheck)


register(InvariantFamily(
    "symmetric_orbits",
    "lengths of the symmetric p/q billiard orbits of a mirror-symmetric domain (marked length "
    "spectrum); q = 2..max_period, kinds A (bounce at t = 0) and B",
    _symmetric_orbits,
    (("max_period", 5), ("all_rotations", False), ("kinds", ("A", "B")), ("steps", 8),
     ("tol", 1e-9), ("degenerate_tol", 1e-7), ("free", False))))

from . import eigen as _eigen  # noqa: E402,F401  (registers eigenvalues_dirichlet/_neumann)
from . import orbit_invariants as _orbits  # noqa: E402,F401  (orbit_lengths, orbit_traces, …)
from . import birkhoff_report as _birkhoff  # noqa: E402,F401  (birkhoff)
