"""Iso-invariant searches over a shape family's free parameters x ∈ Rⁿ.

Kept invariants F: Rⁿ → Rᵐ (any registered families, concatenated) are held at their start
values F₀ through the relative residual r(x) = (F(x) − F₀)/s, s_i = max(|F₀_i|, floor).

* ``continuation`` follows {r = 0}: tangent predictor in the null space of J = ∂r/∂x (SVD,
  numerical rank at ``rank_tolerance``·σ_max), oriented by the projected gradient of the move
  objective (the previous tangent, or a random null direction from the PRNG key, when that
  vanishes), then a minimal-norm corrector x ← x − J⁺r(x): Gauss–Newton (J at every iterate,
  the default) or the chord method (J of the base point, refreshed when the residual contracts
  by less than half). Failed steps are rejected and retried with half the step; easy steps
  grow it.
* ``penalty`` minimizes ½μ‖r‖² + λ·r − w·(move objective) with optax (adam, L-BFGS, sgd);
  λ is the augmented-Lagrangian multiplier, updated λ ← λ + μr every few accepted steps. One
  evaluation (forward pass and pullback) per step, at the candidate point.

Move objectives (maximized): D(x₀, x)² for ``distance`` (objectives.distance, isometry-
invariant), −½(q(x) − target)² for a coefficient or a non-kept invariant entry q.
A step is an (init, update) pair over one :class:`SearchState`; ``update`` is jitted once per
run and never retraced. Every attempt reports an objectives.status.Status.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
import optax

from objectives import geometry
from objectives.curve import Curve, nodes
from objectives.distance import DistanceReference, distance_reference, distance_to
from objectives.programs import persistent_jit
from objectives.status import Status, code, combine

from . import invariants as registry
from .errors import ConfigError
from .families import ShapeFamily
from .runtime import cache_dir
from .searchspec import InvariantOptions, SearchSpec

SIMPLICITY_FLOOR = 1e-3
"""Chord–arc margin below which a step is rejected as self-intersecting (as in validate.py)."""
CONSTRAINT_RESOLUTION = 256
TRACES: dict[str, int] = {"continuation": 0, "penalty": 0}
"""How often each mode's update has been traced (tests assert no retracing between steps)."""


class SearchState(NamedTuple):
    """Everything that changes between steps; the loop around ``update`` holds nothing else."""

    step: jax.Array            # accepted steps so far (int32)
    params: jax.Array          # free shape parameters x
    key: jax.Array             # PRNG key (raw uint32[2])
    tangent: jax.Array         # last accepted predictor direction (continuation)
    step_size: jax.Array       # continuation step length / penalty update multiplier
    rejections: jax.Array      # consecutive rejected attempts (int32)
    multipliers: jax.Array     # augmented-Lagrangian λ (penalty)
    opt_state: Any             # optax state (penalty), () otherwise
    evaluator_states: tuple    # one warm state per solve (Problem.slots maps families to them)
    values: jax.Array          # tracked values at params (continuation), empty otherwise
    jacobian: jax.Array        # their Jacobian ∂values/∂x at params (continuation)
    linearized: jax.Array      # values and jacobian hold the linearization at params (bool)
    move_value: jax.Array      # distance move objective D² at params (continuation), else 0
    move_gradient: jax.Array   # its gradient ∂D²/∂x (continuation, distance move), else empty


class StepInfo(NamedTuple):
    """What one attempt produced (candidate values; a result only if ``accepted``)."""

    accepted: jax.Array
    status: jax.Array
    family_status: jax.Array
    params: jax.Array
    values: jax.Array
    residuals: jax.Array
    residual: jax.Array
    move: jax.Array
    distance: jax.Array
    step_size: jax.Array
    iterations: jax.Array
    null_dim: jax.Array


class Context(NamedTuple):
    """Per-run constants passed to the jitted update as arguments (not baked in)."""

    start: jax.Array
    targets: jax.Array
    scales: jax.Array
    weights: jax.Array
    reference: DistanceReference   # the start's side of D (distance move), else empty


def step_weights(family: ShapeFamily, smoothness: float) -> np.ndarray:
    """Diagonal metric for steps: w = (1 + k²)^(−s/2) for a coefficient of Fourier mode k.

    Steps are measured and taken in y with x = x₀ + W y, i.e. in a Sobolev-H^s-like norm of the
    boundary, so a unit step moves mode k by ~k^(−s): curvature-based invariants (∮κ_s², …)
    grow like k^(2·order) and would otherwise make every high-mode step fail. The mode number
    is read from the label (``cos[3]``, ``re[-2]``); unlabelled entries (radius, axes) get k = 0.
    """
    import re

    ks = []
    for label in family.param_labels:
        found = re.search(r"\[(-?\d+)\]", label)
        ks.append(abs(int(found.group(1))) if found else 0)
    return (1.0 + np.asarray(ks, dtype=np.float64) ** 2) ** (-0.5 * smoothness)


