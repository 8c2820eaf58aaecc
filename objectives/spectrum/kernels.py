"""Nyström matrices of the Helmholtz boundary operators with Kress product quadrature.

Fundamental solution Φ(x, y) = (i/4) H₀⁽¹⁾(k|x − y|); ν is the outward normal. With the
factor-2 normalization of Colton & Kress ("Inverse Acoustic and Electromagnetic Scattering
Theory", 3rd ed. 2013, §3.5),

  (Kφ)(x)  = 2∮ ∂Φ(x, y)/∂ν(y) φ(y) ds(y)     (double layer),
  (K'φ)(x) = 2∮ ∂Φ(x, y)/∂ν(x) φ(y) ds(y)     (its normal-derivative adjoint).

Green's representation of an interior eigenfunction gives the two square systems used here:

  Dirichlet  (I − K') ψ = 0,  ψ = ∂_ν u   (u = ∮Φ ψ ds inside),
  Neumann    (I + K) u|∂Ω = 0              (u = −∮∂_νΦ u ds inside).

Neither has spurious real roots: a null vector at real k makes the exterior field radiate
with zero Neumann (resp. Dirichlet) data, which forces it to vanish (Rellich's lemma).
The log singularity is split off, L = L₁ ln(4 sin²((t − τ)/2)) + L₂, and integrated with
Kress's weights R_j on 2n equispaced nodes (Kress, "Linear Integral Equations", 3rd ed.
2014, §12.3, eqs. 12.18–12.20); the quadrature converges exponentially for analytic curves.
Everything here is plain numpy (host code); k may be complex.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.special as sp

BOUNDARIES = ("dirichlet", "neumann")


@dataclass(frozen=True)
class Nodes:
    """Boundary samples at t_j = 2πj/N: points x, derivatives dx, ddx (each (N, 2))."""

    x: np.ndarray
    dx: np.ndarray
    ddx: np.ndarray

    @property
    def size(self) -> int:
        return self.x.shape[0]

    @property
    def speed(self) -> np.ndarray:
        return np.hypot(self.dx[:, 0], self.dx[:, 1])

    @property
    def normal(self) -> np.ndarray:
        """Unnormalized outward normal ν|γ'| = (γ₂', −γ₁') of a counter-clockwise curve."""
        return np.stack([self.dx[:, 1], -self.dx[:, 0]], axis=1)

    @property
    def curvature_speed(self) -> np.ndarray:
        """det(γ', γ'')/|γ'|² = κ |γ'|."""
        return (self.dx[:, 0] * self.ddx[:, 1] - self.dx[:, 1] * self.ddx[:, 0]) / self.speed**2

    @property
    def weight(self) -> float:
        """Trapezoid weight 2π/N in t."""
        return 2.0 * np.pi / self.size


def kress_weights(size: int) -> np.ndarray:
    """Circulant matrix R_{ij} = R_{|i−j|} of Kress's log weights for N = 2n nodes.

    R(t) = −(2π/n) Σ_{m=1}^{n−1} cos(mt)/m − (π/n²) cos(nt) integrates the trigonometric
    interpolant of f against ln(4 sin²(t/2)) exactly.
    """
    if size % 2:
        raise ValueError(f"resolution: Kress quadrature needs an even node count, got {size}")
    n = size // 2
    d = np.pi * np.arange(size) / n
    m = np.arange(1, n)
    row = -(2.0 * np.pi / n) * (np.cos(np.outer(d, m)) @ (1.0 / m)) - (np.pi / n**2) * np.cos(n * d)
    idx = np.abs(np.arange(size)[:, None] - np.arange(size)[None, :])
    return row[idx]


