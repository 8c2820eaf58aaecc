"""Infinitesimal rigidity scans: how many deformation directions a list of invariants sees.

At a shape with free parameters θ ∈ R^m and invariant values f(θ) ∈ R^r the scan forms

    J̃ = S⁻¹ (∂f/∂θ) B,

where S = diag(scale_i) makes every row a *relative* change (scale_i = |f_i| unless that is
below 1e-9 of its family's largest entry, then that largest entry), and B maps unit vectors
to parameter directions whose boundary normal velocity v = ⟨∂γ/∂θ·δθ, N⟩ has unit L²(ds)
norm. B = U_k Λ_k^{-1/2} from the eigen-decomposition of the normal-velocity Gram matrix
G = ∮ VᵀV ds of the normal velocities with their rigid-motion part projected out (L²(ds)),
keeping eigenvalues above ``gram_tol``·λ_max: directions that move the curve only tangentially
(reparametrizations of the complex Fourier family) or rigidly are thereby removed, and
``dimension`` = k counts genuine first-order changes of shape within the class. The numerical rank is
#{σ_i > rank_tol · σ_1} over the singular values of J̃; its null space, mapped back through
B, gives the deformations the invariants cannot see at first order.

An invariant family whose status is not ``ok`` (an orbit in a family, a failed solve) has no
trustworthy derivative at this shape: the scan then reports which family and why, and no
Jacobian (``ScanResult.smooth`` is False).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from typing import Any, Sequence

import jax
import jax.numpy as jnp
import numpy as np

from objectives.curve import DEFAULT_RESOLUTION, nodes
from objectives.status import Status

from .invariants import Evaluator, evaluate_families, init_families
from .scanspec import PathSpec
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
    """Registry families from (name, options) pairs, pooled like a search's (one orbit solve
    for every orbit family: :func:`deform.invariants.join_pools`)."""
    from .invariants import build, join_pools

    built = join_pools([build(name, options, where) for name, options in specs])
    return [NamedEvaluator(name, ev) for (name, _), ev in zip(specs, built)]


@functools.lru_cache(maxsize=64)
def _jacobian_fn(evaluators: tuple[NamedEvaluator, ...]):
    """Jitted (shape, states) ↦ (∂values/∂θ, (values, per-family status)); cached per evaluator
    tuple so path scans and repeated scans compile once per shape family."""

    def values_of(params, shape, states):
        curve = shape.with_params(params).curve()
        vals, _, codes = evaluate_families([named.evaluator for named in evaluators], curve,
                                           states)
        values = jnp.concatenate(vals)
        return values, (values, codes)

    return jax.jit(lambda shape, states: jax.jacfwd(values_of, has_aux=True)(
        shape.params, shape, states))


def evaluate_jacobian(shape: Shape, evaluators: Sequence[NamedEvaluator], states=None):
    """(values, ∂values/∂θ, per-family status codes, states) by forward-mode autodiff.

    ``states`` are the evaluators' warm-start states (cold ``init`` at ``shape`` if None).
    """
    if states is None:
        curve = shape.curve()
        states = list(init_families([named.evaluator for named in evaluators], curve))
    jac, (values, codes) = _jacobian_fn(tuple(evaluators))(shape, list(states))
    return np.asarray(values), np.asarray(jac), np.asarray(codes), states


@functools.partial(jax.jit, static_argnums=1)
def _normal_velocity_samples(shape: Shape, resolution: int):
    def point(params, t):
        return shape.with_params(params).curve()(t)

    def row(t):
        d_param = jax.jacfwd(point)(shape.params, t)           # (2, m)
        p, tangent = jax.jvp(lambda s: point(shape.params, s), (t,), (jnp.ones_like(t),))
        speed = jnp.linalg.norm(tangent)
        normal = jnp.stack([-tangent[1], tangent[0]]) / speed
        rigid = jnp.stack([normal[0], normal[1], -p[1] * normal[0] + p[0] * normal[1]])
        return normal @ d_param, speed, rigid

    return jax.vmap(row)(nodes(resolution))


def normal_velocity_matrix(shape: Shape, resolution: int = DEFAULT_RESOLUTION):
    """V[j, i] = ⟨∂γ/∂θ_i(t_j), N(t_j)⟩ at trapezoid nodes, the weights |γ'(t_j)|·2π/n, and
    R[j] = normal velocities of the rigid motions (x-, y-translation, rotation about 0)."""
    v, speed, rigid = _normal_velocity_samples(shape, resolution)
    return np.asarray(v), np.asarray(speed) * (2.0 * np.pi / resolution), np.asarray(rigid)


def deformation_basis(shape: Shape, resolution: int = DEFAULT_RESOLUTION,
                      gram_tol: float = GRAM_TOL) -> np.ndarray:
    """B: parameter directions whose normal velocities, with their rigid-motion part removed
    (L²(ds) projection), are L²-orthonormal; they span every first-order change of shape in
    the class. Tangential reparametrizations and rigid motions drop out."""
    v, w, rigid = normal_velocity_matrix(shape, resolution)
    sw = np.sqrt(w)[:, None]
    q, r = np.linalg.qr(sw * rigid)
    rigid_rank = int(np.sum(np.abs(np.diag(r)) > 1e-10 * np.abs(r).max()))
    q = q[:, :rigid_rank] if rigid_rank else q[:, :0]
    vw = sw * v
    vw = vw - q @ (q.T @ vw)
    gram = vw.T @ vw
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


def _period(label: str) -> int | None:
    """q of an orbit label such as ``L1/3[0]`` or ``L[2/5,max]`` (None if it names no p/q)."""
    import re

    found = re.search(r"(\d+)/(\d+)", label)
    return int(found.group(2)) if found else None


def profile_groups(result: ScanResult) -> list[tuple[str, np.ndarray]]:
    """Row groups in the order they are added: families in the listed order, and within an
    orbit family its rows by increasing period q (``name q≤Q``)."""
    fam = np.asarray(result.row_family)
    periods = np.array([_period(lbl) or 0 for lbl in result.labels])
    groups = []
    for name in result.families:
        rows = fam == name
        qs = sorted(set(periods[rows]) - {0})
        if len(qs) > 1:
            base = rows & (periods == 0)
            if base.any():
                groups.append((f"{name} (no period)", base))
            for q in qs:
                groups.append((f"{name} q≤{q}", rows & (periods == q)))
        else:
            groups.append((name, rows))
    return groups


def rank_profile(result: ScanResult) -> list[tuple[str, int, int, float]]:
    """Cumulative (group, rows so far, rank, smallest kept σ/σ₁) as row groups are added in the
    order of :func:`profile_groups` (families, orbit families by increasing period)."""
    if not result.smooth:
        return []
    out = []
    used = np.zeros(len(result.labels), dtype=bool)
    for name, rows in profile_groups(result):
        used = used | rows
        sing = np.linalg.svd(result.reduced[used], compute_uv=False)
        rank = numerical_rank(sing, result.rank_tol)
        weakest = float(sing[rank - 1] / sing[0]) if rank else 0.0
        out.append((name, int(used.sum()), rank, weakest))
    return out


@dataclass
class PathScan:
    """Smallest singular values along a path of base shapes (among the min(rows, dimension)
    that are not zero by counting)."""

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
            # the min(rows, dimension) singular values that can be nonzero; with fewer rows
            # than directions the remaining directions are null by counting alone
            sing = result.singular_values[: min(len(result.labels), result.dimension)]
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


# ----------------------------------------------------------------------------------------------
# [scan] config, the `deform scan` runner, its record (kind "rigidity") and its figures.

def ellipse_path(spec: PathSpec) -> tuple[list[Shape], np.ndarray]:
    """Ellipses (a = 1, b = ratios) as complex Fourier curves of one family (one compile)."""
    from .families import FourierCurve
    from .symmetry import Symmetry

    sym = Symmetry("dihedral", 2) if spec.symmetry == "dihedral" else Symmetry(spec.symmetry)
    family = FourierCurve.build([(1, 1.0, 0.0)], spec.modes, sym)
    n = 2 * spec.modes + 1
    shapes = []
    for b in spec.ratios:
        coeffs = np.asarray(family.base, dtype=np.float64).copy()
        coeffs[spec.modes + 1] = 0.5 * (1.0 + b)   # Re ĉ₁
        coeffs[spec.modes - 1] = 0.5 * (1.0 - b)   # Re ĉ₋₁
        assert coeffs.size == 2 * n
        shapes.append(Shape(family, jnp.asarray(coeffs[list(family.free)])))
    return shapes, np.sqrt(1.0 - np.asarray(spec.ratios) ** 2)


def record_path(spec: PathSpec, family) -> tuple[list[Shape], np.ndarray]:
    """Accepted shapes of a search record (its ``steps`` table) in ``family``."""
    from .errors import ConfigError
    from .record import read_record

    record = read_record(spec.record)
    steps = record.table("steps")
    if "params" not in steps or not record.rows("steps"):
        raise ConfigError(f"scan.path.record: {spec.record} has no accepted shapes (steps.params)")
    params = steps["params"][:: spec.every]
    if params.shape[1] != family.n_params:
        raise ConfigError(f"scan.path.record: {spec.record} holds {params.shape[1]} parameters, "
                          f"the [shape] family has {family.n_params}")
    return ([Shape(family, jnp.asarray(p)) for p in params],
            np.asarray(steps["step"][:: spec.every], dtype=np.float64))


def scan_columns(n_params: int, labels: Sequence[str], param_labels: Sequence[str],
                 families: Sequence[str]):
    from .record import Column

    rows = len(labels)
    return {
        "points": {
            "step": Column((), "i8", (), "index of the base shape (0 = the config's shape)"),
            "parameter": Column((), "f8", (), "path parameter (eccentricity or record step)"),
            "params": Column((n_params,), "f8", tuple(param_labels), "free shape parameters"),
            "values": Column((rows,), "f8", tuple(labels), "invariant values"),
            "jacobian": Column((rows, n_params), "f8", (), "∂values/∂params (NaN if not smooth)"),
            "singular": Column((n_params,), "f8", (),
                               "singular values of the relative Jacobian, NaN-padded"),
            "rank": Column((), "i4", (), "numerical rank (-1 if not smooth)"),
            "dimension": Column((), "i4", (), "first-order deformation directions of the class"),
            "status": Column((len(families),), "i4", tuple(families), "status per family"),
        },
        "null": {
            "step": Column((), "i8", (), "base shape index (always 0)"),
            "direction": Column((n_params,), "f8", tuple(param_labels),
                                "null direction (unit L² normal velocity)"),
        },
        "profile": {
            "step": Column((), "i8", (), "base shape index (always 0)"),
            "rows": Column((), "i4", (), "invariants so far"),
            "rank": Column((), "i4", (), "rank after adding this family"),
            "weakest": Column((), "f8", (), "smallest kept σ / σ₁"),
            "family": Column((), "S64", (), "family added"),
        },
    }


def _point_row(step, parameter, shape, result: ScanResult):
    n = shape.params.size
    rows = len(result.labels)
    sing = np.full(n, np.nan)
    jac = np.full((rows, n), np.nan)
    if result.smooth:
        sing[: min(n, result.singular_values.size)] = result.singular_values[:n]
        jac = result.jacobian
    status = np.asarray([int(Status[s]) for s in result.statuses.values()], dtype=np.int32)
    return {"step": step, "parameter": parameter, "params": np.asarray(shape.params),
            "values": result.values, "jacobian": jac, "singular": sing,
            "rank": -1 if result.rank is None else result.rank, "dimension": result.dimension,
            "status": status}


def run_scan(config, output: str | None = None, plots: str | None = None,
             evaluators: Sequence[NamedEvaluator] | None = None) -> tuple[ScanResult, str, list]:
    """`deform scan`: scan the config's shape (and path), print-ready text, record, figures."""
    from .errors import ConfigError
    from .record import open_writer, provenance
    from .shape import from_family
    from .validate import require_admissible

    spec = config.scan
    if config.shape is None:
        raise ConfigError(f"{config.source}: shape: missing (a scan needs a [shape] table)")
    shape = from_family(config.shape)
    require_admissible(shape)
    if evaluators is None:
        evaluators = build_evaluators(
            [(name, config.invariants.options(name)) for name in spec.families])
    result = rigidity_scan(shape, evaluators, spec.rank_tol, spec.resolution)
    text = format_scan(result)
    path_shapes, path_param = [], np.zeros(0)
    if spec.path.kind == "ellipses":
        path_shapes, path_param = ellipse_path(spec.path)
    elif spec.path.kind == "record":
        path_shapes, path_param = record_path(spec.path, config.shape)
    output = output or spec.output or "runs/scan.h5"
    meta = {"families": list(spec.families), "labels": list(result.labels),
            "row_family": list(result.row_family), "rank_tol": spec.rank_tol,
            "message": result.message, "smooth": result.smooth,
            "family": config.shape.name, "symmetry": config.shape.symmetry.describe(),
            "param_labels": list(config.shape.param_labels), "dimension": result.dimension,
            "rank": result.rank, "path_kind": spec.path.kind}
    attrs = provenance("rigidity", config.text, config.source, 0, meta)
    tables = scan_columns(shape.params.size, result.labels, config.shape.param_labels,
                          spec.families)
    path_result = None
    with open_writer(output, attrs, tables) as writer:
        writer.append("points", _point_row(0, 0.0, shape, result))
        if result.smooth:
            for direction in result.null_directions:
                writer.append("null", {"step": 0, "direction": direction})
            for name, rows, rank, weakest in rank_profile(result):
                writer.append("profile", {"step": 0, "rows": rows, "rank": rank,
                                          "weakest": weakest, "family": name})
        writer.event(0, "summary", {"message": result.message})
        if path_shapes:
            path_result = path_scan(path_shapes, path_param, evaluators, spec.path.smallest,
                                    spec.rank_tol, spec.resolution)
            # path shapes may live in another family: store their singular values only
            for j, (par, low, rank) in enumerate(zip(path_param, path_result.smallest,
                                                      path_result.ranks)):
                writer.event(j + 1, "path", {"parameter": float(par),
                                             "smallest": [None if not np.isfinite(v) else float(v)
                                                          for v in low],
                                             "rank": int(rank), "dimension":
                                             path_result.dimension,
                                             "message": path_result.messages[j]})
    if path_result is not None:
        text += "\n" + format_path(path_result, spec.path.kind)
    figures = []
    if plots is not None:
        from .record import read_record

        figures = plot_scan_record(read_record(output), plots)
    return result, text + f"\nrecord: {output}", figures