@dataclass(frozen=True)
class Problem:
    """A search problem resolved against the registry (host side, built once per run)."""

    family: ShapeFamily
    start: np.ndarray
    names: tuple[str, ...]                  # tracked families: kept first, then watched/moved
    evaluators: tuple[registry.Evaluator, ...]
    n_kept_families: int
    labels: tuple[str, ...]                 # "family:entry" for every tracked value
    n_kept: int                             # first n_kept values are kept
    move_kind: str
    move_index: int                         # parameter index or value index
    move_target: float
    move_tolerance: float
    convex: bool
    distance_points: int = 64

    def curve(self, params) -> Curve:
        return Curve(self.family.boundary, params)

    @property
    def slots(self) -> tuple[int, ...]:
        """Slot of each family's warm state in a search state (shared solves keep one copy)."""
        return registry.state_slots(self.evaluators)

    @property
    def move_label(self) -> str:
        if self.move_kind == "distance":
            return "distance from start"
        if self.move_kind == "coefficient":
            return self.family.param_labels[self.move_index]
        return self.labels[self.move_index]


def build_problem(family: ShapeFamily, spec: SearchSpec, options: InvariantOptions,
                  start: np.ndarray | None = None) -> Problem:
    """Resolve family names, options and the move target; raise ConfigError on bad input."""
    names = list(spec.keep) + list(spec.watch)
    if spec.move.kind == "invariant" and spec.move.family not in names:
        names.append(spec.move.family)
    evaluators = []
    for i, name in enumerate(names):
        where = f"search.keep[{i}]" if i < len(spec.keep) else "search.watch"
        try:
            evaluators.append(registry.build(name, options.options(name), where=where))
        except (ValueError, TypeError) as err:
            raise ConfigError(f"invariants.{name}: {err}") from None
    evaluators = registry.join_pools(evaluators)  # e.g. one orbit solve for every orbit family
    labels = tuple(f"{n}:{lab}" for n, ev in zip(names, evaluators) for lab in ev.labels)
    n_kept = sum(len(ev.labels) for ev in evaluators[:len(spec.keep)])
    if family.n_params == 0:
        raise ConfigError("shape: the family has no free parameters, so nothing can move "
                          "(drop fix_scale or use a family with modes)")
    move_index, move = 0, spec.move
    if move.kind == "coefficient":
        free = family.param_labels
        if move.coefficient not in free:
            raise ConfigError(f"search.move.coefficient: {move.coefficient!r} is not a free "
                              f"coefficient of this shape (free: {', '.join(free)})")
        move_index = free.index(move.coefficient)
    elif move.kind == "invariant":
        offset = sum(len(ev.labels) for ev in evaluators[:names.index(move.family)])
        own = evaluators[names.index(move.family)].labels
        if move.entry.isdigit() and int(move.entry) < len(own):
            move_index = offset + int(move.entry)
        elif move.entry in own:
            move_index = offset + own.index(move.entry)
        else:
            raise ConfigError(f"search.move.entry: {move.entry!r} is not an entry of "
                              f"{move.family!r} (expected an index < {len(own)} or one of: "
                              f"{', '.join(own)})")
    x0 = np.asarray(family.initial_params() if start is None else start, dtype=np.float64)
    return Problem(family, x0, tuple(names), tuple(evaluators), len(spec.keep), labels, n_kept,
                   move.kind, move_index, move.target, move.tolerance, spec.convex,
                   spec.distance_points)


# --------------------------------------------------------------------------- evaluation


def _evaluate_all(problem: Problem, x, states):
    """(values of every tracked family, new states, per-family status codes)."""
    values, new_states, codes = registry.evaluate_families(
        problem.evaluators, problem.curve(x), registry.expand_states(states, problem.slots))
    return (jnp.concatenate(values), registry.compact_states(new_states, problem.slots), codes)


def _residual(problem: Problem, ctx: Context, x, states):
    values, new_states, codes = _evaluate_all(problem, x, states)
    return (values[:problem.n_kept] - ctx.targets) / ctx.scales, (values, new_states, codes)


def _move_quantity(problem: Problem, ctx: Context, x, values):
    """The moved quantity q (the coefficient or the invariant entry; NaN for distance, whose
    exact value the run loop measures on recorded shapes only, to keep steps cheap)."""
    if problem.move_kind == "distance":
        return jnp.asarray(jnp.nan)
    if problem.move_kind == "coefficient":
        return x[problem.move_index]
    return values[problem.move_index]


