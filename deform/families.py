"""Shape families: differentiable boundary parametrizations with built-in symmetry and gauge.

Every family is a frozen (hashable) dataclass deriving from :class:`ShapeFamily`. It owns a
*full* coefficient vector whose layout it documents, of which only the ``free`` entries are
parameters; the others are held at their ``base`` values. Entries are held for two reasons:

* symmetry: coefficients the class forbids are held at zero, so every parameter vector
  stays exactly in its class;
* gauge: rigid motions are removed by holding the coefficients they move at first order
  (translation: the k = 1 modes; rotation: the sine of the lowest allowed mode m ≥ 2 in
  the radial families, Im ĉ₁ and Im ĉ_{1−n} in the complex family), and the scale is
  held when ``fix_scale`` is set (radius, mean support, Re ĉ₁, semi-axis a).

``boundary(params, t)`` maps a free-parameter vector and a scalar t ∈ [0, 2π) to a point
on a counter-clockwise curve; it is what :class:`objectives.Curve` calls.
"""

from __future__ import annotations

import abc
from dataclasses import dataclass, field
from functools import lru_cache
from typing import ClassVar

import jax
import jax.numpy as jnp
import numpy as np
from jax.experimental import jet

from .symmetry import Symmetry


class ShapeFamily(abc.ABC):
    """Abstract base: a coefficient layout, a boundary map and admissibility checks."""

    name: ClassVar[str]
    symmetry: Symmetry
    base: tuple[float, ...]
    free: tuple[int, ...]

    @property
    @abc.abstractmethod
    def labels(self) -> tuple[str, ...]:
        """Names of the full coefficient vector's entries (e.g. ``cos[2]``)."""

    @abc.abstractmethod
    def boundary_full(self, coeffs, t):
        """Point γ(t) from the full coefficient vector."""

    def admissibility(self, params) -> list[str]:
        """Family-specific reasons why ``params`` is not a domain (empty when fine)."""
        return []

    @property
    def n_params(self) -> int:
        return len(self.free)

    @property
    def param_labels(self) -> tuple[str, ...]:
        return tuple(self.labels[i] for i in self.free)

    def initial_params(self) -> np.ndarray:
        return np.asarray(self.base, dtype=np.float64)[list(self.free)]

    def full(self, params):
        coeffs = jnp.asarray(self.base, dtype=jnp.float64)
        if not self.free:
            return coeffs
        return coeffs.at[jnp.asarray(self.free)].set(params)

    def boundary(self, params, t):
        return self.boundary_full(self.full(params), t)

    def with_params(self, params) -> "ShapeFamily":
        """The same family with ``params`` written into its held base vector."""
        coeffs = np.asarray(self.full(jnp.asarray(params)), dtype=np.float64)
        return _replace_base(self, tuple(float(c) for c in coeffs))


def _replace_base(family, base):
    from dataclasses import replace

    return replace(family, base=base)


def _check_forbidden(labels, base, allowed, symmetry: Symmetry) -> None:
    for label, value, ok in zip(labels, base, allowed):
        if not ok and value != 0.0:
            raise ValueError(f"{label}: must be 0 in the {symmetry.describe()} symmetry class")


def _radial_layout(modes: int, symmetry: Symmetry, fix_scale: bool, scale_name: str,
                   cos_name: str, sin_name: str):
    """Labels, allowed mask and free indices for [c0, cos_1..K, sin_1..K]."""
    labels = (scale_name,) + tuple(f"{cos_name}[{k}]" for k in range(1, modes + 1)) + tuple(
        f"{sin_name}[{k}]" for k in range(1, modes + 1))
    allowed = [True] + [symmetry.radial_mode_allowed(k, False) for k in range(1, modes + 1)] + [
        symmetry.radial_mode_allowed(k, True) for k in range(1, modes + 1)]
    held = set()
    if fix_scale:
        held.add(0)
    if modes >= 1:
        held.update({1, modes + 1})  # k = 1: translation
    rotation_free = not symmetry.mirrored
    if rotation_free:
        for k in range(2, modes + 1):
            if symmetry.radial_mode_allowed(k, True):
                held.add(modes + k)  # sine of the lowest allowed mode fixes the rotation
                break
    free = tuple(i for i, ok in enumerate(allowed) if ok and i not in held)
    return labels, allowed, free


def _radial_base(scale: float, cos, sin, modes: int) -> tuple[float, ...]:
    cos = list(cos) + [0.0] * (modes - len(cos))
    sin = list(sin) + [0.0] * (modes - len(sin))
    return (float(scale),) + tuple(map(float, cos)) + tuple(map(float, sin))


