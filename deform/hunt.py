"""Pair hunts: two shapes of one class whose kept invariants agree while they stay far apart.

For free parameters x = (θ_A, θ_B) of two shapes of the same family, with kept invariant
values f and per-invariant scales s (|f(base)|, see :func:`deform.rigidity.row_scales`),

    r(x) = (f(θ_A) − f(θ_B)) / s,          mismatch = max_i |r_i|,
    loss(x) = Σ_i r_i² + w · max(0, 1 − D²(A, B)/D_min²)²,

where D is the isometry-invariant distance (:func:`objectives.distance.shape_distance`, modulo
rotations, translations, reflections and reparametrization; the smooth variant D² is used in the
loss) and D_min the distance floor. A start draws θ_A, θ_B independently as the base shape plus
decaying random Fourier modes (amplitude ``spread``·max(|k|, 1)^−``decay``), runs optax Adam on
the loss (each coordinate's step scaled by its mode weight max(|k|,1)^−decay), then polishes
with Gauss–Newton steps that solve [J_r; ∇D²] W z = [−r; 0] in the least-squares minimum-norm
sense and move Δx = W z: they remove the mismatch at first-order constant distance and
converge quadratically onto the set r = 0 when it is reachable. A pair is *accepted* only if, at the end,
mismatch ≤ tolerance, the exact D ≥ D_min (no congruent copies), both shapes are admissible
domains, and every kept family reports an ``ok`` status (including its re-check, so orbits that
changed branch are rejected). Each start is a pure function of (config, seed) and writes its own
record (kind ``hunt_start``); the ranking over starts goes into a summary record (kind ``hunt``).
"""

from __future__ import annotations

import functools
import json
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import jax
import jax.numpy as jnp
import numpy as np
import optax

from objectives.distance import shape_distance
from objectives.status import Status

from .invariants import evaluate_families, init_families
from .rigidity import NamedEvaluator, build_evaluators, row_scales
from .shape import Shape, from_family

BOUNDARY_POINTS = 128


def mode_index(label: str) -> int:
    """|k| of a coefficient label such as ``cos[3]`` or ``re[-2]`` (1 when it has none)."""
    found = re.search(r"\[(-?\d+)\]", label)
    return max(abs(int(found.group(1))), 1) if found else 1


def mode_weights(family, decay: float) -> np.ndarray:
    """max(|k|, 1)^−decay per free parameter: the start distribution's relative amplitudes and
    the step metric of the optimizer (high modes move less, keeping the curvature tame)."""
    return np.array([float(mode_index(lbl)) ** -decay for lbl in family.param_labels])


def random_start(family, key: jax.Array, spread: float, decay: float) -> jax.Array:
    """Base parameters plus independent normal modes with amplitude spread·max(|k|,1)^−decay."""
    amp = spread * mode_weights(family, decay)
    base = jnp.asarray(family.initial_params())
    return base + jnp.asarray(amp) * jax.random.normal(key, base.shape, dtype=jnp.float64)


def _evaluate_all(curve, evaluators: Sequence[NamedEvaluator], states):
    values, new_states, codes = evaluate_families([named.evaluator for named in evaluators],
                                                  curve, states)
    return jnp.concatenate(values), list(new_states), codes


@dataclass(frozen=True, eq=False)
class PairProblem:
    """The pieces of one hunt that do not change between starts (hashed by identity, so the
    jitted step functions below compile once per problem and are reused by every start)."""

    family: Any
    evaluators: tuple[NamedEvaluator, ...]
    scales: np.ndarray
    floor: float
    weight: float

    @property
    def n(self) -> int:
        return self.family.n_params

    def split(self, x):
        return Shape(self.family, x[: self.n]), Shape(self.family, x[self.n:])

    def residual(self, x, states_a, states_b):
        """(r, D², (states_a, states_b, status codes of A and B))."""
        a, b = self.split(x)
        ca, cb = a.curve(), b.curve()
        va, sa, codes_a = _evaluate_all(ca, self.evaluators, states_a)
        vb, sb, codes_b = _evaluate_all(cb, self.evaluators, states_b)
        r = (va - vb) / self.scales
        d2 = shape_distance(ca, cb, smooth=True)
        return r, d2, (sa, sb, jnp.maximum(codes_a, codes_b))

    def loss(self, x, states_a, states_b):
        r, d2, aux = self.residual(x, states_a, states_b)
        shortfall = jnp.maximum(1.0 - d2 / self.floor**2, 0.0)
        return jnp.sum(r * r) + self.weight * shortfall**2, (r, d2, aux)


