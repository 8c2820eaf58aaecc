"""Orbit-based invariant families: periodic-orbit lengths, traces, bouncing balls, wave amplitudes.

Each family's state is an :class:`objectives.orbits.OrbitSet` (jnp arrays): ``init`` runs the cold
global search (:func:`objectives.orbits.find_orbits`), ``evaluate`` the jittable warm solve
(:func:`objectives.orbits.refine_orbits`), and ``recheck`` a fresh global search compared with the
tracked orbits (:func:`objectives.orbits.same_orbits`). Status: the most severe orbit status.
Families reading the same orbits share that state; in a search, every orbit family with equal
``iterates`` joins one pool (:func:`deform.invariants.join_pools`): one cold search up to the
largest max period and one warm solve holding each orbit once.
Labels are fixed when the family is built: ``L[1/3,max]``, ``tr[2/5,minimax]``, ``L[bb0]``,
``A[1/2,minimax;m=2]``.
"""

from __future__ import annotations

from typing import Any, Callable, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from objectives import orbits as orb
from objectives import wave
from objectives.status import Status, code, finite_or

from .errors import ConfigError
from .invariants import Evaluator, InvariantFamily, Pool, Shared, register


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


def _advance(curve, state):
    fresh = orb.refine_orbits(curve, state)
    return fresh, jnp.max(fresh.status)


def _advance_lanes(curves, state):
    fresh = orb.refine_orbits(curves, state, per_orbit_curves=True)
    return fresh, jnp.max(fresh.status)


def _take(state: orb.OrbitSet, rows: np.ndarray) -> orb.OrbitSet:
    """The orbits at the static indices ``rows`` (a slice when they are consecutive)."""
    if np.array_equal(rows, np.arange(rows[0], rows[0] + rows.size)):
        return jax.tree_util.tree_map(lambda a: a[rows[0]:rows[0] + rows.size], state)
    return jax.tree_util.tree_map(lambda a: a[rows], state)


def _equal(a, b) -> bool:
    """Equal states (host-side check; jitted steps return equal states as distinct arrays)."""
    return a is b or (a is not None and all(
        np.array_equal(np.asarray(u), np.asarray(v), equal_nan=True) for u, v in zip(a, b)))


class _Need(NamedTuple):
    """What one orbit family reads from its warm solve: the orbits ``keys`` of ``block``
    (Birkhoff orbits by (p, q, branch); bouncing balls by rank, longest first), found by a cold
    search up to ``max_period``; entry j of ``values_fn`` (applied to those orbits, in key order)
    reads orbit ``lanes[j]``."""

    block: str
    keys: tuple
    lanes: tuple[int, ...]
    max_period: int
    iterates: int
    values_fn: Callable[[orb.OrbitSet], Any]


def _birkhoff_rows(found: orb.OrbitSet, keys) -> list[int]:
    return [int(np.nonzero((found.p == p) & (found.q == q) & (found.branch == b))[0][0])
            for p, q, b in keys]


def _bouncing_rows(found: orb.OrbitSet, ranks) -> list[int]:
    idx = [int(k) for k in np.argsort(-found.length, kind="stable")
           if found.q[k] == 2 and found.status[k] != Status.orbit_leaves_domain]
    if len(idx) < len(ranks):
        raise ConfigError(f"invariants.bouncing_balls.count: the shape has {len(idx)} "
                          f"admissible bouncing balls, {len(ranks)} were asked for")
    return [idx[r] for r in ranks]


_BLOCKS = {"birkhoff": _birkhoff_rows, "bouncing": _bouncing_rows}