def harmonics(t, ks: tuple[int, ...]):
    """(cos kt, sin kt) for the wave numbers ``ks`` at a scalar t.

    The derivative in t reuses the values, d/dt (cos kt, sin kt) = k(−sin kt, cos kt), so the
    nested derivatives that curve jets take (up to fourth order) cost no further sines and
    cosines; evaluating them is what dominates sampling a Fourier boundary.
    """
    ks = tuple(int(k) for k in ks)
    if isinstance(t, jet.JetTracer):
        # Taylor mode (objectives.birkhoff) cannot trace custom_jvp functions
        # (UnexpectedTracerError in jax 0.10); the plain table has polynomial jet cost anyway.
        return _harmonic_table(t, ks)
    return _harmonics_of(ks)(t)


@lru_cache(maxsize=None)
def _harmonics_of(ks: tuple[int, ...]):
    wave = np.asarray(ks, dtype=np.float64)

    @jax.custom_jvp
    def values(t):
        return _harmonic_table(t, ks)

    @values.defjvp
    def _jvp(primals, tangents):
        (t,), (dt,) = primals, tangents
        c, s = values(t)
        k = wave * dt
        return (c, s), (-k * s, k * c)

    return values


def _harmonic_table(t, ks):
    top = max(max(abs(k) for k in ks), 1)
    # e^{ikt} for k = 1..top by doubling (powers 1..m times e^{imt}), from one sine and cosine:
    # relative error ~log2(top)·ε instead of 2·top transcendental evaluations.
    re, im = jnp.cos(t)[None], jnp.sin(t)[None]
    while re.shape[0] < top:
        m = re.shape[0] - 1
        re, im = (jnp.concatenate([re, re * re[m] - im * im[m]]),
                  jnp.concatenate([im, im * re[m] + re * im[m]]))
    if ks == tuple(range(1, top + 1)):
        return re[:top], im[:top]
    if ks == tuple(range(-top, top + 1)):
        return (jnp.concatenate([re[top - 1::-1], jnp.ones(1), re[:top]]),
                jnp.concatenate([-im[top - 1::-1], jnp.zeros(1), im[:top]]))
    index = np.asarray([max(abs(k) - 1, 0) for k in ks])
    sign = np.asarray([np.sign(k) for k in ks], dtype=np.float64)
    return jnp.where(sign == 0, 1.0, re[index]), sign * im[index]


def _fourier_sum(coeffs, t, modes):
    # one dot, not a sum of products: vmapped over ≥128 points XLA (CPU) stops fusing the
    # product-then-reduce form of the curve jets (then ~1.6× slower); one dot is also faster
    # than two below that
    cos_kt, sin_kt = harmonics(t, tuple(range(1, modes + 1)))
    return coeffs[0] + jnp.dot(coeffs[1:], jnp.concatenate([cos_kt, sin_kt]))


@dataclass(frozen=True)
class Polar(ShapeFamily):
    """Star-shaped about the origin: r(θ) = radius + Σ_{k=1}^{K} (c_k cos kθ + s_k sin kθ).

    Full vector [radius, c_1..c_K, s_1..s_K]; the curve parameter is the polar angle θ.
    """

    name: ClassVar[str] = "polar"
    modes: int
    symmetry: Symmetry = field(default_factory=Symmetry)
    base: tuple[float, ...] = ()
    free: tuple[int, ...] = ()

    @classmethod
    def build(cls, radius, cos=(), sin=(), modes=None, symmetry=Symmetry(), fix_scale=False):
        modes = max(len(cos), len(sin), 1) if modes is None else modes
        labels, allowed, free = _radial_layout(modes, symmetry, fix_scale, "radius", "cos", "sin")
        base = _radial_base(radius, cos, sin, modes)
        _check_forbidden(labels, base, allowed, symmetry)
        return cls(modes, symmetry, base, free)

    @property
    def labels(self):
        return _radial_layout(self.modes, self.symmetry, False, "radius", "cos", "sin")[0]

    def boundary_full(self, coeffs, t):
        r = _fourier_sum(coeffs, t, self.modes)
        return r * jnp.stack([jnp.cos(t), jnp.sin(t)])

    def admissibility(self, params):
        theta = np.linspace(0.0, 2.0 * np.pi, 2048, endpoint=False)
        coeffs = np.asarray(self.full(jnp.asarray(params)))
        k = np.arange(1, self.modes + 1)
        r = coeffs[0] + (np.cos(np.outer(theta, k)) @ coeffs[1:self.modes + 1]
                         + np.sin(np.outer(theta, k)) @ coeffs[self.modes + 1:])
        i = int(np.argmin(r))
        if r[i] <= 0.0:
            return [f"radius r(θ) = {r[i]:.4g} is not positive at θ = {theta[i]:.4f}"]
        return []