@dataclass
class StartResult:
    index: int
    seed: int
    accepted: bool
    reason: str
    mismatch: float
    distance: float
    params_a: np.ndarray
    params_b: np.ndarray
    values_a: np.ndarray
    values_b: np.ndarray
    record: str

    def summary(self) -> dict:
        return {"index": self.index, "seed": self.seed, "accepted": self.accepted,
                "reason": self.reason, "mismatch": self.mismatch, "distance": self.distance,
                "record": self.record}


def make_problem(family, evaluators: Sequence[NamedEvaluator], floor: float,
                 weight: float) -> PairProblem:
    """Scales from the base shape of ``family``."""
    base = from_family(family).curve()
    evs = [named.evaluator for named in evaluators]
    values = [np.atleast_1d(np.asarray(v))
              for v in evaluate_families(evs, base, init_families(evs, base))[0]]
    row_family = [named.name for named in evaluators for _ in named.evaluator.labels]
    return PairProblem(family, tuple(evaluators), row_scales(np.concatenate(values), row_family),
                       float(floor), float(weight))


def _columns(problem: PairProblem, labels):
    from .record import Column

    n, m = problem.n, len(labels)
    plabels = tuple(problem.family.param_labels)
    return {
        "steps": {
            "step": Column((), "i8", (), "optimizer step (Adam, then Gauss–Newton polish)"),
            "phase": Column((), "S8", (), "adam or polish"),
            "params_a": Column((n,), "f8", plabels, "first shape"),
            "params_b": Column((n,), "f8", plabels, "second shape"),
            "loss": Column((), "f8", (), "Σ r² + distance-floor penalty"),
            "mismatch": Column((), "f8", (), "max relative mismatch of kept invariants"),
            "distance": Column((), "f8", (), "isometry-invariant distance D (smooth form)"),
            "status": Column((), "i4", (), "worst status of the kept families"),
        },
        "result": {
            "step": Column((), "i8", (), "last step"),
            "params_a": Column((n,), "f8", plabels, "first shape"),
            "params_b": Column((n,), "f8", plabels, "second shape"),
            "boundary_a": Column((BOUNDARY_POINTS, 2), "f8", ("x", "y"), "first boundary"),
            "boundary_b": Column((BOUNDARY_POINTS, 2), "f8", ("x", "y"), "second boundary"),
            "values_a": Column((m,), "f8", tuple(labels), "kept invariants of the first shape"),
            "values_b": Column((m,), "f8", tuple(labels), "kept invariants of the second shape"),
            "mismatch": Column((), "f8", (), "max relative mismatch"),
            "distance": Column((), "f8", (), "exact isometry-invariant distance D"),
            "accepted": Column((), "i4", (), "1 if every guard passed"),
            "status": Column((), "i4", (), "worst status of the kept families"),
        },
    }


def _boundary(shape: Shape) -> np.ndarray:
    t = jnp.linspace(0.0, 2.0 * jnp.pi, BOUNDARY_POINTS, endpoint=False)
    return np.asarray(jax.vmap(shape.curve())(t))