def _pooled(requests: list[tuple[tuple[str, ...], _Need]]) -> list[Evaluator]:
    """Evaluators for (labels, need) requests with equal ``iterates`` that share one cold search
    (up to the largest max period) and one warm solve. The shared state holds each block's keys
    once, in order of first request, so families reading the same orbits (lengths and traces)
    never solve them twice; a family alone is a pool of one."""
    iterates = requests[0][1].iterates
    blocks: dict[str, list] = {}
    for _, need in requests:
        keys = blocks.setdefault(need.block, [])
        keys.extend(k for k in need.keys if k not in keys)
    if "bouncing" in blocks:  # ranks: the longest ones, whatever order they were asked in
        blocks["bouncing"] = list(range(max(blocks["bouncing"]) + 1))
    offset, position = 0, {}
    for block, keys in blocks.items():
        position.update({(block, k): offset + i for i, k in enumerate(keys)})
        offset += len(keys)
    max_period = max(need.max_period for _, need in requests)
    key = ("orbits", tuple((b, tuple(k)) for b, k in blocks.items()), max_period, iterates)

    def init(curve):
        found = orb.find_orbits(curve, max_period, iterates=iterates)
        rows = [r for block, keys in blocks.items() for r in _BLOCKS[block](found, keys)]
        return _to_state(found.select(rows))

    compared = [None, None, None]  # (curve, state, statuses) of the last recheck of the pool

    def evaluator(labels, need):
        rows = np.asarray([position[(need.block, k)] for k in need.keys])

        def read(state):
            return need.values_fn(_take(state, rows))

        def status_of(state):
            # only this family's orbits: another family's failing orbit is reported there
            return jnp.max(_take(state, rows).status)

        def evaluate(curve, state):
            fresh, _ = _advance(curve, state)
            values = read(fresh)
            return values, fresh, finite_or(values, status_of(fresh))

        def recheck(curve, state):
            # the families of a pool are rechecked one after another on one curve and state:
            # one global search serves them all
            if compared[0] is not curve or not _equal(compared[1], state):
                compared[:] = curve, state, orb.same_orbits(curve, state)[0]
            return state, code(Status(int(np.max(compared[2][rows], initial=0))))

        shared = Shared(key, _advance, read, _advance_lanes,
                        tuple(int(rows[j]) for j in need.lanes),
                        Pool(("orbits", iterates), _join, need), status_of)
        return Evaluator(labels, init, evaluate, recheck, shared)

    return [evaluator(labels, need) for labels, need in requests]


def _join(evaluators: list[Evaluator]) -> list[Evaluator]:
    return _pooled([(ev.labels, ev.shared.pool.need) for ev in evaluators])


def _birkhoff_keys(max_period, branches):
    return [(p, q, orb.BRANCHES.index(b)) for p, q in orb.rotation_numbers(max_period)
            for b in branches]


def _birkhoff_values(name, prefix, values_fn):
    """Builder of a family reading ``values_fn`` off the max/min-max p/q orbits, q ≤ max_period."""

    def build(max_period, branches):
        max_period = _check_period(name, max_period)
        branches = _check_branches(name, branches)
        keys = _birkhoff_keys(max_period, branches)
        labels = tuple(f"{prefix}[{p}/{q},{orb.BRANCHES[b]}]" for p, q, b in keys)
        need = _Need("birkhoff", tuple(keys), tuple(range(len(keys))), max_period, 1, values_fn)
        return _pooled([(labels, need)])[0]

    return build


_orbit_lengths = _birkhoff_values("orbit_lengths", "L", lambda o: o.length)
_orbit_traces = _birkhoff_values("orbit_traces", "tr", lambda o: o.trace)


def _bouncing_balls(count):
    if not isinstance(count, int) or isinstance(count, bool) or count < 1:
        raise ConfigError(f"invariants.bouncing_balls.count: expected a positive integer, "
                          f"got {count!r}")
    labels = tuple(f"L[bb{k}]" for k in range(count)) + tuple(f"tr[bb{k}]" for k in range(count))
    need = _Need("bouncing", tuple(range(count)), (*range(count), *range(count)), 2, 1,
                 lambda o: jnp.concatenate([o.length, o.trace]))
    return _pooled([(labels, need)])[0]


def _wave(max_period, iterates, boundary):
    max_period = _check_period("wave", max_period)
    if boundary not in wave.BOUNDARIES:
        raise ConfigError(f"invariants.wave.boundary: expected one of {wave.BOUNDARIES}, "
                          f"got {boundary!r}")
    if not isinstance(iterates, int) or isinstance(iterates, bool) or not 1 <= iterates <= 8:
        raise ConfigError(f"invariants.wave.iterates: expected an integer in 1..8, got {iterates!r}")
    keys = _birkhoff_keys(max_period, ("max", "minimax"))
    labels = tuple(f"A[{p}/{q},{orb.BRANCHES[b]};m={m}]" for p, q, b in keys
                   for m in range(1, iterates + 1))

    def values(o):
        terms = wave.wave_coefficients(o, boundary)
        # Degenerate terms (orbit families) have no isolated amplitude: reported as 0.
        return jnp.where(terms.usable, terms.amplitude, 0.0)

    need = _Need("birkhoff", tuple(keys), tuple(k for k in range(len(keys))
                                                for _ in range(iterates)),
                 max_period, iterates, values)
    return _pooled([(labels, need)])[0]


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
