"""The `deform` command line. Every user error is one line on stderr with exit code 2."""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable
from dataclasses import dataclass

from . import __version__, runcli, scanspec
from .arguments import positive_int
from .errors import ConfigError, DeformError


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        raise ConfigError(f"{self.prog}: {message}")


@dataclass(frozen=True)
class Command:
    name: str
    help: str
    arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]



def _load_shape(path: str):
    from .config import load_config
    from .shape import from_family
    from .validate import require_admissible

    config = load_config(path)
    if config.shape is None:
        raise ConfigError(f"{path}: shape: missing (the config needs a [shape] table)")
    shape = from_family(config.shape)
    require_admissible(shape)
    return config, shape


def _check_args(p):
    p.add_argument("config", help="config file (TOML)")


def _check_run(args) -> int:
    from .config import load_config
    from .shape import from_family
    from .validate import require_admissible

    config = load_config(args.config)
    parts = []
    if config.shape is not None:
        shape = from_family(config.shape)
        require_admissible(shape)
        parts.append(f"shape {config.shape.name}, {config.shape.n_params} free parameters, "
                     f"symmetry {config.shape.symmetry.describe()}")
    print(f"{args.config}: ok" + (f" ({'; '.join(parts)})" if parts else ""))
    return 0


def _measure_args(p):
    p.add_argument("config", help="config file with a [shape] table")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    p.add_argument("--resolution", type=positive_int, default=None,
                   help="trapezoid nodes for boundary integrals (default: [measure] resolution, 256)")
    p.add_argument("--eigenvalues", type=positive_int, default=0, metavar="N",
                   help="also compute the first N Laplace eigenvalues (boundary integral solver)")
    p.add_argument("--boundary", choices=("dirichlet", "neumann"), default="dirichlet",
                   help="boundary condition for --eigenvalues (default: dirichlet)")
    p.add_argument("--max-period", type=positive_int, default=7, metavar="Q",
                   help="periodic orbits p/q with 2 ≤ q ≤ Q (default 7; 1 skips the orbit sections)")


def _measure_run(args) -> int:
    from .measure import MeasureOptions, format_tables, measure

    config, shape = _load_shape(args.config)
    options = MeasureOptions(resolution=args.resolution or config.measure.resolution,
                             eigenvalues=args.eigenvalues, boundary=args.boundary,
                             max_period=args.max_period)
    report, tables = measure(shape, options)
    if args.json:
        print(json.dumps(json_ready(report), allow_nan=False))
    else:
        header = (f"{args.config}: {shape.family.name} family, symmetry "
                  f"{shape.family.symmetry.describe()}, {shape.family.n_params} free parameters")
        print(format_tables(header, tables))
    return 0


def _compare_args(p):
    from .compare import compare_args

    compare_args(p)


def _compare_run(args) -> int:
    from .compare import compare_run

    return compare_run(args)


def json_ready(value):
    """Plain JSON values: arrays to lists, numpy scalars to Python, non-finite floats to null."""
    import math

    import numpy as np

    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, np.ndarray):
        return json_ready(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


COMMANDS: list[Command] = [
    Command("check", "validate a config file without running it", _check_args, _check_run),
    Command("measure", "print the invariants of a shape", _measure_args, _measure_run),
    Command("compare", "compare the Laplace spectra of two shapes or records",
            _compare_args, _compare_run),
    Command("run", "run a search config and record it (HDF5)", runcli.run_args, runcli.run_run),
    Command("inspect", "print a record's config, summary and steps", runcli.inspect_args,
            runcli.inspect_run),
    Command("plot", "write PNG figures of a record", runcli.plot_args, runcli.plot_run),
    Command("demo", "run the default demo search (runs/demo.h5 + figures)", runcli.demo_args,
            runcli.demo_run),
    Command("scan", "first-order rigidity scan: Jacobian rank, null modes, path (HDF5)",
            scanspec.scan_args, scanspec.scan_run),
    Command("hunt", "hunt pairs of different shapes whose kept invariants agree (HDF5)",
            scanspec.hunt_args, scanspec.hunt_run),
]


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="deform", description=(
        "Deform planar drums while keeping spectral invariants fixed; measure, search, review."))
    parser.add_argument("--version", action="version", version=f"deform {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for command in COMMANDS:
        p = sub.add_parser(command.name, help=command.help, description=command.help)
        command.arguments(p)
        p.set_defaults(handler=command.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    from .runtime import configure_jax

    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if getattr(args, "handler", None) is None:
            parser.print_help()
            return 2
        configure_jax()
        return args.handler(args)
    except DeformError as err:
        print(f"deform: error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("deform: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