@dataclass(frozen=True)
class Support(ShapeFamily):
    """Convex domains by the support function h(φ) = p + Σ_k (a_k cos kφ + b_k sin kφ).

    The boundary point with outward normal n(φ) = (cos φ, sin φ) is h n + h' n'; its radius
    of curvature is h + h'', which must stay positive. Full vector [p, a_1..a_K, b_1..b_K].
    """

    name: ClassVar[str] = "support"
    modes: int
    symmetry: Symmetry = field(default_factory=Symmetry)
    base: tuple[float, ...] = ()
    free: tuple[int, ...] = ()

    @classmethod
    def build(cls, mean, cos=(), sin=(), modes=None, symmetry=Symmetry(), fix_scale=False):
        modes = max(len(cos), len(sin), 1) if modes is None else modes
        labels, allowed, free = _radial_layout(modes, symmetry, fix_scale, "mean", "cos", "sin")
        base = _radial_base(mean, cos, sin, modes)
        _check_forbidden(labels, base, allowed, symmetry)
        return cls(modes, symmetry, base, free)

    @property
    def labels(self):
        return _radial_layout(self.modes, self.symmetry, False, "mean", "cos", "sin")[0]

    def boundary_full(self, coeffs, phi):
        k = jnp.arange(1, self.modes + 1, dtype=jnp.float64)
        cos_kp, sin_kp = harmonics(phi, tuple(range(1, self.modes + 1)))
        # h − p and h' as one matrix-vector product (see _fourier_sum)
        h, dh = jnp.stack([jnp.concatenate([cos_kp, sin_kp]),
                           jnp.concatenate([-k * sin_kp, k * cos_kp])]) @ coeffs[1:]
        h = coeffs[0] + h
        n = jnp.stack([jnp.cos(phi), jnp.sin(phi)])
        dn = jnp.stack([-jnp.sin(phi), jnp.cos(phi)])
        return h * n + dh * dn

    def radius_of_curvature(self, params, phi):
        coeffs = self.full(params)
        k = jnp.arange(1, self.modes + 1, dtype=jnp.float64)
        c, s = coeffs[1:self.modes + 1], coeffs[self.modes + 1:]
        return coeffs[0] + jnp.sum((1.0 - k**2) * (c * jnp.cos(k * phi) + s * jnp.sin(k * phi)))

    def admissibility(self, params):
        phi = np.linspace(0.0, 2.0 * np.pi, 2048, endpoint=False)
        coeffs = np.asarray(self.full(jnp.asarray(params)))
        k = np.arange(1, self.modes + 1)
        rho = coeffs[0] + (np.cos(np.outer(phi, k)) @ ((1 - k**2) * coeffs[1:self.modes + 1])
                           + np.sin(np.outer(phi, k)) @ ((1 - k**2) * coeffs[self.modes + 1:]))
        i = int(np.argmin(rho))
        if rho[i] <= 0.0:
            return [f"radius of curvature h + h'' = {rho[i]:.4g} is not positive at φ = "
                    f"{phi[i]:.4f} (a support function must describe a convex curve)"]
        return []


def _complex_layout(modes: int, symmetry: Symmetry, fix_scale: bool):
    ks = list(range(-modes, modes + 1))
    labels = tuple(f"re[{k}]" for k in ks) + tuple(f"im[{k}]" for k in ks)
    allowed = [symmetry.complex_mode_allowed(k, False) for k in ks] + [
        symmetry.complex_mode_allowed(k, True) for k in ks]
    n = len(ks)
    held = set()
    if symmetry.complex_mode_allowed(0, False):
        held.update({ks.index(0), n + ks.index(0)})  # ĉ₀: translation
    if not symmetry.mirrored:
        held.add(n + ks.index(1))  # Im ĉ₁ and Im ĉ_{1-n}: rotation and parameter shift
        partner = 1 - max(symmetry.rotation_order, 2)
        if -modes <= partner:
            held.add(n + ks.index(partner))
    if fix_scale:
        held.add(ks.index(1))
    free = tuple(i for i, ok in enumerate(allowed) if ok and i not in held)
    return labels, allowed, free


