"""A Chebyshev proxy of k ↦ T(k) on a real interval, evaluable at complex k.

The entries of T(k) are analytic in k away from the branch cut k ≤ 0. Sampling them at
M + 1 Chebyshev points of the second kind on [a, b] (real k: real Bessel functions, cheap)
and evaluating the interpolant in the complex plane replaces the costly complex-argument
Hankel functions that contour-integral eigensolvers need (Trefethen, "Approximation Theory
and Approximation Practice", 2013, ch. 8: geometric convergence inside the Bernstein
ellipse). The degree doubles until the trailing coefficients fall below ``tolerance``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft

from .kernels import Geometry, operator_matrix


@dataclass(frozen=True)
class Proxy:
    lower: float
    upper: float
    coefficients: np.ndarray   # (M + 1, N, N) Chebyshev coefficients of T
    tail: float                # max trailing |coefficient| / max |coefficient|

    def __call__(self, k: np.ndarray) -> np.ndarray:
        """T at the (complex) wavenumbers ``k``, shape (len(k), N, N)."""
        zeta = (2.0 * np.asarray(k, dtype=complex) - (self.lower + self.upper)) / (
            self.upper - self.lower)
        degree = self.coefficients.shape[0]
        basis = np.empty((zeta.size, degree), dtype=complex)
        basis[:, 0] = 1.0
        if degree > 1:
            basis[:, 1] = zeta
        for m in range(2, degree):
            basis[:, m] = 2.0 * zeta * basis[:, m - 1] - basis[:, m - 2]
        flat = self.coefficients.reshape(degree, -1)
        return (basis @ flat).reshape((zeta.size,) + self.coefficients.shape[1:])


def chebyshev_points(lower: float, upper: float, degree: int) -> np.ndarray:
    angles = np.pi * np.arange(degree + 1) / degree
    return 0.5 * (lower + upper) + 0.5 * (upper - lower) * np.cos(angles)


def _coefficients(values: np.ndarray) -> np.ndarray:
    degree = values.shape[0] - 1
    coeffs = scipy.fft.dct(values, type=1, axis=0) / degree
    coeffs[0] *= 0.5
    coeffs[-1] *= 0.5
    return coeffs


def build_proxy(geo: Geometry, lower: float, upper: float, degree: int = 32,
                tolerance: float = 1e-14, max_degree: int = 256) -> Proxy:
    """Chebyshev interpolant of T on [lower, upper], refined by doubling the degree."""
    samples: dict[float, np.ndarray] = {}
    while True:
        points = chebyshev_points(lower, upper, degree)
        values = []
        for k in points:
            key = round(float(k), 15)
            if key not in samples:
                samples[key] = operator_matrix(geo, float(k))
            values.append(samples[key])
        coeffs = _coefficients(np.stack(values))
        magnitude = np.abs(coeffs).reshape(degree + 1, -1).max(axis=1)
        tail = float(magnitude[-3:].max() / magnitude.max())
        if tail < tolerance or degree >= max_degree:
            return Proxy(lower, upper, coeffs, tail)
        degree *= 2
