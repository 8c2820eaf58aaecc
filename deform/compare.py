"""`deform compare A B`: are two drums distinguishable by their first N eigenvalues?

A and B are shape configs (TOML with a [shape] table) or run records (HDF5; the shape at
the last recorded step, or ``--step``). For each j the relative difference
δ_j = (λ_j^B − λ_j^A)/λ_j^A is set against the combined a posteriori error bar
ε_j = (e_j^A + e_j^B)/λ_j^A. The verdict is "distinguishable" when some |δ_j| exceeds
``--sigma`` (default 10) error bars, and otherwise "not distinguishable at this accuracy".
The isometry-invariant shape distance D(A, B) (objectives.distance) says how different the
shapes themselves are.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import dataclass
from pathlib import Path

import jax.numpy as jnp
import numpy as np

from objectives.distance import shape_distance
from objectives.spectrum import BOUNDARIES, Spectrum

from .arguments import positive_int
from .eigen import spectrum_of
from .errors import ConfigError
from .shape import Shape


@dataclass(frozen=True)
class Comparison:
    boundary: str
    first: Spectrum
    second: Spectrum
    relative_difference: np.ndarray
    relative_error_bar: np.ndarray
    distance: float
    sigma: float

    @property
    def significance(self) -> np.ndarray:
        """|δ_j| in units of the combined error bar."""
        return np.abs(self.relative_difference) / np.maximum(self.relative_error_bar, 1e-300)

    @property
    def distinguishable(self) -> bool:
        return bool(np.any(self.significance > self.sigma))

    @property
    def verdict(self) -> str:
        if not self.distinguishable:
            worst = float(np.max(np.abs(self.relative_difference), initial=0.0))
            return (f"not distinguishable at this accuracy: all {len(self.relative_difference)} "
                    f"eigenvalues agree within {self.sigma:g} error bars (max |δ| = {worst:.2e})")
        j = int(np.argmax(self.significance))
        index = j + (0 if self.boundary == "neumann" else 1)
        return (f"distinguishable: λ_{index} differs by {self.relative_difference[j]:+.3e} "
                f"relative, {self.significance[j]:.3g} error bars")


def compare_spectra(first: Shape, second: Shape, count: int, boundary: str = "dirichlet",
                    sigma: float = 10.0) -> Comparison:
    a = spectrum_of(first, count, boundary)
    b = spectrum_of(second, count, boundary)
    n = min(len(a.values), len(b.values))
    scale = np.maximum(np.abs(a.values[:n]), 1e-300)
    diff = np.where(a.values[:n] == 0, 0.0, (b.values[:n] - a.values[:n]) / scale)
    bar = np.where(a.values[:n] == 0, np.inf, (a.errors[:n] + b.errors[:n]) / scale)
    distance = float(shape_distance(first.curve(), second.curve()))
    return Comparison(boundary, a, b, diff, bar, distance, sigma)


def load_shape(path: str, step: int | None = None) -> Shape:
    """A shape from a TOML config or from a run record (HDF5) at ``step`` (default: last)."""
    from .config import load_config, parse_config
    from .shape import from_family
    from .validate import require_admissible

    if Path(path).suffix.lower() in (".h5", ".hdf5"):
        from .record import read_record

        record = read_record(path)
        config = parse_config(record.config_text, f"{path} (stored config)")
        steps = record.table("steps")
        if config.shape is None or "params" not in steps or record.rows("steps") == 0:
            raise ConfigError(f"{path}: the record holds no shape parameters")
        rows = steps["params"][: record.rows("steps")]
        if step is None:
            row = rows[-1]
        else:
            where = np.flatnonzero(steps["step"][: len(rows)] == step)
            if where.size == 0:
                raise ConfigError(f"--step: {path} has no step {step}")
            row = rows[where[0]]
        shape = Shape(config.shape, jnp.asarray(row, dtype=jnp.float64))
    else:
        config = load_config(path)
        if config.shape is None:
            raise ConfigError(f"{path}: shape: missing (the config needs a [shape] table)")
        shape = from_family(config.shape)
    require_admissible(shape)
    return shape


def compare_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("first", help="shape config (TOML) or run record (HDF5)")
    p.add_argument("second", help="shape config (TOML) or run record (HDF5)")
    p.add_argument("--eigenvalues", type=positive_int, default=20, metavar="N",
                   help="number of eigenvalues to compare (default 20)")
    p.add_argument("--boundary", choices=BOUNDARIES, default="dirichlet",
                   help="boundary condition (default dirichlet)")
    p.add_argument("--sigma", type=float, default=10.0,
                   help="error bars a difference must exceed to count (default 10)")
    p.add_argument("--step", type=int, default=None,
                   help="record step to take the shape from (default: the last)")
    p.add_argument("--json", action="store_true", help="print one JSON object")



def compare_run(args: argparse.Namespace) -> int:
    if not args.sigma > 0:
        raise ConfigError(f"--sigma: expected a positive number, got {args.sigma}")
    first, second = load_shape(args.first, args.step), load_shape(args.second, args.step)
    result = compare_spectra(first, second, args.eigenvalues, args.boundary, args.sigma)
    offset = 0 if args.boundary == "neumann" else 1
    if args.json:
        print(json.dumps({
            "boundary": args.boundary,
            "first": {"eigenvalues": result.first.values.tolist(),
                      "errors": result.first.errors.tolist(), "status": result.first.status.name},
            "second": {"eigenvalues": result.second.values.tolist(),
                       "errors": result.second.errors.tolist(),
                       "status": result.second.status.name},
            "relative_difference": result.relative_difference.tolist(),
            "relative_error_bar": [float(x) if np.isfinite(x) else None
                                   for x in result.relative_error_bar],
            "shape_distance": result.distance,
            "distinguishable": result.distinguishable,
            "verdict": result.verdict,
        }, allow_nan=False))
        return 0
    print(f"{args.first} vs {args.second}: {args.boundary} eigenvalues, "
          f"isometry-invariant shape distance D = {result.distance:.6g}")
    print(f"  {'j':>3}  {'λ_j (first)':>20}  {'λ_j (second)':>20}  {'δ_j':>11}  {'error bar':>9}")
    for j in range(len(result.relative_difference)):
        print(f"  {j + offset:>3}  {result.first.values[j]:>20.13f}  "
              f"{result.second.values[j]:>20.13f}  {result.relative_difference[j]:>+11.3e}  "
              f"{result.relative_error_bar[j]:>9.1e}")
    for name, spec in (("first", result.first), ("second", result.second)):
        if spec.status.name != "ok":
            print(f"  warning: {name} spectrum status {spec.status.name}: {spec.message}")
    print(f"verdict: {result.verdict}")
    return 0
