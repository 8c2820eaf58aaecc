"""[scan] and [hunt] config sections (rigidity scans and pair hunts), parsed without JAX.

    [scan]        families, rank_tol, resolution, null_modes, output
    [scan.path]   kind = "ellipses" (ratios, modes, symmetry) | "record" (record, every); smallest
    [hunt]        see :class:`HuntSpec`
Options of the invariant families themselves come from the shared [invariants.<name>] tables.
"""

from __future__ import annotations

from dataclasses import dataclass

from .errors import ConfigError


def _check_families(r, key: str, allow_empty: bool = False) -> tuple[str, ...]:
    from .invariants import REGISTRY

    names = r.strings(key, ()) if allow_empty else r.strings(key)
    if not names and not allow_empty:
        raise ConfigError(f"{r.key(key)}: expected at least one invariant family")
    for i, name in enumerate(names):
        if name not in REGISTRY:
            raise ConfigError(f"{r.key(key)}[{i}]: unknown invariant {name!r} (expected one of: "
                              f"{', '.join(sorted(REGISTRY))})")
    if len(set(names)) != len(names):
        raise ConfigError(f"{r.key(key)}: a family is listed twice")
    return names


PATH_KINDS = ("none", "ellipses", "record")


@dataclass(frozen=True)
class PathSpec:
    """Base shapes for a path scan.

    ``ellipses``: x²/a² + y²/b² = 1 with a = 1 and b = ``ratios``[j], written exactly as the
    complex Fourier curve z = ½(a+b)e^{it} + ½(a−b)e^{−it} with ``modes`` modes in the given
    symmetry class (path parameter: eccentricity √(1 − b²)). ``record``: the accepted shapes of
    a search record with the config's shape family (path parameter: the record's step).
    """

    kind: str = "none"
    ratios: tuple[float, ...] = ()
    modes: int = 6
    symmetry: str = "mirror"
    record: str = ""
    every: int = 1
    smallest: int = 3


@dataclass(frozen=True)
class ScanSpec:
    families: tuple[str, ...]
    rank_tol: float = 1e-8
    resolution: int = 256
    null_modes: int = 4
    output: str = ""
    path: PathSpec = PathSpec()


def parse_scan(r) -> ScanSpec:
    """[scan]: families (in the order the rank profile adds them), rank_tol, resolution,
    null_modes (how many to draw), output, and an optional [scan.path] table."""
    families = _check_families(r, "families")
    spec = dict(
        families=families,
        rank_tol=r.number("rank_tol", 1e-8, minimum=1e-15, maximum=0.5),
        resolution=r.integer("resolution", 256, minimum=32, maximum=8192),
        null_modes=r.integer("null_modes", 4, minimum=0, maximum=64),
        output=r.string("output", ""),
    )
    sub = r.sub("path", None)
    if sub is not None:
        kind = sub.string("kind", choices=PATH_KINDS[1:])
        path = PathSpec(
            kind=kind,
            ratios=sub.numbers("ratios", ()) if kind == "ellipses" else (),
            modes=sub.integer("modes", 6, minimum=1, maximum=256) if kind == "ellipses" else 6,
            symmetry=(sub.string("symmetry", "mirror", choices=("none", "mirror", "central",
                                                                  "dihedral"))
                      if kind == "ellipses" else "mirror"),
            record=sub.string("record") if kind == "record" else "",
            every=sub.integer("every", 1, minimum=1) if kind == "record" else 1,
            smallest=sub.integer("smallest", 3, minimum=1, maximum=64),
        )
        if kind == "ellipses":
            if not path.ratios:
                raise ConfigError(f"{sub.key('ratios')}: expected a non-empty list of b/a")
            for i, b in enumerate(path.ratios):
                if not 0.0 < b <= 1.0:
                    raise ConfigError(f"{sub.key('ratios')}[{i}]: expected 0 < b/a <= 1, "
                                        f"got {b:g}")
        sub.done()
        spec["path"] = path
    r.done()
    return ScanSpec(**spec)




def scan_args(p) -> None:
    p.add_argument("config", help="config file with [shape] and [scan] tables")
    p.add_argument("--output", default=None, help="record file (default: [scan] output or "
                   "runs/scan.h5)")
    p.add_argument("--plots", default=None, help="also write PNG figures to this directory")


def scan_run(args) -> int:
    from .rigidity import scan_run as run

    return run(args)


@dataclass(frozen=True)
class HuntSpec:
    """[hunt]: two shapes of the [shape] family are optimized together so that the ``keep``
    invariants agree (relative mismatch, per-invariant scales from the base shape) while their
    isometry-invariant distance D stays above ``floor``; every start is its own record."""

    keep: tuple[str, ...]
    check: tuple[str, ...] = ()
    starts: int = 8
    seed: int = 0
    steps: int = 300
    learning_rate: float = 0.01
    floor: float = 0.05
    weight: float = 1.0
    spread: float = 0.05
    decay: float = 2.0
    tolerance: float = 1e-10
    check_tolerance: float = 1e-6
    polish: int = 20
    workers: int = 1
    output: str = "runs/hunt"
    top: int = 5


def parse_hunt(r) -> HuntSpec:
    keep = _check_families(r, "keep")
    check = _check_families(r, "check", allow_empty=True)
    spec = HuntSpec(
        keep=keep,
        check=check,
        starts=r.integer("starts", 8, minimum=1, maximum=100000),
        seed=r.integer("seed", 0, minimum=0),
        steps=r.integer("steps", 300, minimum=0, maximum=10**6),
        learning_rate=r.number("learning_rate", 0.01, positive=True),
        floor=r.number("floor", 0.05, positive=True),
        weight=r.number("weight", 1.0, positive=True),
        spread=r.number("spread", 0.05, minimum=0.0),
        decay=r.number("decay", 2.0, minimum=0.0),
        tolerance=r.number("tolerance", 1e-10, positive=True),
        check_tolerance=r.number("check_tolerance", 1e-6, positive=True),
        polish=r.integer("polish", 20, minimum=0, maximum=1000),
        workers=r.integer("workers", 1, minimum=1, maximum=256),
        output=r.string("output", "runs/hunt"),
        top=r.integer("top", 5, minimum=1),
    )
    r.done()
    return spec


def hunt_args(p) -> None:
    p.add_argument("config", help="config file with [shape] and [hunt] tables")
    p.add_argument("--output", default=None, help="directory for the records (default: [hunt] "
                   "output, runs/hunt)")
    p.add_argument("--starts", type=int, default=None, help="number of random starts")
    p.add_argument("--workers", type=int, default=None, help="local worker processes")
    p.add_argument("--plots", default=None, help="also write PNG figures of the best pair here")


def hunt_run(args) -> int:
    from .hunt import hunt_run as run

    return run(args)
