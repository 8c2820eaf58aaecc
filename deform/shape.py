"""Shapes as values: a family, its free parameters and a stack of transformations.

Transformations return new shapes (``rotated``, ``translated``, ``reflected``, ``scaled``,
``reparametrized``); the curve of a shape applies them in order, keeping the orientation
counter-clockwise (a reflection also reverses the parameter).
"""

from __future__ import annotations

from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np

from objectives.curve import Curve

from .families import ShapeFamily


@dataclass(frozen=True)
class _Transformed:
    """Static boundary function: base family followed by transformations of the given kinds."""

    base: object
    kinds: tuple[str, ...]

    def __call__(self, params, t):
        base_params, args = params
        for kind, arg in zip(reversed(self.kinds), reversed(args)):
            if kind == "reflect":
                t = -t
            elif kind == "reparam":
                t = t + arg[0] + arg[1] * jnp.sin(t)
        p = self.base(base_params, t)
        for kind, arg in zip(self.kinds, args):
            if kind == "rotate":
                c, s = jnp.cos(arg), jnp.sin(arg)
                p = jnp.stack([c * p[0] - s * p[1], s * p[0] + c * p[1]])
            elif kind == "translate":
                p = p + arg
            elif kind == "reflect":
                p = p * jnp.array([1.0, -1.0])
            elif kind == "scale":
                p = arg * p
        return p


@jax.tree_util.register_pytree_node_class
@dataclass(frozen=True)
class Shape:
    """A domain: ``family`` (static), free ``params`` and transformations (kind, argument)."""

    family: ShapeFamily
    params: jax.Array
    transforms: tuple = ()

    def curve(self) -> Curve:
        if not self.transforms:
            return Curve(self.family.boundary, self.params)
        kinds = tuple(k for k, _ in self.transforms)
        args = tuple(a for _, a in self.transforms)
        return Curve(_Transformed(self.family.boundary, kinds), (self.params, args))

    def with_params(self, params) -> "Shape":
        return Shape(self.family, jnp.asarray(params, dtype=jnp.float64), self.transforms)

    def tree_flatten(self):
        kinds = tuple(k for k, _ in self.transforms)
        return (self.params, tuple(a for _, a in self.transforms)), (self.family, kinds)

    @classmethod
    def tree_unflatten(cls, aux, children):
        family, kinds = aux
        params, args = children
        return cls(family, params, tuple(zip(kinds, args)))


def from_family(family: ShapeFamily) -> Shape:
    """The shape of a family at its configured (base) parameters."""
    return Shape(family, jnp.asarray(family.initial_params()))


def _with(shape: Shape, kind: str, arg) -> Shape:
    return Shape(shape.family, shape.params,
                 shape.transforms + ((kind, jnp.asarray(arg, dtype=jnp.float64)),))


def rotated(shape: Shape, angle: float) -> Shape:
    """Rotated by ``angle`` radians about the origin."""
    return _with(shape, "rotate", angle)


def translated(shape: Shape, shift) -> Shape:
    return _with(shape, "translate", np.asarray(shift, dtype=np.float64).reshape(2))


def reflected(shape: Shape) -> Shape:
    """Mirrored in the x-axis (parameter reversed so the curve stays counter-clockwise)."""
    return _with(shape, "reflect", 0.0)


def scaled(shape: Shape, factor: float) -> Shape:
    """Dilated by ``factor`` > 0 about the origin (a similarity, not an isometry)."""
    return _with(shape, "scale", factor)


def reparametrized(shape: Shape, shift: float = 0.0, warp: float = 0.0) -> Shape:
    """Same curve traced as t ↦ γ(t + shift + warp·sin t); requires |warp| < 1."""
    if not abs(warp) < 1.0:
        raise ValueError("warp: |warp| must be < 1 for an orientation-preserving diffeomorphism")
    return _with(shape, "reparam", [shift, warp])