def _move_objective(problem: Problem, ctx: Context, x, states):
    """Objective to increase: D² (smooth at the start) or −½(q − target)²."""
    if problem.move_kind == "distance":
        return distance_to(ctx.reference, problem.curve(x), smooth=True)
    if problem.move_kind == "coefficient":
        q = x[problem.move_index]
    else:
        q = _evaluate_all(problem, x, states)[0][problem.move_index]
    return -0.5 * (q - problem.move_target) ** 2


def _linearized(problem: Problem, x, states):
    """(values, ∂values/∂x, new states, status codes) by automatic differentiation."""
    values, J, new_states, codes = registry.linearize_families(
        problem.evaluators, problem.curve, x, registry.expand_states(states, problem.slots))
    return values, J, registry.compact_states(new_states, problem.slots), codes


def _target_quantity(problem: Problem, x, values, J):
    """(q, ∇q) of a coefficient or invariant-entry move, from values and their Jacobian."""
    if problem.move_kind == "coefficient":
        return x[problem.move_index], jnp.zeros_like(x).at[problem.move_index].set(1.0)
    return values[problem.move_index], J[problem.move_index]


def constraint_status(problem: Problem, x):
    """self_intersection / not_convex (when asked) / nonfinite for a candidate shape."""
    curve = problem.curve(x)
    points = jax.vmap(curve)(nodes(CONSTRAINT_RESOLUTION))

    def pairwise_check(_):
        simple = geometry.simplicity(curve, CONSTRAINT_RESOLUTION)
        return simple.crossing | ~(simple.margin >= SIMPLICITY_FLOOR) | ~(
            geometry.area(curve, CONSTRAINT_RESOLUTION) > 0)

    # The O(n²) chord–arc test runs only when the node polygon is not convex (a convex,
    # counter-clockwise polygon is simple), which is most steps of most searches.
    bad = jax.lax.cond(geometry.polygon_convex(points), lambda _: jnp.asarray(False),
                       pairwise_check, None)
    status = jnp.where(bad, code(Status.self_intersection), code(Status.ok))
    if problem.convex:
        kmin = geometry.convexity_margin(curve, CONSTRAINT_RESOLUTION)[0]
        status = combine(status, jnp.where(kmin > 0, code(Status.ok), code(Status.not_convex)))
    finite = jnp.all(jnp.isfinite(x))
    return jnp.where(finite, status, code(Status.nonfinite))


def _unit(v):
    norm = jnp.linalg.norm(v)
    return v / jnp.where(norm > 0, norm, 1.0), norm


# --------------------------------------------------------------------------- continuation


def _null_space(J, rank_tolerance):
    """SVD pieces: projector onto null(J), pseudo-inverse J⁺, rank and null dimension."""
    n = J.shape[1]
    # the thin SVD suffices: null(J) is the complement of the in-rank right singular vectors
    U, S, Vt = jnp.linalg.svd(J, full_matrices=False)
    in_rank = S > rank_tolerance * jnp.maximum(S[0], 1e-300)
    rank = jnp.sum(in_rank)
    projector = jnp.eye(n, dtype=J.dtype) - Vt.T @ (in_rank[:, None].astype(J.dtype) * Vt)
    inv_s = jnp.where(in_rank, 1.0 / jnp.where(in_rank, S, 1.0), 0.0)
    pinv = Vt.T @ (inv_s[:, None] * U.T)
    return projector, pinv, rank, n - rank


