"""Periodic billiard orbits of a convex (or checked non-convex) table and their linear stability.

Orbits are critical points of the periodic length function W(t_1..t_q) = Σ|γ(t_{i+1}) − γ(t_i)|
(Birkhoff 1927). For every coprime p/q with 2 ≤ q ≤ Q, p ≤ q/2 we report the orbit of maximal
length and the min-max orbit (Birkhoff's two orbits; Aubry–Mather theory), plus every
bouncing ball (2-periodic orbit hitting the boundary orthogonally at both ends).

Cold path, :func:`find_orbits`: a global max-plus dynamic programme over a boundary grid equally
spaced in arclength gives, for every start point, the longest closed path of q chords winding p
times (the discrete Birkhoff function B). Local maxima of B seed the max orbit and local minima
seed the min-max orbit; each seed is refined by Newton's method with a pseudo-inverse Hessian (so
one-parameter families, e.g. the circle and the ellipse, give no NaN), and the best refined orbit
of the right Morse type is kept. Bouncing balls are all simultaneous zeros of ⟨d, T(t₁)⟩ and
⟨d, T(t₂)⟩ (d the chord), bracketed on a grid of the torus and refined by Newton.

Warm path, :func:`refine_orbits`: a few Newton steps from the previous bounce parameters under
``stop_gradient``, then one implicit-function correction t* − H⁺∇W(t*, θ) with H⁺ stopped, so
the monodromy and everything built from it have exact first derivatives; lengths are W at the
critical point (envelope theorem). One padded code path (Q slots) for all rotation numbers.

Conventions: phase space (s, p), s arclength, p = cos of the angle from the positive tangent to
the outgoing ray. The monodromy P is the linearized return map of the full period at the first
bounce, det P = 1. Kinds: elliptic |tr P| < 2, hyperbolic |tr P| > 2, parabolic otherwise (within
``PARABOLIC_TOL``). α ∈ (0, π) with tr P = 2 cos α (elliptic); Lyapunov exponent
log|largest multiplier| per period (hyperbolic). Hessian index: number of positive eigenvalues of
the Hessian of W (0 for a max, 1 for a min-max orbit). Maslov index of the m-th iterate: the Morse
index of the length function of the m-fold orbit (number of negative Hessian eigenvalues), i.e.
the number of conjugate points along it; this is the index σ in the density-of-states trace
formula d(k) ∋ A cos(kL − σπ/2) (stationary phase over the q bounce points: each free-space Green
function contributes e^{−iπ/4}, the Hessian e^{iπ sgn/4}; cf. Sieber, Pavloff & Schmit, Phys. Rev.
E 55 (1997) 2279, from memory). For an elliptic orbit with natural-lift rotation angle ω it equals
2⌊mω/2π⌋ + 1.
"""

from __future__ import annotations

from functools import partial
from math import gcd
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from numpy.lib.stride_tricks import as_strided

from . import billiard, programs
from .curve import Array, Curve
from .status import Status

BRANCHES = ("max", "minimax", "critical")
KINDS = ("elliptic", "hyperbolic", "parabolic")
MAX, MINIMAX, CRITICAL = 0, 1, 2
ELLIPTIC, HYPERBOLIC, PARABOLIC = 0, 1, 2

PARABOLIC_TOL = 1e-9
"""|tr P ∓ 2| below this is parabolic (round-off on tr P is ~1e-13 for unit-size shapes)."""
RESIDUAL_TOL = 1e-10
"""Largest |∂W/∂s_i| (a difference of cosines) accepted as a converged orbit."""
DEGENERATE_TOL = 1e-8
"""|det(I − Pᵐ)| or a relative Hessian eigenvalue below this flags a degenerate orbit."""
RESONANCE_TOL = 1e-6
"""|sin(mα/2)| below this flags a resonance of order m."""
NEAR_TIE_TOL = 1e-6
"""Relative length difference under which two distinct orbits of one kind are a near-tie."""
NEWTON_TOL = 1e-14
"""The cold and warm Newton loops stop once the largest step is below this."""


class OrbitSet(NamedTuple):
    """Periodic orbits with their linear stability; every field has a leading orbit axis K.

    ``t`` holds the bounce parameters padded to Q slots (entries ≥ q repeat t_0 and are unused);
    ``branch`` indexes :data:`BRANCHES`, ``kind`` :data:`KINDS`; ``angle`` is α (NaN unless
    elliptic), ``lyapunov`` the exponent per period (NaN unless hyperbolic); ``det_iterates``
    [k, m−1] = det(I − Pᵐ) = 2 − tr Pᵐ and ``maslov`` [k, m−1] the Maslov index of the m-th iterate;
    ``reflections`` = q per period; ``status`` an :class:`objectives.status.Status` code.
    """

    p: Array
    q: Array
    branch: Array
    t: Array
    length: Array
    monodromy: Array
    trace: Array
    kind: Array
    angle: Array
    lyapunov: Array
    det_iterates: Array
    maslov: Array
    reflections: Array
    residual: Array
    hessian_index: Array
    status: Array
    degenerate: Array
    resonant: Array
    near_tie: Array

    @property
    def size(self) -> int:
        return int(self.p.shape[0])

    def labels(self) -> tuple[str, ...]:
        """Stable names: ``1/3,max``, ``2/5,minimax``, ``bb3`` for extra bouncing balls."""
        out, extra = [], 0
        for p, q, b in zip(np.asarray(self.p), np.asarray(self.q), np.asarray(self.branch)):
            if b == CRITICAL:
                out.append(f"bb{extra}")
                extra += 1
            else:
                out.append(f"{p}/{q},{BRANCHES[b]}")
        return tuple(out)

    def select(self, index) -> "OrbitSet":
        """The sub-set at the given orbit indices (numpy index array or mask)."""
        index = np.asarray(index)
        return OrbitSet(*(np.asarray(f)[index] for f in self))


