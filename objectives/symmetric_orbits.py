"""Marked length spectrum of a mirror-symmetric billiard: lengths of the symmetric p/q orbits.

The domain is symmetric about the x-axis with γ(−t) = conj γ(t) (every mirror family has this
parametrization), so γ(0) and γ(π) lie on the axis. A p/q configuration is q bounce parameters
t_0 < t_1 < … < t_{q−1} < t_0 + 2πp (lifted) with length W(t) = Σ_i |γ(t_{i+1}) − γ(t_i)|;
periodic billiard orbits are the critical points of W (Birkhoff 1927). An orbit is *symmetric*
when t_{c−i} = 2a − t_i (indices mod q) for a centre index c ∈ {0, 1} and an axis point
a ∈ {0, π}. Two symmetric p/q orbits exist for every mirror domain (fixed points of the
reflection acting on the orbit circle); we mark them

* q odd:  ``0`` (a bounce at γ(0)) and ``π`` (a bounce at γ(π)); each also has one chord
  crossing the axis at a right angle;
* q even: ``axis`` (bounces at γ(0) and γ(π)) and ``perp`` (two chords perpendicular to the axis).

With t = t⁰ + M u, where t⁰_i = a + 2πp(i − c/2)/q and M sends u_j to +1 at a representative
index and −1 at its partner c − i, symmetric configurations are exactly the u ∈ R^{⌊(q−c)/2⌋}
of the reduced length W̃(u) = W(t⁰ + M u). By the principle of symmetric criticality a critical
point of W̃ is a critical point of W. Near integrable tables (disk, ellipse) the p/q orbits come
in one-parameter families, so W has a degenerate Hessian and generic orbit lengths are not smooth
in the shape; the family is moved by the reflection, whose fixed points are isolated, so W̃ keeps
a non-degenerate Hessian and the symmetric lengths stay smooth. This is the marked length
spectrum used by De Simoi, Kaloshin & Wei, "Dynamical spectral rigidity among Z₂-symmetric
strictly convex domains, close to a circle", Ann. of Math. 186 (2017) 277–314.

Lengths are differentiated by the envelope theorem: the solve runs under ``stop_gradient`` and
W is evaluated at the stopped critical point, which gives the exact first derivative in the
shape because ∇_t W = 0 there.
"""

from __future__ import annotations

from math import gcd
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from .curve import Array, Curve, cross, safe_norm
from .geometry import arclength_parameters
from .status import Status, code, combine

KINDS_ODD = ("0", "π")
KINDS_EVEN = ("axis", "perp")


class SymmetricOrbit(NamedTuple):
    """A marked symmetric orbit: rotation number p/q and kind (see module docstring)."""

    p: int
    q: int
    kind: str

    @property
    def label(self) -> str:
        return f"L{self.p}/{self.q}[{self.kind}]"