@dataclass(frozen=True)
class Geometry:
    """Pair quantities reused for every k: distances, normal projections, log weights."""

    nodes: Nodes
    distance: np.ndarray        # r_ij = |x_i − x_j| (1 on the diagonal, unused there)
    projection: np.ndarray      # f_ij / r_ij, the normal projection of the boundary operator
    log_weight: np.ndarray      # R_ij − (π/n) ln(4 sin²((t_i − t_j)/2)), zero diagonal term
    diagonal: np.ndarray        # L₂(t, t) = ∓det(γ', γ'')/(2π|γ'|²) (Neumann −, Dirichlet +)
    upper: tuple[np.ndarray, np.ndarray]


def geometry(nodes: Nodes, boundary: str) -> Geometry:
    """Precompute the k-independent parts of T(k) = I − K' (Dirichlet) or I + K (Neumann).

    f_ij = ν(t_i)·(x_i − x_j)|γ'(t_j)|/|γ'(t_i)| for K', ν(t_j)·(x_i − x_j) for K.
    """
    if boundary not in BOUNDARIES:
        raise ValueError(f"boundary: expected one of {BOUNDARIES}, got {boundary!r}")
    size = nodes.size
    n = size // 2
    x, nu, speed = nodes.x, nodes.normal, nodes.speed
    diff = x[:, None, :] - x[None, :, :]
    r = np.hypot(diff[..., 0], diff[..., 1])
    np.fill_diagonal(r, 1.0)
    if boundary == "dirichlet":
        # −K' written in the same form as K: (ik/2) H₁ f/r with f = ν(t_i)·(x_i − x_j)…
        f = np.einsum("ik,ijk->ij", nu, diff) * (speed[None, :] / speed[:, None])
        sign = -1.0
    else:
        f = np.einsum("jk,ijk->ij", nu, diff)
        sign = 1.0
    t = np.pi * np.arange(size) / n
    dt = t[:, None] - t[None, :]
    with np.errstate(divide="ignore"):
        log_term = np.log(4.0 * np.sin(0.5 * dt) ** 2)
    np.fill_diagonal(log_term, 0.0)
    log_weight = kress_weights(size) - (np.pi / n) * log_term
    # K and K' share the diagonal limit −κ|γ'|/2π; T = I − K' carries it with the other sign.
    diagonal = sign * (-nodes.curvature_speed / (2.0 * np.pi))
    return Geometry(nodes, r, f / r, log_weight, diagonal, np.triu_indices(size, 1))


def _symmetric(values_upper: np.ndarray, upper, size: int, dtype) -> np.ndarray:
    out = np.zeros((size, size), dtype=dtype)
    out[upper] = values_upper
    return out + out.T


def operator_matrix(geo: Geometry, k: complex) -> np.ndarray:
    """T(k) = I − K' (Dirichlet) or I + K (Neumann) at wavenumber k (Re k > 0, complex allowed).

    Both are I + L with L = (ik/2) H₁⁽¹⁾(kr) f/r (the f of :func:`geometry`), log part
    L₁ = −(k/2π) J₁(kr) f/r, smooth part L₂ = L − L₁ ln(4 sin²), diagonal L₂(t, t).
    """
    size = geo.nodes.size
    n = size // 2
    kr = k * geo.distance[geo.upper]
    if np.isrealobj(k) or np.imag(k) == 0.0:
        kr = np.real(kr)
        j1, y1 = sp.j1(kr), sp.y1(kr)
        j1m = _symmetric(j1, geo.upper, size, float)
        y1m = _symmetric(y1, geo.upper, size, float)
        h1m = j1m + 1j * y1m
        k = float(np.real(k))
    else:
        j1 = sp.jv(1, kr)
        h1 = sp.hankel1(1, kr)
        j1m = _symmetric(j1, geo.upper, size, complex)
        h1m = _symmetric(h1, geo.upper, size, complex)
    g = k * geo.projection
    full = (0.5j * h1m) * g
    log_part = (-0.5 / np.pi) * j1m * g
    kernel = log_part * geo.log_weight + (np.pi / n) * full
    kernel[np.diag_indices(size)] = (np.pi / n) * geo.diagonal
    return np.eye(size) + kernel
