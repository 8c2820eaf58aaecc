"""Leading wave-trace (Balian–Bloch / Guillemin–Melrose) coefficients of isolated periodic orbits.

Normalization: the oscillating part of the density of states in k = √λ,

    d(k) = Σ_j δ(k − k_j) = d̄(k) + Σ_γ A_γ cos(k L_γ − σ_γ π/2) + (lower order in k),
    A_γ = L_γ^# / (π |det(I − P_γ)|^{1/2}),   det(I − P) = 2 − tr P in the plane,

summed over periodic orbits γ and their iterates (L_γ^# the primitive length, P_γ the monodromy
of the full, possibly repeated, orbit). A self-retracing orbit (bouncing ball) counts once; any
other orbit and its time reverse are distinct, so their common term is doubled. σ_γ = μ_γ for
Neumann and μ_γ + 2n_γ for Dirichlet (n_γ reflections), i.e. Dirichlet carries (−1)^{n_γ};
μ_γ is the Maslov index (objectives.orbits: the Morse index of the length function).
Sources: R. Balian, C. Bloch, Ann. Phys. 69 (1972) 76–160; M. C. Gutzwiller, J. Math. Phys. 12
(1971) 343; presentation for billiards M. Sieber, N. Pavloff, C. Schmit, Phys. Rev. E 55 (1997)
2279 (all from memory).

Equivalent cosine-trace form: w(t) = Σ_j cos(k_j t) has near t = L the singularity
Re[C (t − L + i0)^{-1}] with C = i e^{iσπ/2} A/2 (Fourier transform of the above; cf. V. Guillemin,
R. Melrose, Adv. Math. 32 (1979) 204–232, from memory, whose constants differ by convention).
"""

from __future__ import annotations

from typing import NamedTuple

import jax.numpy as jnp
import numpy as np
from scipy.special import wofz

from .curve import Array
from .orbits import OrbitSet

BOUNDARIES = ("dirichlet", "neumann")


class WaveTerms(NamedTuple):
    """One entry per (orbit, iterate m): ``length`` m·L, ``amplitude`` A ≥ 0 (time reverses
    included), ``maslov`` μ, ``phase`` σπ/2 mod 2π for the chosen boundary condition,
    ``sign`` (−1)^{n} for Dirichlet or +1, ``multiplicity`` 1 (bouncing ball) or 2, and
    ``usable`` False where the orbit is degenerate (det(I − Pᵐ) ≈ 0) or not a valid orbit."""

    orbit: Array
    iterate: Array
    length: Array
    amplitude: Array
    maslov: Array
    phase: Array
    sign: Array
    multiplicity: Array
    usable: Array


def wave_coefficients(orbits: OrbitSet, boundary: str = "dirichlet",
                      iterates: int | None = None) -> WaveTerms:
    """Leading wave-trace coefficient of every orbit and iterate m = 1..M (module docstring).

    Differentiable in the shape through ``orbits.length`` and ``orbits.det_iterates`` (use the
    warm :func:`objectives.orbits.refine_orbits` output); integers are carried along.
    """
    if boundary not in BOUNDARIES:
        raise ValueError(f"boundary: expected one of {BOUNDARIES}, got {boundary!r}")
    total = orbits.det_iterates.shape[1]
    m_max = total if iterates is None else min(iterates, total)
    k = orbits.length.shape[0]
    m = jnp.arange(1, m_max + 1)
    dets = orbits.det_iterates[:, :m_max]
    mult = jnp.where(orbits.q == 2, 1, 2)
    primitive = orbits.length[:, None]
    abs_det = jnp.abs(dets)
    ok = (abs_det > 1e-8) & ((orbits.status == 0) | (orbits.status == 1))[:, None]
    amp = mult[:, None] * primitive / (jnp.pi * jnp.sqrt(jnp.where(ok, abs_det, 1.0)))
    maslov = orbits.maslov[:, :m_max]
    reflections = m[None, :] * orbits.q[:, None]
    extra = 2 * reflections if boundary == "dirichlet" else 0
    sigma = maslov + extra
    sign = jnp.where(boundary == "dirichlet", (-1) ** (reflections % 2), 1)
    flat = lambda x: jnp.reshape(x, (-1,))  # noqa: E731
    shape = (k, m_max)
    return WaveTerms(
        orbit=flat(jnp.broadcast_to(jnp.arange(k)[:, None], shape)),
        iterate=flat(jnp.broadcast_to(m[None, :], shape)),
        length=flat(m[None, :] * primitive),
        amplitude=flat(jnp.where(ok, amp, jnp.nan)),
        maslov=flat(maslov),
        phase=flat(jnp.mod(sigma * (jnp.pi / 2), 2 * jnp.pi)),
        sign=flat(jnp.broadcast_to(sign, shape)),
        multiplicity=flat(jnp.broadcast_to(mult[:, None], shape)),
        usable=flat(ok),
    )


def smoothed_singularity(u: np.ndarray, width: float) -> np.ndarray:
    """((x + i0)^{-1} * g_ε)(u) for the Gaussian g_ε(x) = e^{−x²/2ε²}/(√(2π) ε).

    Equal to −i∫₀^∞ e^{iku − ε²k²/2} dk = −i √(π/2)/ε · w(u/(√2 ε)) with w the Faddeeva
    function (scipy.special.wofz): real part the Gaussian-smoothed p.v. 1/u, imaginary part
    −π g_ε(u).
    """
    return -1j * np.sqrt(np.pi / 2) / width * wofz(np.asarray(u) / (np.sqrt(2.0) * width))


def geometric_wave_trace(terms: WaveTerms, t: np.ndarray, width: float) -> np.ndarray:
    """Periodic-orbit side of the Gaussian-smoothed even wave trace at times ``t``.

    Spectral counterpart: Σ_j cos(k_j t) e^{−ε² k_j²/2} = (w * g_ε)(t) with ε = ``width``. Each
    usable term adds Re[C ((· − mL + i0)^{-1} * g_ε)(t)], C = i e^{iσπ/2} A/2, at ±mL (w is even).
    Only the leading singularities: the t = 0 (Weyl) term and lower orders are not included.
    """
    t = np.asarray(t, dtype=np.float64)
    out = np.zeros_like(t)
    usable = np.asarray(terms.usable)
    for ell, amp, phase in zip(np.asarray(terms.length)[usable], np.asarray(terms.amplitude)[usable],
                               np.asarray(terms.phase)[usable]):
        coeff = 1j * np.exp(1j * phase) * amp / 2.0
        # w is even: the singularity at −L is the mirror image, (f(−·) * g)(t) = (f * g)(−t).
        out += np.real(coeff * smoothed_singularity(t - ell, width))
        out += np.real(coeff * smoothed_singularity(-t - ell, width))
    return out
