"""Infinitesimal rigidity scans: how many deformation directions a list of invariants sees.

At a shape with free parameters θ ∈ R^m and invariant values f(θ) ∈ R^r the scan forms

    J̃ = S⁻¹ (∂f/∂θ) B,

where S = diag(scale_i) makes every row a *relative* change (scale_i = |f_i| unless that is
below 1e-9 of its family's largest entry, then that largest entry), and B maps unit vectors
to parameter directions whose boundary normal velocity v = ⟨∂γ/∂θ·δθ, N⟩ has unit L²(ds)
norm. B = U_k Λ_k^{-1/2} from the eigen-decomposition of the normal-velocity Gram matrix
G = ∮ VᵀV ds, keeping eigenvalues above ``gram_tol``·λ_max: directions that move the curve
only tangentially (reparametrizations of the complex Fourier family) are thereby removed, and
``dimension`` = k counts genuine first-order deformations of the class. The numerical rank is
#{σ_i > rank_tol · σ_1} over the singular values of J̃; its null space, mapped back through
B, gives the deformations the invariants cannot see at first order.

An invariant family whose status is not ``ok`` (an orbit in a family, a failed solve) has no
trustworthy derivative at this shape: the scan then reports which family and why, and no
Jacobian (``ScanResult.smooth`` is False).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Sequence

import jax
import jax.numpy as jnp
import numpy as np

from objectives.curve import DEFAULT_RESOLUTION, nodes
from objectives.status import Status

from .invariants import Evaluator
from .shape import Shape

RANK_TOL = 1e-8
"""Default relative singular-value threshold. Autodiff Jacobians are exact to round-off
(~1e-14 relative), so 1e-8 separates structural zeros from small but genuine sensitivities
by six orders of magnitude on either side (common practice for numerical rank)."""

GRAM_TOL = 1e-10
"""Relative eigenvalue floor of the normal-velocity Gram matrix (tangential directions)."""


@dataclass(frozen=True)
class NamedEvaluator:
    """An invariant family built for a scan: its registry name and evaluator."""

    name: str
    evaluator: Evaluator


@dataclass
class ScanResult:
    """Outcome of a rigidity scan at one shape (see module docstring for the mathematics)."""

    families: tuple[str, ...]
    labels: tuple[str, ...]
    row_family: tuple[str, ...]
    values: np.ndarray
    statuses: dict[str, str]
    smooth: bool
    message: str
    rank_tol: float = RANK_TOL
    dimension: int = 0
    jacobian: np.ndarray | None = None          # ∂f/∂θ, rows × free parameters
    reduced: np.ndarray | None = None           # J̃ = S⁻¹ J B
    basis: np.ndarray | None = None             # B, free parameters × dimension
    singular_values: np.ndarray | None = None
    rank: int | None = None
    null_directions: np.ndarray | None = None   # parameter directions, one per row
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def nullity(self) -> int | None:
        return None if self.rank is None else self.dimension - self.rank


def build_evaluators(specs: Sequence[tuple[str, dict]], where: str = "scan.families"
                     ) -> list[NamedEvaluator]:
    """Registry families from (name, options) pairs."""
    from .invariants import build

    return [NamedEvaluator(name, build(name, options, where)) for name, options in specs]


def _stacked_values(shape: Shape, evaluators: Sequence[NamedEvaluator], states):
    def values_of(params):
        curve = shape.with_params(params).curve()
        vals, codes = [], []
        for named, state in zip(evaluators, states):
            v, _, status = named.evaluator.evaluate(curve, state)
            vals.append(jnp.atleast_1d(v))
            codes.append(jnp.max(jnp.atleast_1d(status)))
        values = jnp.concatenate(vals)
        return values, (values, jnp.stack(codes))

    return values_of


def evaluate_jacobian(shape: Shape, evaluators: Sequence[NamedEvaluator], states=None):
    """(values, ∂values/∂θ, per-family status codes) by forward-mode autodiff.

    ``states`` are the evaluators' warm-start states (cold ``init`` at ``shape`` if None).
    """
    if states is None:
        curve = shape.curve()
        states = [named.evaluator.init(curve) for named in evaluators]
    fn = _stacked_values(shape, evaluators, states)
    jac, (values, codes) = jax.jit(jax.jacfwd(fn, has_aux=True))(shape.params)
    return np.asarray(values), np.asarray(jac), np.asarray(codes), states


def normal_velocity_matrix(shape: Shape, resolution: int = DEFAULT_RESOLUTION):
    """V[j, i] = ⟨∂γ/∂θ_i(t_j), N(t_j)⟩ at trapezoid nodes, and the weights |γ'(t_j)|·2π/n."""

    def point(params, t):
        return shape.with_params(params).curve()(t)

    def row(t):
        d_param = jax.jacfwd(point)(shape.params, t)           # (2, m)
        tangent = jax.jvp(lambda s: point(shape.params, s), (t,), (jnp.ones_like(t),))[1]
        speed = jnp.linalg.norm(tangent)
        normal = jnp.stack([-tangent[1], tangent[0]]) / speed
        return normal @ d_param, speed

    v, speed = jax.jit(jax.vmap(row))(nodes(resolution))
    return np.asarray(v), np.asarray(speed) * (2.0 * np.pi / resolution)


