"""Truncated power series in one and two variables as flat JAX arrays.

A *bivariate* series of degree ≤ n is the vector of its coefficients over the monomials
x^i y^j with i + j ≤ n, ordered by total degree and, within a degree, by decreasing i
(``monomials(n)``); its length is (n+1)(n+2)/2 and n is read off the array's last axis.
A *univariate* series of degree ≤ n is the vector of its n + 1 coefficients a_0..a_n.
Products are truncated at degree n (the algebra R[x, y]/(x, y)^{n+1}). Substitution into a
series (``compose``) requires the substituted series to vanish at the origin. Coefficients
may be real or complex; every function is jittable and differentiable, and loops over the
degree are ``lax.scan``s so the traced graph stays small at high order.
"""

from __future__ import annotations

import functools
import math

import jax
import jax.numpy as jnp
import numpy as np

Array = jax.Array


# ----------------------------------------------------------------------------- tables
@functools.lru_cache(maxsize=None)
def monomials(degree: int) -> tuple[tuple[int, int], ...]:
    """Exponents (i, j) of x^i y^j, i + j ≤ degree, by total degree then decreasing i."""
    return tuple((i, d - i) for d in range(degree + 1) for i in range(d, -1, -1))


@functools.lru_cache(maxsize=None)
def _degree_of_length(length: int) -> int:
    degree = int(round((math.sqrt(8 * length + 1) - 3) / 2))
    if (degree + 1) * (degree + 2) // 2 != length:
        raise ValueError(f"series length {length} is not (n+1)(n+2)/2 for an integer degree n")
    return degree


def degree(series: Array) -> int:
    """Truncation degree n of a bivariate series (from its static length)."""
    return _degree_of_length(series.shape[-1])


def index(degree_: int, i: int, j: int) -> int:
    """Position of x^i y^j in a series of the given degree."""
    d = i + j
    return d * (d + 1) // 2 + (d - i)


@functools.lru_cache(maxsize=None)
def _shift_table(degree_: int) -> np.ndarray:
    """T[k, c] = position of monomial c − k (or the padding slot M when c − k is not one)."""
    mons = monomials(degree_)
    size = len(mons)
    table = np.full((size, size), size)
    for k, (i1, j1) in enumerate(mons):
        for c, (i2, j2) in enumerate(mons):
            if i2 >= i1 and j2 >= j1:
                table[k, c] = index(degree_, i2 - i1, j2 - j1)
    return table


@functools.lru_cache(maxsize=None)
def _coefficient_grid(degree_: int) -> np.ndarray:
    """G[i, j] = position of x^i y^j (padding slot M when i + j > degree)."""
    size = (degree_ + 1) * (degree_ + 2) // 2
    grid = np.full((degree_ + 1, degree_ + 1), size)
    for i in range(degree_ + 1):
        for j in range(degree_ + 1 - i):
            grid[i, j] = index(degree_, i, j)
    return grid


def _padded(a: Array) -> Array:
    return jnp.concatenate([a, jnp.zeros(a.shape[:-1] + (1,), dtype=a.dtype)], axis=-1)


@functools.lru_cache(maxsize=None)
def exponents(degree_: int) -> tuple[np.ndarray, np.ndarray]:
    """Arrays (i, j) of the exponents of every monomial, in series order."""
    mons = np.asarray(monomials(degree_))
    return mons[:, 0], mons[:, 1]


@functools.lru_cache(maxsize=None)
def _swap_permutation(degree_: int) -> np.ndarray:
    return np.asarray([index(degree_, j, i) for i, j in monomials(degree_)])


# ----------------------------------------------------------------------------- bivariate
def constant(value, degree_: int, dtype=jnp.float64) -> Array:
    """The constant series ``value``."""
    size = (degree_ + 1) * (degree_ + 2) // 2
    return jnp.zeros(size, dtype=dtype).at[0].set(value)


def variable(which: int, degree_: int, dtype=jnp.float64) -> Array:
    """The series x (``which`` = 0) or y (``which`` = 1)."""
    size = (degree_ + 1) * (degree_ + 2) // 2
    return jnp.zeros(size, dtype=dtype).at[1 + which].set(1.0)


def embed(univariate: Array, which: int, degree_: int) -> Array:
    """A univariate series a(x) (``which`` = 0) or a(y) (``which`` = 1) as a bivariate one."""
    positions = np.asarray([index(degree_, k, 0) if which == 0 else index(degree_, 0, k)
                            for k in range(degree_ + 1)])
    size = (degree_ + 1) * (degree_ + 2) // 2
    coeffs = univariate[..., :degree_ + 1]
    return jnp.zeros(coeffs.shape[:-1] + (size,), dtype=coeffs.dtype).at[..., positions].set(coeffs)


def _vecmat(v: Array, matrix: Array) -> Array:
    """v @ matrix as multiply-and-sum: XLA fuses it, and compiles it much faster than the
    many tiny dot ops a high-order series computation would otherwise emit."""
    return jnp.sum(v[..., :, None] * matrix, axis=-2)


def multiplication_matrix(b: Array) -> Array:
    """The matrix B with a·b = a @ B (truncated product; broadcasts over leading axes)."""
    return _padded(b)[..., _shift_table(degree(b))]


def mul(a: Array, b: Array) -> Array:
    """Truncated product a·b (broadcasts over leading axes)."""
    return _vecmat(a, multiplication_matrix(b))