def make_continuation(problem: Problem, spec: SearchSpec, linearize: Callable | None = None):
    """(init, update) for predictor–corrector continuation along {r = 0}.

    The state carries the values and Jacobian at its point, so a step linearizes once per
    corrector iterate (Gauss–Newton) and a rejected attempt costs no new Jacobian at the base;
    the corrector ends with the linearization at the new point, which the next step uses.
    ``linearize`` is ``(x, states) -> (values, J, states, codes)``; pass the jitted one from
    :func:`prepare` so its trace is reused.
    """
    cs = spec.continuation
    newton = cs.corrector == "newton"
    distance = problem.move_kind == "distance"
    linearize = linearize or (lambda x, states: _linearized(problem, x, states))

    def init(ctx: Context, key, evaluator_states, values, jacobian) -> SearchState:
        """With ``values``/``jacobian`` None the state is not linearized yet: the first
        ``update`` then only linearizes at the start (an attempt that is never accepted)."""
        n, m = ctx.start.shape[0], len(problem.labels)
        linearized = values is not None
        values = jnp.zeros(m) if values is None else values
        jacobian = jnp.zeros((m, n)) if jacobian is None else jacobian
        return SearchState(
            step=jnp.asarray(0, jnp.int32), params=jnp.asarray(ctx.start), key=key,
            tangent=jnp.zeros(n), step_size=jnp.asarray(cs.step_size),
            rejections=jnp.asarray(0, jnp.int32), multipliers=jnp.zeros(problem.n_kept),
            opt_state=(), evaluator_states=evaluator_states, values=jnp.asarray(values),
            jacobian=jnp.asarray(jacobian), linearized=jnp.asarray(linearized),
            move_value=jnp.asarray(0.0), move_gradient=jnp.zeros(n if distance else 0))

    def update(ctx: Context, state: SearchState):
        TRACES["continuation"] += 1
        x, states, w = state.params, state.evaluator_states, ctx.weights
        values_x, J_x = state.values, state.jacobian
        # priming: one pass that linearizes at x itself, so prepare needs no separate program
        prime = ~state.linearized
        kept = lambda v: (v[:problem.n_kept] - ctx.targets) / ctx.scales  # noqa: E731
        kept_J = lambda J: J[:problem.n_kept] / ctx.scales[:, None] * w  # noqa: E731
        # all linear algebra in the weighted coordinates y (x = x₀ + W y)
        projector, pinv_x, _, null_dim = _null_space(kept_J(J_x), cs.rank_tolerance)
        key, sub = jax.random.split(state.key)
        if distance:
            # carried from the step that reached x (the priming pass computes it at the start)
            objective, move_grad = state.move_value, state.move_gradient
        else:
            q, dq = _target_quantity(problem, x, values_x, J_x)
            objective, move_grad = -0.5 * (q - problem.move_target) ** 2, -(
                q - problem.move_target) * dq
        along_move, move_norm = _unit(projector @ (w * move_grad))
        along_prev, prev_norm = _unit(projector @ state.tangent)
        along_random, _ = _unit(projector @ jax.random.normal(sub, x.shape))
        if problem.move_kind == "distance":
            # follow the path (previous tangent) and lean toward increasing D, so the search
            # does not zig-zag on a multi-dimensional null space
            blend, blend_norm = _unit(jnp.where(prev_norm > 1e-12, along_prev, 0.0)
                                      + jnp.where(move_norm > 1e-12, along_move, 0.0))
            tangent = jnp.where(blend_norm > 1e-12, blend, along_random)
        else:
            tangent = jnp.where(move_norm > 1e-12, along_move,
                                jnp.where(prev_norm > 1e-12, along_prev, along_random))
        direction = w * tangent
        h = state.step_size
        if problem.move_kind != "distance":
            # do not overshoot the target: a linear estimate of the remaining distance
            rate = jnp.abs(dq @ direction)
            h = jnp.minimum(h, jnp.abs(q - problem.move_target) / jnp.maximum(rate, 1e-12))
        predicted = jnp.where(prime, x, x + h * direction)

        def values_only(p, st):
            values, st, codes = _evaluate_all(problem, p, st)
            return values, J_x, st, codes

        class Carry(NamedTuple):
            p: jax.Array          # current iterate
            want_jacobian: jax.Array  # linearize (not only evaluate) at p in this pass
            pinv: jax.Array       # (J W)⁺ used for corrections
            values: jax.Array     # values at the last visited point
            jacobian: jax.Array   # J at the last visited point when ``fresh``
            fresh: jax.Array
            states: tuple
            codes: jax.Array
            corrections: jax.Array
            passes: jax.Array
            previous: jax.Array   # residual size before the last correction
            done: jax.Array
            failed: jax.Array

        def go_on(c: Carry):
            return ~c.done & (c.passes < 2 * cs.corrector_iterations + 2)

        def visit(c: Carry):
            # Gauss–Newton linearizes at every iterate; the chord method evaluates and keeps
            # the base J, linearizing only when the residual contracts by less than half and
            # once at the converged point (that J is the next step's base)
            if newton:  # static: its program holds no evaluation-only branch
                values, J, st, codes = linearize(c.p, c.states)
            else:
                values, J, st, codes = jax.lax.cond(c.want_jacobian, linearize, values_only,
                                                    c.p, c.states)
            r = kept(values)
            size = jnp.max(jnp.abs(r)) if problem.n_kept else jnp.asarray(0.0)
            converged = size <= cs.tolerance
            # a residual that grew fourfold means the corrector left its basin (the max-norm
            # of converging Gauss–Newton iterates may grow a little): give up, the step is
            # retried at half the length
            failed = (size > 4.0 * c.previous) | (
                ~converged & (c.corrections >= cs.corrector_iterations)) | ~jnp.isfinite(size)
            fresh = c.want_jacobian
            pinv = jax.lax.cond(fresh & ~converged,
                                lambda J: jnp.linalg.pinv(kept_J(J), rtol=cs.rank_tolerance),
                                lambda J: c.pinv, J)
            # chord: a stale J at a converged point, or a poor contraction, asks for a fresh J
            # at the same point before going on
            relinearize = ~fresh & (converged | (size > 0.5 * c.previous))
            move = ~converged & ~failed & ~relinearize
            p = jnp.where(move, c.p - w * (pinv @ r), c.p)
            return Carry(p, jnp.asarray(newton) | relinearize, pinv, values, J, fresh, st,
                         codes, c.corrections + move.astype(jnp.int32), c.passes + 1,
                         jnp.where(move, size, c.previous),
                         (converged & fresh) | failed | prime, failed)

        start = Carry(predicted, jnp.asarray(newton) | prime, pinv_x, values_x, J_x,
                      jnp.asarray(False), states, jnp.zeros(len(problem.evaluators), jnp.int32),
                      jnp.asarray(0, jnp.int32), jnp.asarray(0, jnp.int32),
                      jnp.asarray(jnp.inf), jnp.asarray(False), jnp.asarray(False))
        end = jax.lax.while_loop(go_on, visit, start)
        # the priming pass only linearizes at x (its corrections used provisional targets)
        x_new, values, iterations = jnp.where(prime, x, end.p), end.values, end.corrections
        r = kept(values)
        residual = jnp.max(jnp.abs(r)) if problem.n_kept else jnp.asarray(0.0)
        converged = (residual <= cs.tolerance) & end.fresh & ~end.failed
        status = combine(jnp.max(end.codes), constraint_status(problem, x_new),
                         jnp.where(converged, code(Status.ok), code(Status.solver_failed)),
                         jnp.where(null_dim > 0, code(Status.ok), code(Status.degenerate)),
                         jnp.where(jnp.all(jnp.isfinite(values)), code(Status.ok),
                                   code(Status.nonfinite)))
        accepted = (status == int(Status.ok)) & ~prime
        # a step past an extremum of the move objective is kept (it is a valid point of the
        # set) but halves the step, so the search settles instead of oscillating
        if distance:
            new_objective, new_gradient = jax.value_and_grad(
                lambda p: _move_objective(problem, ctx, p, end.states))(x_new)
        else:
            q_new = _move_quantity(problem, ctx, x_new, values)
            new_objective = -0.5 * (q_new - problem.move_target) ** 2
            new_gradient = state.move_gradient
        improved = new_objective > objective
        factor = jnp.where(iterations <= 3, cs.grow, jnp.where(iterations <= 6, 1.0, 1 / cs.grow))
        grown = jnp.where(improved, jnp.minimum(state.step_size * factor, cs.max_step),
                          0.5 * state.step_size)
        pick = lambda a, b: jax.tree_util.tree_map(  # noqa: E731
            lambda u, v: jnp.where(accepted, u, v), a, b)
        new_state = SearchState(
            step=state.step + accepted.astype(jnp.int32),
            params=pick(x_new, x), key=key, tangent=pick(tangent, state.tangent),
            step_size=jnp.where(accepted, grown, state.step_size * 0.5),
            rejections=jnp.where(accepted, 0, state.rejections + 1),
            multipliers=state.multipliers, opt_state=(),
            evaluator_states=pick(end.states, states), values=pick(values, values_x),
            jacobian=pick(end.jacobian, J_x), linearized=jnp.asarray(True),
            move_value=pick(new_objective, state.move_value),
            move_gradient=pick(new_gradient, state.move_gradient))
        new_state = jax.tree_util.tree_map(lambda u, v: jnp.where(prime, u, v), state._replace(
            evaluator_states=end.states, values=values, jacobian=end.jacobian,
            linearized=jnp.asarray(True), move_value=new_objective,
            move_gradient=new_gradient), new_state)
        info = StepInfo(accepted, status, end.codes, x_new, values, r, residual,
                        _move_quantity(problem, ctx, x_new, values), jnp.asarray(jnp.nan), h,
                        iterations, null_dim)
        return new_state, info

    return init, update