def orbit_list(max_period: int, all_rotations: bool = False,
               kinds: tuple[str, ...] = ("A", "B")) -> tuple[SymmetricOrbit, ...]:
    """Symmetric orbits p/q for q = 2..max_period (p = 1, or all coprime p ≤ q/2).

    ``kinds`` picks the first ("A": ``0``/``axis``) and/or second ("B": ``π``/``perp``) kind.
    """
    out = []
    for q in range(2, max_period + 1):
        ps = [p for p in range(1, q // 2 + 1) if gcd(p, q) == 1] if all_rotations else [1]
        names = KINDS_ODD if q % 2 else KINDS_EVEN
        for p in ps:
            for which in kinds:
                out.append(SymmetricOrbit(p, q, names[0 if which == "A" else 1]))
    return tuple(out)


def layout(orbit: SymmetricOrbit) -> tuple[np.ndarray, np.ndarray]:
    """(t⁰, M): symmetric configurations are t = t⁰ + M u (lifted bounce parameters)."""
    p, q, kind = orbit
    centre = 1 if kind == "perp" else 0
    anchor = np.pi if kind == "π" else 0.0
    idx = np.arange(q)
    t0 = anchor + 2.0 * np.pi * p * (idx - centre / 2.0) / q
    columns = []
    for i in range(q):
        j = (centre - i) % q
        if i < j:
            col = np.zeros(q)
            col[i], col[j] = -1.0, 1.0  # δ_i = −u, δ_{c−i} = +u keeps t_{c−i} = 2a − t_i
            columns.append(col)
    m = np.stack(columns, axis=1) if columns else np.zeros((q, 0))
    return t0, m


def length(curve: Curve, t: Array, winding: int) -> Array:
    """W(t) = Σ_i |γ(t_{i+1}) − γ(t_i)| with t_q = t_0 + 2π·winding (cyclic)."""
    pts = jax.vmap(curve)(t)
    nxt = jnp.roll(pts, -1, axis=0)
    return jnp.sum(safe_norm(nxt - pts))


def length_gradient(curve: Curve, t: Array) -> Array:
    """∂W/∂t_i = ⟨γ'(t_i), e_{i−1} − e_i⟩ with e_i the unit vector of chord i (t_i → t_{i+1});
    this is the generating-function identity ∂h/∂s = −cos θ, ∂h/∂s' = cos θ' in t units."""
    pts, tangents = jax.vmap(lambda s: jax.jvp(curve, (s,), (jnp.ones_like(s),)))(t)
    chord = jnp.roll(pts, -1, axis=0) - pts
    unit = chord / safe_norm(chord)[:, None]
    return jnp.sum(tangents * (jnp.roll(unit, 1, axis=0) - unit), axis=1)


class OrbitSolution(NamedTuple):
    """A solved orbit: reduced coordinates u*, bounce parameters t*, diagnostics."""

    u: Array
    t: Array
    residual: Array          # |∇_t W| at t*, relative to W (full, not reduced, gradient)
    reduced_gap: Array       # min |eig ∇²_u W̃| / max |eig|  (1 when there is nothing to solve)
    family_gap: Array        # min |eig ∇²_t W| / max |eig| of the full cyclic Hessian
    status: Array


def _ascent(grad, u0, steps, max_step):
    """Saddle-free Newton ascent to a local maximum of a function with gradient ``grad``:
    du = Q |Λ|⁻¹ Qᵀ g from the eigen-decomposition of the Hessian H = QΛQᵀ, clipped to
    ``max_step``. Near a non-degenerate maximum this is Newton's method (quadratic)."""
    hess = jax.jacfwd(grad)

    def step(_, u):
        g = grad(u)
        lam, q = jnp.linalg.eigh(hess(u))
        du = q @ ((q.T @ g) / jnp.maximum(jnp.abs(lam), 1e-12 * jnp.max(jnp.abs(lam))))
        norm = jnp.linalg.norm(du)
        du = jnp.where(norm > max_step, du * max_step / jnp.maximum(norm, 1e-300), du)
        return jnp.where(jnp.all(jnp.isfinite(du)), u + du, u)

    return jax.lax.fori_loop(0, steps, step, u0)


def _gap(h):
    eig = jnp.abs(jnp.linalg.eigvalsh(0.5 * (h + h.T)))
    return jnp.min(eig) / jnp.maximum(jnp.max(eig), 1e-300)


def solve(curve: Curve, orbit: SymmetricOrbit, u0: Array, steps: int = 12,
          tol: float = 1e-9, degenerate_tol: float = 1e-7, free: bool = False) -> OrbitSolution:
    """The local maximum of the reduced length W̃ near ``u0`` (saddle-free Newton ascent),
    all under stop_gradient. Each kind's orbit is the maximum of W̃ over its symmetric
    configurations, which exists for every mirror domain and is isolated near the disk and
    the ellipse.

    With ``free`` the symmetric solution is then refined by the same ascent over all q bounce
    points (the generic, unmarked maximal p/q orbit of Birkhoff); its status is ``degenerate`` when the full Hessian is near singular.
    Status: ``orbit_not_converged`` if |∇_t W|/W > ``tol`` (also when the shape is not mirror
    symmetric, so the symmetric configuration is no orbit), ``branch_changed`` if the bounce
    order is lost, ``orbit_leaves_domain`` if a chord leaves on the wrong side of the tangent,
    ``degenerate`` if the relevant Hessian gap is below ``degenerate_tol``.
    """
    curve = jax.lax.stop_gradient(curve)
    t0_np, m_np = layout(orbit)
    t0, m = jnp.asarray(t0_np), jnp.asarray(m_np)
    max_step = np.pi / (4 * orbit.q)
    full_grad = lambda s: length_gradient(curve, s)  # noqa: E731
    if m_np.shape[1]:
        reduced_grad = lambda u: m.T @ full_grad(t0 + m @ u)  # noqa: E731
        u = _ascent(reduced_grad, jnp.asarray(u0, dtype=jnp.float64), steps, max_step)
        reduced_gap = _gap(jax.jacfwd(reduced_grad)(u))
    else:
        u = jnp.zeros(0)
        reduced_gap = jnp.asarray(1.0)
    t = t0 + m @ u
    if free:
        t = _ascent(full_grad, t, steps, max_step)
        family_gap = _gap(jax.jacfwd(full_grad)(t))
    else:
        family_gap = jnp.asarray(jnp.nan)  # not computed: the reduced gap is what matters
    w = length(curve, t, orbit.p)
    residual = jnp.linalg.norm(full_grad(t)) / w
    gap = family_gap if free else reduced_gap
    gaps = jnp.diff(jnp.concatenate([t, t[:1] + 2.0 * jnp.pi * orbit.p]))
    status = combine(
        jnp.where(gap < degenerate_tol, code(Status.degenerate), code(Status.ok)),
        jnp.where(jnp.all(gaps > 0.0), code(Status.ok), code(Status.branch_changed)),
        jnp.where(_chords_inward(curve, t), code(Status.ok), code(Status.orbit_leaves_domain)),
        jnp.where(residual <= tol, code(Status.ok), code(Status.orbit_not_converged)),
        jnp.where(jnp.isfinite(w), code(Status.ok), code(Status.nonfinite)),
    )
    return OrbitSolution(u, t, residual, reduced_gap, family_gap, status)


def _chords_inward(curve: Curve, t: Array) -> Array:
    """Every chord leaves and arrives on the inner side of the tangent (⟨N, chord⟩ > 0)."""
    pts = jax.vmap(curve)(t)
    tangents = jax.vmap(lambda s: jax.jvp(curve, (s,), (jnp.ones_like(s),))[1])(t)
    chord = jnp.roll(pts, -1, axis=0) - pts
    leaving = cross(tangents, chord) > 0.0
    arriving = cross(jnp.roll(tangents, -1, axis=0), -chord) > 0.0
    return jnp.all(leaving & arriving)


def orbit_length(curve: Curve, orbit: SymmetricOrbit, t_star: Array) -> Array:
    """W at the (stopped) critical point t*: exact value and first derivative (envelope)."""
    return length(curve, jax.lax.stop_gradient(t_star), orbit.p)


def initial_guess(orbit: SymmetricOrbit, curve: Curve | None = None,
                  resolution: int = 256) -> Array:
    """u with bounce points equally spaced in arclength along the symmetric layout (u = 0,
    equal spacing in t, when no curve is given; both are exact for the disk)."""
    t0_np, m_np = layout(orbit)
    if curve is None or not m_np.shape[1]:
        return jnp.zeros(m_np.shape[1])
    p, q, _ = orbit
    nodes_2q = arclength_parameters(jax.lax.stop_gradient(curve), 2 * q, resolution)
    # t⁰_i sits at the arclength fraction (a/2π + p(i − c/2)/q), a multiple of 1/(2q)
    index = np.rint(2 * q * (t0_np / (2.0 * np.pi))).astype(int) % (2 * q)
    target = nodes_2q[index]
    shift = jnp.mod(target - t0_np + np.pi, 2.0 * np.pi) - np.pi
    return jnp.asarray(np.linalg.pinv(m_np)) @ shift


def marked_lengths(curve: Curve, orbits: tuple[SymmetricOrbit, ...], guesses=None,
                   steps: int = 12, tol: float = 1e-9, degenerate_tol: float = 1e-7,
                   free: bool = False):
    """(lengths, solutions, per-orbit statuses) of the listed symmetric orbits."""
    if guesses is None:
        guesses = [initial_guess(o, curve) for o in orbits]
    sols = [solve(curve, o, g, steps, tol, degenerate_tol, free) for o, g in zip(orbits, guesses)]
    lengths = jnp.stack([orbit_length(curve, o, s.t) for o, s in zip(orbits, sols)])
    return lengths, sols, jnp.stack([s.status for s in sols])
