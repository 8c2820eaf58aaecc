"""Named invariant families that searches keep or move and scans differentiate.

A family is looked up by name (``area``, ``heat_dirichlet``, …) and built with options
into an :class:`Evaluator`: labels for its entries, a cold ``init`` (may run global
searches, not jitted) and a warm ``evaluate(curve, state) -> (values, state, status)``
that is jittable and differentiable with respect to the curve's parameters. State is
what a family carries from step to step (e.g. orbits to warm-start from); stateless
families use ``None``. Capabilities add families with :func:`register`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, NamedTuple

import jax.numpy as jnp

from objectives import geometry, heat
from objectives.curve import Curve
from objectives.status import Status, code, finite_or

from .errors import ConfigError


class Evaluator(NamedTuple):
    """``recheck(curve, state) -> (state, status)`` is an optional cheap identity re-check
    (e.g. re-running a global orbit search) that searches call every few accepted steps and
    at the end, outside jit; a non-ok status (``branch_changed``…) stops the search."""

    labels: tuple[str, ...]
    init: Callable[[Curve], Any]
    evaluate: Callable[[Curve, Any], tuple[Any, Any, Any]]
    recheck: Callable[[Curve, Any], tuple[Any, Any]] | None = None


@dataclass(frozen=True)
class InvariantFamily:
    """``options`` lists (key, default) pairs accepted in ``[invariants.<name>]``."""

    name: str
    doc: str
    build: Callable[..., Evaluator]
    options: tuple[tuple[str, Any], ...] = ()


REGISTRY: dict[str, InvariantFamily] = {}


def register(family: InvariantFamily) -> InvariantFamily:
    REGISTRY[family.name] = family
    return family


def stateless(labels: tuple[str, ...], fn: Callable[[Curve], Any]) -> Evaluator:
    """Evaluator for a pure function of the curve (no warm-start state)."""

    def evaluate(curve, state):
        values = jnp.atleast_1d(fn(curve))
        return values, state, finite_or(values, code(Status.ok))

    return Evaluator(labels, lambda curve: None, evaluate)


def build(name: str, options: dict | None = None, where: str = "keep") -> Evaluator:
    """Evaluator for a registered family; unknown names/options raise ConfigError."""
    if name not in REGISTRY:
        raise ConfigError(f"{where}: unknown invariant {name!r} (expected one of: "
                          f"{', '.join(sorted(REGISTRY))})")
    family = REGISTRY[name]
    allowed = dict(family.options)
    options = dict(options or {})
    for key in options:
        if key not in allowed:
            hint = ", ".join(allowed) or "none"
            raise ConfigError(f"invariants.{name}.{key}: unknown option (expected one of: {hint})")
    return family.build(**{**allowed, **options})


register(InvariantFamily(
    "area", "enclosed area |Ω|",
    lambda resolution: stateless(("area",), lambda c: geometry.area(c, resolution)),
    (("resolution", 256),)))

register(InvariantFamily(
    "perimeter", "boundary length |∂Ω|",
    lambda resolution: stateless(("perimeter",), lambda c: geometry.perimeter(c, resolution)),
    (("resolution", 256),)))


def _moments(max_power, resolution):
    powers = tuple(range(2, max_power + 1))
    return stateless(tuple(f"∮κ^{n}ds" for n in powers), lambda c: jnp.stack(
        [geometry.curvature_moment(c, n, resolution) for n in powers]))


register(InvariantFamily(
    "curvature_moments", "∮κⁿ ds for n = 2..max_power", _moments,
    (("max_power", 4), ("resolution", 256))))


def _heat(boundary):
    def make(order, resolution):
        labels = tuple(f"heat_{boundary[0].upper()}_c{k}" for k in range(order + 1))
        return stateless(labels, lambda c: heat.heat_coefficients(c, boundary, order, resolution))

    return make


for _b in heat.BOUNDARIES:
    register(InvariantFamily(
        f"heat_{_b}", f"{_b.capitalize()} heat-trace coefficients c₀..c_order",
        _heat(_b), (("order", heat.MAX_ORDER), ("resolution", 256))))