# --------------------------------------------------------------------------- penalty


def _optimizer(spec: SearchSpec) -> optax.GradientTransformationExtraArgs:
    """The configured optax optimizer followed by a clip of each update's norm."""
    ps = spec.penalty
    if ps.optimizer == "adam":
        base = optax.adam(ps.learning_rate)
    elif ps.optimizer == "sgd":
        base = optax.sgd(ps.learning_rate)
    else:  # step lengths come from its zoom line search; learning_rate is not used
        base = optax.lbfgs()
    return optax.chain(base, optax.clip_by_global_norm(ps.max_update))


def make_penalty(problem: Problem, spec: SearchSpec, linearize: Callable | None = None):
    """(init, update) for the penalty / augmented-Lagrangian descent.

    One evaluation per step: ``update`` evaluates the invariants and the loss gradient at the
    candidate x + s·Wu (u the optimizer update in the weighted coordinates y, x = x₀ + W y,
    pending from the last accepted point x), accepts
    or rejects it, and on acceptance computes the next pending update from that same gradient.
    A rejection halves s and retries from x. The first call (:func:`prepare` makes it) evaluates
    the start, where u = 0, and only primes u.
    """
    del linearize  # each step differentiates once, at its candidate, by a pullback
    ps = spec.penalty
    tx = _optimizer(spec)

    def forward(ctx, x, states):
        """(relative residuals r, move objective) with (values, states, codes) as aux."""
        values, new_states, codes = _evaluate_all(problem, x, states)
        r = (values[:problem.n_kept] - ctx.targets) / ctx.scales
        if problem.move_kind == "distance":
            objective = _move_objective(problem, ctx, x, states)
        else:
            q = _move_quantity(problem, ctx, x, values)
            objective = -0.5 * (q - problem.move_target) ** 2
        return (r, objective), (values, new_states, codes)

    def loss_of(r, objective, multipliers):
        return (0.5 * ps.weight * jnp.sum(r * r) + jnp.sum(multipliers * r)
                - ps.move_weight * objective)

    def init(ctx: Context, key, evaluator_states, values, jacobian) -> SearchState:
        del values, jacobian  # each step evaluates and differentiates at its candidate
        x = jnp.asarray(ctx.start)
        return SearchState(
            step=jnp.asarray(0, jnp.int32), params=x, key=key, tangent=jnp.zeros_like(x),
            step_size=jnp.asarray(1.0), rejections=jnp.asarray(0, jnp.int32),
            multipliers=jnp.zeros(problem.n_kept), opt_state=tx.init(x),
            evaluator_states=evaluator_states, values=jnp.zeros(0), jacobian=jnp.zeros(0),
            linearized=jnp.asarray(False), move_value=jnp.asarray(0.0),
            move_gradient=jnp.zeros(0))

    def update(ctx: Context, state: SearchState):
        TRACES["penalty"] += 1
        # optax works in the weighted coordinates y, x = x₀ + W y (see step_weights): Adam's
        # per-coordinate steps would otherwise move a mode-32 coefficient as far as the radius
        x, states, w = state.params, state.evaluator_states, ctx.weights
        candidate = x + state.step_size * w * state.tangent
        (r, objective), pullback, (values, states_new, codes) = jax.vjp(
            lambda p: forward(ctx, p, states), candidate, has_aux=True)
        residual = jnp.max(jnp.abs(r))
        status = combine(jnp.max(codes), constraint_status(problem, candidate),
                         jnp.where(jnp.all(jnp.isfinite(values)), code(Status.ok),
                                   code(Status.nonfinite)))
        accepted = status == int(Status.ok)
        step = state.step + accepted.astype(jnp.int32)
        refresh = accepted & (ps.multiplier_every > 0) & (
            step % max(ps.multiplier_every, 1) == 0)
        multipliers = jnp.where(refresh, state.multipliers + ps.weight * r, state.multipliers)
        # the pending update uses the refreshed multipliers; the backward pass runs once
        value = loss_of(r, objective, multipliers)
        grad = w * pullback((ps.weight * r + multipliers,
                             -ps.move_weight * jnp.ones_like(objective)))[0]
        value_fn = lambda y: loss_of(  # noqa: E731
            *forward(ctx, ctx.start + w * y, states)[0], multipliers)
        updates, opt_state = tx.update(grad, state.opt_state, (candidate - ctx.start) / w,
                                       value=value, grad=grad, value_fn=value_fn)
        accepted = accepted & jnp.all(jnp.isfinite(updates))
        pick = lambda a, b: jax.tree_util.tree_map(  # noqa: E731
            lambda u, v: jnp.where(accepted, u, v), a, b)
        new_state = SearchState(
            step=state.step + accepted.astype(jnp.int32), params=pick(candidate, x),
            key=state.key, tangent=pick(updates, state.tangent),
            step_size=jnp.where(accepted, jnp.minimum(1.0, state.step_size * 1.5),
                                state.step_size * 0.5),
            rejections=jnp.where(accepted, 0, state.rejections + 1),
            multipliers=pick(multipliers, state.multipliers),
            opt_state=pick(opt_state, state.opt_state),
            evaluator_states=pick(states_new, states), values=state.values,
            jacobian=state.jacobian, linearized=state.linearized, move_value=state.move_value,
            move_gradient=state.move_gradient)
        status = jnp.where(accepted | (status != int(Status.ok)), status, code(Status.nonfinite))
        info = StepInfo(accepted, status, codes, candidate, values, r, residual,
                        _move_quantity(problem, ctx, candidate, values), jnp.asarray(jnp.nan),
                        state.step_size * jnp.linalg.norm(w * state.tangent),
                        jnp.asarray(1, jnp.int32), jnp.asarray(-1, jnp.int32))
        return new_state, info

    return init, update


