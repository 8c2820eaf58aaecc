"""Shape families, configs, searches, records and the `deform` command line."""

__version__ = "0.1.0"

from .families import Disk, Ellipse, FourierCurve, Polar, ShapeFamily, Support  # noqa: E402
from .shape import (Shape, from_family, reflected, reparametrized, rotated, scaled,  # noqa: E402
                    translated)
from .symmetry import Symmetry  # noqa: E402

__all__ = ["Disk", "Ellipse", "FourierCurve", "Polar", "ShapeFamily", "Support", "Shape",
           "Symmetry", "from_family", "reflected", "reparametrized", "rotated", "scaled",
           "translated"]