def deformation_basis(shape: Shape, resolution: int = DEFAULT_RESOLUTION,
                      gram_tol: float = GRAM_TOL) -> np.ndarray:
    """B: parameter directions with L²(ds)-orthonormal normal velocities, spanning all
    first-order deformations of the class (tangential directions removed)."""
    v, w = normal_velocity_matrix(shape, resolution)
    gram = v.T @ (w[:, None] * v)
    lam, u = np.linalg.eigh(gram)
    keep = lam > gram_tol * max(lam.max(initial=0.0), 0.0)
    order = np.argsort(lam[keep])[::-1]
    return u[:, keep][:, order] / np.sqrt(lam[keep][order])


def row_scales(values: np.ndarray, row_family: Sequence[str]) -> np.ndarray:
    """|f_i|, or the family's largest |f| when |f_i| is below 1e-9 of it (or everything is 0)."""
    values = np.abs(np.asarray(values, dtype=np.float64))
    scales = values.copy()
    fam = np.asarray(row_family)
    for name in dict.fromkeys(row_family):
        mask = fam == name
        top = values[mask].max() if mask.any() else 0.0
        top = top if top > 0 else 1.0
        scales[mask] = np.where(values[mask] > 1e-9 * top, values[mask], top)
    return scales


def numerical_rank(singular_values: np.ndarray, rank_tol: float = RANK_TOL) -> int:
    """#{σ_i > rank_tol·σ_1} (0 for an empty or zero matrix)."""
    s = np.asarray(singular_values)
    if s.size == 0 or s[0] <= 0:
        return 0
    return int(np.sum(s > rank_tol * s[0]))


def _describe_statuses(names, codes) -> tuple[dict[str, str], list[str]]:
    statuses, bad = {}, []
    for name, c in zip(names, codes):
        status = Status(int(c))
        statuses[name] = status.name
        if status is not Status.ok:
            bad.append(f"{name}: {status.message}")
    return statuses, bad


def rigidity_scan(shape: Shape, evaluators: Sequence[NamedEvaluator], rank_tol: float = RANK_TOL,
                  resolution: int = DEFAULT_RESOLUTION, states=None,
                  scales: np.ndarray | None = None) -> ScanResult:
    """Jacobian, singular values, numerical rank and null directions at ``shape``."""
    names = tuple(named.name for named in evaluators)
    labels, row_family = [], []
    for named in evaluators:
        labels.extend(named.evaluator.labels)
        row_family.extend([named.name] * len(named.evaluator.labels))
    values, jac, codes, states = evaluate_jacobian(shape, evaluators, states)
    statuses, bad = _describe_statuses(names, codes)
    result = ScanResult(names, tuple(labels), tuple(row_family), values, statuses,
                        smooth=not bad, message="", rank_tol=rank_tol)
    result.extra["states"] = states
    if bad or not np.all(np.isfinite(jac)):
        reasons = bad or ["non-finite derivative"]
        result.smooth = False
        result.message = ("not smooth at this shape, no Jacobian reported: " + "; ".join(reasons))
        return result
    basis = deformation_basis(shape, resolution)
    scales = row_scales(values, row_family) if scales is None else np.asarray(scales)
    reduced = (jac / scales[:, None]) @ basis
    _, sing, vt = np.linalg.svd(reduced, full_matrices=True)
    rank = numerical_rank(sing, rank_tol)
    result.dimension = basis.shape[1]
    result.jacobian, result.reduced, result.basis = jac, reduced, basis
    result.singular_values, result.rank = sing, rank
    result.null_directions = (basis @ vt[rank:].T).T
    result.extra["scales"] = scales
    result.message = (f"rank {rank} of {result.dimension} deformation directions "
                      f"(σ > {rank_tol:g}·σ₁), {result.nullity} null")
    return result