MODES: dict[str, Callable] = {"continuation": make_continuation, "penalty": make_penalty}
PRIMING_CALLS = {"continuation": 0, "penalty": 1}
"""Calls of ``update`` that :func:`prepare` makes before step 1 (penalty: evaluate the start)."""
CARRIES_LINEARIZATION = {"continuation": True, "penalty": False}
"""Modes whose state holds the values and Jacobian at its point (primed by a first update)."""


# --------------------------------------------------------------------------- set-up


class Prepared(NamedTuple):
    """A problem ready to step: context, initial state, jitted update, start diagnostics."""

    problem: Problem
    ctx: Context
    state: SearchState
    update: Callable
    start_values: np.ndarray
    start_status: np.ndarray
    rank: int
    singular_values: np.ndarray
    linearize: Callable        # jitted (x, states) -> (values, J, states, codes)


def named_keys(seed: int, names: tuple[str, ...]) -> dict[str, jax.Array]:
    """One PRNG key from the seed, split into named sub-keys."""
    keys = jax.random.split(jax.random.PRNGKey(seed), len(names))
    return dict(zip(names, keys))


def prepare(problem: Problem, spec: SearchSpec, identity: str | None = None) -> Prepared:
    """Cold start: evaluator inits, start values, scales, rank of the kept Jacobian.

    ``identity`` (text that determines the problem, e.g. the config) keeps the step program on
    disk (:mod:`objectives.programs`), so a later run of the same config does not trace it again.
    """
    x0 = jnp.asarray(problem.start)
    states = registry.compact_states(
        registry.init_families(problem.evaluators, problem.curve(x0)), problem.slots)
    linearize = jax.jit(lambda x, s: _linearized(problem, x, s))
    weights = jnp.asarray(step_weights(problem.family, spec.smoothness))
    init, update = MODES[spec.mode](problem, spec, linearize)
    key = named_keys(spec.seed, ("search",))["search"]
    # targets and scales are arguments, not constants: these stand in until the start is known
    reference = start_reference(problem)
    provisional = Context(x0, jnp.zeros(problem.n_kept), jnp.ones(problem.n_kept), weights,
                          reference)
    carries = CARRIES_LINEARIZATION[spec.mode]
    if carries:
        state = _strongly_typed(init(provisional, key, states, None, None))
    else:
        start_linearize = linearize
        if identity is not None:  # its program is kept too: this mode runs it at every start
            states = jax.device_put(states, jax.devices()[0])
            start_linearize = persistent_jit(
                lambda x, s: _linearized(problem, x, s), (x0, states),
                jax.tree_util.tree_structure((0, 0, states, 0)),
                f"search/{spec.mode}/linearize\n{identity}", cache_dir())
        values, J_start, states, codes = start_linearize(x0, states)
        state = _strongly_typed(init(provisional, key, states, values, J_start))
    update = _same_types(update)
    # committed like the update's outputs, so later calls hit the same compiled program
    state = jax.device_put(state, jax.devices()[0])
    if identity is None:
        update = jax.jit(update)
    else:
        out_tree = jax.tree_util.tree_structure((state, StepInfo(*[0] * len(StepInfo._fields))))
        update = persistent_jit(update, (provisional, state), out_tree,
                                f"search/{spec.mode}\n{identity}", cache_dir())
    if carries:
        # the update's priming pass linearizes at the start (targets do not enter it), so the
        # run compiles one program instead of two
        state, info = update(provisional, state)
        values, J_start, codes = state.values, state.jacobian, info.family_status
    values = np.asarray(values)
    targets = values[:problem.n_kept]
    scales = np.maximum(np.abs(targets), spec.scale_floor)
    ctx = Context(x0, jnp.asarray(targets), jnp.asarray(scales), weights, reference)
    J = np.asarray(J_start)[:problem.n_kept] / scales[:, None]
    sv = np.linalg.svd(J * np.asarray(weights), compute_uv=False)
    tol = spec.continuation.rank_tolerance * (sv[0] if sv.size and sv[0] > 0 else 1.0)
    rank = int(np.sum(sv > tol))
    for _ in range(PRIMING_CALLS[spec.mode]):
        state = update(ctx, state)[0]._replace(step=state.step, rejections=state.rejections)
    return Prepared(problem, ctx, state, update, values, np.asarray(codes), rank, sv, linearize)


