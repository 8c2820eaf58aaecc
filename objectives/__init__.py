"""Pure mathematics on closed planar curves: geometry, orbits, trace invariants, spectra.

Nothing here imports from ``deform``. Every function takes an :class:`objectives.Curve`.
"""

from .curve import DEFAULT_RESOLUTION, Curve, sample, taylor
from .distance import shape_distance
from .geometry import (area, boundary_graph, centroid, convexity_margin, curvature, curvature_jet,
                       curvature_moment, fourier_decay_rate, perimeter, simplicity)

__all__ = ["DEFAULT_RESOLUTION", "Curve", "sample", "taylor", "shape_distance", "area",
           "boundary_graph", "centroid", "convexity_margin", "curvature", "curvature_jet",
           "curvature_moment", "fourier_decay_rate", "perimeter", "simplicity"]
