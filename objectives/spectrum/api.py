"""Laplace eigenvalues of a :class:`objectives.Curve`, and a JAX-differentiable version.

``eigenvalues(curve, count, boundary)`` samples the curve, picks a resolution and runs the
boundary-integral solver (numpy, host side). ``make_eigenvalue_function`` wraps the solver
in ``jax.pure_callback`` with a ``jax.custom_jvp`` whose tangent is Hadamard's formula

  δλ = ∮ h V_ν ds,   V_ν = (∂γ/∂p · δp)·ν,
  h = −(∂_ν u)² (Dirichlet),  h = |∇_∂u|² − λu² (Neumann),  ‖u‖_{L²(Ω)} = 1

(Hadamard 1908; A. Henrot, "Extremum Problems for Eigenvalues of Elliptic Operators",
Birkhäuser 2006, §5.7). A cluster of (nearly) equal eigenvalues is not differentiable
one by one; its mean is, with derivative the trace of the Hadamard matrix divided by its
size, so the function returns each eigenvalue replaced by its cluster mean.
"""

from __future__ import annotations

from functools import partial

import jax
import jax.numpy as jnp
import numpy as np

from ..curve import Curve, sample
from ..status import Status
from .kernels import BOUNDARIES
from .solver import (Spectrum, area_perimeter, default_resolution, nodes_from_arrays,
                     resolution_check, solve, wavenumber_for_count)

MAX_REFINEMENTS = 4

__all__ = ["eigenvalues", "make_eigenvalue_function", "choose_resolution", "probed_resolution",
           "nodes_of"]


_sample_jit = jax.jit(sample, static_argnums=(1, 2))


def nodes_of(curve: Curve, resolution: int):
    """Host arrays γ, γ', γ'' at t_j = 2πj/resolution as solver nodes."""
    g = np.asarray(_sample_jit(curve, resolution, 2))
    return nodes_from_arrays(g[0], g[1], g[2])


def choose_resolution(curve: Curve, count: int | None = None, boundary: str = "dirichlet",
                      k_max: float | None = None) -> int:
    """Node count for the first ``count`` eigenvalues (or k ≤ ``k_max``), see
    :func:`objectives.spectrum.solver.default_resolution`."""
    coarse = nodes_of(curve, 256)
    area, perimeter = area_perimeter(coarse)
    if k_max is None:
        k_max = wavenumber_for_count(count + 3 * np.sqrt(count) + 5, area, perimeter, boundary)
    return default_resolution(coarse, k_max)


def _check(count, boundary, resolution):
    if boundary not in BOUNDARIES:
        raise ValueError(f"boundary: expected one of {', '.join(BOUNDARIES)}, got {boundary!r}")
    if count is not None and (int(count) != count or count < 1):
        raise ValueError(f"count: expected a positive integer, got {count!r}")
    if resolution is not None and (resolution < 16 or resolution % 2):
        raise ValueError(f"resolution: expected an even integer ≥ 16, got {resolution!r}")


def probed_resolution(curve: Curve, count: int | None = None, boundary: str = "dirichlet",
                      k_max: float | None = None, accuracy: float = 1e-10) -> int:
    """:func:`choose_resolution`, raised by 3/2 until one disc of eigenvalues just above the
    requested range changes by less than ``accuracy`` (relative, in λ) on 5/4 refinement and
    shows no roots off the real axis (:func:`objectives.spectrum.solver.resolution_check`)."""
    _check(count, boundary, None)
    resolution = choose_resolution(curve, count, boundary, k_max)
    area, perimeter = area_perimeter(nodes_of(curve, 256))
    k_top = k_max if k_max is not None else wavenumber_for_count(
        count + 3 * np.sqrt(count) + 5, area, perimeter, boundary)
    for _ in range(MAX_REFINEMENTS):
        change = resolution_check(nodes_of(curve, resolution), boundary, k_top)
        if 2.0 * change <= accuracy:
            break
        resolution = 2 * int(np.ceil(0.75 * resolution))
    return resolution