def _strongly_typed(tree):
    """Leaves as arrays of fixed dtype (no weak types), so jit sees one signature."""
    return jax.tree_util.tree_map(
        lambda v: jax.lax.convert_element_type(jnp.asarray(v), jnp.asarray(v).dtype), tree)


def _same_types(update):
    """Wrap ``update`` so the returned state has exactly the input state's dtypes: otherwise
    weak types promoted inside optimizers (L-BFGS) change the signature and retrace every step."""

    def wrapped(ctx, state):
        new_state, info = update(ctx, state)
        new_state = jax.tree_util.tree_map(
            lambda new, old: jax.lax.convert_element_type(new, old.dtype), new_state, state)
        return new_state, info

    return wrapped


# --------------------------------------------------------------------------- state ⇄ vector


def flatten_state(state: SearchState) -> np.ndarray:
    """All leaves as one float64 vector (exact for the int32/uint32 leaves used here)."""
    leaves = jax.tree_util.tree_leaves(state)
    return np.concatenate([np.asarray(v, dtype=np.float64).ravel() for v in leaves])


def unflatten_state(template: SearchState, vector: np.ndarray) -> SearchState:
    leaves, treedef = jax.tree_util.tree_flatten(template)
    out, offset = [], 0
    for leaf in leaves:
        leaf = np.asarray(leaf)
        size = leaf.size
        out.append(jnp.asarray(vector[offset:offset + size].reshape(leaf.shape).astype(leaf.dtype)))
        offset += size
    if offset != vector.size:
        raise ConfigError(f"--resume: the record's state has {vector.size} entries, this config "
                          f"needs {offset} (was the record made with another config or an older "
                          "version?)")
    # committed like the update's outputs, so the next call reuses the compiled program
    return jax.device_put(jax.tree_util.tree_unflatten(treedef, out), jax.devices()[0])