@dataclass(frozen=True)
class FourierCurve(ShapeFamily):
    """General closed curve z(t) = Σ_{|k|≤K} ĉ_k e^{ikt} (non-star-shaped, non-convex).

    Full vector [Re ĉ_{-K}..Re ĉ_K, Im ĉ_{-K}..Im ĉ_K]. Tangential reparametrizations other
    than the parameter shift are not removed: they move the coefficients but not the curve.
    """

    name: ClassVar[str] = "curve"
    modes: int
    symmetry: Symmetry = field(default_factory=Symmetry)
    base: tuple[float, ...] = ()
    free: tuple[int, ...] = ()

    @classmethod
    def build(cls, terms, modes=None, symmetry=Symmetry(), fix_scale=False):
        """``terms``: iterable of (k, Re ĉ_k, Im ĉ_k)."""
        terms = list(terms)
        modes = max([abs(int(k)) for k, _, _ in terms] + [1]) if modes is None else modes
        ks = list(range(-modes, modes + 1))
        re, im = [0.0] * len(ks), [0.0] * len(ks)
        for k, a, b in terms:
            re[ks.index(int(k))] += float(a)
            im[ks.index(int(k))] += float(b)
        labels, allowed, free = _complex_layout(modes, symmetry, fix_scale)
        base = tuple(re + im)
        _check_forbidden(labels, base, allowed, symmetry)
        return cls(modes, symmetry, base, free)

    @property
    def labels(self):
        return _complex_layout(self.modes, self.symmetry, False)[0]

    def boundary_full(self, coeffs, t):
        c, s = harmonics(t, tuple(range(-self.modes, self.modes + 1)))
        # coeffs = [Re z_k, Im z_k]: one matrix-vector product for both coordinates (see
        # _fourier_sum)
        return jnp.stack([jnp.concatenate([c, -s]), jnp.concatenate([s, c])]) @ coeffs

    def admissibility(self, params):
        from objectives.curve import Curve
        from objectives.geometry import area

        a = float(area(Curve(self.boundary, jnp.asarray(params))))
        if a <= 0.0:
            return [f"the curve runs clockwise (signed area {a:.4g}); list the coefficients "
                    "of a counter-clockwise curve"]
        return []


@dataclass(frozen=True)
class Ellipse(ShapeFamily):
    """x = a cos t, y = b sin t; full vector [a, b]; dihedral D₂ by construction."""

    name: ClassVar[str] = "ellipse"
    symmetry: Symmetry = field(default_factory=lambda: Symmetry("dihedral", 2))
    base: tuple[float, ...] = (1.0, 1.0)
    free: tuple[int, ...] = (0, 1)

    @classmethod
    def build(cls, a, b, fix_scale=False):
        if not (a > 0 and b > 0):
            raise ValueError("a, b: semi-axes must be positive")
        return cls(base=(float(a), float(b)), free=(1,) if fix_scale else (0, 1))

    @property
    def labels(self):
        return ("a", "b")

    def boundary_full(self, coeffs, t):
        return jnp.stack([coeffs[0] * jnp.cos(t), coeffs[1] * jnp.sin(t)])

    def admissibility(self, params):
        a, b = np.asarray(self.full(jnp.asarray(params)))
        return [] if a > 0 and b > 0 else [f"semi-axes a = {a:.4g}, b = {b:.4g} must be positive"]


@dataclass(frozen=True)
class Disk(ShapeFamily):
    """Circle of the given radius about the origin; full vector [radius]."""

    name: ClassVar[str] = "disk"
    symmetry: Symmetry = field(default_factory=lambda: Symmetry("none"))
    base: tuple[float, ...] = (1.0,)
    free: tuple[int, ...] = (0,)

    @classmethod
    def build(cls, radius, fix_scale=False):
        if not radius > 0:
            raise ValueError("radius: must be positive")
        return cls(base=(float(radius),), free=() if fix_scale else (0,))

    @property
    def labels(self):
        return ("radius",)

    def boundary_full(self, coeffs, t):
        return coeffs[0] * jnp.stack([jnp.cos(t), jnp.sin(t)])

    def admissibility(self, params):
        r = float(np.asarray(self.full(jnp.asarray(params)))[0])
        return [] if r > 0 else [f"radius {r:.4g} must be positive"]


FAMILIES = {f.name: f for f in (Polar, FourierCurve, Support, Ellipse, Disk)}
