"""Orbit-based invariant families: periodic-orbit lengths, traces, bouncing balls, wave amplitudes.

Each family's state is an :class:`objectives.orbits.OrbitSet` (jnp arrays): ``init`` runs the cold
global search (:func:`objectives.orbits.find_orbits`), ``evaluate`` the jittable warm solve
(:func:`objectives.orbits.refine_orbits`), and ``recheck`` a fresh global search compared with the
tracked orbits (:func:`objectives.orbits.same_orbits`). Status: the most severe orbit status.
Labels are fixed when the family is built: ``L[1/3,max]``, ``tr[2/5,minimax]``, ``L[bb0]``,
``A[1/2,minimax;m=2]``.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np

from objectives import orbits as orb
from objectives import wave
from objectives.status import Status, code, finite_or

from .errors import ConfigError
from .invariants import Evaluator, InvariantFamily, Shared, register


def _check_period(name: str, max_period) -> int:
    if not isinstance(max_period, int) or isinstance(max_period, bool) or not 2 <= max_period <= 24:
        raise ConfigError(f"invariants.{name}.max_period: expected an integer in 2..24, "
                          f"got {max_period!r}")
    return max_period


def _check_branches(name: str, branches) -> tuple[str, ...]:
    branches = tuple(branches) if isinstance(branches, (list, tuple)) else (branches,)
    if not branches or any(b not in ("max", "minimax") for b in branches):
        raise ConfigError(f"invariants.{name}.branches: expected a non-empty list of \"max\" and "
                          f"\"minimax\", got {branches!r}")
    return branches


def _to_state(orbits: orb.OrbitSet) -> orb.OrbitSet:
    return jax.tree_util.tree_map(jnp.asarray, orbits)


def _birkhoff_selection(max_period, branches):
    keys = [(p, q, orb.BRANCHES.index(b)) for p, q in orb.rotation_numbers(max_period)
            for b in branches]
    labels = tuple(f"{p}/{q},{orb.BRANCHES[b]}" for p, q, b in keys)

    def select(orbits: orb.OrbitSet) -> orb.OrbitSet:
        rows = []
        for key in keys:
            match = np.nonzero((orbits.p == key[0]) & (orbits.q == key[1])
                               & (orbits.branch == key[2]))[0]
            rows.append(int(match[0]))
        return orbits.select(rows)

    return labels, select


def _recheck(max_period):
    def recheck(curve, state):
        statuses, _ = orb.same_orbits(curve, state)
        return state, code(Status(int(np.max(statuses, initial=0))))

    return recheck


def _advance(curve, state):
    fresh = orb.refine_orbits(curve, state)
    return fresh, jnp.max(fresh.status)


def _advance_lanes(curves, state):
    fresh = orb.refine_orbits(curves, state, per_orbit_curves=True)
    return fresh, jnp.max(fresh.status)


def _evaluator(labels, select, max_period, iterates, values_fn, selection, lanes):
    """``selection`` names the orbits ``select`` keeps: families with equal (selection,
    max_period, iterates) track the same orbits and share one warm solve. ``lanes[j]`` is the
    selected orbit entry j of ``values_fn`` reads (every entry reads one orbit)."""

    def init(curve):
        return _to_state(select(orb.find_orbits(curve, max_period, iterates=iterates)))

    def evaluate(curve, state):
        fresh, status = _advance(curve, state)
        values = values_fn(fresh)
        return values, fresh, finite_or(values, status)

    shared = Shared(("orbits", selection, max_period, iterates), _advance, values_fn,
                    _advance_lanes, tuple(lanes))
    return Evaluator(labels, init, evaluate, _recheck(max_period), shared)


def _birkhoff_values(name, prefix, values_fn):
    """Builder of a family reading ``values_fn`` off the max/min-max p/q orbits, q ≤ max_period."""

    def build(max_period, branches):
        max_period = _check_period(name, max_period)
        branches = _check_branches(name, branches)
        names, select = _birkhoff_selection(max_period, branches)
        return _evaluator(tuple(f"{prefix}[{n}]" for n in names), select, max_period, 1,
                          values_fn, ("birkhoff", branches), range(len(names)))

    return build


_orbit_lengths = _birkhoff_values("orbit_lengths", "L", lambda o: o.length)
_orbit_traces = _birkhoff_values("orbit_traces", "tr", lambda o: o.trace)


def _bouncing_balls(count):
    if not isinstance(count, int) or isinstance(count, bool) or count < 1:
        raise ConfigError(f"invariants.bouncing_balls.count: expected a positive integer, "
                          f"got {count!r}")

    def select(orbits):
        idx = [k for k in np.argsort(-orbits.length, kind="stable")
               if orbits.q[k] == 2 and orbits.status[k] != Status.orbit_leaves_domain]
        if len(idx) < count:
            raise ConfigError(f"invariants.bouncing_balls.count: the shape has {len(idx)} "
                              f"admissible bouncing balls, {count} were asked for")
        return orbits.select(idx[:count])

    labels = tuple(f"L[bb{k}]" for k in range(count)) + tuple(f"tr[bb{k}]" for k in range(count))
    return _evaluator(labels, select, 2, 1, lambda o: jnp.concatenate([o.length, o.trace]),
                      ("bouncing", count), [*range(count), *range(count)])


def _wave(max_period, iterates, boundary):
    max_period = _check_period("wave", max_period)
    if boundary not in wave.BOUNDARIES:
        raise ConfigError(f"invariants.wave.boundary: expected one of {wave.BOUNDARIES}, "
                          f"got {boundary!r}")
    if not isinstance(iterates, int) or isinstance(iterates, bool) or not 1 <= iterates <= 8:
        raise ConfigError(f"invariants.wave.iterates: expected an integer in 1..8, got {iterates!r}")
    names, select = _birkhoff_selection(max_period, ("max", "minimax"))
    labels = tuple(f"A[{n};m={m}]" for n in names for m in range(1, iterates + 1))

    def values(o):
        terms = wave.wave_coefficients(o, boundary)
        # Degenerate terms (orbit families) have no isolated amplitude: reported as 0.
        return jnp.where(terms.usable, terms.amplitude, 0.0)

    return _evaluator(labels, select, max_period, iterates, values,
                      ("birkhoff", ("max", "minimax")),
                      [k for k in range(len(names)) for _ in range(iterates)])


register(InvariantFamily(
    "orbit_lengths", "lengths of the max and min-max Birkhoff p/q billiard orbits, q ≤ max_period",
    _orbit_lengths, (("max_period", 5), ("branches", ("max", "minimax")))))
register(InvariantFamily(
    "orbit_traces", "monodromy traces of the max and min-max p/q orbits, q ≤ max_period",
    _orbit_traces, (("max_period", 5), ("branches", ("max", "minimax")))))
register(InvariantFamily(
    "bouncing_balls", "lengths and monodromy traces of the `count` longest bouncing balls",
    _bouncing_balls, (("count", 2),)))
register(InvariantFamily(
    "wave", "leading wave-trace amplitudes L/(π|det(I − Pᵐ)|^½) of the p/q orbits and iterates",
    _wave, (("max_period", 4), ("iterates", 2), ("boundary", "dirichlet"))))
