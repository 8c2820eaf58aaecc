"""Laplace eigenvalues for users: the `measure` section and the searchable invariant families.

Families ``eigenvalues_dirichlet`` / ``eigenvalues_neumann`` keep or move the first
``count`` eigenvalues (Neumann counts λ₀ = 0). Clusters of (nearly) equal eigenvalues are
replaced by their mean, which stays differentiable when a symmetric shape splits them.
The node count is chosen once by ``init`` (``resolution = 0``) or fixed by the option.
"""

from __future__ import annotations

import numpy as np

from objectives.curve import Curve
from objectives.spectrum import (BOUNDARIES, Spectrum, eigenvalues, make_eigenvalue_function,
                                 probed_resolution)

from .errors import ConfigError
from .invariants import Evaluator, InvariantFamily, register
from .shape import Shape


def spectrum_of(shape: Shape, count: int, boundary: str) -> Spectrum:
    """First ``count`` eigenvalues of a shape; ConfigError on bad arguments."""
    if boundary not in BOUNDARIES:
        raise ConfigError(f"--boundary: expected one of {', '.join(BOUNDARIES)}, got {boundary!r}")
    if count < 1:
        raise ConfigError(f"--eigenvalues: expected a positive integer, got {count}")
    return eigenvalues(shape.curve(), count, boundary)


def eigenvalue_section(shape: Shape, options):
    """`deform measure --eigenvalues N [--boundary B]`: values ascending with multiplicity."""
    spec = spectrum_of(shape, options.eigenvalues, options.boundary)
    b = options.boundary
    data = {
        "eigenvalues": {b: [float(v) for v in spec.values]},
        "eigenvalue_errors": {b: [float(e) for e in spec.errors]},
        "eigenvalue_multiplicities": {b: [int(m) for m in spec.multiplicities]},
        "eigenvalue_status": {b: spec.status.name},
    }
    rows = [("boundary condition", b),
            ("status", spec.status.name + (f" ({spec.message})" if spec.message else "")),
            ("boundary nodes", str(spec.nodes.size)),
            ("Weyl mean N̄(λ_max) vs count", f"{spec.weyl_mean:.3f} vs {len(spec.values)}")]
    first = 0 if b == "neumann" else 1
    for j, (v, e, m) in enumerate(zip(spec.values, spec.errors, spec.multiplicities), start=first):
        rows.append((f"λ_{j}", f"{v:.14g}  ± {e:.1e}" + (f"  [cluster of {m}]" if m > 1 else "")))
    return data, rows


def _build(boundary: str):
    def make(count: int = 10, resolution: int = 0) -> Evaluator:
        if not (isinstance(count, int) and count >= 1):
            raise ConfigError(f"invariants.eigenvalues_{boundary}.count: expected a positive "
                              f"integer, got {count!r}")
        if not (isinstance(resolution, int) and resolution >= 0 and resolution % 2 == 0):
            raise ConfigError(f"invariants.eigenvalues_{boundary}.resolution: expected 0 (auto) "
                              f"or an even positive integer, got {resolution!r}")
        chosen = {"resolution": resolution}
        first = 0 if boundary == "neumann" else 1
        labels = tuple(f"λ{boundary[0].upper()}_{j}" for j in range(first, first + count))
        functions = {}

        def init(curve: Curve):
            if not chosen["resolution"]:
                # a margin above the probed count, so the deformed shapes stay resolved
                chosen["resolution"] = 2 * int(np.ceil(0.6 * probed_resolution(
                    curve, count, boundary)))
            return None

        def evaluate(curve: Curve, state):
            if not chosen["resolution"]:
                init(curve)
            key = (curve.fn, chosen["resolution"])
            if key not in functions:
                functions[key] = make_eigenvalue_function(curve.fn, count, boundary,
                                                          chosen["resolution"])
            values, status = functions[key](curve.params)
            return values, state, status

        return Evaluator(labels, init, evaluate)

    return make


for _boundary in BOUNDARIES:
    register(InvariantFamily(
        f"eigenvalues_{_boundary}",
        f"first `count` {_boundary.capitalize()} Laplace eigenvalues (cluster means), boundary "
        "integral equations, Hadamard shape gradients",
        _build(_boundary), (("count", 10), ("resolution", 0))))
