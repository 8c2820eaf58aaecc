"""Reviewing records: `deform inspect` (config, summary, per-step table) and `deform plot` (PNGs).

Works on any record in the :mod:`deform.record` format; search records (tables ``steps``,
``rejected``, ``events`` with the columns written by :mod:`deform.run`) get the full summary,
other kinds get their scalar columns tabulated.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from .record import Record

DRIFT_FLOOR = 1e-17
"""Relative drifts are drawn on a log scale; exact zeros are shown at this floor."""


def family_drift(record: Record) -> dict[str, np.ndarray]:
    """Per kept family, max |relative residual| of its entries at every accepted step."""
    meta, steps = record.meta, record.table("steps")
    if "residuals" not in steps or not meta.get("kept_families"):
        return {}
    out = {}
    for name in meta["kept_families"]:
        lo, hi = meta["family_slices"][name]
        out[name] = np.max(np.abs(steps["residuals"][:, lo:hi]), axis=1)
    return out


def stop_reason(record: Record) -> tuple[str, str] | None:
    for _, kind, message in reversed(record.events()):
        if kind == "stop":
            data = json.loads(message)
            return data["status"], data["reason"]
    return None


def summary_lines(record: Record) -> list[str]:
    """A few readable lines: steps, why it stopped, how far it moved, how well values held."""
    meta, steps = record.meta, record.table("steps")
    n = record.rows("steps")
    lines = []
    if "distance" not in steps or n == 0:
        return [f"{n} rows in table 'steps'" if n else "no completed steps"]
    last = n - 1
    lines.append(f"{meta.get('mode', '?')} search on the {meta.get('family', '?')} family "
                 f"({meta.get('symmetry', '?')} symmetry, {meta.get('free_parameters', '?')} "
                 f"free parameters): {int(steps['step'][last])} accepted steps, "
                 f"{record.rows('rejected')} rejected attempts")
    reason = stop_reason(record)
    lines.append(f"stopped: {reason[1]} [{reason[0]}]" if reason else
                 "stopped: the run did not finish (killed or still running; --resume continues)")
    lines.append(f"moved: distance from the start shape D = {steps['distance'][last]:.6g} "
                 f"(max {np.max(steps['distance']):.6g})"
                 + (f"; {meta['move_label']} = {steps['move'][last]:.8g}"
                    + (f" (target {meta['move_target']:.8g})"
                       if meta.get("move_target") is not None else "")
                    if meta.get("move_kind") not in (None, "distance") else ""))
    drift = family_drift(record)
    if drift:
        held = ", ".join(f"{name} {np.max(v):.2g}" for name, v in drift.items())
        lines.append(f"kept values held (max relative drift over the path): {held}; "
                     f"at the end {steps['residual'][last]:.2g}")
    if steps.get("invariants") is not None and meta.get("start_values") and n:
        start_perimeter = _value(record, "perimeter:perimeter")
        if start_perimeter is not None:
            lines.append(f"scale: start perimeter {start_perimeter:.6g}, so the shape moved "
                         f"by {steps['distance'][last] / start_perimeter:.3%} of its perimeter "
                         "(distance / perimeter)")
    return lines


def _value(record: Record, label: str):
    labels = record.labels.get("steps", {}).get("invariants", ())
    if label in labels:
        return float(record.table("steps")["invariants"][0, labels.index(label)])
    return None


def step_table(record: Record, limit: int | None = None) -> list[str]:
    """Per-step table of the scalar columns of ``steps`` (plus status names)."""
    steps = record.table("steps")
    names = {int(k): v for k, v in record.meta.get("status_names", {}).items()}
    scalar = [c for c, v in steps.items() if v.ndim == 1 and c not in ("step", "status")]
    order = [c for c in ("residual", "distance", "move", "step_size", "iterations", "null_dim")
             if c in scalar] + sorted(c for c in scalar if c not in (
                 "residual", "distance", "move", "step_size", "iterations", "null_dim"))
    lines = ["  ".join([f"{'step':>6}"] + [f"{c:>12}" for c in order] + ["status"])]
    n = record.rows("steps")
    rows = range(n) if limit is None or n <= limit else list(range(limit // 2)) + [None] + list(
        range(n - limit // 2, n))
    for i in rows:
        if i is None:
            lines.append(f"{'…':>6}")
            continue
        cells = [f"{int(steps['step'][i]):6d}"]
        for c in order:
            v = steps[c][i]
            cells.append(f"{int(v):12d}" if np.issubdtype(v.dtype, np.integer)
                         else f"{float(v):12.5g}")
        status = int(steps["status"][i]) if "status" in steps else 0
        cells.append(names.get(status, str(status)))
        lines.append("  ".join(cells))
    return lines


# Records of other kinds are reviewed by the module that writes them: kind → (module, inspect
# function returning lines, plot function (record, directory) → paths).
REVIEWERS = {
    "rigidity": ("deform.rigidity", "inspect_lines", "plot_scan_record"),
    "hunt": ("deform.hunt", "inspect_lines", "plot_hunt_record"),
    "hunt_start": ("deform.hunt", "inspect_lines", "plot_hunt_record"),
}


def _reviewer(record: Record, which: int):
    import importlib

    entry = REVIEWERS.get(str(record.attrs.get("kind")))
    return None if entry is None else getattr(importlib.import_module(entry[0]), entry[which])


def inspect_text(record: Record, limit: int | None = 60) -> str:
    attrs = record.attrs
    custom = _reviewer(record, 1)
    if custom is not None:
        head = [f"record: {record.path}", f"kind: {attrs.get('kind')}  seed: {attrs.get('seed')}"
                f"  started: {attrs.get('started')}", f"config ({attrs.get('source', '?')}):"]
        head += ["  " + line for line in record.config_text.rstrip().splitlines()]
        return "\n".join(head + ["", "summary:"] + ["  " + line for line in custom(record)])
    versions = record.versions
    out = [f"record: {record.path}",
           f"kind: {attrs.get('kind')}  seed: {attrs.get('seed')}  started: {attrs.get('started')}"
           f"  jax {versions.get('jax', '?')}, isodrum {versions.get('isodrum', '?')}",
           f"config ({attrs.get('source', '?')}):"]
    out += ["  " + line for line in record.config_text.rstrip().splitlines()]
    out += ["", "summary:"] + ["  " + line for line in summary_lines(record)]
    rejected = record.table("rejected")
    if record.rows("rejected"):
        names = {int(k): v for k, v in record.meta.get("status_names", {}).items()}
        counts: dict[str, int] = {}
        for s in rejected["status"]:
            counts[names.get(int(s), str(s))] = counts.get(names.get(int(s), str(s)), 0) + 1
        out.append("  rejected attempts by status: " + ", ".join(
            f"{k} {v}" for k, v in sorted(counts.items())))
    out += ["", "steps:"] + ["  " + line for line in step_table(record, limit)]
    return "\n".join(out)


def plot_record(record: Record, directory: str | Path | None = None) -> list[Path]:
    """Write the review figures as PNGs; returns their paths."""
    custom = _reviewer(record, 2)
    if custom is not None:
        return custom(record, directory)
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    path = Path(record.path)
    directory = Path(directory) if directory else path.with_name(path.stem + "_plots")
    directory.mkdir(parents=True, exist_ok=True)
    steps, n = record.table("steps"), record.rows("steps")
    written = []
    if n == 0:
        return written

    def save(fig, name):
        target = directory / name
        fig.savefig(target, dpi=110, bbox_inches="tight")
        plt.close(fig)
        written.append(target)

    if "boundary" in steps:
        closed = lambda b: np.vstack([b, b[:1]])  # noqa: E731
        fig, (ax, ax2) = plt.subplots(1, 2, figsize=(11, 5.5))
        start, end = closed(steps["boundary"][0]), closed(steps["boundary"][-1])
        ax.plot(start[:, 0], start[:, 1], "k-", lw=1.5, label="start")
        ax.plot(end[:, 0], end[:, 1], "C3-", lw=1.5, label=f"end (step {int(steps['step'][-1])})")
        ax.set_aspect("equal")
        ax.legend(loc="upper right")
        ax.set_title(f"start and end shapes, D = {steps['distance'][-1]:.4g}"
                     if "distance" in steps else "start and end shapes")
        # the same change magnified so that its largest displacement is 10 % of the size
        shift = end - start
        size = np.ptp(start, axis=0).max()
        biggest = np.max(np.linalg.norm(shift, axis=1))
        gain = 0.1 * size / biggest if biggest > 0 else 1.0
        magnified = start + gain * shift
        ax2.plot(start[:, 0], start[:, 1], "k-", lw=1.5, label="start")
        ax2.plot(magnified[:, 0], magnified[:, 1], "C3--", lw=1.5,
                 label=f"start + {gain:.3g} × (end − start)")
        ax2.set_aspect("equal")
        ax2.legend(loc="upper right", fontsize=8)
        ax2.set_title("the change, magnified (same curve parameter)")
        save(fig, "shapes.png")

        fig, ax = plt.subplots(figsize=(5.5, 5.5))
        picks = np.unique(np.linspace(0, n - 1, min(n, 12)).astype(int))
        cmap = plt.get_cmap("viridis")
        for j, i in enumerate(picks):
            b = closed(steps["boundary"][i])
            ax.plot(b[:, 0], b[:, 1], color=cmap(j / max(len(picks) - 1, 1)), lw=1.0)
        ax.set_aspect("equal")
        ax.set_title(f"path of shapes (steps 0 to {int(steps['step'][-1])}, dark to light)")
        save(fig, "path.png")

    drift = family_drift(record)
    if drift:
        fig, ax = plt.subplots(figsize=(7, 4))
        for name, values in drift.items():
            ax.semilogy(steps["step"], np.maximum(values, DRIFT_FLOOR), marker=".", label=name)
        ax.set_xlabel("step")
        ax.set_ylabel("max |relative drift|")
        ax.set_title("drift of each kept family")
        ax.legend(fontsize=8)
        save(fig, "drift.png")

    if "distance" in steps:
        fig, axes = plt.subplots(2, 1, figsize=(7, 5.5), sharex=True)
        axes[0].plot(steps["step"], steps["distance"], "C0.-")
        axes[0].set_ylabel("distance D from start")
        if record.meta.get("move_kind") == "distance" and "step_size" in steps:
            # the moved quantity is D itself: show the adaptive step length instead
            axes[1].semilogy(steps["step"][1:], steps["step_size"][1:], "C1.-")
            axes[1].set_ylabel("step length (weighted)")
        else:
            axes[1].plot(steps["step"], steps["move"], "C1.-")
            axes[1].set_ylabel(record.meta.get("move_label", "move objective"))
        if record.meta.get("move_target") is not None:
            axes[1].axhline(record.meta["move_target"], color="k", ls=":", label="target")
            axes[1].legend()
        axes[1].set_xlabel("step")
        axes[0].set_title("distance from the start and the move per step")
        save(fig, "distance.png")
    return written