@functools.partial(jax.jit, static_argnums=(0, 1))
def _adam_step(problem: PairProblem, learning_rate: float, x, opt_state, sa, sb, metric):
    """One optax Adam step on the hunt loss, each coordinate's step scaled by ``metric``
    (mode weights), with the kept families' states carried along."""
    optimizer = optax.adam(learning_rate)
    (value, (r, d2, (sa, sb, codes))), grad = jax.value_and_grad(
        problem.loss, has_aux=True)(x, sa, sb)
    updates, opt_state = optimizer.update(grad, opt_state, x)
    updates = updates * metric
    return optax.apply_updates(x, updates), opt_state, sa, sb, value, r, d2, jnp.max(codes)


@functools.partial(jax.jit, static_argnums=0)
def _linearized(problem: PairProblem, x, sa, sb):
    """(∂(r, D²)/∂x, r, D², states, worst status) for a Gauss–Newton step."""
    def residual(y):
        out = problem.residual(y, sa, sb)
        return jnp.concatenate([out[0], out[1][None]]), out   # rows: r, then D²

    jac, (r, d2, (sa, sb, codes)) = jax.jacfwd(residual, has_aux=True)(x)
    return jac, r, d2, sa, sb, jnp.max(codes)


def run_start(problem: PairProblem, spec, index: int, seed: int, output: str | None,
              config_text: str = "", source: str = "<config>") -> StartResult:
    """One seeded start: Adam on the loss, Gauss–Newton polish, guards; optionally recorded."""
    from contextlib import nullcontext

    from .record import open_writer, provenance
    from .validate import problems as shape_problems

    key_a, key_b = jax.random.split(jax.random.PRNGKey(seed))
    x = jnp.concatenate([random_start(problem.family, key_a, spec.spread, spec.decay),
                         random_start(problem.family, key_b, spec.spread, spec.decay)])
    a, b = problem.split(x)
    evs = [e.evaluator for e in problem.evaluators]
    states_a = list(init_families(evs, a.curve()))
    states_b = list(init_families(evs, b.curve()))
    labels = [lbl for e in problem.evaluators for lbl in e.evaluator.labels]
    opt_state = optax.adam(spec.learning_rate).init(x)
    weights = mode_weights(problem.family, spec.decay)
    metric = jnp.asarray(np.concatenate([weights, weights]))
    lr = float(spec.learning_rate)

    meta = {"index": index, "keep": [e.name for e in problem.evaluators], "labels": labels,
            "floor": problem.floor, "tolerance": spec.tolerance, "family": problem.family.name,
            "symmetry": problem.family.symmetry.describe(),
            "param_labels": list(problem.family.param_labels)}
    context = (open_writer(Path(output) / f"start_{index:04d}.h5",
                           provenance("hunt_start", config_text, source, seed, meta),
                           _columns(problem, labels)) if output else nullcontext(None))
    worst = Status.ok
    with context as writer:
        def log(step, phase, x, value, r, d2, code):
            if writer is not None:
                writer.append("steps", {
                    "step": step, "phase": phase, "params_a": np.asarray(x[: problem.n]),
                    "params_b": np.asarray(x[problem.n:]), "loss": float(value),
                    "mismatch": float(jnp.max(jnp.abs(r))),
                    "distance": float(jnp.sqrt(jnp.maximum(d2, 0.0))), "status": int(code)})

        step = 0
        for step in range(1, spec.steps + 1):
            x, opt_state, states_a, states_b, value, r, d2, code = _adam_step(
                problem, lr, x, opt_state, states_a, states_b, metric)
            worst = max(worst, Status(int(code)))
            if step % 25 == 0 or step == spec.steps:
                log(step, "adam", x, value, r, d2, code)
            if worst is not Status.ok:
                break
        for _ in range(spec.polish if worst is Status.ok else 0):
            jac, r, d2, states_a, states_b, code = _linearized(problem, x, states_a, states_b)
            worst = max(worst, Status(int(code)))
            step += 1
            log(step, "polish", x, float(jnp.sum(r * r)), r, d2, code)
            if float(jnp.max(jnp.abs(r))) <= 0.01 * spec.tolerance or worst is not Status.ok:
                break
            # minimum-norm step in the mode-weighted metric that removes the mismatch while
            # keeping D² fixed to first order: [J_r; ∇D²] W dz = [−r; 0], dx = W dz
            w = np.asarray(metric)
            rhs = np.concatenate([-np.asarray(r), [0.0]])
            dz = np.linalg.lstsq(np.asarray(jac) * w, rhs, rcond=1e-12)[0]
            x = x + jnp.asarray(w * dz)
        a, b = problem.split(x)
        va, states_a, codes_a = _evaluate_all(a.curve(), problem.evaluators, states_a)
        vb, states_b, codes_b = _evaluate_all(b.curve(), problem.evaluators, states_b)
        worst = max(worst, Status(int(jnp.max(codes_a))), Status(int(jnp.max(codes_b))))
        for shape, states in ((a, states_a), (b, states_b)):
            curve = shape.curve()  # one curve per shape: pooled families share one search
            for named, st in zip(problem.evaluators, states):
                if named.evaluator.recheck is not None:
                    worst = max(worst, Status(int(named.evaluator.recheck(curve, st)[1])))
        va, vb = np.asarray(va), np.asarray(vb)
        mismatch = float(np.max(np.abs(va - vb) / problem.scales))
        distance = float(shape_distance(a.curve(), b.curve()))
        reasons = []
        if worst is not Status.ok:
            reasons.append(f"status {worst.name}: {worst.message}")
        for name, shape in (("A", a), ("B", b)):
            found = shape_problems(shape)
            if found:
                reasons.append(f"shape {name} is not admissible: {found[0]}")
        if not np.isfinite(mismatch) or mismatch > spec.tolerance:
            reasons.append(f"mismatch {mismatch:.3g} above tolerance {spec.tolerance:.3g}")
        if not np.isfinite(distance) or distance < problem.floor:
            reasons.append(f"distance D = {distance:.4g} below the floor {problem.floor:.4g} "
                           "(congruent or nearly congruent copies)")
        accepted = not reasons
        reason = "accepted" if accepted else "; ".join(reasons)
        path = ""
        if writer is not None:
            writer.append("result", {
                "step": step, "params_a": np.asarray(a.params), "params_b": np.asarray(b.params),
                "boundary_a": _boundary(a), "boundary_b": _boundary(b), "values_a": va,
                "values_b": vb, "mismatch": mismatch, "distance": distance,
                "accepted": int(accepted), "status": int(worst)})
            writer.event(step, "stop", {"accepted": accepted, "reason": reason})
            path = str(Path(output) / f"start_{index:04d}.h5")
    return StartResult(index, seed, accepted, reason, mismatch, distance,
                       np.asarray(a.params), np.asarray(b.params), va, vb, path)