def start_reference(problem: Problem) -> DistanceReference:
    """The start shape's side of the distance D (empty unless the move is the distance)."""
    if problem.move_kind != "distance":
        return DistanceReference(jnp.zeros(0, jnp.complex128), jnp.zeros(0, jnp.complex128))
    return _reference(problem)


def _reference(problem: Problem) -> DistanceReference:
    return _jitted_reference(problem.curve(jnp.asarray(problem.start)), problem.distance_points)


_jitted_reference = jax.jit(distance_reference, static_argnames=("points",))


def distance_meter(problem: Problem) -> Callable[[Any], float]:
    """Jitted x ↦ exact isometry-invariant distance D(x, start) (objectives.distance)."""
    reference = _reference(problem)
    meter = jax.jit(lambda x: distance_to(reference, problem.curve(x)))
    return lambda params: float(meter(jnp.asarray(params)))


def boundary_sampler(problem: Problem, points: int) -> Callable[[Any], np.ndarray]:
    """Jitted x ↦ boundary points at ``points`` equispaced curve parameters."""
    sample = jax.jit(lambda x: jax.vmap(problem.curve(x))(nodes(points)))
    return lambda params: np.asarray(sample(jnp.asarray(params)))


def evaluator_data(problem: Problem, state: SearchState) -> dict[str, np.ndarray]:
    """Flattened warm state per family that has one (e.g. tracked orbits)."""
    out = {}
    for name, st in zip(problem.names,
                        registry.expand_states(state.evaluator_states, problem.slots)):
        leaves = jax.tree_util.tree_leaves(st)
        if leaves:
            out[name] = np.concatenate([np.asarray(v, dtype=np.float64).ravel() for v in leaves])
    return out


def recheck(problem: Problem, state: SearchState, linearize: Callable | None = None
            ) -> tuple[SearchState, list[tuple[str, Status]]]:
    """Run the evaluators' ``recheck`` hooks on the current shape (outside jit).

    A hook that hands back a new state (a re-seeded orbit) invalidates the values and Jacobian
    a continuation state carries; they are recomputed with ``linearize`` (``Prepared.linearize``).
    """
    curve = problem.curve(state.params)
    states = registry.expand_states(state.evaluator_states, problem.slots)
    new_states, reports = [], []
    for name, ev, st in zip(problem.names, problem.evaluators, states):
        if ev.recheck is None:
            new_states.append(st)
            continue
        # each family reports on its own orbits; families sharing a solve share its search
        st, status = ev.recheck(curve, st)
        new_states.append(st)
        reports.append((name, Status(int(status))))
    changed = any(a is not b for a, b in zip(new_states, states))
    state = state._replace(evaluator_states=registry.compact_states(new_states, problem.slots))
    if changed and state.jacobian.size:
        if linearize is None:
            raise ValueError("recheck: a hook changed a tracked state; pass `linearize` so the "
                             "carried Jacobian is recomputed")
        values, J, states, _ = linearize(state.params, state.evaluator_states)
        state = state._replace(values=values, jacobian=J, evaluator_states=states)
    return state, reports
