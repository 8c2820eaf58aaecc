"""Admissibility of a shape as a domain: simple, positively oriented, family constraints."""

from __future__ import annotations

import jax
import numpy as np

from objectives.geometry import simplicity

from .errors import ShapeError
from .shape import Shape

SIMPLICITY_FLOOR = 1e-3
"""Chord–arc margins below this are treated as touching (common practice: a curve that
comes within 0.1 % of its arclength separation of itself is numerically non-simple)."""


def problems(shape: Shape, resolution: int = 512) -> list[str]:
    """Reasons why ``shape`` is not an admissible domain; empty if it is."""
    found = list(shape.family.admissibility(shape.params))
    if found:
        return found
    simple = jax.jit(simplicity, static_argnums=1)(shape.curve(), resolution)
    margin = float(simple.margin)
    if bool(simple.crossing) or not np.isfinite(margin) or margin < SIMPLICITY_FLOOR:
        p = jax.vmap(shape.curve())(np.array([float(simple.t_first), float(simple.t_second)]))
        found.append(
            "not a simple closed curve: the boundary meets itself near "
            f"t = {float(simple.t_first):.4f} (x, y = {p[0, 0]:.4f}, {p[0, 1]:.4f}) and "
            f"t = {float(simple.t_second):.4f} (x, y = {p[1, 0]:.4f}, {p[1, 1]:.4f}); "
            f"chord-arc margin {margin:.3g}")
    return found


def require_admissible(shape: Shape, resolution: int = 512) -> None:
    found = problems(shape, resolution)
    if found:
        raise ShapeError(f"shape rejected: {found[0]}")
