"""`deform run`: one search, from a parsed config to one HDF5 record, with progress lines.

A run is a pure function of the config and its seed. Each accepted step is one row of the
``steps`` table (row 0 is the start shape) and carries the whole :class:`SearchState`
flattened, so ``--resume`` restarts from the last committed row and replays the remaining
steps exactly. Rejected attempts go to the ``rejected`` table, never to ``steps``.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Callable

import jax
import numpy as np

from objectives.status import Status

from .errors import ConfigError, ShapeError
from .families import ShapeFamily
from .record import Column, open_writer, provenance, read_record, resume_rows
from .search import (Prepared, StepInfo, boundary_sampler, build_problem, distance_meter,
                     evaluator_data,
                     flatten_state, prepare, recheck, unflatten_state)
from .searchspec import InvariantOptions, SearchSpec

STOP_KINDS = ("stop", "summary")


def _tables(prepared: Prepared, spec: SearchSpec) -> dict[str, dict[str, Column]]:
    problem, state = prepared.problem, prepared.state
    n, m = problem.start.size, len(problem.labels)
    kept = problem.labels[:problem.n_kept]
    steps = {
        "step": Column((), "i8", (), "accepted steps so far (0 = start shape)"),
        "params": Column((n,), "f8", problem.family.param_labels, "free shape parameters"),
        "boundary": Column((spec.boundary_points, 2), "f8", ("x", "y"),
                           "boundary points at equispaced curve parameters"),
        "invariants": Column((m,), "f8", problem.labels, "every tracked invariant"),
        "residuals": Column((problem.n_kept,), "f8", kept,
                            "(kept − start)/scale, relative mismatch of each kept value"),
        "residual": Column((), "f8", (), "max |relative residual| of the kept values"),
        "move": Column((), "f8", (), f"moved quantity: {problem.move_label}"),
        "distance": Column((), "f8", (), "isometry-invariant distance D from the start"),
        "step_size": Column((), "f8", (), "length of the step taken"),
        "iterations": Column((), "i4", (), "corrector iterations (continuation)"),
        "null_dim": Column((), "i4", (), "dimension of the kept Jacobian's null space"),
        "status": Column((), "i4", (), "objectives.status.Status value"),
        "family_status": Column((len(problem.names),), "i4", problem.names,
                                "status of each tracked invariant family"),
        "state": Column((flatten_state(state).size,), "f8", (),
                        "flattened search state after this step (for --resume)"),
    }
    for name, data in evaluator_data(problem, state).items():
        steps[f"data_{name}"] = Column((data.size,), "f8", (), f"warm state of {name} "
                                       "(e.g. the tracked orbits, shared by pooled orbit "
                                       "families), flattened")
    rejected = {
        "step": Column((), "i8", (), "step that was being attempted"),
        "params": Column((n,), "f8", problem.family.param_labels, "rejected candidate"),
        "residual": Column((), "f8"), "move": Column((), "f8"), "distance": Column((), "f8"),
        "step_size": Column((), "f8"), "iterations": Column((), "i4"),
        "status": Column((), "i4", (), "why it was rejected"),
        "family_status": Column((len(problem.names),), "i4", problem.names),
    }
    return {"steps": steps, "rejected": rejected}


def _meta(prepared: Prepared, spec: SearchSpec, steps_limit: int) -> dict:
    problem = prepared.problem
    offsets, start = {}, 0
    for name, ev in zip(problem.names, problem.evaluators):
        offsets[name] = [start, start + len(ev.labels)]
        start += len(ev.labels)
    return {
        "mode": spec.mode, "family": problem.family.name,
        "symmetry": problem.family.symmetry.describe(),
        "free_parameters": problem.start.size, "kept_families": list(problem.names[
            :problem.n_kept_families]), "tracked_families": list(problem.names),
        "family_slices": offsets, "n_kept": problem.n_kept,
        "move_kind": problem.move_kind, "move_label": problem.move_label,
        "move_target": problem.move_target if problem.move_kind != "distance" else None,
        "rank": prepared.rank, "singular_values": [float(s) for s in prepared.singular_values],
        "steps_limit": steps_limit, "start_values": [float(v) for v in prepared.start_values],
    }


def _row(prepared: Prepared, sample, state, info: StepInfo) -> dict:
    problem = prepared.problem
    row = {
        "step": int(state.step), "params": np.asarray(state.params),
        "boundary": sample(state.params),
        "invariants": info.values, "residuals": info.residuals, "residual": info.residual,
        "move": info.move, "distance": info.distance, "step_size": info.step_size,
        "iterations": info.iterations, "null_dim": info.null_dim, "status": info.status,
        "family_status": info.family_status, "state": flatten_state(state),
    }
    for name, data in evaluator_data(problem, state).items():
        row[f"data_{name}"] = data
    return row


def _start_info(prepared: Prepared) -> StepInfo:
    problem = prepared.problem
    values = prepared.start_values
    move = 0.0 if problem.move_kind == "distance" else (
        problem.start[problem.move_index] if problem.move_kind == "coefficient"
        else values[problem.move_index])
    status = int(np.max(prepared.start_status)) if prepared.start_status.size else 0
    return StepInfo(True, status, prepared.start_status, problem.start, values,
                    np.zeros(problem.n_kept), 0.0, move, 0.0, 0.0, 0,
                    problem.start.size - prepared.rank)


def _line(step, info: StepInfo, note: str = "") -> str:
    name = Status(int(info.status)).name
    if bool(info.accepted):
        return (f"{step:6d}  {float(info.residual):10.2e}  {float(info.distance):10.5f}  "
                f"{float(info.move):12.6g}  {float(info.step_size):9.2e}  {name}{note}")
    return (f"{'-':>6}  {float(info.residual):10.2e}  {float(info.distance):10.5f}  "
            f"{float(info.move):12.6g}  {float(info.step_size):9.2e}  rejected: {name}{note}")


HEADER = f"{'step':>6}  {'residual':>10}  {'distance':>10}  {'move':>12}  {'step':>9}  status"


def run_search(family: ShapeFamily, spec: SearchSpec, options: InvariantOptions, *,
               config_text: str, source: str, output: str | Path, resume: bool = False,
               steps: int | None = None, progress: Callable[[str], None] = print) -> Path:
    """Run (or resume) a search and write its record; returns the record path."""
    output = Path(output)
    limit = spec.steps if steps is None else steps
    problem = build_problem(family, spec, options)
    _check_start(problem)
    prepared = prepare(problem, spec, identity=f"{config_text}\n{spec!r}\n{options!r}")
    tables = _tables(prepared, spec)
    sample = boundary_sampler(problem, spec.boundary_points)
    meter = distance_meter(problem)

    def measured(info: StepInfo) -> StepInfo:
        distance = meter(info.params)
        move = distance if problem.move_kind == "distance" else info.move
        return info._replace(distance=distance, move=move)
    state, initial = prepared.state, None
    if resume:
        old = read_record(output)
        if old.config_text != config_text:
            raise ConfigError(f"--resume: {output} was recorded from a different config "
                              "(the config text must be identical)")
        done = old.table("steps")
        if old.rows("steps") == 0:
            raise ConfigError(f"--resume: {output} holds no completed step")
        last = int(done["step"][-1])
        state = unflatten_state(prepared.state, done["state"][-1])
        initial = resume_rows(old, last_step=last)
        ev = initial.get("events", {})
        if ev:
            keep = np.array([k.decode() not in STOP_KINDS for k in ev["kind"]], dtype=bool)
            initial["events"] = {c: v[keep] for c, v in ev.items()}
        attrs = dict(old.attrs)
        progress(f"resuming {output} after step {last}")
    else:
        attrs = provenance(f"search/{spec.mode}", config_text, source, spec.seed,
                           _meta(prepared, spec, limit))
    n = problem.start.size
    with open_writer(output, attrs, tables, initial=initial) as writer:
        kept_names = ", ".join(problem.names[:problem.n_kept_families])
        progress(f"{spec.mode} search: {family.name} family, {n} free parameters, "
                 f"{problem.n_kept} kept values ({kept_names}), rank {prepared.rank}; "
                 f"moving {problem.move_label}")
        stop = None
        if not resume:
            writer.append("steps", _row(prepared, sample, state, _start_info(prepared)))
            stop = _start_problem(prepared, spec)
        progress(HEADER)
        while stop is None and int(state.step) < limit:
            new_state, info = prepared.update(prepared.ctx, state)
            info = measured(jax.device_get(info))
            if bool(info.accepted):
                state = new_state
                note, reports = "", []
                due = spec.recheck_every and int(state.step) % spec.recheck_every == 0
                if due or int(state.step) == limit:
                    state, reports = recheck(problem, state, prepared.linearize)
                writer.append("steps", _row(prepared, sample, state, info))
                progress(_line(int(state.step), info, note))
                bad = [(name, st) for name, st in reports if st != Status.ok]
                if bad:
                    stop = (bad[0][1], f"recheck of {bad[0][0]}: {bad[0][1].message}")
                elif problem.move_kind != "distance" and abs(
                        float(info.move) - problem.move_target) <= problem.move_tolerance and (
                        spec.mode == "continuation"
                        or float(info.residual) <= spec.penalty.tolerance):
                    stop = (Status.ok, f"target reached: {problem.move_label} = "
                                       f"{float(info.move):.8g}")
                elif spec.mode == "continuation" and float(
                        state.step_size) < spec.continuation.min_step:
                    stop = (Status.ok, f"stalled: {problem.move_label} no longer improves "
                            f"(= {float(info.move):.8g}); a local extremum along the shapes "
                            "that keep the kept values")
            else:
                writer.append("rejected", {
                    "step": int(state.step) + 1, "params": info.params,
                    "residual": info.residual, "move": info.move, "distance": info.distance,
                    "step_size": info.step_size, "iterations": info.iterations,
                    "status": info.status, "family_status": info.family_status})
                state = new_state
                progress(_line(int(state.step), info))
                too_small = spec.mode == "continuation" and float(
                    state.step_size) < spec.continuation.min_step
                if int(state.rejections) > spec.max_retries or too_small:
                    status = Status(int(info.status))
                    stop = (status, f"cannot continue after {int(state.rejections)} rejected "
                                    f"attempts (last: {status.message}); the step size fell to "
                                    f"{float(state.step_size):.3g}")
        if stop is None:
            stop = (Status.ok, f"reached the step limit ({limit} steps)")
        writer.event(int(state.step), "stop", json.dumps(
            {"status": stop[0].name, "reason": stop[1]}))
    return output


def _check_start(problem) -> None:
    """Impossible constraints at the start shape are configuration errors, not failed steps."""
    from objectives.geometry import convexity_margin

    from .search import constraint_status

    status = Status(int(jax.jit(lambda x: constraint_status(problem, x))(problem.start)))
    if status == Status.not_convex:
        kmin = float(convexity_margin(problem.curve(problem.start))[0])
        raise ConfigError(f"search.convex: the start shape is not convex (min curvature "
                          f"{kmin:.4g}), so convexity cannot be kept")
    if status != Status.ok:
        raise ShapeError(f"shape rejected: {status.message}")


def _start_problem(prepared: Prepared, spec: SearchSpec):
    """A reason not to take any step: bad start shape, full column rank, target reached."""
    problem = prepared.problem
    status = Status(int(np.max(prepared.start_status))) if prepared.start_status.size else Status.ok
    if status != Status.ok:
        bad = [n for n, s in zip(problem.names, prepared.start_status) if s != 0]
        return (status, f"the start shape fails {bad[0]}: {status.message}")
    n = problem.start.size
    if prepared.rank >= n:
        return (Status.degenerate, f"cannot move: the {problem.n_kept} kept values have a "
                f"Jacobian of full column rank {prepared.rank} = {n} free parameters in this "
                "shape class, so they determine the shape locally")
    if problem.move_kind != "distance":
        info = _start_info(prepared)
        if abs(float(info.move) - problem.move_target) <= problem.move_tolerance:
            return (Status.ok, f"target already reached at the start ({problem.move_label})")
    return None
