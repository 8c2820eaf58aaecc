"""Wave-trace coefficients of periodic orbits: normalization, phases, smoothing, derivatives."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import dawsn

from deform.families import Ellipse
from objectives import orbits as orb
from objectives import wave
from objectives.curve import Curve

ELLIPSE = Ellipse.build(1.0, 0.6)


@pytest.fixture(scope="module")
def ellipse_orbits():
    return orb.find_orbits(Curve(ELLIPSE.boundary, jnp.array([1.0, 0.6])), 3)


def _term(terms, length, iterate=1):
    k = [i for i in range(len(terms.length))
         if abs(terms.length[i] - length) < 1e-9 and terms.iterate[i] == iterate]
    assert len(k) == 1
    return k[0]


def test_ellipse_bouncing_ball_amplitudes_and_phases(ellipse_orbits):
    # Ellipse a = 1, b = 0.6, density-of-states normalization A = L/(π|det(I − P)|^{1/2}) with
    # phase σπ/2 (Balian & Bloch 1972; Gutzwiller 1971; Sieber, Pavloff & Schmit 1997, from
    # memory). Amplitudes and phases of the two bouncing balls as determined numerically from
    # ~3000 Mathieu-function eigenvalues (smoothed spectral Fourier transform at k ∈ [30, 141]):
    # minor axis 2|F| = 0.39788, phase +π/2; major axis 2|F| = 0.14225 (D) / 0.14396 (N), phase π.
    for boundary in ("dirichlet", "neumann"):
        terms = wave.wave_coefficients(ellipse_orbits, boundary)
        minor, major = _term(terms, 2.4), _term(terms, 4.0)
        assert abs(terms.amplitude[minor] - 0.39788) < 2e-5
        assert abs(terms.amplitude[major] - 0.1431) < 0.0015  # within the measured D/N spread
        assert abs(terms.phase[minor] - np.pi / 2) < 1e-12
        assert abs(terms.phase[major] - np.pi) < 1e-12
        # Closed form of the same normalization: A = 4b / (π |2 − tr P|^{1/2}), tr P = 4g² − 2.
        g = 1 - 2 * 0.6**2
        assert abs(terms.amplitude[minor] - 2.4 / (np.pi * np.sqrt(4 - 4 * g * g))) < 1e-12


def test_dirichlet_sign_and_time_reversal(ellipse_orbits):
    # Dirichlet carries (−1)^{reflections} relative to Neumann (σ_D = μ + 2n); orbits with q ≥ 3
    # and their time reverses count twice, self-retracing bouncing balls once (Sieber et al. 1997,
    # from memory). Degenerate orbits (the ellipse's q ≥ 3 families) are not usable here.
    d = wave.wave_coefficients(ellipse_orbits, "dirichlet")
    n = wave.wave_coefficients(ellipse_orbits, "neumann")
    q = np.asarray(ellipse_orbits.q)[np.asarray(d.orbit)]
    reflections = q * np.asarray(d.iterate)
    np.testing.assert_array_equal(d.sign, (-1) ** reflections)
    np.testing.assert_allclose(np.cos(d.phase), np.cos(n.phase) * (-1) ** reflections, atol=1e-12)
    np.testing.assert_array_equal(d.multiplicity, np.where(q == 2, 1, 2))
    assert not np.any(np.asarray(d.usable)[q > 2])


def test_iterates_use_powers_of_the_monodromy(ellipse_orbits):
    # det(I − Pᵐ) = 2 − tr Pᵐ with tr Pᵐ = 2 cos(mα) for an elliptic orbit (Cayley–Hamilton).
    k = int(np.nonzero((ellipse_orbits.q == 2) & (ellipse_orbits.kind == orb.ELLIPTIC))[0][0])
    alpha = ellipse_orbits.angle[k]
    for m in range(1, 4):
        assert abs(ellipse_orbits.det_iterates[k, m - 1] - (2 - 2 * np.cos(m * alpha))) < 1e-12
    terms = wave.wave_coefficients(ellipse_orbits, "neumann")
    i = _term(terms, 4.8, iterate=2)
    expected = 2.4 / (np.pi * np.sqrt(abs(2 - 2 * np.cos(2 * alpha))))
    assert abs(terms.amplitude[i] - expected) < 1e-12


def test_smoothed_singularity_against_quadrature():
    # ((x + i0)^{-1} * g_ε)(u) = −i∫₀^∞ e^{iku − ε²k²/2} dk, checked by adaptive quadrature
    # (scipy.integrate.quad); its imaginary part is −π g_ε(u) (Sokhotski–Plemelj).
    width = 0.05
    for u in (-0.2, -0.03, 0.0, 0.01, 0.15):
        re = quad(lambda k: np.sin(k * u) * np.exp(-0.5 * (width * k) ** 2), 0, np.inf, limit=400)[0]
        im = -quad(lambda k: np.cos(k * u) * np.exp(-0.5 * (width * k) ** 2), 0, np.inf, limit=400)[0]
        value = wave.smoothed_singularity(np.array([u]), width)[0]
        assert abs(value - (re + 1j * im)) < 1e-8 * max(1.0, abs(value))
        gauss = np.exp(-u * u / (2 * width**2)) / (np.sqrt(2 * np.pi) * width)
        assert abs(value.imag + np.pi * gauss) < 1e-10


def test_geometric_wave_trace_peaks_at_orbit_lengths(ellipse_orbits):
    # A phase σπ/2 = π/2 term is a smoothed −(A/2) p.v. 1/(t − L): odd about L; a phase π term
    # is −(A/2) π δ(t − L): a negative Gaussian peak of height −(A/2)π g_ε(0) (REFERENCES-free
    # check of the convolution formula against the distribution it smooths).
    terms = wave.wave_coefficients(ellipse_orbits, "neumann", iterates=1)
    width = 0.01
    only = lambda i: terms._replace(usable=np.arange(len(terms.length)) == i)  # noqa: E731
    major, minor = _term(terms, 4.0), _term(terms, 2.4)
    peak = wave.geometric_wave_trace(only(major), np.array([4.0]), width)[0]
    expected = -0.5 * terms.amplitude[major] * np.pi / (np.sqrt(2 * np.pi) * width)
    assert abs(peak - expected) < 1e-9 * abs(expected)
    left, right = wave.geometric_wave_trace(only(minor), np.array([2.4 - 0.05, 2.4 + 0.05]), width)
    # −(A/2) (p.v. 1/u * g_ε) at u = t − L, the smoothed p.v. being √2 D(u/√2ε)/ε with Dawson's
    # integral D (scipy.special.dawsn); the even trace adds the mirror +(A/2) p.v. 1/(t + L).
    half = 0.5 * terms.amplitude[minor]
    pv = lambda u: np.sqrt(2) * dawsn(u / (np.sqrt(2) * width)) / width  # noqa: E731
    assert abs(left - (-half * pv(-0.05) + half * pv(4.75))) < 1e-9
    assert abs(right - (-half * pv(0.05) + half * pv(4.85))) < 1e-9
    # Even in t.
    t = np.array([1.3, 2.5, 3.9])
    np.testing.assert_allclose(wave.geometric_wave_trace(terms, -t, width),
                               wave.geometric_wave_trace(terms, t, width), rtol=1e-12)


def test_amplitude_gradient_against_central_differences(ellipse_orbits):
    # Amplitudes through the warm solve: implicit derivative vs central differences in (a, b).
    state = jax.tree_util.tree_map(jnp.asarray, ellipse_orbits)
    bb = np.nonzero(np.asarray(ellipse_orbits.q) == 2)[0]

    def amps(x):
        out = orb.refine_orbits(Curve(ELLIPSE.boundary, x), state)
        terms = wave.wave_coefficients(out, "dirichlet", iterates=2)
        keep = np.isin(np.asarray(terms.orbit), bb)
        return terms.amplitude[keep]

    x0 = jnp.array([1.0, 0.6])
    jac = np.asarray(jax.jacfwd(amps)(x0))
    h = 1e-6
    fd = np.stack([(amps(x0 + h * e) - amps(x0 - h * e)) / (2 * h) for e in np.eye(2)], 1)
    assert np.all(np.isfinite(jac))
    np.testing.assert_allclose(jac, fd, rtol=1e-6, atol=1e-8)
