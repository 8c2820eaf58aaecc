"""Distance between two curves modulo rigid motions, reflections and reparametrization.

Definition. Resample each curve at ``m`` points equally spaced in arclength (u = s/L),
centre both at their point means, and let

    D(A, B)² = min over σ ∈ [0, 1), ε ∈ {identity, reflection}, R ∈ SO(2) of
               ∫₀¹ |a(u) − R·ε(b)(u + σ)|² du,

where ε(b)(u) = conj(b(−u)) is the reflected curve traversed counter-clockwise. D is in
length units, is zero exactly for congruent curves (equal arclength parametrizations up
to shift) and positive otherwise. In complex notation the optimal rotation is closed
form, D² = ‖a‖² + ‖b‖² − 2 max_σ |C(σ)| with C(σ) = ∫ a(u) conj(b(u + σ)) du, so the
shift is found on a fine FFT grid and polished by Newton's method; D² is then summed as the
aligned residual itself (no cancellation, so D resolves ~1e-12 and not ~1e-7). ``smooth=True``
returns D² instead of D: D has a cone point at congruent shapes, D² is differentiable there and
wherever the optimal alignment is unique, which is what an optimizer needs.
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp

from .curve import DEFAULT_RESOLUTION, Array, Curve
from .geometry import arclength_parameters

DISTANCE_POINTS = 128


def _arclength_samples(curve: Curve, count: int, resolution: int) -> Array:
    t = arclength_parameters(curve, count, resolution)
    p = jax.vmap(curve)(t)
    z = p[:, 0] + 1j * p[:, 1]
    return z - jnp.mean(z)


def _aligned_residual(a_hat: Array, b_hat: Array, k: Array, oversample: int) -> Array:
    """min over σ, R of Σ_k |â_k − R b̂_k e^{2πikσ}|², with the best σ for
    C(σ) = Σ_k â_k conj(b̂_k) e^{-2πikσ} from a grid search polished by Newton, and R = C/|C|.

    The residual is summed directly rather than as ‖a‖² + ‖b‖² − 2|C|, which would cancel to
    round-off (D ≈ 1e-7) for nearly congruent shapes. σ and R are held fixed under
    differentiation: at the optimum their variation does not change the value (envelope theorem).
    """
    prod = a_hat * jnp.conj(b_hat)
    m = a_hat.shape[0] * oversample
    sigma = jnp.arange(m) / m

    def overlap(s):
        return jnp.sum(prod * jnp.exp(-2j * jnp.pi * k * s))

    def c_abs2(s):
        c = overlap(s)
        return (c * jnp.conj(c)).real

    # C on the grid σ = j/m is one length-m FFT of the zero-padded products (k placed at k mod m)
    spread = jnp.zeros(m, prod.dtype).at[jnp.round(k).astype(jnp.int32) % m].set(
        jax.lax.stop_gradient(prod))
    on_grid = jnp.fft.fft(spread)
    grid = (on_grid * jnp.conj(on_grid)).real
    s0 = jax.lax.stop_gradient(sigma[jnp.argmax(grid)])
    g = jax.grad(c_abs2)
    h = jax.grad(g)

    def newton(_, s):
        step = g(s) / h(s)
        ok = jnp.isfinite(step) & (h(s) < 0)
        return jnp.where(ok, s - jnp.clip(step, -0.5 / m, 0.5 / m), s)

    s_star = jax.lax.stop_gradient(jax.lax.fori_loop(0, 6, newton, s0))
    s_star = jax.lax.stop_gradient(jnp.where(c_abs2(s_star) >= jnp.max(grid), s_star, s0))
    c = jax.lax.stop_gradient(overlap(s_star))
    rotation = jnp.where(jnp.abs(c) > 0, c / jnp.where(jnp.abs(c) > 0, jnp.abs(c), 1.0), 1.0)
    residual = a_hat - rotation * b_hat * jnp.exp(2j * jnp.pi * k * s_star)
    return jnp.sum((residual * jnp.conj(residual)).real)


class DistanceReference(NamedTuple):
    """One side of D, ready for :func:`distance_to`: the normalized Fourier coefficients of the
    centred arclength samples of a curve and of its reflection."""

    direct: Array
    reflected: Array


def distance_reference(curve: Curve, points: int = DISTANCE_POINTS,
                       resolution: int = DEFAULT_RESOLUTION) -> DistanceReference:
    """The part of D(curve, ·) that depends on ``curve`` only (compute once, compare many)."""
    b = _arclength_samples(curve, points, resolution)
    b_reflected = jnp.conj(jnp.roll(b[::-1], 1))
    return DistanceReference(jnp.fft.fft(b) / points, jnp.fft.fft(b_reflected) / points)


def distance_to(reference: DistanceReference, curve: Curve,
                resolution: int = DEFAULT_RESOLUTION, smooth: bool = False) -> Array:
    """D(curve, reference curve) (D² if ``smooth``), with the reference's point count."""
    points = reference.direct.shape[0]
    a_hat = jnp.fft.fft(_arclength_samples(curve, points, resolution)) / points
    k = jnp.fft.fftfreq(points, 1.0 / points)
    d2 = jnp.min(jnp.stack([_aligned_residual(a_hat, b_hat, k, 8)
                            for b_hat in (reference.direct, reference.reflected)]))
    if smooth:
        return d2
    positive = d2 > 0
    return jnp.where(positive, jnp.sqrt(jnp.where(positive, d2, 1.0)), 0.0)


def shape_distance(first: Curve, second: Curve, points: int = DISTANCE_POINTS,
                   resolution: int = DEFAULT_RESOLUTION, smooth: bool = False) -> Array:
    """Isometry-invariant L² distance D(A, B) (D² if ``smooth``); see the module docstring."""
    return distance_to(distance_reference(second, points, resolution), first, resolution,
                       smooth)