def format_path(scan: PathScan, kind: str) -> str:
    name = "eccentricity" if kind == "ellipses" else "step"
    lines = [f"smallest singular values along the path ({scan.dimension} directions):",
             f"  {name:>12}  rank  " + "  ".join(f"σ_min{i + 1:<5}" for i in
                                                range(scan.smallest.shape[1]))]
    for par, low, rank, msg in zip(scan.parameter, scan.smallest, scan.ranks, scan.messages):
        if rank < 0:
            lines.append(f"  {par:>12.6g}  {msg}")
        else:
            lines.append(f"  {par:>12.6g}  {rank:>4}  " + "  ".join(f"{v:.3e}" for v in low))
    return "\n".join(lines)


def _path_events(record) -> list[dict]:
    import json

    return [json.loads(m) for _, kind, m in record.events() if kind == "path"]


def inspect_lines(record) -> list[str]:
    """Summary of a rigidity record for `deform inspect`."""
    meta = record.meta
    pts = record.table("points")
    lines = [f"rigidity scan of the {meta.get('family')} family ({meta.get('symmetry')} symmetry, "
             f"{len(meta.get('param_labels', []))} free parameters) with "
             f"{', '.join(meta.get('families', []))}", meta.get("message", "")]
    if record.rows("points") and meta.get("smooth"):
        sing = pts["singular"][0]
        sing = sing[np.isfinite(sing)]
        lines.append("singular values: " + ", ".join(f"{s:.3e}" for s in sing))
    prof = record.table("profile")
    if record.rows("profile"):
        lines.append("rank as families are added:")
        for fam, rows, rank, weak in zip(prof["family"], prof["rows"], prof["rank"],
                                         prof["weakest"]):
            lines.append(f"  {fam.decode():<24} rows {int(rows):>4}  rank {int(rank):>4}  "
                         f"σ_min/σ₁ {weak:.3e}")
    path = _path_events(record)
    if path:
        lines.append(f"path ({meta.get('path_kind')}): parameter, rank, smallest σ")
        for ev in path:
            low = ", ".join("nan" if v is None else f"{v:.3e}" for v in ev["smallest"])
            lines.append(f"  {ev['parameter']:.6g}  {ev['rank']}  {low}")
    return lines