def rank_results(results: Sequence[StartResult]) -> list[StartResult]:
    """Accepted pairs first, farthest apart first (their mismatches are all within tolerance);
    then the rejected ones by mismatch (ascending) and distance (descending)."""
    def key(r):
        mismatch = r.mismatch if np.isfinite(r.mismatch) else np.inf
        return (0, -r.distance, mismatch) if r.accepted else (1, mismatch, -r.distance)

    return sorted(results, key=key)


def recheck_pair(family, params_a, params_b, evaluators: Sequence[NamedEvaluator],
                 tolerance: float) -> tuple[list[tuple[str, float, str]], str | None]:
    """Per family: (name, max relative mismatch, status). The first family (in order) whose
    mismatch exceeds ``tolerance`` tells the shapes apart (None if none does)."""
    a, b = Shape(family, jnp.asarray(params_a)), Shape(family, jnp.asarray(params_b))
    rows, first = [], None
    evs = [named.evaluator for named in evaluators]
    curve_a, curve_b = a.curve(), b.curve()
    states_a, states_b = init_families(evs, curve_a), init_families(evs, curve_b)
    for named, st_a, st_b in zip(evaluators, states_a, states_b):
        ev = named.evaluator
        va, _, sa = ev.evaluate(curve_a, st_a)
        vb, _, sb = ev.evaluate(curve_b, st_b)
        va, vb = np.atleast_1d(np.asarray(va)), np.atleast_1d(np.asarray(vb))
        scale = row_scales(np.abs(va) + np.abs(vb), [named.name] * va.size) / 2
        gap = float(np.max(np.abs(va - vb) / scale))
        status = Status(max(int(np.max(np.asarray(sa))), int(np.max(np.asarray(sb)))))
        rows.append((named.name, gap, status.name))
        if first is None and status is Status.ok and gap > tolerance:
            first = named.name
    return rows, first