def rotation_numbers(max_period: int) -> tuple[tuple[int, int], ...]:
    """Coprime (p, q) with 2 ≤ q ≤ max_period and 1 ≤ p ≤ q/2, ordered by q then p."""
    return tuple((p, q) for q in range(2, max_period + 1) for p in range(1, q // 2 + 1)
                 if gcd(p, q) == 1)


# ----------------------------------------------------------------------------------------------
# Orbit data at given bounce parameters (shared by the cold and warm paths)


def _active_hessian(chords, period, size):
    """Arclength Hessian with −scale on padded diagonal entries (so they never look critical)."""
    hess = billiard.arclength_hessian_from(chords, period)
    scale = jnp.max(jnp.abs(hess)) + 1.0
    return hess + jnp.diag(jnp.where(jnp.arange(size) < period, 0.0, -scale)), scale


def _morse_counts(chords, period, size):
    """(#positive, #negative, smallest |eigenvalue| relative) of the active arclength Hessian."""
    hess, scale = _active_hessian(chords, period, size)
    lam = jnp.linalg.eigvalsh(hess)
    tol = DEGENERATE_TOL * scale
    pos = jnp.sum(lam > tol)
    neg = jnp.sum(lam < -tol) - (size - period)
    active_abs = jnp.where(jnp.abs(lam + scale) > 1e-12 * scale, jnp.abs(lam), jnp.inf)
    return pos, neg, jnp.min(active_abs) / scale


def iterate_maslov(jets: billiard.Jets, q: int, iterates: int) -> np.ndarray:
    """Morse index (number of negative eigenvalues) of W on the m-fold orbit, m = 1..M.

    Numpy, outside jit (cold path and reports): the Hessian of the m-fold orbit has size m·q.
    ``jets`` are the (γ, γ', γ'') at the q bounces.
    """
    return _maslov_batch(tuple(np.asarray(x)[None, :q] for x in jets), np.asarray([q]),
                         iterates)[0]


def _maslov_batch(jets, q: np.ndarray, iterates: int) -> np.ndarray:
    """:func:`iterate_maslov` for K orbits at once: jets of shape (K, Q, 2) with the q[k] ≤ Q
    bounces of orbit k first. Each m-fold Hessian is padded to size m·Q with zero rows and
    columns (zero eigenvalues, never counted as negative), so one eigvalsh call per m serves
    every period."""
    count, slots = jets[0].shape[:2]
    rows = np.arange(count)[:, None]
    # Padded slots (unused) repeat bounce 0 and may give 0/0.
    with np.errstate(divide="ignore", invalid="ignore"):
        a, b, c = _second_derivatives_np(jets, np.where(np.arange(slots) + 1 < q[:, None],
                                                       np.arange(slots) + 1, 0))
    out = np.zeros((count, iterates), dtype=np.int32)
    for m in range(1, iterates + 1):
        size = m * slots
        n = m * q[:, None]
        j = np.arange(size)[None, :]
        active = j < n
        bounce, before = j % q[:, None], (j - 1) % q[:, None]
        # The m-fold orbit repeats the q chords: cyclic Hessian, diagonal a_i + c_{i−1},
        # b_i between i and i+1 (the two chords add when n = 2).
        upper = np.zeros((count, size, size))
        upper[rows, j, np.where(active, (j + 1) % n, j)] = np.where(active, b[rows, bounce], 0.0)
        hess = upper + np.swapaxes(upper, 1, 2)
        hess[rows, j, j] = np.where(active, a[rows, bounce] + c[rows, before], 0.0)
        lam = np.linalg.eigvalsh(hess)
        scale = np.max(np.abs(lam), axis=1, keepdims=True) + 1.0
        out[:, m - 1] = np.sum(lam < -DEGENERATE_TOL * scale, axis=1)
    return out


def _second_derivatives_np(jets, nxt):
    """(a, b, c) of each chord of the closed polygons through the jets' points, chord i from
    point i to point nxt[..., i] (numpy; arrays of shape (..., Q, 2) give (..., Q))."""
    pts, vel, acc = (np.asarray(x) for x in jets)
    ahead = lambda x: np.take_along_axis(x, nxt[..., None], axis=-2)
    d = ahead(pts) - pts
    h = np.linalg.norm(d, axis=-1)
    u = d / h[..., None]
    speed = np.linalg.norm(vel, axis=-1)
    tan = vel / speed[..., None]
    kappa = (vel[..., 0] * acc[..., 1] - vel[..., 1] * acc[..., 0]) / speed**3
    tan_end, kappa_end = ahead(tan), np.take_along_axis(kappa, nxt, axis=-1)
    sin_out = tan[..., 0] * u[..., 1] - tan[..., 1] * u[..., 0]
    sin_in = u[..., 0] * tan_end[..., 1] - u[..., 1] * tan_end[..., 0]
    return (sin_out**2 / h - kappa * sin_out, sin_out * sin_in / h,
            sin_in**2 / h - kappa_end * sin_in)


def _power_traces(mono, iterates):
    """tr Pᵐ for m = 1..M by repeated multiplication."""
    out, power = [], jnp.eye(2)
    for _ in range(iterates):
        power = mono @ power
        out.append(jnp.trace(power))
    return jnp.stack(out)


def _stability(mono, iterates, resonance_order):
    tr = jnp.trace(mono)
    elliptic = jnp.abs(tr) < 2.0 - PARABOLIC_TOL
    hyperbolic = jnp.abs(tr) > 2.0 + PARABOLIC_TOL
    kind = jnp.where(elliptic, ELLIPTIC, jnp.where(hyperbolic, HYPERBOLIC, PARABOLIC))
    half = jnp.clip(tr / 2.0, -1.0 + 1e-15, 1.0 - 1e-15)
    angle = jnp.where(elliptic, jnp.arccos(jnp.where(elliptic, half, 0.0)), jnp.nan)
    big = jnp.where(hyperbolic, jnp.abs(tr) / 2.0, 2.0)
    lyap = jnp.where(hyperbolic, jnp.arccosh(big), jnp.nan)
    dets = 2.0 - _power_traces(mono, iterates)
    orders = jnp.arange(1, resonance_order + 1)
    resonant = elliptic & jnp.any(jnp.abs(jnp.sin(orders * jnp.where(elliptic, angle, 0.0) / 2))
                                  < RESONANCE_TOL)
    return tr, kind.astype(jnp.int32), angle, lyap, dets, resonant


def orbit_data(curve: Curve, t: Array, q, iterates: int = 3, resonance_order: int = 4):
    """Everything :class:`OrbitSet` holds (but the Maslov indices) for one padded configuration.

    Returns (jets, length, monodromy, trace, kind, angle, lyapunov, det_iterates, residual,
    hessian_index, degenerate, resonant, ordered, inward) where ``ordered`` says the bounces
    wind around the table in cyclic order and ``inward`` that every chord starts and ends
    inside the table (sin θ > 0 at both ends).
    """
    size = t.shape[0]
    jets = billiard.bounce_jets(curve, t)
    chords = billiard.chords_from_jets(jets, q)
    length = jnp.sum(chords.length)
    mono = billiard.monodromy_from(chords)
    tr, kind, angle, lyap, dets, resonant = _stability(mono, iterates, resonance_order)
    n = jnp.arange(size)
    prev = jnp.where(n == 0, q - 1, n - 1)
    residual = jnp.max(jnp.where(chords.active, jnp.abs(chords.cos_in[prev] - chords.cos_out), 0.0))
    # Integer diagnostics: no derivative needed, so none is traced.
    pos, _, rel_min = _morse_counts(jax.lax.stop_gradient(chords), q, size)
    degenerate = jnp.any(jnp.abs(jax.lax.stop_gradient(dets)) < DEGENERATE_TOL) | (
        rel_min < DEGENERATE_TOL)
    nxt = billiard.next_index(size, q)
    steps = jnp.where(chords.active, jnp.mod(t[nxt] - t, 2.0 * jnp.pi), 0.0)
    ordered = jnp.all(jnp.where(chords.active, steps > 0, True)) | (q == 2)
    inward = jnp.all(jnp.where(chords.active, (chords.sin_out > 0) & (chords.sin_in > 0), True))
    return (jets, length, mono, tr, kind, angle, lyap, dets, residual, pos.astype(jnp.int32),
            degenerate, resonant, ordered, inward)


def _winding(t, q):
    size = t.shape[0]
    nxt = billiard.next_index(size, q)
    active = jnp.arange(size) < q
    steps = jnp.where(active, jnp.mod(t[nxt] - t, 2.0 * jnp.pi), 0.0)
    return jnp.sum(steps) / (2.0 * jnp.pi)


# ----------------------------------------------------------------------------------------------
# Newton's method on ∇W = 0 with a pseudo-inverse Hessian


def _grad_hess(curve, t, q):
    return _grad_hess_from(billiard.bounce_jets(curve, t), q)


def _grad_hess_from(jets, q):
    """(∇W, ∇²W) at the bounces with these jets; padded slots are decoupled, below every
    active eigenvalue, with zero gradient."""
    chords = billiard.chords_from_jets(jets, q)
    grad = billiard.length_gradient_from(jets, chords, q)
    hess = billiard.length_hessian_from(jets, chords, q)
    pad = -(1.0 + 2.0 * jnp.max(jnp.abs(hess)))
    active = jnp.arange(grad.shape[0]) < q
    return grad, hess + jnp.diag(jnp.where(active, 0.0, pad))


def _clip_step(delta, max_step):
    return jnp.clip(jnp.where(jnp.isfinite(delta), delta, 0.0), -max_step, max_step)


def _eigen_step(grad, hess, target):
    """Step of Newton's method on ∇W = 0 that follows the wanted Morse type (eigenvector
    following), from the Hessian eigendecomposition.

    In the Hessian eigenbasis (λ_i ascending, gradient components c_i) the step is
    δ_i = −c_i / (σ_i (|λ_i| + ε)), with σ_i the wanted sign of the curvature: all −1 for a
    maximum (``target`` 0), −1 except +1 on the largest eigenvalue for a min-max orbit
    (``target`` 1), sign(λ_i) for any critical point (``target`` −1). Near a nondegenerate orbit
    of the wanted type this is Newton's method; elsewhere it climbs (descends) where it should,
    so a seed is not captured by a critical point of the wrong type. ε = 10⁻¹⁰·max|λ| acts as a
    pseudo-inverse along orbit families (zero eigenvalues, zero gradient). Callers clip steps
    to a maximal length and stop once the step is below a tolerance.
    """
    size = grad.shape[0]
    rank = jnp.arange(size)
    lam, vec = jnp.linalg.eigh(hess)
    # Padded slots have the lowest eigenvalues and zero gradient; they never matter.
    wanted = jnp.where(target == 0, -1.0,
                       jnp.where(target == 1, jnp.where(rank == size - 1, 1.0, -1.0),
                                 jnp.sign(lam)))
    eps = 1e-10 * jnp.max(jnp.abs(lam))
    return -(vec * (1.0 / (wanted * (jnp.abs(lam) + eps)))) @ (vec.T @ grad)


PIVOT_TOL = 1e-6
"""Smallest |pivot| / max|H| for which the LDLᵀ Newton step replaces the eigenvector step."""


def _pivot_step(grad, hess, q, target):
    """(−H⁻¹∇W, usable) by an unpivoted LDLᵀ factorization of the Hessian.

    H is cyclic tridiagonal on the q active slots (diagonal, H[k, k+1], the corner H[0, q−1])
    and diagonal on the padding, so eliminating slots 0..q−2 in order only fills the last
    column: the pivots are d_k = H_kk − H_{k−1,k}²/d_{k−1} with the border w_k = H[k, q−1] −
    (H_{k−1,k}/d_{k−1}) w_{k−1}, and the last pivot is H_{q−1,q−1} − Σ w_k²/d_k (O(q) work).
    By Sylvester's law of inertia the signs of the pivots are the signs of the eigenvalues, so
    when H has the inertia the target wants (no positive eigenvalue for a max, exactly one for
    a min-max, any for a critical point) the step of :func:`_eigen_step` is this Newton step
    up to its 10⁻¹⁰ regularization. ``usable`` is false when the inertia is wrong or a pivot is
    below ``PIVOT_TOL``·max|H| (near-singular H, or growth of the unpivoted factors); the
    caller then takes the eigenvector step."""
    size = grad.shape[0]
    diag = jnp.diagonal(hess)
    upper = jnp.diagonal(hess, 1)
    border0 = hess[:, q - 1]
    pivots, border, y = [], [], []
    closing, solved = 0.0, 0.0
    for k in range(size):
        inner, final = k <= q - 2, k == q - 1
        if k == 0:
            d, w, y_k = diag[0], border0[0], grad[0]
        else:
            ell = jnp.where(inner, upper[k - 1] / pivots[k - 1], 0.0)
            d = diag[k] - ell * upper[k - 1]
            w = border0[k] - ell * border[k - 1]
            y_k = grad[k] - ell * y[k - 1]
        d = jnp.where(final, diag[k] - closing, d)
        y_k = jnp.where(final, grad[k] - solved, jnp.where(inner, y_k, grad[k]))
        d = jnp.where(inner | final, d, diag[k])
        w = jnp.where(inner, w, 0.0)
        closing = closing + w * w / jnp.where(inner, d, 1.0)
        solved = solved + w * y_k / jnp.where(inner, d, 1.0)
        pivots.append(d)
        border.append(w)
        y.append(y_k)
    pivots = jnp.stack(pivots)
    rank = jnp.arange(size)
    x_last = jnp.sum(jnp.where(rank == q - 1, jnp.stack(y) / pivots, 0.0))
    x = [None] * size
    for k in reversed(range(size)):
        inner = k <= q - 2
        ahead = x[k + 1] if k + 1 < size else 0.0
        link = jnp.where(k + 1 <= q - 2, upper[k] / pivots[k], 0.0) if k + 1 < size else 0.0
        value = y[k] / pivots[k]
        x[k] = jnp.where(inner, value - link * ahead - border[k] / pivots[k] * x_last, value)
    positive = jnp.sum(pivots > 0)
    inertia = jnp.where(target == 0, positive == 0, jnp.where(target == 1, positive == 1, True))
    tiny = jnp.min(jnp.abs(pivots)) < PIVOT_TOL * jnp.max(jnp.abs(hess))
    return -jnp.stack(x), inertia & ~tiny


def _cycle_update(i, t, before, delta, horizon):
    """State (i, t, |δ|, t_prev) after the step δ from t, jumping to the end of the budget
    ``horizon`` on an exact 2-cycle (the iterate ``before`` t comes back): the iteration
    depends on t alone, so it would alternate between the two points forever (clipped steps
    that flip sign on a seed that cannot settle). Stopping and resuming gives the same
    iterates as one run."""
    new = t + delta
    cycle = jnp.all(new == before)
    even = (horizon - (i + 1)) % 2 == 0
    return (jnp.where(cycle, horizon, i + 1), jnp.where(cycle & ~even, t, new),
            jnp.max(jnp.abs(delta)), t)


def _lane_steps(curve, t, q, target, max_step, valid):
    """The steps of the Newton iteration (:func:`_eigen_step`) for a batch of lanes: the LDLᵀ Newton step where the
    Hessian has the wanted inertia, the eigenvector step elsewhere. The (costly) eigenvalue
    problems are solved only for the lanes that need them, a few gathered lanes at a time (one
    small compiled eigensolver instead of one per batch size)."""
    lanes, slots = t.shape
    # One flat batch of curve jets: a nested (lane, slot) vmap evaluated them ~30 % slower.
    jets = jax.vmap(partial(billiard._jet2, curve))(t.reshape(-1))
    jets = billiard.Jets(*(a.reshape(lanes, slots, 2) for a in jets))
    grad, hess = jax.vmap(_grad_hess_from)(jets, q)
    return _steps_from_derivatives(grad, hess, q, target, max_step, valid)


def _steps_from_derivatives(grad, hess, q, target, max_step, valid):
    """Clipped Newton steps (:func:`_eigen_step`) for a batch of lanes with these (∇W, ∇²W): LDLᵀ where
    the inertia is right, eigenvector steps for the ``valid`` lanes where it is not."""
    lanes = grad.shape[0]
    delta, usable = jax.vmap(_pivot_step)(grad, hess, q, target)
    few = max(1, lanes // 4)

    def fix(state):
        delta, need = state
        pick = jnp.nonzero(need, size=few, fill_value=lanes)[0]
        part = jnp.minimum(pick, lanes - 1)
        sub = jax.vmap(_eigen_step)(grad[part], hess[part], target[part])
        return delta.at[pick].set(sub, mode="drop"), need.at[pick].set(False, mode="drop")

    delta, _ = jax.lax.while_loop(lambda state: jnp.any(state[1]), fix,
                                  (delta, valid & ~usable))
    return jax.vmap(_clip_step)(delta, max_step)


class _Runs(NamedTuple):
    """Per-seed Newton state: steps taken, iterate, last step size, previous iterate, finished
    (step budget spent, converged, or merged into another seed)."""

    taken: Array
    t: Array
    last: Array
    before: Array
    done: Array


def _queue_stage(curve, runs, q, target, max_step, cap, steps, lanes):
    """Advance every unfinished seed of ``runs`` to ``cap`` steps (or its end) on ``lanes``
    parallel lanes; a lane whose seed stops takes the next waiting seed at once.

    Each seed follows t ← t + clipped step (:func:`_eigen_step`, 2-cycle ends by
    :func:`_cycle_update` with ``horizon`` = ``steps``); only
    the batching differs: a vmapped loop over a fixed batch runs until its slowest seed stops,
    whereas here the lanes stay busy as long as seeds wait."""
    count = runs.t.shape[0]
    waiting = ~runs.done & (runs.taken < cap)
    order = jnp.nonzero(waiting, size=count, fill_value=count)[0]
    pending = jnp.sum(waiting)
    idx = jnp.minimum(order[:lanes], count - 1)
    valid = jnp.arange(lanes) < pending

    def load(runs, idx):
        return runs.taken[idx], runs.t[idx], runs.last[idx], runs.before[idx]

    def unfinished(state):
        _, valid, _, head, _ = state
        return jnp.any(valid) | (head < pending)

    def body(state):
        idx, valid, lane, head, runs = state
        i, t, _, before = lane
        delta = _lane_steps(curve, t, q[idx], target[idx], max_step[idx], valid)
        lane = jax.vmap(_cycle_update, in_axes=(0, 0, 0, 0, None))(i, t, before, delta, steps)
        ended = ~((lane[0] < steps) & (lane[2] > NEWTON_TOL))
        stopped = valid & (ended | (lane[0] >= cap))
        # Every busy lane is written back, so the stored state is current when the phase ends.
        into = jnp.where(valid, idx, count)
        runs = _Runs(*(field.at[into].set(value, mode="drop")
                       for field, value in zip(runs[:4], lane)),
                     runs.done.at[jnp.where(valid & ended, idx, count)].set(True, mode="drop"))
        slot = head + jnp.cumsum(stopped) - 1
        take = stopped & (slot < pending)
        idx = jnp.where(take, order[jnp.minimum(slot, count - 1)], idx)
        lane = tuple(jnp.where(take.reshape((-1,) + (1,) * (a.ndim - 1)), a, b)
                     for a, b in zip(load(runs, idx), lane))
        return (idx, jnp.where(stopped, take, valid), lane,
                jnp.minimum(head + jnp.sum(stopped), pending), runs)

    state = (idx, valid, load(runs, idx), jnp.minimum(lanes, pending), runs)
    return jax.lax.while_loop(unfinished, body, state)[4]


def _merge(t, q, target, rep, decimals):
    """:func:`_representatives` inside jit: each representative (rep[k] = k) maps to the first
    representative with the same q, target and bounce set rounded to ``decimals``; composed with
    ``rep``.

    A stable sort by a hash (a fixed linear form of the key) puts equal keys next to each other,
    smallest index first; runs of entries whose full keys equal their neighbour's form the
    groups (O(n log n) instead of comparing all pairs). A hash collision could only split a
    group, i.e. leave a duplicate running, never merge different keys."""
    count, slots = t.shape
    index = jnp.arange(count)
    own = rep == index
    bounces = jnp.sort(jnp.where(jnp.arange(slots)[None, :] < q[:, None],
                                 jnp.mod(t, 2 * jnp.pi), jnp.inf), axis=1)
    keys = jnp.concatenate([jnp.round(bounces, decimals), jnp.stack([q, target, own], axis=1)],
                           axis=1)
    weights = jnp.sqrt(jnp.arange(2.0, keys.shape[1] + 2.0))  # rationally independent
    order = jnp.argsort(jnp.where(jnp.isinf(keys), 0.0, keys) @ weights, stable=True)
    ranked = keys[order]
    start = jnp.concatenate([jnp.ones(1, bool), jnp.any(ranked[1:] != ranked[:-1], axis=1)])
    head = jax.lax.cummax(jnp.where(start, index, 0))
    first = jnp.zeros(count, index.dtype).at[order].set(order[head])
    return jnp.where(own, first, index)[rep]


@partial(jax.jit, static_argnames=("steps", "lanes"))
def _newton_queue(curve, t, q, target, max_step, active, caps, steps, lanes=8):
    """Newton's method (:func:`_eigen_step`) with 2-cycle ends (budget ``steps``) for every
    seed where ``active``, in one call on ``lanes`` parallel lanes.

    Phases advance every moving seed to the step caps ``caps`` (the last is the budget); after
    each, seeds that reached the same configuration to 10⁻⁶ continue as one (``rep``, the seed
    each one follows). The phases are a loop, so the step is compiled once. Returns (t, rep)."""
    count = t.shape[0]
    runs = _Runs(jnp.zeros(count, jnp.int32), t, jnp.full(count, jnp.inf),
                 jnp.full_like(t, jnp.nan), ~active)

    def phase(k, state):
        runs, rep = state
        # As if each phase were a fresh call: no 2-cycle is recognised on its first step.
        runs = runs._replace(before=jnp.full_like(t, jnp.nan))
        runs = _queue_stage(curve, runs, q, target, max_step, caps[k], steps, lanes)
        rep = _merge(runs.t, q, target, rep, MERGE_DECIMALS)
        return runs._replace(done=runs.done | (rep != jnp.arange(count))), rep

    runs, rep = jax.lax.fori_loop(0, caps.shape[0], phase, (runs, jnp.arange(count)))
    return runs.t, rep


@partial(jax.jit, static_argnames=("iterates", "resonance_order"))
def _data_batch(curve, t, q, iterates, resonance_order):
    """Orbit data (and the winding number) of a batch of refined configurations."""

    def one(t, q):
        t = jnp.where(jnp.arange(t.shape[0]) < q, t, t[0])
        return (t,) + orbit_data(curve, t, q, iterates, resonance_order) + (_winding(t, q),)

    return jax.vmap(one)(t, q)


_KEPT: dict = {}
"""Cold-path programs loaded in this process, by (name, boundary, static arguments, types)."""


def _kept(fn, out_tree, curve, *args, **static):
    """``fn(curve, *args, **static)`` for a jitted cold-path ``fn``, through a program kept on
    disk (:mod:`objectives.programs`) when the boundary is a built-in family: a later process
    then loads it instead of tracing and lowering it (about half a second of the first cold
    solve). ``out_tree`` is the structure of ``fn``'s output."""
    identity = programs.boundary_identity(curve.fn)
    if identity is None:
        return fn(curve, *args, **static)
    types = tuple((np.shape(a), np.result_type(a).str) for a in args)
    key = (fn.__name__, identity, tuple(sorted(static.items())), types)
    if key not in _KEPT:
        _KEPT[key] = programs.persistent_jit(
            lambda curve, *args: fn(curve, *args, **static), (curve, *args), out_tree,
            f"objectives.orbits.{fn.__name__}\n{identity}\n{sorted(static.items())}")
    return _KEPT[key](curve, *args)


_ARRAY_OUT = jax.tree_util.tree_structure(0)
_QUEUE_OUT = jax.tree_util.tree_structure((0, 0))
_DATA_OUT = jax.tree_util.tree_structure((0, billiard.Jets(0, 0, 0)) + (0,) * 14)


# ----------------------------------------------------------------------------------------------
# Global search


@jax.jit
def _jets1(curve, t):
    """(γ, γ') at every entry of t, shape (len(t), 2, 2)."""
    return jax.vmap(lambda s: jnp.stack([curve(s), jax.jacfwd(curve)(s)]))(t)


SAMPLE_BUCKET = 128
"""Curve evaluations are padded to a multiple of this, so few array sizes are ever traced."""


def _evaluate(curve, t: np.ndarray) -> np.ndarray:
    """:func:`_jets1` at host parameters t, padded to a multiple of ``SAMPLE_BUCKET``."""
    padded = np.zeros(-(-t.size // SAMPLE_BUCKET) * SAMPLE_BUCKET)
    padded[:t.size] = t
    return np.asarray(_kept(_jets1, _ARRAY_OUT, curve, padded))[:t.size]


def _nodes(n: int) -> np.ndarray:
    """2πj/n, j = 0..n−1, rounded as (2π/n)·j (as XLA folds 2π·j/n, so the grids stay those of
    the earlier jitted sampler)."""
    return (2.0 * np.pi / n) * np.arange(n)


def _uniform_samples(curve, sizes) -> dict:
    """{n: (t, γ(t), γ'(t))} at the n equispaced nodes t = 2πj/n, for every n in ``sizes``, from
    one curve evaluation."""
    sizes = sorted(set(sizes))
    jets = np.split(_evaluate(curve, np.concatenate([_nodes(n) for n in sizes])),
                    np.cumsum(sizes)[:-1])
    return {n: (_nodes(n), j[:, 0], j[:, 1]) for n, j in zip(sizes, jets)}


def _samples(curve, n):
    return _uniform_samples(curve, [n])[n]


def _points(curve, t):
    return _evaluate(curve, np.asarray(t, dtype=float).reshape(-1))[:, 0]


def _arclength_nodes(samples, n: int) -> np.ndarray:
    """n curve parameters equally spaced in arclength, trapezoid-integrated over ``samples``
    (t, γ, γ') of a finer uniform grid."""
    t_fine, _, vel = samples
    speed = np.linalg.norm(vel, axis=1)
    s = np.concatenate([[0.0], np.cumsum(0.5 * (speed + np.roll(speed, -1)))]) * (
        2 * np.pi / t_fine.size)
    t_ext = np.concatenate([t_fine, [2 * np.pi]])
    return np.interp(np.arange(n) * s[-1] / n, s, t_ext)


OVERSAMPLE = 8
"""Uniform samples per arclength grid point integrated by :func:`boundary_grid`."""


def _arclength_grids(curve, sizes, oversample: int = OVERSAMPLE, samples=None) -> dict:
    """{n: (t_grid, points)} for :func:`boundary_grid` of every size, from two curve
    evaluations (``samples`` may already hold the fine uniform grids)."""
    sizes = sorted(set(sizes))
    if samples is None:
        samples = _uniform_samples(curve, [n * oversample for n in sizes])
    t_grids = [_arclength_nodes(samples[n * oversample], n) for n in sizes]
    points = np.split(_points(curve, np.concatenate(t_grids)), np.cumsum(sizes)[:-1])
    return {n: (t, pts) for n, t, pts in zip(sizes, t_grids, points)}


def boundary_grid(curve: Curve, n: int, oversample: int = OVERSAMPLE) -> tuple[np.ndarray, np.ndarray]:
    """n curve parameters equally spaced in arclength (trapezoid-integrated) and their points."""
    return _arclength_grids(curve, [n], oversample)[n]


class BirkhoffTables(NamedTuple):
    """What :func:`birkhoff_path` needs to trace optimal paths: ``values[j][s, a]`` the best
    length of j chords from grid point s advancing a points, ``chords[k − 1, x]`` the chord
    from point x mod n advancing k points (x up to 2n + pn)."""

    values: list
    chords: np.ndarray


def birkhoff_table(points: np.ndarray, p: int, q: int) -> tuple[np.ndarray, BirkhoffTables]:
    """Discrete Birkhoff function by max-plus dynamic programming.

    B[s] = max over closed paths of q chords through grid points starting at point s and
    advancing (counter-clockwise, each step 1..n−1 points) p full turns of the summed chord
    lengths. Returns B and the tables for :func:`birkhoff_path`.

    Step j: V_j[s, a] = max_k V_{j−1}[s, a − k] + h(s + a − k, k) over k = 1..n−1, evaluated as
    one strided (s, k, a) sum reduced over k (no back-pointers: paths are traced afterwards).
    """
    chords = _chord_table(points, p)
    return _birkhoff_tables(chords, [(p, q)])[(p, q)]


def _chord_table(points: np.ndarray, max_p: int) -> np.ndarray:
    """chords[k − 1, x] = |γ_{x+k} − γ_x| for x = 0 .. (2 + max_p)n − 1 (indices mod n); serves
    every rotation number p/q with p ≤ max_p on this grid."""
    n = points.shape[0]
    dist = np.linalg.norm(points[None, :, :] - points[:, None, :], axis=-1)
    x = np.arange((2 + max_p) * n)
    return np.ascontiguousarray(dist[x[None, :] % n, (x[None, :] + np.arange(1, n)[:, None]) % n])


def _birkhoff_tables(chords: np.ndarray, rotations) -> dict:
    """{(p, q): (B, tables)} for every rotation number on one grid from ONE dynamic programme:
    V_j[s, a] does not depend on p or q, so the q-th table read at advance pn is B for p/q."""
    n = chords.shape[0] + 1
    top = max(p for p, _ in rotations) * n
    c0, c1 = chords.strides
    # Views: gain[s, k − 1, a] = chords[k − 1, s + a − k + n], shifted[s, k − 1, a] =
    # V[s, a − k] = padded[s, n − 1 + a − k] (−inf for a < k).
    padded = np.full((n, n - 1 + top + 1), -np.inf)
    padded[:, n - 1] = 0.0
    p0, p1 = padded.strides
    buffer = np.empty((n, n - 1, top + 1))
    values = [padded[:, n - 1:].copy()]
    for j in range(1, max(q for _, q in rotations) + 1):
        # Only advances reachable in j chords from which the remaining chords of some served
        # rotation number can still close its path (other entries are never read); on the
        # last step of every open rotation number, only its closing advances pn.
        open_ = [(p, q) for p, q in rotations if q >= j]
        if all(q == j for _, q in open_):
            spans = [(p * n, p * n) for p in sorted({p for p, _ in open_})]
        else:
            spans = [(max(j, min(p * n - (q - j) * (n - 1) for p, q in open_)),
                      min(j * (n - 1), max(p * n for p, _ in open_)))]
        best = []
        for lo, hi in spans:
            width = hi - lo + 1
            shifted = as_strided(padded[:, n - 2 + lo:], shape=(n, n - 1, width),
                                 strides=(p0, -p1, p1), writeable=False)
            gain = as_strided(chords[:, n - 1 + lo:], shape=(n, n - 1, width),
                              strides=(c1, c0 - c1, c1), writeable=False)
            np.add(shifted, gain, out=buffer[:, :, :width])
            best.append(buffer[:, :, :width].max(axis=1))
        padded[:, n - 1:] = -np.inf
        for (lo, hi), part in zip(spans, best):
            padded[:, n - 1 + lo:n + hi] = part
        values.append(padded[:, n - 1:].copy())
    return {(p, q): (values[q][:, p * n], BirkhoffTables(values[:q + 1], chords))
            for p, q in rotations}


def birkhoff_path(back: BirkhoffTables, start: int, p: int, n: int) -> np.ndarray:
    """Grid indices of the optimal path from ``start`` (q entries, cyclically ordered); ties go
    to the shortest last chord."""
    return birkhoff_paths(back, np.asarray([start]), p, n)[0]


def birkhoff_paths(back: BirkhoffTables, starts: np.ndarray, p: int, n: int) -> np.ndarray:
    """:func:`birkhoff_path` for every start at once, shape (len(starts), q)."""
    starts = np.asarray(starts, dtype=int)
    advance = np.full(starts.shape, p * n)
    k = np.arange(1, n)
    out = []
    for previous in reversed(back.values[:-1]):
        before = advance[:, None] - k[None, :]
        gains = np.where(before >= 0, previous[starts[:, None], np.maximum(before, 0)]
                         + back.chords[k[None, :] - 1, starts[:, None] + before + n], -np.inf)
        advance = advance - k[np.argmax(gains, axis=1)]
        out.append((starts + advance) % n)
    return np.stack(out[::-1], axis=1)


def _local_extrema(values: np.ndarray, maxima: bool) -> np.ndarray:
    v = values if maxima else -values
    left, right = np.roll(v, 1), np.roll(v, -1)
    idx = np.nonzero((v >= left) & (v >= right) & np.isfinite(v))[0]
    return idx[np.argsort(-v[idx], kind="stable")]


def _distinct_paths(traced, n, count, separation=1):
    """Up to ``count`` of the ``traced`` grid paths (best first) that are not the same orbit:
    a path whose every bounce lies within ``separation`` grid points (cyclically) of a bounce of
    an already kept path is a grid variant of it."""
    gaps = np.abs(traced[:, None, :, None] - traced[None, :, None, :]) % n
    # variant[i, j]: every bounce of path i is near some bounce of path j.
    variant = np.all(np.minimum(gaps, n - gaps).min(axis=3) <= separation, axis=2)
    kept = []
    for i in range(len(traced)):
        if not variant[i, kept].any():
            kept.append(i)
            if len(kept) == count:
                break
    return list(traced[kept])


def _lift(t_path: np.ndarray, p: int) -> np.ndarray:
    """Bounce parameters made monotone (t_{i+1} > t_i, total advance 2πp); rows of a 2-D array
    are separate paths."""
    t_path = np.atleast_2d(t_path)
    steps = np.mod(np.diff(np.concatenate([t_path, t_path[:, :1]], axis=1), axis=1), 2 * np.pi)
    zero = np.zeros((t_path.shape[0], 1))
    return t_path[:, :1] + np.concatenate([zero, np.cumsum(steps[:, :-1], axis=1)], axis=1)


def _chord_leaves(poly: np.ndarray, t_poly: np.ndarray, a: np.ndarray, b: np.ndarray,
                  ta: float, tb: float) -> bool:
    """Whether the open segment a→b meets the boundary polygon or lies outside it."""
    n = poly.shape[0]
    e0, e1 = poly, np.roll(poly, -1, axis=0)
    dt = 2 * np.pi / n
    near = lambda tv: np.minimum(np.mod(t_poly - tv, 2 * np.pi),  # noqa: E731
                                 np.mod(tv - t_poly, 2 * np.pi)) < 2.5 * dt
    keep = ~(near(ta) | near(tb) | near(np.mod(ta - dt, 2 * np.pi)) | near(np.mod(tb - dt, 2 * np.pi)))
    d = b - a
    f = e1 - e0
    denom = d[0] * f[:, 1] - d[1] * f[:, 0]
    r = e0 - a
    with np.errstate(divide="ignore", invalid="ignore"):
        u = (r[:, 0] * f[:, 1] - r[:, 1] * f[:, 0]) / denom
        v = (r[:, 0] * d[1] - r[:, 1] * d[0]) / denom
    hit = keep & (denom != 0) & (u > 1e-9) & (u < 1 - 1e-9) & (v >= 0) & (v <= 1)
    if np.any(hit):
        return True
    mid = 0.5 * (a + b)
    ang = np.arctan2(poly[:, 1] - mid[1], poly[:, 0] - mid[0])
    winding = np.sum(np.angle(np.exp(1j * (np.roll(ang, -1) - ang)))) / (2 * np.pi)
    return abs(winding) < 0.5


DOMAIN_RESOLUTION = 1024
"""Boundary polygon nodes used to test whether chords stay inside the table."""


def boundary_polygon(curve: Curve, resolution: int = DOMAIN_RESOLUTION):
    """(t nodes, polygon points) of the boundary for :func:`orbit_leaves_domain`."""
    t, pts, _ = _samples(curve, resolution)
    return np.asarray(t), np.asarray(pts)


def orbit_leaves_domain(polygon, points: np.ndarray, t: np.ndarray, q: int) -> bool:
    """Whether some chord of the orbit (bounce ``points`` at parameters ``t``) crosses the
    boundary polygon or runs outside the table."""
    t_poly, poly = polygon
    tq = np.mod(np.asarray(t[:q]), 2 * np.pi)
    for i in range(q):
        j = (i + 1) % q
        if _chord_leaves(poly, t_poly, points[i], points[j], tq[i], tq[j]):
            return True
    return False


def _grid_sizes(max_period, grid, only=None, refine=1) -> dict:
    """{(p, q): max-plus grid size} for every rotation number (or those of the keys in ``only``):
    at least ~5 grid points per bounce, so long orbits keep resolved seeds."""
    return {(p, q): refine * max(grid, int(16 * np.ceil(5 * q / 16)))
            for p, q in rotation_numbers(max_period)
            if only is None or any(key[:2] == (p, q) for key in only)}


def _seed_batch(curve, max_period, grid, candidates, only=None, refine=1, samples=None):
    """Seeds (p, q, branch, lifted t) from the max-plus search for every rotation number (or the
    (p, q, branch) keys in ``only``), on a grid ``refine`` times the default (``samples`` may
    hold the fine uniform grids :func:`boundary_grid` integrates over)."""
    size = _grid_sizes(max_period, grid, only, refine)
    wanted = list(size)
    # The rotation numbers sharing a grid share one dynamic programme.
    grids = _arclength_grids(curve, size.values(), samples=samples)
    tables = {}
    for n, (_, points) in grids.items():
        served = [key for key in wanted if size[key] == n]
        tables.update(_birkhoff_tables(_chord_table(points, max(p for p, _ in served)), served))
    seeds = []
    for p, q in wanted:
        n = size[(p, q)]
        t_grid = grids[n][0]
        table, back = tables[(p, q)]
        branches = [(branch, maxima) for branch, maxima in ((MAX, True), (MINIMAX, False))
                    if only is None or (p, q, branch) in only]
        # Every local extremum of B, best first: on a coarse grid the discretization error of B
        # exceeds the gap between near-tied orbits, so no value margin is imposed; grid variants
        # of one orbit are merged, so the ``candidates`` seeds are distinct orbits. The optimal
        # paths of both kinds are traced in one pass.
        starts = [_local_extrema(table, maxima) for _, maxima in branches]
        traced = np.split(birkhoff_paths(back, np.concatenate(starts), p, n),
                          np.cumsum([len(x) for x in starts])[:-1])
        for (branch, _), group in zip(branches, traced):
            paths = _distinct_paths(group, n, candidates, max(1, n // (6 * q)))
            # Neighbouring maxima along a near-integrable orbit family can merge on the grid:
            # also seed from the best path shifted by ±1, ±2 points along the boundary.
            paths += [np.mod(paths[0] + shift, n) for shift in SEED_SHIFTS]
            for lifted in _lift(t_grid[np.stack(paths)], p):
                seeds.append((p, q, branch, lifted))
    return seeds


def _torus_candidates(samples):
    """Grid cells of the torus where both ⟨d, T(t₁)⟩ and ⟨d, T(t₂)⟩ change sign (t₁ < t₂), on
    the uniform ``samples`` (t, γ, γ')."""
    t, pts, vel = samples
    n = t.size
    tan = vel / np.linalg.norm(vel, axis=1, keepdims=True)
    d = pts[None, :, :] - pts[:, None, :]
    f1 = np.einsum("ijk,ik->ij", d, tan)
    f2 = np.einsum("ijk,jk->ij", d, tan)

    def changes(f):
        corners = np.stack([f, np.roll(f, -1, 0), np.roll(f, -1, 1), np.roll(np.roll(f, -1, 0), -1, 1)])
        return (corners.min(0) < 0) & (corners.max(0) > 0)

    i, j = np.nonzero(changes(f1) & changes(f2))
    gap = np.minimum((j - i) % n, (i - j) % n)
    keep = (i < j) & (gap > 2)
    i, j = i[keep], j[keep]
    close = _cyclic_near(i, n) & _cyclic_near(j, n)
    # Neighbouring cells bracket the same crossing: one seed each (the first in row order).
    kept = []
    for k in range(i.size):
        if not close[k, kept].any():
            kept.append(k)
    cells = np.stack([i[kept], j[kept]], axis=1).reshape(-1, 2)
    h = 2 * np.pi / n
    return np.stack([t[cells[:, 0]] + h / 2, t[cells[:, 1]] + h / 2], axis=1)


def _cyclic_near(x: np.ndarray, n: int) -> np.ndarray:
    """[a, b]: grid indices x[a] and x[b] are at most one point apart on the n-cycle."""
    gap = (x[:, None] - x[None, :]) % n
    return np.minimum(gap, n - gap) <= 1


SEED_SHIFTS = (-2, -1, 1, 2)
MAX_RESEED_GRID = 128
"""Finest grid used to re-seed a failed orbit (the max-plus search costs ~n³ per rotation)."""


def _solve_seeds(curve, t_seeds, q_seeds, targets, slots, iterates, resonance_order, steps,
                 max_step):
    """Refine every seed by Newton's method (:func:`_eigen_step`, at most ``steps`` steps), then take the orbit data
    of the distinct results. Returns (batched data, representative index per seed): seeds that
    converged to the same configuration (same q and target, same bounce set) share one entry.

    The Newton loop is one compiled call (:func:`_newton_queue`): phases of increasing step
    caps, each only on the seeds still moving, fed through a queue of lanes so one slow seed
    never holds a batch. After each phase, seeds that have reached the same configuration (to
    10⁻⁶, i.e. already in one Newton basin) continue as one."""
    count = len(t_seeds)
    t = np.zeros((count, slots))
    for k, ts in enumerate(t_seeds):
        t[k, :len(ts)] = ts
        t[k, len(ts):] = ts[0]
    qs = np.asarray(q_seeds, dtype=np.int32)
    targets = np.asarray(targets, dtype=np.int32)
    # Every call passes the same number of caps (repeating the budget): one compilation.
    caps = np.asarray([min(c, steps) for c in NEWTON_CAPS] + [steps], dtype=np.int32)
    # One padded size for up to QUEUE seeds, so one compilation serves (almost) every call.
    idx = np.minimum(np.arange(max(QUEUE, -(-count // 128) * 128)), count - 1)
    out = _kept(_newton_queue, _QUEUE_OUT, curve, t[idx], qs[idx], targets[idx], max_step[idx],
                np.arange(idx.size) < count, caps, steps=steps)
    t = np.asarray(out[0])[:count]
    rep = np.asarray(out[1])[:count]
    rep = _representatives(t, qs, targets, np.unique(rep))[rep]
    distinct = np.unique(rep)
    data = [_kept(_data_batch, _DATA_OUT, curve, t[idx], qs[idx], iterates=iterates,
                  resonance_order=resonance_order) for idx in _chunks(distinct, SOLVE_CHUNK)]
    data = jax.tree_util.tree_map(lambda *xs: np.concatenate([np.asarray(x) for x in xs]), *data)
    # Chunks are padded: entry j of ``data`` belongs to seed distinct[j].
    where = np.zeros(count, dtype=int)
    where[distinct] = np.arange(distinct.size)
    return data, where[rep], rep == np.arange(count)


QUEUE = 256
"""Seeds per Newton call (padded with inactive entries; more seeds take a larger size)."""
NEWTON_CAPS = (4, 7, 10, 16)
"""Step counts after which seeds that met continue as one. Most seeds stop after 5-9 steps;
the few left after 16 rarely converge at all (sliding along the table)."""
SOLVE_CHUNK = 64
"""Refined configurations per orbit-data call (one compiled size; the default cold solve
refines ~40 distinct ones, so one call)."""


def _chunks(index: np.ndarray, size: int):
    """Index arrays of ``size`` entries, the last padded by repeating its first entry (its
    results are written twice, identically)."""
    for lo in range(0, index.size, size):
        part = index[lo:lo + size]
        yield np.concatenate([part, np.full(size - part.size, part[0])])


MERGE_DECIMALS = 6
"""Seeds still moving whose bounces agree to this many decimals continue as one."""


def _representatives(t, qs, targets, among, decimals=8):
    """For each configuration in ``among`` the first one there with the same q, target and
    bounce set (mod 2π, rounded to ``decimals``); every other index maps to itself. Unequal
    roundings of nearly equal configurations only cost a duplicate."""
    rep = np.arange(len(qs))
    among = np.asarray(among)
    slots = np.arange(t.shape[1])
    # Unused slots become +inf so they sort last and compare equal.
    bounces = np.sort(np.where(slots[None, :] < qs[among, None], np.mod(t[among], 2 * np.pi),
                               np.inf), axis=1)
    keys = np.concatenate([qs[among, None], targets[among, None],
                           np.round(bounces, decimals)], axis=1)
    first = {}
    for k, key in zip(among, keys):
        rep[k] = first.setdefault(key.tobytes(), k)
    return rep


def _status_of(residual, ordered, winding, p, inward, leaves, degenerate, finite, wrong_index):
    """Status codes, elementwise over arrays of orbits; the first failing check decides."""
    return np.select(
        [~finite, residual > RESIDUAL_TOL, leaves | ~inward,
         ~ordered | (np.abs(winding - p) > 1e-6) | wrong_index, degenerate],
        [Status.nonfinite, Status.orbit_not_converged, Status.orbit_leaves_domain,
         Status.branch_changed, Status.degenerate], Status.ok).astype(np.int32)


def find_orbits(curve: Curve, max_period: int = 7, iterates: int = 3, grid: int = 32,
                bouncing_grid: int = 96, candidates: int = 3, resonance_order: int = 4,
                check_domain: bool | None = None, newton_steps: int = 40) -> OrbitSet:
    """Cold solve: every bouncing ball and the max and min-max orbit of each p/q, q ≤ max_period.

    ``grid`` boundary points for the max-plus search, ``bouncing_grid`` per torus axis for the
    bouncing-ball search, ``candidates`` distinct seeds refined per orbit kind (near-ties are
    resolved by refined lengths and flagged), ``iterates`` M for det(I − Pᵐ) and Maslov indices.
    ``check_domain`` tests every chord against the boundary (default: only if the table is not
    strictly convex). Not jitted (global search); see :func:`refine_orbits` for the warm path.
    """
    if max_period < 2:
        raise ValueError(f"max_period: expected an integer ≥ 2, got {max_period}")
    # One curve evaluation serves the bouncing-ball torus, the convexity test and the fine
    # grids the max-plus grids are integrated over.
    samples = _uniform_samples(curve, [bouncing_grid] + [OVERSAMPLE * n for n in _grid_sizes(
        max_period, grid).values()])
    if check_domain is None:
        check_domain = not _polygon_convex(samples[bouncing_grid])
    polygon = boundary_polygon(curve) if check_domain else None
    solve = partial(_refined_rows, curve, slots=max_period, iterates=iterates,
                    resonance_order=resonance_order, steps=newton_steps, polygon=polygon)
    rows = []

    # Birkhoff orbits and bouncing balls (all sign-change cells of the two end cosines on a torus
    # grid) in one solve: the few seeds that never settle then share one tail batch.
    seeds = _seed_batch(curve, max_period, grid, candidates, samples=samples)
    bouncing = [(1, 2, CRITICAL, t) for t in _torus_candidates(samples[bouncing_grid])[:512]]
    solved = solve(seeds + bouncing, max_step=np.repeat(
        [2 * np.pi / grid, 2 * np.pi / bouncing_grid], [len(seeds), len(bouncing)]))
    bouncing = [r for r in solved if r["branch"] == CRITICAL]
    solved = [r for r in solved if r["branch"] != CRITICAL]
    picked = {}
    for p, q in rotation_numbers(max_period):
        for branch in (MAX, MINIMAX):
            group = [r for r in solved if r["p"] == p and r["q"] == q and r["branch"] == branch]
            picked[(p, q, branch)] = _pick(group, branch)
    # A seed that Newton could not bring to an orbit of its type is re-seeded on finer grids.
    for refine in (2, 4):
        failed = [key for key, row in picked.items()
                  if row["status"] not in (Status.ok, Status.degenerate)]
        if not failed or refine * grid > MAX_RESEED_GRID:
            break
        seeds = _seed_batch(curve, max_period, grid, candidates, only=failed, refine=refine)
        solved += solve(seeds, max_step=np.full(len(seeds), 2 * np.pi / (refine * grid)))
        for key in failed:
            group = [r for r in solved if (r["p"], r["q"], r["branch"]) == key]
            picked[key] = _pick(group, key[2])
    rows.extend(picked.values())

    for row in _bouncing_balls(bouncing):
        same_family = lambda r: (r["degenerate"] and row["degenerate"]  # noqa: E731
                                 and abs(r["length"] - row["length"]) < 1e-9 * row["length"])
        if not any(r["q"] == 2 and (_same_orbit(r, row) or same_family(r)) for r in rows):
            rows.append(row)
    return _to_set(rows, iterates)


def _refined_rows(curve, seeds, slots, iterates, resonance_order, steps, max_step, polygon):
    """Rows of the distinct orbits refined from ``seeds`` = [(p, q, branch, t)]; the Newton
    target follows the branch (any critical point for bouncing balls)."""
    targets = [{MAX: 0, MINIMAX: 1}.get(branch, -1) for _, _, branch, _ in seeds]
    data, where, first = _solve_seeds(curve, [s[3] for s in seeds], [s[1] for s in seeds],
                                      targets, slots, iterates, resonance_order, steps, max_step)
    keep = np.nonzero(first)[0]
    p, q, branch = (np.asarray([seeds[k][i] for k in keep], dtype=int) for i in range(3))
    return _data_rows(data, where[keep], p, q, branch, polygon)


def _data_rows(out, k, p, q, branch, polygon):
    """Row dicts for the entries ``k`` of the batched orbit data ``out`` reported as (p, q,
    branch); statuses by :func:`_status_of`, Maslov indices left to :func:`_to_set`."""
    (t, jets, length, mono, tr, kind, angle, lyap, dets, residual, index, degenerate, resonant,
     ordered, inward, winding) = jax.tree_util.tree_map(lambda o: np.asarray(o)[k], out)
    finite = (np.all(np.isfinite(t), axis=1) & np.isfinite(length)
              & np.all(np.isfinite(mono), axis=(1, 2)))
    leaves = np.asarray([polygon is not None and bool(finite[i])
                         and orbit_leaves_domain(polygon, jets.point[i], t[i], q[i])
                         for i in range(k.size)], dtype=bool)
    wrong_index = (branch != CRITICAL) & (index != np.where(branch == MAX, 0, 1)) & ~degenerate
    status = _status_of(residual, ordered, winding, p, inward, leaves, degenerate, finite,
                        wrong_index)
    columns = {"p": p, "q": q, "branch": branch, "length": length, "trace": tr, "kind": kind,
               "angle": angle, "lyapunov": lyap, "reflections": q, "residual": residual,
               "hessian_index": index, "status": status, "degenerate": degenerate,
               "resonant": resonant}
    scalars = {name: value.tolist() for name, value in columns.items()}
    return [dict({name: value[i] for name, value in scalars.items()},
                 t=t[i], jets=billiard.Jets(*(x[i] for x in jets)), monodromy=mono[i],
                 det_iterates=dets[i], maslov=None, near_tie=False)
            for i in range(k.size)]


def _same_orbit(a, b, tol=1e-7):
    if a["q"] != b["q"] or abs(a["length"] - b["length"]) > tol * max(1.0, a["length"]):
        return False
    ta = np.sort(np.mod(a["t"][:a["q"]], 2 * np.pi))
    tb = np.sort(np.mod(b["t"][:b["q"]], 2 * np.pi))
    diff = np.abs(np.angle(np.exp(1j * (ta[:, None] - tb[None, :]))))
    return bool(np.all(diff.min(axis=1) < 1e-5))


def _pick(group, branch):
    """Best refined candidate: longest max-type / shortest min-max-type; flags near-ties."""
    good = [r for r in group if r["status"] in (Status.ok, Status.degenerate)]
    pool = good or group
    sign = 1.0 if branch == MAX else -1.0
    pool = sorted(pool, key=lambda r: -sign * r["length"])
    best = dict(pool[0])
    for other in pool[1:]:
        if any(other is g for g in good) and not _same_orbit(best, other) and abs(
                other["length"] - best["length"]) < NEAR_TIE_TOL * best["length"]:
            best["near_tie"] = not best["degenerate"]
    return best


def _polygon_convex(samples):
    """Whether consecutive unit tangents at the uniform ``samples`` (t, γ, γ') always turn left
    (strict convexity proxy)."""
    vel = samples[2]
    nxt = np.roll(vel, -1, axis=0)
    return bool(np.all(vel[:, 0] * nxt[:, 1] - vel[:, 1] * nxt[:, 0] > 0))


def _bouncing_balls(solved):
    """The distinct converged bouncing balls among refined torus-grid seeds, longest first."""
    rows = []
    for row in solved:
        if row["status"] in (Status.orbit_not_converged, Status.nonfinite):
            continue
        if row["status"] == Status.branch_changed:  # winding check is meaningless for q = 2
            row["status"] = int(Status.degenerate if row["degenerate"] else Status.ok)
        if any(_same_orbit(row, r) for r in rows):
            continue
        # A one-parameter family (the circle's diameters) is reported once.
        if row["degenerate"] and any(r["degenerate"] and abs(r["length"] - row["length"])
                                     < 1e-9 * row["length"] for r in rows):
            continue
        rows.append(row)
    return sorted(rows, key=lambda r: -r["length"])


def _to_set(rows, iterates) -> OrbitSet:
    jets = tuple(np.stack([np.asarray(r["jets"][i]) for r in rows]) for i in range(3))
    for r, maslov in zip(rows, _maslov_batch(jets, np.asarray([r["q"] for r in rows]),
                                             iterates)):
        r["maslov"] = maslov
    field = lambda name, dtype=None: np.asarray([r[name] for r in rows], dtype=dtype)  # noqa: E731
    return OrbitSet(
        p=field("p", np.int32), q=field("q", np.int32), branch=field("branch", np.int32),
        t=field("t", np.float64), length=field("length"), monodromy=field("monodromy"),
        trace=field("trace"), kind=field("kind", np.int32), angle=field("angle"),
        lyapunov=field("lyapunov"), det_iterates=field("det_iterates"),
        maslov=field("maslov", np.int32), reflections=field("reflections", np.int32),
        residual=field("residual"), hessian_index=field("hessian_index", np.int32),
        status=field("status", np.int32), degenerate=field("degenerate", bool),
        resonant=field("resonant", bool), near_tie=field("near_tie", bool))


# ----------------------------------------------------------------------------------------------
# Warm path


def _warm_newton(curve, t, q, target, steps, max_step, curve_axis=None, tol=NEWTON_TOL):
    """Newton's method (:func:`_eigen_step`) for a batch of orbits in one loop (``curve_axis``
    0: one curve per orbit).

    Each orbit stops after ``steps`` steps or once its step is below ``tol``; steps are LDLᵀ
    Newton steps where the Hessian has the wanted inertia (the warm start is next to the orbit,
    so nearly always), eigenvector-following steps where it has not."""
    count = t.shape[0]
    max_step = jnp.full(count, max_step, t.dtype)

    def going(state):
        taken, _, last = state
        return jnp.any((taken < steps) & (last > tol))

    def body(state):
        taken, t, last = state
        moving = (taken < steps) & (last > tol)
        grad, hess = jax.vmap(_grad_hess, in_axes=(curve_axis, 0, 0))(curve, t, q)
        delta = _steps_from_derivatives(grad, hess, q, target, max_step, moving)
        return (taken + moving.astype(jnp.int32), jnp.where(moving[:, None], t + delta, t),
                jnp.where(moving, jnp.max(jnp.abs(delta), axis=1), last))

    start = (jnp.zeros(count, jnp.int32), t, jnp.full(count, jnp.inf, t.dtype))
    _, t, _ = jax.lax.while_loop(going, body, start)
    # Unused slots follow bounce 0 so padded entries stay harmless.
    return jnp.where(jnp.arange(t.shape[1])[None, :] < q[:, None], t, t[:, :1])


def _implicit_correction(grad, hess):
    """−H⁺∇W per orbit with H held constant; H⁺ drops eigenvalues below 10⁻¹¹ of the largest
    (one-parameter orbit families). One eigh per orbit: an LDLᵀ solve here ran slightly faster
    but made the warm and gradient programs compile ~1.4 s longer."""

    def one(g, h):
        lam, vec = jnp.linalg.eigh(h)
        scale = jnp.max(jnp.abs(lam))
        inv = jnp.where(jnp.abs(lam) > 1e-11 * scale, 1.0 / lam, 0.0)
        return -(vec * inv) @ (vec.T @ g)

    return jax.vmap(one)(grad, hess)


@partial(jax.jit, static_argnames=("newton_steps", "resonance_order", "per_orbit_curves"))
def refine_orbits(curve: Curve, orbits: OrbitSet, newton_steps: int = 12,
                  resonance_order: int = 4, per_orbit_curves: bool = False) -> OrbitSet:
    """Warm path: Newton from the tracked bounce parameters, implicit derivatives (jittable).

    At most ``newton_steps`` steps, stopping as soon as every orbit's step is below 1e-14.

    Lengths are W at the critical point (exact gradient by the envelope theorem); the bounce
    parameters carry the implicit-function derivative −H⁻¹∂_θ∇W through one correction step
    with the (pseudo-)inverse Hessian held constant, so monodromies, traces and angles have
    exact first derivatives. Status per orbit: not converged, left its branch (Hessian index
    or cyclic order changed), chord leaving the table (an end with sin θ ≤ 0), degenerate.
    Maslov indices are kept from ``orbits`` (they change only through a degeneracy).

    With ``per_orbit_curves`` the curve's parameters carry a leading axis, one copy per orbit,
    and orbit k reads copy k only: one reverse pass seeded on every orbit at once then gives
    each orbit's own parameter gradient (a Jacobian costs a pass per output per orbit, not per
    output row).
    """
    iterates = orbits.det_iterates.shape[1]
    axis = 0 if per_orbit_curves else None
    target = jnp.where(orbits.branch == MAX, 0, jnp.where(orbits.branch == MINIMAX, 1, -1))
    frozen = jax.lax.stop_gradient(curve)
    t_star = jax.lax.stop_gradient(_warm_newton(frozen, jax.lax.stop_gradient(orbits.t),
                                                orbits.q, target, newton_steps, 0.5, axis))
    # Only ∇W carries the shape derivative; the Hessian is held constant.
    jets = jax.vmap(billiard.bounce_jets, in_axes=(axis, 0))(curve, t_star)
    grad = jax.vmap(lambda j, q: billiard.length_gradient_from(
        j, billiard.chords_from_jets(j, q), q))(jets, orbits.q)
    hess = jax.vmap(_grad_hess_from)(jax.lax.stop_gradient(jets), orbits.q)[1]
    t_corrected = t_star + _implicit_correction(grad, hess)

    def one(curve, t_new, q, index, maslov, branch):
        (_, length, mono, tr, kind, angle, lyap, dets, residual, new_index, degenerate, resonant,
         ordered, inward) = orbit_data(curve, t_new, q, iterates, resonance_order)
        changed = (~ordered) | ((branch != CRITICAL) & (new_index != index) & (~degenerate))
        finite = jnp.isfinite(length) & jnp.all(jnp.isfinite(mono))
        status = jnp.where(~finite, Status.nonfinite,
                           jnp.where(residual > RESIDUAL_TOL, Status.orbit_not_converged,
                                     jnp.where(~inward, Status.orbit_leaves_domain,
                                               jnp.where(changed, Status.branch_changed,
                                                         jnp.where(degenerate, Status.degenerate,
                                                                   Status.ok)))))
        return (t_new, length, mono, tr, kind, angle, lyap, dets, maslov, residual, new_index,
                status.astype(jnp.int32), degenerate, resonant)

    (t, length, mono, tr, kind, angle, lyap, dets, maslov, residual, index, status, degenerate,
     resonant) = jax.vmap(one, in_axes=(axis, 0, 0, 0, 0, 0))(
        curve, t_corrected, orbits.q, orbits.hessian_index, orbits.maslov, orbits.branch)
    return orbits._replace(t=t, length=length, monodromy=mono, trace=tr, kind=kind, angle=angle,
                           lyapunov=lyap, det_iterates=dets, maslov=maslov, residual=residual,
                           hessian_index=index, status=status, degenerate=degenerate,
                           resonant=resonant)


# ----------------------------------------------------------------------------------------------
# Identity re-check, bouncing-ball endpoint data, multiplicities, class hypotheses


def same_orbits(curve: Curve, tracked: OrbitSet, fresh: OrbitSet | None = None,
                rtol: float = 1e-8) -> tuple[np.ndarray, OrbitSet]:
    """Compare tracked orbits with a fresh global search on ``curve``.

    Per tracked orbit: ``branch_changed`` if the fresh max (min-max) orbit of the same p/q is a
    different orbit (another length or other bounce points), e.g. after a bifurcation made the
    tracked orbit no longer the longest; for extra bouncing balls, if no fresh bouncing ball
    matches. Returns (status codes, fresh OrbitSet).
    """
    tracked = OrbitSet(*(np.asarray(f) for f in tracked))
    if fresh is None:
        fresh = find_orbits(curve, max_period=int(tracked.t.shape[1]),
                            iterates=int(tracked.det_iterates.shape[1]))
    fresh = OrbitSet(*(np.asarray(f) for f in fresh))
    rows_t, rows_f = _rows(tracked), _rows(fresh)
    out = []
    for r in rows_t:
        if r["branch"] == CRITICAL:
            pool = [f for f in rows_f if f["q"] == 2]
        else:
            pool = [f for f in rows_f if (f["p"], f["q"], f["branch"]) == (r["p"], r["q"],
                                                                             r["branch"])]
        match = any(_same_orbit(r, f, rtol) for f in pool)
        out.append(int(Status.ok if match else Status.branch_changed))
    return np.asarray(out, dtype=np.int32), fresh


def _rows(orbits: OrbitSet) -> list[dict]:
    return [{name: (np.asarray(getattr(orbits, name))[k]) for name in OrbitSet._fields}
            for k in range(orbits.size)]


def endpoint_graphs(curve: Curve, orbits: OrbitSet) -> np.ndarray:
    """For bouncing balls: (f'', f''', f'''') of the boundary as a graph over the tangent line
    at each end, shape (K, 2, 3); NaN for orbits that are not bouncing balls."""
    from .geometry import boundary_graph

    graph = jax.jit(jax.vmap(lambda s: boundary_graph(curve, s)))
    out = np.full((orbits.size, 2, 3), np.nan)
    for k in range(orbits.size):
        if int(orbits.q[k]) == 2:
            out[k] = np.asarray(graph(jnp.asarray(orbits.t[k][:2])))
    return out


def mirror_curvatures(chord: Array, angle: Array) -> tuple[Array, Array]:
    """The two curvatures κ of a symmetric two-mirror orbit (κ₁ = κ₂ = κ) with chord length d
    and rotation angle α: (1 − dκ)² = cos²(α/2), so κ = (1 ∓ cos(α/2))/d.

    From tr P = 4g₁g₂ − 2 = 2 cos α with g_i = 1 − dκ_i (two-mirror cavity; common practice,
    e.g. A. E. Siegman, "Lasers", 1986, from memory).
    """
    c = jnp.cos(angle / 2.0)
    return (1.0 - c) / chord, (1.0 + c) / chord


def length_multiplicity(orbits: OrbitSet, max_length: float | None = None,
                        rtol: float = 1e-9) -> np.ndarray:
    """For each orbit, how many distinct periodic orbits (iterates m·L of every found orbit
    included, time reverses of q ≥ 3 orbits counted) share its primitive length within rtol,
    considering lengths up to ``max_length`` (default: the longest found)."""
    lengths = np.asarray(orbits.length)
    qs = np.asarray(orbits.q)
    iterates = int(np.asarray(orbits.det_iterates).shape[1])
    bound = max_length if max_length is not None else float(np.max(lengths)) * (1 + rtol)
    spectrum = []
    for k in range(orbits.size):
        for m in range(1, iterates + 1):
            if m * lengths[k] <= bound * (1 + rtol):
                spectrum.extend([(k, m, m * lengths[k])] * (1 if qs[k] == 2 else 2))
    out = np.zeros(orbits.size, dtype=int)
    for k in range(orbits.size):
        out[k] = sum(1 for _, _, ell in spectrum if abs(ell - lengths[k]) <= rtol * lengths[k])
    return out


def rotation_lift(orbits: OrbitSet) -> np.ndarray:
    """Natural-lift rotation angle ω ∈ (0, 2π) of elliptic orbits (NaN otherwise): α when the
    second iterate's Maslov index is 1, 2π − α when it is 3 (μ₂ = 2⌊2ω/2π⌋ + 1)."""
    alpha = np.asarray(orbits.angle)
    maslov = np.asarray(orbits.maslov)
    if maslov.shape[1] < 2:
        return alpha
    return np.where(maslov[:, 1] >= 3, 2 * np.pi - alpha, alpha)


class Hypotheses(NamedTuple):
    """Checklist for a designated bouncing ball; each entry (passed, detail text)."""

    nondegenerate: tuple[bool, str]
    non_resonant: tuple[bool, str]
    third_derivative: tuple[bool, str]
    simple_length: tuple[bool, str]

    def passed(self) -> bool:
        return all(v[0] for v in self)


def class_hypotheses(curve: Curve, orbits: OrbitSet, index: int, resonance_order: int = 4,
                     length_bound: float | None = None, tol: float = 1e-8) -> Hypotheses:
    """Nondegenerate (det(I − Pᵐ) ≠ 0, m ≤ M), non-resonant (mα ∉ 2πℤ, m ≤ order), boundary
    graph third derivative nonzero at both ends, primitive length of multiplicity one among
    all found orbits and their iterates up to ``length_bound`` (default: M times its length)."""
    dets = np.asarray(orbits.det_iterates[index])
    nondeg = bool(np.all(np.abs(dets) > tol))
    alpha = float(orbits.angle[index])
    if np.isfinite(alpha):
        gaps = [abs(np.sin(m * alpha / 2)) for m in range(1, resonance_order + 1)]
        nonres = (bool(min(gaps) > RESONANCE_TOL),
                  f"α/2π = {alpha / (2 * np.pi):.10f}, min_m≤{resonance_order} |sin(mα/2)| = "
                  f"{min(gaps):.3g}")
    else:
        nonres = (True, f"not elliptic ({KINDS[int(orbits.kind[index])]}): no rotation resonance")
    graphs = endpoint_graphs(curve, orbits.select([index]))[0]
    third = graphs[:, 1]
    bound = length_bound or float(orbits.length[index]) * orbits.det_iterates.shape[1]
    mult = length_multiplicity(orbits, bound)[index]
    return Hypotheses(
        (nondeg, "min_m |det(I − Pᵐ)| = " + f"{np.min(np.abs(dets)):.3g}"),
        nonres,
        (bool(np.all(np.abs(third) > tol)), f"f''' = {third[0]:.6g}, {third[1]:.6g}"),
        (bool(mult == 1), f"multiplicity {mult} among found orbits up to length {bound:.6g}"),
    )


def polar_angles(curve: Curve, t: Array) -> np.ndarray:
    """Polar angles in [0, 2π) of the bounce points about the origin."""
    pts = np.asarray(_points(curve, jnp.asarray(t)))
    angles = np.mod(np.arctan2(pts[:, 1], pts[:, 0]), 2 * np.pi)
    return np.where(angles >= 2 * np.pi, 0.0, angles)  # mod can round up to 2π


__all__ = ["OrbitSet", "BRANCHES", "KINDS", "rotation_numbers", "find_orbits", "refine_orbits",
           "same_orbits", "orbit_data", "boundary_grid", "birkhoff_table", "birkhoff_path",
           "orbit_leaves_domain", "endpoint_graphs", "mirror_curvatures", "length_multiplicity",
           "rotation_lift", "class_hypotheses", "Hypotheses", "polar_angles"]