def plot_scan_record(record, directory=None) -> list:
    """PNG figures of a rigidity record: singular values, rank profile, null modes, path."""
    from pathlib import Path

    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from .config import parse_config
    from .shape import from_family

    target = Path(record.path)
    directory = Path(directory) if directory else target.with_name(target.stem + "_plots")
    directory.mkdir(parents=True, exist_ok=True)
    meta, written = record.meta, []

    def save(fig, name):
        fig.savefig(directory / name, dpi=110, bbox_inches="tight")
        plt.close(fig)
        written.append(directory / name)

    pts = record.table("points")
    if record.rows("points") and meta.get("smooth"):
        sing = pts["singular"][0]
        sing = sing[np.isfinite(sing)]
        fig, ax = plt.subplots(figsize=(6, 4))
        ax.semilogy(np.arange(1, sing.size + 1), np.maximum(sing, 1e-18), "o-")
        ax.axhline(meta["rank_tol"] * sing[0], color="k", ls=":", label="rank threshold")
        ax.set_xlabel("index")
        ax.set_ylabel("σ (relative change per unit L² normal velocity)")
        ax.set_title(f"singular values: rank {meta.get('rank')} of {meta.get('dimension')}")
        ax.legend()
        save(fig, "singular_values.png")
    prof = record.table("profile")
    if record.rows("profile"):
        fig, ax = plt.subplots(figsize=(6.5, 4))
        names = [f.decode() for f in prof["family"]]
        ax.step(np.arange(len(names)), prof["rank"], where="mid", marker="o")
        ax.axhline(meta.get("dimension", 0), color="k", ls=":", label="deformation directions")
        ax.set_xticks(np.arange(len(names)), names, rotation=30, ha="right")
        ax.set_ylabel("rank")
        ax.set_title("rank as invariant families are added")
        ax.legend()
        save(fig, "rank_profile.png")
    null = record.table("null")
    count = min(record.rows("null"), _null_modes_to_draw(record))
    if count:
        config = parse_config(record.config_text, record.attrs.get("source", "<record>"))
        shape = from_family(config.shape).with_params(pts["params"][0])
        t = np.linspace(0.0, 2.0 * np.pi, 400)
        base = np.asarray(jax.vmap(shape.curve())(t))
        size = float(np.max(np.linalg.norm(base - base.mean(axis=0), axis=1)))
        cols = min(count, 4)
        rows = -(-count // cols)
        fig, axes = plt.subplots(rows, cols, figsize=(3.2 * cols, 3.2 * rows), squeeze=False)
        for k in range(count):
            ax = axes[k // cols][k % cols]
            d = null["direction"][k]
            v = normal_velocity_matrix(shape, 256)[0]
            amp = 0.15 * size / max(float(np.max(np.abs(v @ d))), 1e-300)
            for sign, style in ((1.0, "C3-"), (-1.0, "C0-")):
                moved = np.asarray(jax.vmap(shape.with_params(shape.params + sign * amp * d)
                                            .curve())(t))
                ax.plot(moved[:, 0], moved[:, 1], style, lw=1.0)
            ax.plot(base[:, 0], base[:, 1], "k-", lw=1.5)
            ax.set_aspect("equal")
            ax.set_title(f"null mode {k + 1} (±)", fontsize=9)
            ax.axis("off")
        for k in range(count, rows * cols):
            axes[k // cols][k % cols].axis("off")
        save(fig, "null_modes.png")
    path = _path_events(record)
    if path:
        fig, ax = plt.subplots(figsize=(6.5, 4))
        par = np.array([ev["parameter"] for ev in path])
        low = np.array([[np.nan if v is None else v for v in ev["smallest"]] for ev in path])
        for i in range(low.shape[1]):
            ax.semilogy(par, np.maximum(low[:, i], 1e-18), "o-", label=f"σ_min,{i + 1}")
        ax.set_xlabel("eccentricity" if meta.get("path_kind") == "ellipses" else "record step")
        ax.set_ylabel("smallest singular values")
        ax.set_title("first-order rigidity along the path")
        ax.legend()
        save(fig, "path_singular_values.png")
    return written


def _null_modes_to_draw(record) -> int:
    from .config import parse_config

    scan = parse_config(record.config_text, record.attrs.get("source", "<record>")).scan
    return 4 if scan is None else scan.null_modes


def scan_run(args) -> int:
    from .config import load_config
    from .errors import ConfigError

    config = load_config(args.config)
    if config.scan is None:
        raise ConfigError(f"{args.config}: scan: missing (the config needs a [scan] table)")
    _, text, figures = run_scan(config, args.output, args.plots)
    print(text)
    for path in figures:
        print(path)
    return 0