_WORKER_PROBLEMS: dict[str, PairProblem] = {}


def _worker(config_text: str, source: str, index: int, seed: int, output: str | None) -> dict:
    """Process-pool entry: rebuild everything from the config text (runs are pure functions
    of config and seed) and return a JSON-ready summary."""
    from .config import parse_config
    from .runtime import configure_jax

    configure_jax()
    config = parse_config(config_text, source)
    if config_text not in _WORKER_PROBLEMS:  # one problem (one compilation) per worker process
        _WORKER_PROBLEMS[config_text] = _problem(config)
    problem = _WORKER_PROBLEMS[config_text]
    result = run_start(problem, config.hunt, index, seed, output, config_text, source)
    out = result.summary()
    out.update(params_a=result.params_a.tolist(), params_b=result.params_b.tolist(),
               values_a=result.values_a.tolist(), values_b=result.values_b.tolist())
    return out


def _problem(config) -> PairProblem:
    evaluators = build_evaluators([(n, config.invariants.options(n)) for n in config.hunt.keep],
                                  "hunt.keep")
    return make_problem(config.shape, evaluators, config.hunt.floor, config.hunt.weight)


def _from_summary(d: dict) -> StartResult:
    return StartResult(d["index"], d["seed"], d["accepted"], d["reason"], d["mismatch"],
                       d["distance"], np.asarray(d["params_a"]), np.asarray(d["params_b"]),
                       np.asarray(d["values_a"]), np.asarray(d["values_b"]), d["record"])


def start_seeds(seed: int, starts: int) -> list[int]:
    """Independent per-start seeds derived from the configured one (numpy SeedSequence)."""
    children = np.random.SeedSequence(seed).generate_state(starts, dtype=np.uint32)
    return [int(c) for c in children]