def rank_profile(result: ScanResult) -> list[tuple[str, int, int, float]]:
    """Cumulative (family, rows so far, rank, smallest kept σ/σ₁) as families are added in order."""
    if not result.smooth:
        return []
    out = []
    fam = np.asarray(result.row_family)
    for i, name in enumerate(result.families):
        rows = np.isin(fam, result.families[: i + 1])
        sing = np.linalg.svd(result.reduced[rows], compute_uv=False)
        rank = numerical_rank(sing, result.rank_tol)
        weakest = float(sing[rank - 1] / sing[0]) if rank else 0.0
        out.append((name, int(rows.sum()), rank, weakest))
    return out


@dataclass
class PathScan:
    """Smallest singular values along a path of base shapes."""

    parameter: np.ndarray
    smallest: np.ndarray        # (points, count) smallest σ of J̃, NaN where not smooth
    ranks: np.ndarray           # -1 where not smooth
    dimension: int
    messages: list[str]


def path_scan(shapes: Sequence[Shape], parameter: Sequence[float],
              evaluators: Sequence[NamedEvaluator], count: int = 3,
              rank_tol: float = RANK_TOL, resolution: int = DEFAULT_RESOLUTION) -> PathScan:
    """Scan each shape of a path; invariant states are warm-started along the path."""
    smallest = np.full((len(shapes), count), np.nan)
    ranks = np.full(len(shapes), -1)
    messages, states, dimension = [], None, 0
    for j, shape in enumerate(shapes):
        if states is not None:
            # warm start: refresh each state from the previous shape's solution
            curve = shape.curve()
            states = [named.evaluator.evaluate(curve, st)[1] for named, st in
                      zip(evaluators, states)]
        result = rigidity_scan(shape, evaluators, rank_tol, resolution, states)
        messages.append(result.message)
        if result.smooth:
            states = result.extra["states"]
            sing = np.zeros(result.dimension)
            sing[: result.singular_values.size] = result.singular_values[: result.dimension]
            low = np.sort(sing)[:count]
            smallest[j, : low.size] = low
            ranks[j] = result.rank
            dimension = result.dimension
        else:
            states = None
    return PathScan(np.asarray(parameter, dtype=np.float64), smallest, ranks, dimension, messages)


def format_scan(result: ScanResult, top: int = 12) -> str:
    """Readable summary: statuses, singular values, rank, rank profile."""
    lines = [f"invariants: {len(result.labels)} values from {', '.join(result.families)}"]
    if not result.smooth:
        lines.append(result.message)
        return "\n".join(lines)
    lines.append(f"free parameters: {result.jacobian.shape[1]}, deformation directions: "
                 f"{result.dimension}")
    sing = result.singular_values
    shown = ", ".join(f"{s:.3e}" for s in sing[:top]) + (" …" if sing.size > top else "")
    lines.append(f"singular values of the relative Jacobian (per unit L² normal velocity): {shown}")
    lines.append(result.message)
    lines.append("rank as families are added:")
    lines.append(f"  {'family':<24} {'rows':>5} {'rank':>5} {'σ_min/σ₁':>10}")
    for name, rows, rank, weakest in rank_profile(result):
        lines.append(f"  {name:<24} {rows:>5} {rank:>5} {weakest:>10.3e}")
    return "\n".join(lines)
