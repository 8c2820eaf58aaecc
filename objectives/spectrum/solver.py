"""All Laplace eigenvalues of a smooth planar domain in a window, with multiplicity and error bars.

−Δu = λu, k = √λ. Eigenvalues are the real k where T(k) (see :mod:`.kernels`) is singular.

1. Windows. The k-axis is cut into chunks; on each chunk T is replaced by a Chebyshev proxy
   (:mod:`.proxy`), and the chunk is tiled by discs |k − c| ≤ ρ.
2. Contour integrals (W.-J. Beyn, "An integral method for solving nonlinear eigenvalue
   problems", Linear Algebra Appl. 436 (2012) 3839–3863, Theorem 3.3). With a random probe V,
   A_p = (1/2πi)∮ z^p T(z)⁻¹V dz, p = 0, 1, by the trapezoid rule on the circle; the numerical
   rank of A₀ is the number of eigenvalues in the disc (multiplicities included: nothing is
   missed, degenerate pairs give rank 2), and the eigenvalues of U*A₁WΣ⁻¹ are the k's.
   The trapezoid rule is a rational filter, so eigenvalues just outside the disc come out as
   well; each eigenvalue is kept from the window whose centre is nearest.
3. Polishing and a posteriori error. Each cluster (relative gap below ``cluster_tol``) is
   refined by one step of block inverse iteration and a Newton step on the projected
   m × m pencil (U*T(k)Q) with freshly assembled (not proxied) T; a second Newton step gives
   the reported error estimate. A slow decay of the eigenvector's Fourier coefficients
   (under-resolved boundary) raises the estimate.
4. Checks: Weyl's three-term mean count N̄(λ) = |Ω|λ/4π ∓ |∂Ω|√λ/4π + 1/6 (Weyl 1911,
   Pleijel 1954, McKean & Singer 1967) is reported beside the count.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sl

from ..status import Status
from .kernels import BOUNDARIES, Geometry, Nodes, geometry, operator_matrix
from .proxy import build_proxy
from .threads import single_blas_thread

QUADRATURE_NODES = 32
WINDOW_RADIUS = 0.5
CHUNK_LENGTH = 6.0
CLUSTER_TOL = 1e-8
_SEED = 20261201


@dataclass(frozen=True)
class Spectrum:
    """Eigenvalues λ (ascending, with multiplicity) and what comes with them.

    ``errors``: a posteriori absolute error estimates of λ. ``clusters``: index of the
    cluster each eigenvalue belongs to (eigenvalues closer than ``cluster_tol`` relative;
    exact multiplicities are clusters). ``boundary_data``: (count, N) real values at the
    nodes, ∂_ν u (Dirichlet) or u|∂Ω (Neumann), for ‖u‖_{L²(Ω)} = 1 (within a cluster, an
    orthonormal basis of its eigenspace). ``hadamard``: (count, N) densities h with
    δλ = ∮ h V_ν ds for a simple eigenvalue (−(∂_ν u)², resp. |∇_∂u|² − λu²).
    """

    boundary: str
    values: np.ndarray
    errors: np.ndarray
    clusters: np.ndarray
    boundary_data: np.ndarray
    hadamard: np.ndarray
    nodes: Nodes
    weyl_mean: float
    status: Status
    message: str = ""
    extra: dict = field(default_factory=dict)

    @property
    def wavenumbers(self) -> np.ndarray:
        return np.sqrt(np.maximum(self.values, 0.0))

    @property
    def multiplicities(self) -> np.ndarray:
        """Size of each eigenvalue's cluster."""
        _, inverse, counts = np.unique(self.clusters, return_inverse=True, return_counts=True)
        return counts[inverse]

    def cluster_means(self) -> np.ndarray:
        """Each eigenvalue replaced by the mean of its cluster (smooth under deformation)."""
        out = np.empty_like(self.values)
        for c in np.unique(self.clusters):
            sel = self.clusters == c
            out[sel] = self.values[sel].mean()
        return out


def nodes_from_arrays(x, dx, ddx) -> Nodes:
    return Nodes(np.asarray(x, dtype=float), np.asarray(dx, dtype=float),
                 np.asarray(ddx, dtype=float))