def hunt(config, output: str | None = None, starts: int | None = None,
         workers: int | None = None) -> tuple[list[StartResult], str]:
    """Run every start (in a local process pool when workers > 1), rank, re-check, record."""
    from .errors import ConfigError
    from .record import Column, open_writer, provenance

    spec = config.hunt
    if config.shape is None:
        raise ConfigError(f"{config.source}: shape: missing (a hunt needs a [shape] table)")
    from .validate import require_admissible

    require_admissible(from_family(config.shape))
    output = output or spec.output
    starts = starts or spec.starts
    workers = workers or spec.workers
    seeds = start_seeds(spec.seed, starts)
    if workers > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        ctx = multiprocessing.get_context("spawn")
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
            futures = [pool.submit(_worker, config.text, config.source, i, s, output)
                       for i, s in enumerate(seeds)]
            results = [_from_summary(f.result()) for f in futures]
    else:
        problem = _problem(config)
        results = [run_start(problem, spec, i, s, output, config.text, config.source)
                   for i, s in enumerate(seeds)]
    ranked = rank_results(results)
    lines = [f"pair hunt in the {config.shape.name} family "
             f"({config.shape.symmetry.describe()} symmetry, {config.shape.n_params} free "
             f"parameters), keeping {', '.join(spec.keep)}; {starts} starts, floor D ≥ "
             f"{spec.floor:g}, tolerance {spec.tolerance:g}",
             f"  {'rank':>4} {'start':>5} {'mismatch':>10} {'distance':>10}  verdict"]
    for i, r in enumerate(ranked[: spec.top]):
        lines.append(f"  {i + 1:>4} {r.index:>5} {r.mismatch:>10.3e} {r.distance:>10.4f}  "
                     f"{r.reason}")
    accepted = [r for r in ranked if r.accepted]
    check_rows, first = [], None
    if accepted:
        best = accepted[0]
        lines.append(f"best pair: start {best.index}, mismatch {best.mismatch:.3e}, "
                     f"D = {best.distance:.4f}")
        if spec.check:
            checks = build_evaluators(
                [(n, config.invariants.options(n)) for n in spec.keep + spec.check], "hunt.check")
            check_rows, first = recheck_pair(config.shape, best.params_a, best.params_b, checks,
                                             spec.check_tolerance)
            lines.append("re-check with more families (max relative difference, status):")
            for name, gap, status in check_rows:
                lines.append(f"  {name:<24} {gap:.3e}  {status}")
            lines.append(f"first family that tells them apart: {first}" if first else
                         "no checked family tells them apart at tolerance "
                         f"{spec.check_tolerance:g}")
    else:
        best_any = ranked[0]
        lines.append(f"no pair beyond the distance floor D ≥ {spec.floor:g} with mismatch ≤ "
                     f"{spec.tolerance:g} was found in {starts} starts (closest: mismatch "
                     f"{best_any.mismatch:.3e} at D = {best_any.distance:.4f})")
    meta = {"keep": list(spec.keep), "check": list(spec.check), "floor": spec.floor,
            "tolerance": spec.tolerance, "starts": starts, "found": bool(accepted),
            "family": config.shape.name, "symmetry": config.shape.symmetry.describe(),
            "param_labels": list(config.shape.param_labels),
            "recheck": [list(r) for r in check_rows], "first_distinguishing": first,
            "report": lines}
    summary_path = Path(output) / "hunt.h5"
    n = config.shape.n_params
    tables = {"ranking": {
        "step": Column((), "i8", (), "rank (0 = best)"),
        "start": Column((), "i8", (), "start index"),
        "seed": Column((), "i8", (), "seed of the start"),
        "mismatch": Column((), "f8", (), "max relative mismatch"),
        "distance": Column((), "f8", (), "exact isometry-invariant distance"),
        "accepted": Column((), "i4", (), "1 if every guard passed"),
        "params_a": Column((n,), "f8", tuple(config.shape.param_labels), "first shape"),
        "params_b": Column((n,), "f8", tuple(config.shape.param_labels), "second shape"),
        "reason": Column((), "S512", (), "verdict"),
        "record": Column((), "S512", (), "record of the start"),
    }}
    with open_writer(summary_path, provenance("hunt", config.text, config.source, spec.seed, meta),
                     tables) as writer:
        for i, r in enumerate(ranked):
            writer.append("ranking", {"step": i, "start": r.index, "seed": r.seed,
                                      "mismatch": r.mismatch, "distance": r.distance,
                                      "accepted": int(r.accepted), "params_a": r.params_a,
                                      "params_b": r.params_b, "reason": r.reason,
                                      "record": r.record})
        writer.event(0, "summary", json.dumps({"found": bool(accepted), "report": lines}))
    lines.append(f"records: {output}/start_*.h5, ranking: {summary_path}")
    return ranked, "\n".join(lines)


def hunt_run(args) -> int:
    from .config import load_config
    from .errors import ConfigError

    config = load_config(args.config)
    if config.hunt is None:
        raise ConfigError(f"{args.config}: hunt: missing (the config needs a [hunt] table)")
    if args.starts is not None and args.starts < 1:
        raise ConfigError(f"--starts: expected a positive integer, got {args.starts}")
    if args.workers is not None and args.workers < 1:
        raise ConfigError(f"--workers: expected a positive integer, got {args.workers}")
    _, text = hunt(config, args.output, args.starts, args.workers)
    print(text)
    if args.plots:
        from .record import read_record

        summary = Path(args.output or config.hunt.output) / "hunt.h5"
        for path in plot_hunt_record(read_record(summary), args.plots):
            print(path)
    return 0