def eigenvalues(curve: Curve, count: int | None = None, boundary: str = "dirichlet",
                resolution: int | None = None, k_max: float | None = None,
                accuracy: float = 1e-10) -> Spectrum:
    """The first ``count`` eigenvalues of −Δ on the domain bounded by ``curve`` (or all
    with λ ≤ k_max²), ascending with multiplicity, with error estimates and boundary data.

    Without ``resolution`` the node count comes from :func:`probed_resolution`; if the full
    solve still reports under-resolution or a refinement change above ``accuracy`` it is
    raised by 3/2 and the solve repeated (at most ``MAX_REFINEMENTS`` times)."""
    _check(count, boundary, resolution)
    if resolution is not None:
        return solve(nodes_of(curve, resolution), boundary, count=count, k_max=k_max)
    resolution = probed_resolution(curve, count, boundary, k_max, accuracy)
    for _ in range(MAX_REFINEMENTS):
        spec = solve(nodes_of(curve, resolution), boundary, count=count, k_max=k_max)
        resolved = "resolution" not in spec.message
        if resolved and 2.0 * spec.extra.get("refinement_change", 0.0) <= accuracy:
            break
        resolution = 2 * int(np.ceil(0.75 * resolution))
    return spec


def _host_solve(points, count: int, boundary: str):
    nodes = nodes_from_arrays(*np.asarray(points))
    try:
        spec = solve(nodes, boundary, count=count)
    except (ValueError, np.linalg.LinAlgError):
        nan = np.full(count, np.nan)
        return nan, np.full((count, nodes.size), np.nan), np.int32(Status.solver_failed)
    values = spec.cluster_means()
    dens = spec.hadamard.copy()
    for c in np.unique(spec.clusters):
        sel = spec.clusters == c
        dens[sel] = dens[sel].mean(axis=0)
    if values.size < count:
        pad = count - values.size
        values = np.concatenate([values, np.full(pad, np.nan)])
        dens = np.concatenate([dens, np.full((pad, nodes.size), np.nan)])
    status = spec.status if np.all(np.isfinite(values)) else Status.nonfinite
    return values, dens, np.int32(status)


def make_eigenvalue_function(fn, count: int, boundary: str = "dirichlet", resolution: int = 256):
    """``f(params) -> (λ₁..λ_count as cluster means, status)``, differentiable in ``params``.

    ``fn`` is the curve's static boundary function; ``resolution`` (even) is fixed so the
    function can be jitted (choose it once with :func:`choose_resolution`).
    """
    _check(count, boundary, resolution)
    out_shapes = (jax.ShapeDtypeStruct((count,), jnp.float64),
                  jax.ShapeDtypeStruct((count, resolution), jnp.float64),
                  jax.ShapeDtypeStruct((), jnp.int32))
    host = partial(_host_solve, count=count, boundary=boundary)

    def solve_at(params):
        points = sample(Curve(fn, params), resolution, order=2)
        return points, jax.pure_callback(host, out_shapes, points)

    @jax.custom_jvp
    def f(params):
        _, (values, _, status) = solve_at(params)
        return values, status

    @f.defjvp
    def f_jvp(primals, tangents):
        (params,), (dparams,) = primals, tangents
        points, (values, dens, status) = solve_at(params)
        _, dx = jax.jvp(lambda p: sample(Curve(fn, p), resolution, order=0)[0], (params,),
                        (dparams,))
        dxs = points[1]
        normal = jnp.stack([dxs[:, 1], -dxs[:, 0]], axis=1)  # ν|γ'|, so ds is absorbed
        v_normal = jnp.sum(dx * normal, axis=1)
        dvalues = (2.0 * jnp.pi / resolution) * (dens @ v_normal)
        return (values, status), (dvalues, np.zeros((), dtype=jax.dtypes.float0))

    return f