def powers(a: Array, count: int) -> Array:
    """Stack [1, a, a², …, a^count] (shape (count + 1, len))."""
    # a scan compiles its body once; unrolled chains of tiny products cost far more compile
    matrix = multiplication_matrix(a)
    one = constant(1.0, degree(a), a.dtype)
    def step(previous, _):
        current = _vecmat(previous, matrix)
        return current, current

    _, rest = jax.lax.scan(step, one, None, length=count)
    return jnp.concatenate([one[None], rest])


def compose(f: Array, a: Array, b: Array) -> Array:
    """f(a(x, y), b(x, y)) for series a, b with a(0) = b(0) = 0 (f may be batched).

    Σ_i a^i (Σ_j f_ij b^j): powers of b, then Horner's scheme in a.
    """
    n = degree(f)
    inner = _padded(f)[..., _coefficient_grid(n)] @ powers(b, n)  # (..., i, monomial)
    matrix = multiplication_matrix(a)
    def horner(result, coefficient):
        return _vecmat(result, matrix) + coefficient, None

    stacked = jnp.moveaxis(inner[..., :n, :], -2, 0)[::-1]
    result, _ = jax.lax.scan(horner, inner[..., n, :], stacked)
    return result


@functools.lru_cache(maxsize=None)
def _shift_rows(degree_: int) -> np.ndarray:
    """S[i, c] = position of x^{a−i} y^b for monomial c = x^a y^b (padding slot M if a < i)."""
    size = (degree_ + 1) * (degree_ + 2) // 2
    table = np.full((degree_ + 1, size), size)
    for i in range(degree_ + 1):
        for c, (a, b) in enumerate(monomials(degree_)):
            if a >= i:
                table[i, c] = index(degree_, a - i, b)
    return table


def compose_second(f: Array, b: Array) -> Array:
    """f(x, b(x, y)) for b(0) = 0: like ``compose(f, x, b)`` but multiplying by powers of x
    is a shift, so no Horner loop is needed."""
    n = degree(f)
    inner = _padded(_padded(f)[..., _coefficient_grid(n)] @ powers(b, n))  # Σ_j f_ij b^j
    return jnp.sum(inner[..., np.arange(n + 1)[:, None], _shift_rows(n)], axis=-2)


def swap_conjugate(f: Array) -> Array:
    """The series f̄ with f̄(z, z̄) = conj(f(z, z̄)) when x = z and y = z̄ (so coefficients of
    z^i z̄^j become conj of those of z^j z̄^i)."""
    return jnp.conj(f[..., _swap_permutation(degree(f))])


def _binomial_series(exponent: float, count: int) -> np.ndarray:
    """Coefficients C(e, k), k = 0..count, of (1 + v)^e."""
    out = np.ones(count + 1)
    for k in range(1, count + 1):
        out[k] = out[k - 1] * (exponent - k + 1) / k
    return out


def power_of(a: Array, exponent: float) -> Array:
    """a^exponent for a series with a(0) > 0 (real), via a(0)^e (1 + v)^e, v = a/a(0) − 1."""
    n = degree(a)
    a0 = a[..., 0]
    v = a / a0 - constant(1.0, n, a.dtype)
    return (a0 ** exponent) * (jnp.asarray(_binomial_series(exponent, n)) @ powers(v, n))


# ----------------------------------------------------------------------------- univariate
@functools.lru_cache(maxsize=None)
def _toeplitz_table(length: int) -> np.ndarray:
    k, c = np.meshgrid(np.arange(length), np.arange(length), indexing="ij")
    return np.where(c >= k, c - k, length)


def umultiplication_matrix(b: Array) -> Array:
    """Upper-triangular Toeplitz B with a·b = a @ B for univariate series."""
    return _padded(b)[..., _toeplitz_table(b.shape[-1])]


def umul(a: Array, b: Array) -> Array:
    """Truncated product of univariate series of equal length (broadcasts)."""
    return _vecmat(a, umultiplication_matrix(b))


def upowers(a: Array, count: int) -> Array:
    """Stack [1, a, …, a^count] of a univariate series."""
    matrix = umultiplication_matrix(a)
    out = [jnp.zeros_like(a).at[0].set(1.0)]
    for _ in range(count):
        out.append(_vecmat(out[-1], matrix))
    return jnp.stack(out)


def ucompose(f: Array, u: Array) -> Array:
    """f(u(x)) for univariate series with u(0) = 0 (u as long as or longer than needed)."""
    return f @ upowers(u, f.shape[-1] - 1)[:, : f.shape[-1]]


def upower_of(a: Array, exponent: float) -> Array:
    """a^exponent for a univariate series with a(0) > 0."""
    n = a.shape[-1] - 1
    a0 = a[0]
    v = (a / a0).at[0].set(0.0)
    return (a0 ** exponent) * (jnp.asarray(_binomial_series(exponent, n)) @ upowers(v, n))


def ulog1p(v: Array) -> Array:
    """log(1 + v) for a univariate series with v(0) = 0."""
    n = v.shape[-1] - 1
    k = np.arange(n + 1)
    coeffs = np.where(k > 0, (-1.0) ** (k + 1) / np.maximum(k, 1), 0.0)
    return jnp.asarray(coeffs) @ upowers(v, n)


def urevert(s: Array) -> Array:
    """Compositional inverse u of s (s(0) = 0, s'(0) ≠ 0): s(u(x)) = x to the series' degree."""
    n = s.shape[-1] - 1
    identity = jnp.zeros_like(s).at[1].set(1.0)

    def step(u, _):
        return u + (identity - ucompose(s, u)) / s[1], None

    u, _ = jax.lax.scan(step, identity / s[1], None, length=n)
    return u