def inspect_lines(record) -> list[str]:
    """`deform inspect` text for hunt summaries and per-start records."""
    meta = record.meta
    if record.attrs.get("kind") == "hunt":
        return list(meta.get("report", []))
    res = record.table("result")
    lines = [f"hunt start {meta.get('index')} ({meta.get('family')}, keep "
             f"{', '.join(meta.get('keep', []))}): {record.rows('steps')} logged steps"]
    for _, kind, message in record.events():
        if kind == "stop":
            data = json.loads(message)
            lines.append(f"verdict: {data['reason']}")
    if record.rows("result"):
        lines.append(f"mismatch {res['mismatch'][0]:.3e}, distance D = {res['distance'][0]:.4f}")
        lines.append(f"  {'invariant':<24} {'shape A':>16} {'shape B':>16} {'rel. diff':>10}")
        for lbl, va, vb in zip(meta.get("labels", []), res["values_a"][0], res["values_b"][0]):
            rel = abs(va - vb) / max(abs(va), abs(vb), 1e-300)
            lines.append(f"  {lbl:<24} {va:>16.10g} {vb:>16.10g} {rel:>10.2e}")
    return lines


def plot_hunt_record(record, directory=None) -> list[Path]:
    """Best pair overlaid (aligned only by centroid) with mismatch bars; one start or a summary."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from .record import read_record

    target = Path(record.path)
    directory = Path(directory) if directory else target.with_name(target.stem + "_plots")
    directory.mkdir(parents=True, exist_ok=True)
    if record.attrs.get("kind") == "hunt":
        ranking = record.table("ranking")
        if not record.rows("ranking"):
            return []
        start = read_record(ranking["record"][0].decode()) if ranking["record"][0] else None
        if start is None:
            return []
        record = start
    res, meta = record.table("result"), record.meta
    if not record.rows("result"):
        return []
    fig, axes = plt.subplots(1, 2, figsize=(11, 4.8))
    for key, style, name in (("boundary_a", "C0-", "A"), ("boundary_b", "C3-", "B")):
        b = res[key][0]
        b = np.vstack([b, b[:1]]) - b.mean(axis=0)
        axes[0].plot(b[:, 0], b[:, 1], style, lw=1.5, label=f"shape {name}")
    axes[0].set_aspect("equal")
    axes[0].legend()
    axes[0].set_title(f"pair: D = {res['distance'][0]:.4f}, mismatch {res['mismatch'][0]:.2e}")
    va, vb = res["values_a"][0], res["values_b"][0]
    rel = np.abs(va - vb) / np.maximum(np.maximum(np.abs(va), np.abs(vb)), 1e-300)
    labels = meta.get("labels", [str(i) for i in range(va.size)])
    axes[1].bar(np.arange(rel.size), np.maximum(rel, 1e-18))
    axes[1].set_yscale("log")
    axes[1].set_xticks(np.arange(rel.size), labels, rotation=60, ha="right", fontsize=7)
    axes[1].set_ylabel("relative mismatch |f_A − f_B| / max")
    axes[1].set_title("kept invariants")
    out = directory / "pair.png"
    fig.savefig(out, dpi=110, bbox_inches="tight")
    plt.close(fig)
    written = [out]
    steps = record.table("steps")
    if record.rows("steps"):
        fig, ax = plt.subplots(figsize=(6.5, 4))
        ax.semilogy(steps["step"], np.maximum(steps["mismatch"], 1e-18), "C0.-", label="mismatch")
        ax2 = ax.twinx()
        ax2.plot(steps["step"], steps["distance"], "C3.-", label="distance D")
        ax2.axhline(meta.get("floor", 0.0), color="C3", ls=":")
        ax.set_xlabel("step")
        ax.set_ylabel("max relative mismatch")
        ax2.set_ylabel("distance D")
        ax.set_title("pair hunt progress")
        out = directory / "progress.png"
        fig.savefig(out, dpi=110, bbox_inches="tight")
        plt.close(fig)
        written.append(out)
    return written