def area_perimeter(nodes: Nodes) -> tuple[float, float]:
    w = nodes.weight
    area = 0.5 * w * float(np.sum(nodes.x[:, 0] * nodes.dx[:, 1] - nodes.x[:, 1] * nodes.dx[:, 0]))
    return area, w * float(np.sum(nodes.speed))


def diameter(nodes: Nodes) -> float:
    d = nodes.x[:, None, :] - nodes.x[None, :, :]
    return float(np.sqrt(np.max(np.sum(d * d, axis=-1))))


def weyl_mean(lam, area: float, perimeter: float, boundary: str):
    """N̄(λ) = |Ω|λ/4π ∓ |∂Ω|√λ/4π + 1/6 (− Dirichlet, + Neumann; λ₀ = 0 counted)."""
    sign = -1.0 if boundary == "dirichlet" else 1.0
    lam = np.asarray(lam, dtype=float)
    return area * lam / (4 * np.pi) + sign * perimeter * np.sqrt(lam) / (4 * np.pi) + 1.0 / 6.0


def wavenumber_for_count(count: float, area: float, perimeter: float, boundary: str) -> float:
    """k with N̄(k²) = count (the quadratic in k solved for its positive root)."""
    sign = -1.0 if boundary == "dirichlet" else 1.0
    a, b, c = area / (4 * np.pi), sign * perimeter / (4 * np.pi), 1.0 / 6.0 - count
    return float((-b + np.sqrt(b * b - 4 * a * c)) / (2 * a))


def feature_size(nodes: Nodes) -> np.ndarray:
    """Per node, the distance to the nearest boundary point that is not its own neighbourhood:
    min |x_i − x_j| over j whose arclength separation exceeds 2|x_i − x_j| (thin necks and
    near-touching arcs make the boundary kernels nearly singular there)."""
    s = np.concatenate([[0.0], np.cumsum(nodes.speed[:-1])]) * nodes.weight
    total = nodes.weight * float(np.sum(nodes.speed))
    sep = np.abs(s[:, None] - s[None, :])
    sep = np.minimum(sep, total - sep)
    d = np.hypot(*(nodes.x[:, None, :] - nodes.x[None, :, :]).transpose(2, 0, 1))
    far = sep > 2.0 * d
    return np.where(far, d, np.inf).min(axis=1)


def default_resolution(nodes: Nodes, k_max: float) -> int:
    """Even node count: k·max|γ'| modes for e^{ikr} along the boundary plus a margin, and
    node spacing |γ'|2π/N at most a fifth of the local feature size (the trapezoid rule on a
    kernel with a pole at distance δ converges like e^{−2πδ/h}).

    Calibrated by the convergence tests in tests/test_spectrum.py (error below 1e-12 at
    this count on the test shapes).
    """
    bandwidth = k_max * float(nodes.speed.max())
    spacing = float(np.max(2 * np.pi * nodes.speed / feature_size(nodes)) * 5.0)
    return int(2 * np.ceil(0.5 * max(1.5 * bandwidth + 48, spacing)))


def _next_chunk(a: float, k_hi: float, radius: float, chunk: float):
    """The chunk [a, b] after a (geometric near k = 0, then of length ``chunk``), tiled by
    discs of radius ρ ≤ min(radius, a/4) so that k = 0 (a branch point) stays far away."""
    b = min(a + min(a, chunk), k_hi)
    if k_hi - b < 0.25 * min(a, chunk):
        b = k_hi
    n = max(1, int(np.ceil((b - a) / (2.0 * min(radius, a / 4.0)))))
    rho = (b - a) / (2 * n)
    return b, [a + rho * (2 * j + 1) for j in range(n)], rho


def _beyn(proxy, centre: float, rho: float, probes: int, size: int, rng, nq: int):
    """Eigenvalues and right null vectors of T inside (and just outside) |k − c| = ρ, or
    None when the probe block is saturated (more eigenvalues than probes)."""
    theta = 2 * np.pi * (np.arange(nq) + 0.5) / nq
    unit = np.exp(1j * theta)
    v = rng.standard_normal((size, probes))
    t = proxy(centre + rho * unit)
    a0 = np.zeros((size, probes), dtype=complex)
    a1 = np.zeros((size, probes), dtype=complex)
    for q in range(nq):
        x = sl.lu_solve(sl.lu_factor(t[q], check_finite=False), v, check_finite=False)
        a0 += (unit[q] / nq) * x
        a1 += (unit[q] ** 2 / nq) * x
    u, s, wh = np.linalg.svd(a0, full_matrices=False)
    rank = int(np.sum(s > 1e-11 * max(s[0], 1e-3)))
    if rank > probes - 3:
        return None
    if rank == 0:
        return np.zeros(0, dtype=complex), np.zeros((size, 0), dtype=complex)
    b = (u[:, :rank].conj().T @ a1 @ wh[:rank].conj().T) / s[:rank]
    mu, y = np.linalg.eig(b)
    return centre + rho * mu, u[:, :rank] @ y


