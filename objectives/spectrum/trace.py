"""Spectral against geometric side of the wave trace (the trace-formula check).

Spectral side: with a C^∞ bump g on [k_a, k_b] (g(k) = exp(−1/(x(1−x))), x = (k − k_a)/(k_b − k_a)),

  F(ℓ) = Σ_j g(k_j) e^{i k_j ℓ} / ∫ g dk.

Geometric side (Gutzwiller 1971; Balian & Bloch 1972; for billiards Sieber, Pavloff &
Schmit, Phys. Rev. E 55 (1997) 2279): an isolated periodic orbit γ (length L, primitive
length L^#, linearized return map P, Maslov index μ, n reflections) adds
A_γ cos(kL − σπ/2) to the density of states, A_γ = L^#/(π|det(I − P)|^{1/2}),
σ = μ + 2n (Dirichlet) or μ (Neumann); an orbit and its time reverse count separately unless
the orbit retraces itself (bouncing balls count once). Near L, 2|F(L)| → A_γ and
arg F(L) → σπ/2 (mod 2π) as the window moves to high k.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np


def bump(k: np.ndarray, k_lower: float, k_upper: float) -> np.ndarray:
    """C^∞ bump supported on (k_lower, k_upper), maximum e^{−4} at the centre."""
    x = (np.asarray(k, dtype=float) - k_lower) / (k_upper - k_lower)
    inside = (x > 0) & (x < 1)
    xs = np.where(inside, x, 0.5)
    return np.where(inside, np.exp(-1.0 / (xs * (1.0 - xs))), 0.0)


def spectral_trace(wavenumbers: np.ndarray, lengths: np.ndarray, k_lower: float,
                   k_upper: float) -> np.ndarray:
    """F(ℓ) at the given lengths (complex), see the module docstring."""
    k = np.asarray(wavenumbers, dtype=float)
    weights = bump(k, k_lower, k_upper)
    grid = np.linspace(k_lower, k_upper, 4001)
    norm = np.trapezoid(bump(grid, k_lower, k_upper), grid)
    return np.exp(1j * np.outer(np.asarray(lengths, dtype=float), k)) @ weights / norm


class OrbitTerm(NamedTuple):
    """One term of the geometric side: an orbit (iterate) with its predicted peak."""

    label: str
    length: float
    amplitude: float
    phase: float       # σπ/2 reduced to (−π, π]
    degenerate: bool   # det(I − P) ≈ 0: a family, the isolated-orbit amplitude does not apply


def geometric_terms(orbits, boundary: str, max_length: float) -> list[OrbitTerm]:
    """Predicted (L, A, phase) for every orbit iterate of an :class:`objectives.orbits.OrbitSet`
    (fields length, det_iterates, maslov, reflections, q) with L ≤ ``max_length``."""
    out = []
    labels = orbits.labels()
    lengths = np.asarray(orbits.length)
    dets = np.asarray(orbits.det_iterates)
    maslov = np.asarray(orbits.maslov)
    reflections = np.asarray(orbits.reflections)
    for j, label in enumerate(labels):
        primitive = float(lengths[j])
        retracing = int(np.asarray(orbits.q)[j]) == 2
        for m in range(1, dets.shape[1] + 1):
            if m * primitive > max_length:
                break
            det = float(dets[j, m - 1])
            sigma = int(maslov[j, m - 1]) + (2 * m * int(reflections[j])
                                             if boundary == "dirichlet" else 0)
            degenerate = abs(det) < 1e-8
            amp = np.inf if degenerate else primitive / (np.pi * np.sqrt(abs(det)))
            amp *= 1.0 if retracing else 2.0
            phase = float(np.angle(np.exp(0.5j * np.pi * sigma)))
            out.append(OrbitTerm(f"{label}×{m}" if m > 1 else label, m * primitive, amp, phase,
                                 degenerate))
    return sorted(out, key=lambda term: term.length)
