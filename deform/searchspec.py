"""[search] and [invariants.<name>] config sections, parsed into frozen values (no JAX here).

    [search]                      mode, keep, watch, steps, seed, output, convex, recheck_every
    [search.move]                 kind = "distance" | "coefficient" | "invariant", target, …
    [search.continuation]         step sizes, corrector and rank tolerances
    [search.penalty]              optimizer, learning rate, penalty weight, multipliers
    [invariants.<family>]         options of a registered invariant family
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from .errors import ConfigError

MODES = ("continuation", "penalty")
MOVE_KINDS = ("distance", "coefficient", "invariant")
OPTIMIZERS = ("adam", "lbfgs", "sgd")
CORRECTORS = ("newton", "chord")


@dataclass(frozen=True)
class MoveSpec:
    """What the shape moves toward.

    ``distance``: increase the isometry-invariant distance D from the start shape.
    ``coefficient``: drive the free shape coefficient ``coefficient`` to ``target``.
    ``invariant``: drive entry ``entry`` (label or index) of family ``family`` to ``target``.
    """

    kind: str = "distance"
    coefficient: str = ""
    family: str = ""
    entry: str = ""
    target: float = 0.0
    tolerance: float = 1e-6


@dataclass(frozen=True)
class ContinuationSpec:
    step_size: float = 0.02
    min_step: float = 1e-5
    max_step: float = 0.1
    grow: float = 1.5
    corrector_iterations: int = 12
    tolerance: float = 1e-10
    rank_tolerance: float = 1e-8
    corrector: str = "newton"


@dataclass(frozen=True)
class PenaltySpec:
    optimizer: str = "adam"
    learning_rate: float = 1e-3
    weight: float = 1e4
    move_weight: float = 1.0
    multiplier_every: int = 20
    max_update: float = 0.05
    tolerance: float = 1e-6


@dataclass(frozen=True)
class SearchSpec:
    mode: str
    keep: tuple[str, ...]
    watch: tuple[str, ...] = ()
    steps: int = 20
    seed: int = 0
    output: str = ""
    convex: bool = False
    max_retries: int = 8
    recheck_every: int = 10
    scale_floor: float = 1e-9
    boundary_points: int = 128
    smoothness: float = 2.0
    distance_points: int = 64
    move: MoveSpec = MoveSpec()
    continuation: ContinuationSpec = ContinuationSpec()
    penalty: PenaltySpec = PenaltySpec()


@dataclass(frozen=True)
class InvariantOptions:
    """Options per invariant family, as (name, ((key, value), …)) pairs."""

    entries: tuple[tuple[str, tuple[tuple[str, Any], ...]], ...] = field(default_factory=tuple)

    def options(self, name: str) -> dict[str, Any]:
        return dict(dict(self.entries).get(name, ()))


def _registry():
    from .invariants import REGISTRY

    return REGISTRY


def _family_names(r, key: str, default) -> tuple[str, ...]:
    names = r.strings(key, default)
    registry = _registry()
    seen = set()
    for i, name in enumerate(names):
        if name not in registry:
            raise ConfigError(f"{r.key(key)}[{i}]: unknown invariant {name!r} (expected one of: "
                              f"{', '.join(sorted(registry))})")
        if name in seen:
            raise ConfigError(f"{r.key(key)}[{i}]: {name!r} is listed twice")
        seen.add(name)
    return names


def _move(r) -> MoveSpec:
    kind = r.string("kind", "distance", choices=MOVE_KINDS)
    if kind == "distance":
        spec = MoveSpec()
    elif kind == "coefficient":
        spec = MoveSpec(kind, coefficient=r.string("coefficient"), target=r.number("target"),
                        tolerance=r.number("tolerance", 1e-6, positive=True))
    else:
        family = r.string("family")
        if family not in _registry():
            raise ConfigError(f"{r.key('family')}: unknown invariant {family!r} (expected one of:"
                              f" {', '.join(sorted(_registry()))})")
        entry = r.raw("entry", 0)
        if isinstance(entry, bool) or not isinstance(entry, (int, str)):
            raise ConfigError(f"{r.key('entry')}: expected an entry label or index, got {entry!r}")
        spec = MoveSpec(kind, family=family, entry=str(entry), target=r.number("target"),
                        tolerance=r.number("tolerance", 1e-6, positive=True))
    r.done()
    return spec


def _continuation(r) -> ContinuationSpec:
    d = ContinuationSpec()
    spec = ContinuationSpec(
        step_size=r.number("step_size", d.step_size, positive=True),
        min_step=r.number("min_step", d.min_step, positive=True),
        max_step=r.number("max_step", d.max_step, positive=True),
        grow=r.number("grow", d.grow, minimum=1.0, maximum=4.0),
        corrector_iterations=r.integer("corrector_iterations", d.corrector_iterations,
                                       minimum=1, maximum=100),
        tolerance=r.number("tolerance", d.tolerance, positive=True, maximum=1e-2),
        rank_tolerance=r.number("rank_tolerance", d.rank_tolerance, positive=True, maximum=0.1),
        corrector=r.string("corrector", d.corrector, choices=CORRECTORS),
    )
    if not spec.min_step <= spec.step_size <= spec.max_step:
        raise ConfigError(f"{r.key('step_size')}: expected min_step <= step_size <= max_step, "
                          f"got {spec.min_step:g}, {spec.step_size:g}, {spec.max_step:g}")
    r.done()
    return spec


def _penalty(r) -> PenaltySpec:
    d = PenaltySpec()
    spec = PenaltySpec(
        optimizer=r.string("optimizer", d.optimizer, choices=OPTIMIZERS),
        learning_rate=r.number("learning_rate", d.learning_rate, positive=True),
        weight=r.number("weight", d.weight, positive=True),
        move_weight=r.number("move_weight", d.move_weight, minimum=0.0),
        multiplier_every=r.integer("multiplier_every", d.multiplier_every, minimum=0),
        max_update=r.number("max_update", d.max_update, positive=True),
        tolerance=r.number("tolerance", d.tolerance, positive=True),
    )
    r.done()
    return spec


def parse_search(r) -> SearchSpec:
    """[search] table → SearchSpec; names of invariant families are checked against the registry."""
    mode = r.string("mode", "continuation", choices=MODES)
    keep = _family_names(r, "keep", ())
    watch = _family_names(r, "watch", ())
    if not keep:
        raise ConfigError(f"{r.key('keep')}: expected at least one invariant family to keep")
    both = set(keep) & set(watch)
    if both:
        raise ConfigError(f"{r.key('watch')}: {sorted(both)[0]!r} is already kept")
    move_r = r.sub("move", {})
    move = _move(move_r)
    if move.kind == "invariant" and move.family in keep:
        raise ConfigError(f"{move_r.key('family')}: {move.family!r} is kept, so it cannot be "
                          "moved to a target (keep it or move it, not both)")
    spec = SearchSpec(
        mode=mode, keep=keep, watch=watch,
        steps=r.integer("steps", 20, minimum=1, maximum=1_000_000),
        seed=r.integer("seed", 0, minimum=0, maximum=2**31 - 1),
        output=r.string("output", ""),
        convex=r.boolean("convex", False),
        max_retries=r.integer("max_retries", 8, minimum=0, maximum=100),
        recheck_every=r.integer("recheck_every", 10, minimum=0),
        scale_floor=r.number("scale_floor", 1e-9, positive=True),
        boundary_points=r.integer("boundary_points", 128, minimum=16, maximum=4096),
        smoothness=r.number("smoothness", 2.0, minimum=0.0, maximum=8.0),
        distance_points=r.integer("distance_points", 64, minimum=16, maximum=1024),
        move=move,
        continuation=_continuation(r.sub("continuation", {})),
        penalty=_penalty(r.sub("penalty", {})),
    )
    r.done()
    return spec


def parse_invariants(r) -> InvariantOptions:
    """[invariants.<name>] tables: options of registered families, checked against defaults."""
    registry = _registry()
    entries = []
    for name in list(r.table):
        if name not in registry:
            raise ConfigError(f"{r.key(name)}: unknown invariant {name!r} (expected one of: "
                              f"{', '.join(sorted(registry))})")
        sub = r.sub(name)
        allowed = dict(registry[name].options)
        for key, value in sub.table.items():
            if key not in allowed:
                hint = ", ".join(allowed) or "none"
                raise ConfigError(f"{sub.key(key)}: unknown option (expected one of: {hint})")
            default = allowed[key]
            if isinstance(default, bool) != isinstance(value, bool) or (
                    isinstance(default, (int, float)) and not isinstance(value, (int, float))):
                raise ConfigError(f"{sub.key(key)}: expected a value like {default!r}, "
                                  f"got {value!r}")
            if isinstance(default, int) and not isinstance(default, bool) and not isinstance(
                    value, int):
                raise ConfigError(f"{sub.key(key)}: expected an integer, got {value!r}")
        entries.append((name, tuple(sorted(sub.table.items()))))
    return InvariantOptions(tuple(entries))
