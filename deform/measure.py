"""`deform measure`: the invariants of one shape as a readable table or a JSON object.

A report is built from sections; each section is a function ``(shape, options) -> dict``
of JSON-ready values plus a list of table rows. Capabilities add a section to SECTIONS.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial
from typing import Callable

import jax
import jax.numpy as jnp
import numpy as np

from objectives import geometry

from . import birkhoff_report, orbit_report
from .eigen import eigenvalue_section
from .shape import Shape


@dataclass(frozen=True)
class MeasureOptions:
    resolution: int = 256
    eigenvalues: int = 0            # > 0: add the first N Laplace eigenvalues
    boundary: str = "dirichlet"     # boundary condition for the eigenvalue section
    max_period: int = 7             # periodic orbits p/q with q ≤ max_period (< 2: no orbit sections)


@dataclass(frozen=True)
class Section:
    name: str
    compute: Callable[[Shape, MeasureOptions], tuple[dict, list[tuple[str, str]]]]
    enabled: Callable[[MeasureOptions], bool] = lambda options: True


def _fmt(x: float) -> str:
    return f"{x:.12g}"


@partial(jax.jit, static_argnums=1)
def _geometry_numbers(shape: Shape, n: int):
    curve = shape.curve()
    return {
        "area": geometry.area(curve, n),
        "perimeter": geometry.perimeter(curve, n),
        "centroid": geometry.centroid(curve, n),
        "curvature_moments": jnp.stack([geometry.curvature_moment(curve, k, n) for k in (1, 2, 3, 4)]),
        "convexity": geometry.convexity_margin(curve, n),
        "simplicity": geometry.simplicity(curve, n),
        "decay": geometry.fourier_decay_rate(curve, n),
    }


def geometry_section(shape: Shape, options: MeasureOptions):
    g = jax.tree_util.tree_map(np.asarray, _geometry_numbers(shape, options.resolution))
    min_k, t_min = float(g["convexity"][0]), float(g["convexity"][1])
    simple = g["simplicity"]
    data = {
        "area": float(g["area"]),
        "perimeter": float(g["perimeter"]),
        "centroid": [float(v) for v in g["centroid"]],
        "curvature_integrals": {f"k{n}": float(v) for n, v in zip((1, 2, 3, 4), g["curvature_moments"])},
        "min_curvature": min_k,
        "min_curvature_at": t_min,
        "convex": bool(min_k > 0),
        "simplicity_margin": float(simple.margin),
        "fourier_decay_rate": float(g["decay"]),
    }
    rows = [
        ("area", _fmt(data["area"])),
        ("perimeter", _fmt(data["perimeter"])),
        ("centroid", f"({data['centroid'][0]:.6g}, {data['centroid'][1]:.6g})"),
        ("∮κ ds / 2π", _fmt(data["curvature_integrals"]["k1"] / (2 * np.pi))),
        ("∮κ² ds", _fmt(data["curvature_integrals"]["k2"])),
        ("∮κ³ ds", _fmt(data["curvature_integrals"]["k3"])),
        ("min κ (at t)", f"{min_k:.8g} (t = {t_min:.4f}) {'convex' if min_k > 0 else 'NOT convex'}"),
        ("chord-arc margin", f"{data['simplicity_margin']:.6g}"),
        ("Fourier decay rate σ", f"{data['fourier_decay_rate']:.4g}"),
    ]
    return data, rows


SECTIONS: list[Section] = [Section("geometry", geometry_section),
                           Section("eigenvalues", eigenvalue_section,
                                   lambda options: options.eigenvalues > 0)]

_with_orbits = lambda options: options.max_period >= 2  # noqa: E731
SECTIONS += [Section("bouncing balls", orbit_report.bouncing_balls_section, _with_orbits),
             Section("periodic orbits", orbit_report.orbits_section, _with_orbits),
             Section("wave trace", orbit_report.wave_section, _with_orbits),
             Section("class hypotheses", orbit_report.hypotheses_section, _with_orbits)]
SECTIONS += [Section("birkhoff", birkhoff_report.birkhoff_section, _with_orbits)]


def measure(shape: Shape, options: MeasureOptions = MeasureOptions()):
    """All enabled sections: (merged JSON dict, list of (section, rows))."""
    report, tables = {}, []
    for section in SECTIONS:
        if section.enabled(options):
            data, rows = section.compute(shape, options)
            report.update(data)
            tables.append((section.name, rows))
    return report, tables


def format_tables(header: str, tables) -> str:
    width = max([len(k) for _, rows in tables for k, _ in rows] + [10])
    lines = [header]
    for name, rows in tables:
        lines.append(f"\n[{name}]")
        lines.extend(f"  {k:<{width}}  {v}" for k, v in rows)
    return "\n".join(lines)