def _orth(a: np.ndarray) -> np.ndarray:
    q, _ = np.linalg.qr(a)
    return q


def _polish(geo: Geometry, k0: np.ndarray, vectors: np.ndarray):
    """Refined k (m,), error estimates (m,), refined complex basis (N, m) of one cluster."""
    kc = float(np.mean(k0.real))
    # A one-sided difference suffices: the derivative only sets the Newton step's rate.
    h = 1e-7 * max(1.0, kc)
    t0 = operator_matrix(geo, kc)
    dt = (operator_matrix(geo, kc + h) - t0) / h
    q = _orth(vectors)
    try:
        q = _orth(sl.lu_solve(sl.lu_factor(t0, check_finite=False), q, check_finite=False))
    except (ValueError, np.linalg.LinAlgError):
        pass
    u = _orth(dt @ q)
    g1 = u.conj().T @ dt @ q

    def newton(k_at, t_at):
        delta, x = sl.eig(u.conj().T @ t_at @ q, -g1)
        order = np.argsort(delta.real)
        return k_at + delta.real[order], np.abs(delta.imag[order]), x[:, order]

    k1, _, _ = newton(kc, t0)
    kc2 = float(np.mean(k1))
    k2, imag2, x2 = newton(kc2, operator_matrix(geo, kc2))
    err = np.abs(k2 - k1) + imag2 + 4e-16 * kc
    return k2, err, q @ x2


def _real_basis(q: np.ndarray) -> np.ndarray:
    """Real orthonormal basis (N, m) of the real span of the complex null vectors q."""
    m = q.shape[1]
    u, _, _ = np.linalg.svd(np.concatenate([q.real, q.imag], axis=1), full_matrices=False)
    return u[:, :m]


