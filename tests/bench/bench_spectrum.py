"""Benchmark: boundary-integral eigenvalues vs a finite-element route, measured side by side.

Shape: an invented 16-mode analytic star-shaped drum r(θ) = 1 + Σ_{k=2}^{16} a_k cos(kθ + φ_k),
a_k = 0.12 e^{−0.3k}. Prints
  1. the first 50 Dirichlet eigenvalues by the boundary-integral engine (time, eigenvalues/s,
     largest a posteriori relative error, agreement with a run on 3/2 the nodes);
  2. scikit-fem (isoparametric P2 triangles, ARPACK shift-invert) on refined meshes until all
     50 agree with (1) to 1e-5 relative (time per level);
  3. the cost of the engine for the first N = 50, 100, 200, 400 eigenvalues.
Run: .venv/bin/python tests/bench/bench_spectrum.py [max N, default 400]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import jax.numpy as jnp
import numpy as np

from deform.runtime import configure_jax

MODES = 16
RNG = np.random.default_rng(16)
AMPLITUDE = 0.12 * np.exp(-0.3 * np.arange(2, MODES + 1))
PHASE = RNG.uniform(0, 2 * np.pi, MODES - 1)
COS = np.concatenate([[0.0], AMPLITUDE * np.cos(PHASE)])  # a_k cos φ_k, k = 1..16
SIN = np.concatenate([[0.0], -AMPLITUDE * np.sin(PHASE)])


def boundary(p, t):
    k = jnp.arange(1, MODES + 1)
    r = 1.0 + jnp.sum(p[:MODES] * jnp.cos(k * t)) + jnp.sum(p[MODES:] * jnp.sin(k * t))
    return r * jnp.stack([jnp.cos(t), jnp.sin(t)])


def fem_dirichlet(nrefs: int, count: int):
    """The finite-element reference of tests/test_spectrum.py on this drum: (eigenvalues, dofs)."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from test_spectrum import fem_dirichlet as reference

    return reference(COS[:MODES], SIN[:MODES], nrefs, count)


def main(max_count: int = 400) -> None:
    configure_jax()
    from objectives.curve import Curve
    from objectives.spectrum import eigenvalues, solve
    from objectives.spectrum.api import nodes_of
    from objectives.spectrum.threads import single_blas_thread

    curve = Curve(boundary, jnp.asarray(np.concatenate([COS, SIN])))
    eigenvalues(curve, 3)  # compile the JAX boundary sampler once, outside the timings

    print("== 1. boundary integral engine: first 50 Dirichlet eigenvalues")
    t0 = time.perf_counter()
    spec = eigenvalues(curve, 50)
    t_bie = time.perf_counter() - t0
    check = solve(nodes_of(curve, 2 * int(0.75 * spec.nodes.size)), "dirichlet", count=50)
    agree = np.max(np.abs(check.values / spec.values - 1))
    print(f"  time {t_bie:.2f} s, {50 / t_bie:.1f} eigenvalues/s, nodes {spec.nodes.size}, "
          f"status {spec.status.name}")
    print(f"  max a posteriori relative error {np.max(spec.errors / spec.values):.1e}; "
          f"agreement with 3/2 the nodes {agree:.1e}")
    print(f"  λ_1 = {spec.values[0]:.13f}, λ_50 = {spec.values[49]:.13f}")

    print("== 2. scikit-fem, isoparametric P2, ARPACK shift-invert (single BLAS thread)")
    fem_time_1e5 = None
    with single_blas_thread():
        for nrefs in (3, 4, 5, 6):
            t0 = time.perf_counter()
            vals, dofs = fem_dirichlet(nrefs, 50)
            dt = time.perf_counter() - t0
            err = np.max(np.abs(vals / spec.values - 1))
            print(f"  nrefs {nrefs}: {dofs:7d} unknowns, {dt:6.2f} s, max relative error {err:.1e}")
            if err < 1e-5:
                fem_time_1e5 = dt
                break
    if fem_time_1e5 is not None:
        print(f"  side by side: FEM 1e-5 in {fem_time_1e5:.2f} s vs boundary integrals "
              f"~1e-12 in {t_bie:.2f} s (ratio {fem_time_1e5 / t_bie:.2f})")

    print("== 3. cost growth of the engine with N")
    previous = None
    for count in (50, 100, 200, 400):
        if count > max_count:
            break
        t0 = time.perf_counter()
        s = eigenvalues(curve, count)
        dt = time.perf_counter() - t0
        growth = "" if previous is None else f", ×{dt / previous:.2f} for ×2 N"
        print(f"  N = {count:4d}: {dt:7.2f} s, {count / dt:6.1f} eigenvalues/s, nodes "
              f"{s.nodes.size}, max rel. error estimate {np.max(s.errors / s.values):.1e}, "
              f"status {s.status.name}{growth}")
        previous = dt


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 400)