def _tangential_derivative(values: np.ndarray, nodes: Nodes) -> np.ndarray:
    """∂_s of nodal values (columns) by trigonometric differentiation in t."""
    size = nodes.size
    freq = np.fft.fftfreq(size, d=1.0 / size)
    freq[size // 2] = 0.0
    spec = np.fft.fft(values, axis=0) * (1j * freq)[:, None]
    return np.fft.ifft(spec, axis=0).real / nodes.speed[:, None]


def _normalize(basis: np.ndarray, lam: float, nodes: Nodes, boundary: str):
    """L²(Ω)-orthonormal boundary data and Hadamard densities of one eigenspace.

    Rellich's identity ∫_Ω u v = (1/2λ)∮ (x·ν) ∂_νu ∂_νv ds (Dirichlet) and its Neumann
    form (1/2λ)∮ (x·ν)(λuv − ∂_su ∂_sv) ds (Rellich, Math. Z. 46 (1940) 635–636), polarized,
    give the Gram matrix of the eigenfunctions from their boundary data alone.
    """
    w = nodes.weight
    xn = np.sum((nodes.x - nodes.x.mean(axis=0)) * nodes.normal, axis=1)  # (x·ν)|γ'|
    if boundary == "dirichlet":
        gram = (w / (2 * lam)) * (basis.T * xn) @ basis
    else:
        ds = _tangential_derivative(basis, nodes)
        gram = (w / (2 * lam)) * ((lam * basis.T * xn) @ basis - (ds.T * xn) @ ds)
    evals, evecs = np.linalg.eigh(0.5 * (gram + gram.T))
    if np.any(evals <= 0):
        return None, None
    data = basis @ (evecs / np.sqrt(evals)) @ evecs.T
    for j in range(data.shape[1]):
        if data[np.argmax(np.abs(data[:, j])), j] < 0:
            data[:, j] = -data[:, j]
    if boundary == "dirichlet":
        dens = -(data**2)
    else:
        dens = _tangential_derivative(data, nodes) ** 2 - lam * data**2
    return data.T, dens.T


def _tail(vectors: np.ndarray) -> float:
    """Relative size of the top 10% of Fourier modes (resolution check)."""
    spec = np.abs(np.fft.fft(vectors, axis=0))
    size = spec.shape[0]
    band = np.abs(np.fft.fftfreq(size, d=1.0 / size)) >= 0.45 * size
    return float(spec[band].max() / spec.max())


def _resample(values: np.ndarray, size: int) -> np.ndarray:
    """Trigonometric interpolation of nodal columns to ``size`` equispaced nodes."""
    old = values.shape[0]
    spec = np.fft.fft(values, axis=0)
    out = np.zeros((size,) + values.shape[1:], dtype=complex)
    half = old // 2
    out[:half] = spec[:half]
    out[size - half + 1:] = spec[half + 1:]
    out[half] = 0.5 * spec[half]
    out[size - half] = 0.5 * spec[half]
    result = np.fft.ifft(out, axis=0) * (size / old)
    return result if np.iscomplexobj(values) else result.real


def refined_nodes(nodes: Nodes, size: int) -> Nodes:
    """The same boundary on ``size`` nodes by trigonometric interpolation (spectrally
    accurate for analytic curves; exact for trigonometric polynomials of low degree)."""
    return Nodes(_resample(nodes.x, size), _resample(nodes.dx, size), _resample(nodes.ddx, size))


def _group(values: np.ndarray, tol: float) -> list[np.ndarray]:
    order = np.argsort(values)
    groups, current = [], [order[0]]
    for a, b in zip(order[:-1], order[1:]):
        if values[b] - values[a] <= tol * max(1.0, abs(values[b])):
            current.append(b)
        else:
            groups.append(np.array(current))
            current = [b]
    groups.append(np.array(current))
    return groups


def resolution_check(nodes: Nodes, boundary: str, k_top: float,
                     radius: float = WINDOW_RADIUS) -> float:
    """Cheap probe before a full solve: relative change of the highest eigenvalue in one disc
    just below ``k_top`` when the nodes are refined by 5/4 (inf when roots appear just off
    the real axis, the sign of an under-resolved boundary)."""
    with single_blas_thread():
        size = nodes.size
        geo = geometry(nodes, boundary)
        rho = min(radius, k_top / 6.0)
        centre = k_top - rho
        proxy = build_proxy(geo, centre - 4 * rho, centre + 4 * rho, tolerance=1e-13)
        area, perimeter = area_perimeter(nodes)
        expected = weyl_mean((centre + 2 * rho) ** 2, area, perimeter, boundary) - weyl_mean(
            (centre - 2 * rho) ** 2, area, perimeter, boundary)
        probes = min(int(np.ceil(1.5 * max(expected, 0.0))) + 8, size - 2)
        found = _beyn(proxy, centre, rho, probes, size, np.random.default_rng(_SEED),
                      QUADRATURE_NODES)
        if found is None:
            return float("inf")
        ks, vecs = found
        dist = np.abs(ks.real - centre) / rho
        real = (np.abs(ks.imag) < 1e-6 * np.maximum(1.0, np.abs(ks))) & (dist <= 1.0)
        if np.any(~real & (np.abs(ks.imag) < 0.2 * rho) & (dist <= 1.0)):
            return float("inf")
        if not np.any(real):
            return 0.0
        j = int(np.flatnonzero(real)[np.argmax(ks.real[real])])
        finer = refined_nodes(nodes, 2 * int(np.ceil(0.625 * size)))
        k_fine, _, _ = _polish(geometry(finer, boundary), ks[j:j + 1].real,
                               _resample(vecs[:, [j]], finer.size))
        k_here, _, _ = _polish(geo, ks[j:j + 1].real, vecs[:, [j]])
        return float(abs(k_fine[0] - k_here[0]) / k_top)


def solve(nodes: Nodes, boundary: str, count: int | None = None, k_max: float | None = None,
          k_min: float | None = None, radius: float = WINDOW_RADIUS,
          quadrature_nodes: int = QUADRATURE_NODES, cluster_tol: float = CLUSTER_TOL) -> Spectrum:
    """The first ``count`` eigenvalues, or all with k ≤ ``k_max`` (see module docstring)."""
    with single_blas_thread():
        return _solve(nodes, boundary, count, k_max, k_min, radius, quadrature_nodes, cluster_tol)


def _solve(nodes, boundary, count, k_max, k_min, radius, quadrature_nodes, cluster_tol):
    if boundary not in BOUNDARIES:
        raise ValueError(f"boundary: expected one of {BOUNDARIES}, got {boundary!r}")
    if (count is None) == (k_max is None):
        raise ValueError("give exactly one of count and k_max")
    area, perimeter = area_perimeter(nodes)
    if area <= 0:
        raise ValueError("curve: not counter-clockwise (non-positive area)")
    size = nodes.size
    geo = geometry(nodes, boundary)
    if k_min is None:
        if boundary == "dirichlet":
            # Faber–Krahn: λ₁ ≥ π j₀₁²/|Ω| (j₀₁ = 2.4048…)
            k_min = 0.9 * 2.404825557695773 * np.sqrt(np.pi / area)
        else:
            k_min = 0.25 * np.pi / diameter(nodes)
    target = count - (1 if boundary == "neumann" else 0) if count is not None else None
    if k_max is None:
        k_hi = wavenumber_for_count(count + 3 * np.sqrt(count) + 5, area, perimeter, boundary)
        k_hi = max(k_hi, k_min * 1.5)
    else:
        k_hi = k_max
    rng = np.random.default_rng(_SEED)
    candidates = []   # (k, window id, distance/ρ, centre, vector)
    near_axis = []
    status, message = Status.ok, ""
    window_id = 0

    def scan(proxy, c: float, rho: float, depth: int = 0) -> None:
        nonlocal window_id, status, message
        expected = weyl_mean((c + 2 * rho) ** 2, area, perimeter, boundary) - weyl_mean(
            max(c - 2 * rho, 0.0) ** 2, area, perimeter, boundary)
        probes = min(int(np.ceil(1.5 * max(expected, 0.0))) + 8, size - 2)
        found = _beyn(proxy, c, rho, probes, size, rng, quadrature_nodes)
        if found is None and probes < size - 2:
            found = _beyn(proxy, c, rho, min(2 * probes, size - 2), size, rng, quadrature_nodes)
        if found is None:
            if depth < 4:
                scan(proxy, c - rho / 2, rho / 2, depth + 1)
                scan(proxy, c + rho / 2, rho / 2, depth + 1)
            else:
                status, message = Status.solver_failed, f"too many eigenvalues near k = {c:.4g}"
            return
        for kj, vec in zip(found[0], found[1].T):
            dist = abs(kj.real - c) / rho
            real = abs(kj.imag) < 1e-6 * max(1.0, abs(kj))
            if real and dist <= 1.25 and kj.real > 0:
                candidates.append((kj.real, window_id, dist, c, vec))
            elif not real and abs(kj.imag) < 0.2 * rho and dist <= 1.0:
                # The exact T(k) is singular only at real k here (see kernels); a root just
                # off the axis means the discretization no longer resolves this frequency.
                near_axis.append(kj)
        window_id += 1

    a, extensions = k_min, 0
    while True:
        b, centres, rho = _next_chunk(a, k_hi, radius, CHUNK_LENGTH)
        # The proxy interval reaches 2ρ beyond the discs, keeping them well inside its
        # Bernstein ellipse (rounding in the Chebyshev sum grows like ρ_z^M off the axis).
        proxy = build_proxy(geo, a - 2 * rho, b + 2 * rho, tolerance=1e-13)
        if proxy.tail > 1e-11:
            status = Status.solver_failed
            message = f"Chebyshev proxy unresolved on [{a:.3g}, {b:.3g}]"
        for c in centres:
            scan(proxy, c, rho)
        a = b
        if target is not None:
            found_below = sum(1 for cand in candidates if cand[0] < b - rho and cand[2] <= 1.0)
            if found_below >= target + 2:
                break
            if a >= k_hi * (1 - 1e-12):
                if extensions >= 4:
                    status, message = Status.solver_failed, "fewer eigenvalues found than requested"
                    break
                extensions += 1
                k_hi *= 1.25
        elif a >= k_hi * (1 - 1e-12):
            break
    k_hi_done = a
    # Keep each eigenvalue from the window whose centre is nearest to the group it belongs to.
    kept = []
    if candidates:
        ks = np.array([c[0] for c in candidates])
        for grp in _group(ks, 1e-6):
            mean = ks[grp].mean()
            centres = {candidates[i][1]: abs(mean - candidates[i][3]) for i in grp}
            best = min(centres, key=centres.get)
            kept.extend(i for i in grp if candidates[i][1] == best)
    kept.sort(key=lambda i: candidates[i][0])
    ks = np.array([candidates[i][0] for i in kept])
    vecs = np.stack([candidates[i][4] for i in kept], axis=1) if kept else np.zeros((size, 0))
    values, errors, cluster_ids, data, dens = [], [], [], [], []
    if boundary == "neumann":
        values.append(0.0)
        errors.append(0.0)
        cluster_ids.append(0)
        data.append(np.full(size, 1.0 / np.sqrt(area)))
        dens.append(np.zeros(size))
    tail = 0.0
    if ks.size:
        for cid, grp in enumerate(_group(ks, cluster_tol), start=len(values)):
            kk, kerr, q = _polish(geo, ks[grp], vecs[:, grp])
            lam = kk**2
            basis = _real_basis(q)
            tail = max(tail, _tail(basis))
            d, h = _normalize(basis, float(np.mean(lam)), nodes, boundary)
            if d is None:
                status, message = Status.solver_failed, "eigenfunction Gram matrix not positive"
                d, h = np.full((len(grp), size), np.nan), np.full((len(grp), size), np.nan)
            values.extend(lam)
            errors.extend(2 * kk * kerr)
            cluster_ids.extend([cid] * len(grp))
            data.extend(d)
            dens.extend(h)
    values = np.array(values)
    errors = np.array(errors)
    disc = 0.0
    if ks.size:
        # Resolution check: re-polish the top cluster on 5/4 as many nodes.
        groups = _group(ks, cluster_tol)
        if count is not None:
            limit = np.sort(values)[min(count, values.size) - 1]
        else:
            limit = k_max**2
        inside = [g for g in groups if np.min(ks[g]) ** 2 <= limit * (1 + 1e-9)]
        top = (inside or groups)[-1]
        k_top = float(np.mean(ks[top]))
        finer = refined_nodes(nodes, 2 * int(np.ceil(0.625 * size)))
        fine_vecs = _resample(vecs[:, top], finer.size)
        k_fine, _, _ = _polish(geometry(finer, boundary), ks[top], fine_vecs)
        k_here, _, _ = _polish(geo, ks[top], vecs[:, top])
        disc = float(np.max(np.abs(k_fine - k_here)) / k_top)
        errors = errors + 2.0 * disc * values
    if tail > 1e-4 or disc > 1e-6:
        status, message = max(status, Status.solver_failed), (
            f"boundary under-resolved (relative change {disc:.1e} on refinement); "
            "raise the resolution")
    order = np.argsort(values, kind="stable")
    values, errors = values[order], errors[order]
    cluster_ids = np.array(cluster_ids)[order]
    data, dens = np.array(data)[order], np.array(dens)[order]
    if count is not None:
        values, errors, cluster_ids = values[:count], errors[:count], cluster_ids[:count]
        data, dens = data[:count], dens[:count]
    else:
        keep = values <= k_max**2
        values, errors, cluster_ids, data, dens = (values[keep], errors[keep], cluster_ids[keep],
                                                   data[keep], dens[keep])
    k_top = np.sqrt(values[-1]) if values.size else k_hi
    near_axis = [kj for kj in near_axis if kj.real <= 1.02 * k_top]
    if near_axis:
        status, message = Status.solver_failed, (
            f"non-real roots near the axis (k = {near_axis[0]:.6g}): the boundary is "
            "under-resolved; raise the resolution")
    if not np.all(np.isfinite(values)):
        status = Status.nonfinite
    lam_top = float(values[-1]) if values.size else 0.0
    return Spectrum(boundary, values, errors, cluster_ids, data, dens, nodes,
                    float(weyl_mean(lam_top, area, perimeter, boundary)), status, message,
                    {"k_searched": k_hi_done, "windows": window_id, "fourier_tail": tail,
                     "refinement_change": disc,
                     "area": area, "perimeter": perimeter})
