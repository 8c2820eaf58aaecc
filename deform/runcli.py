"""Arguments and handlers of `deform run`, `deform inspect`, `deform plot` and `deform demo`.

Kept out of cli.py so that the shared command list only gains one line per command; nothing
here imports JAX until a handler runs.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from .arguments import positive_int
from .errors import ConfigError


def default_output(config_path: str, configured: str) -> Path:
    """[search] output if set, else runs/<config name>.h5."""
    return Path(configured) if configured else Path("runs") / (Path(config_path).stem + ".h5")


def run_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("config", help="config file (TOML) with [shape] and [search] tables")
    p.add_argument("--output", default=None,
                   help="record file to write (default: [search] output, else runs/NAME.h5)")
    p.add_argument("--steps", type=positive_int, default=None,
                   help="stop after this many accepted steps (default: [search] steps)")
    p.add_argument("--resume", action="store_true",
                   help="continue the record at --output from its last completed step")
    p.add_argument("--quiet", action="store_true", help="no per-step progress lines")


def execute(config_path: str, output: str | None = None, steps: int | None = None,
            resume: bool = False, quiet: bool = False) -> Path:
    """Load, validate and run a search config; print progress and the final summary."""
    from .config import load_config
    from .record import read_record
    from .review import summary_lines
    from .run import run_search
    from .shape import from_family
    from .validate import require_admissible

    config = load_config(config_path)
    if config.shape is None:
        raise ConfigError(f"{config_path}: shape: missing (the config needs a [shape] table)")
    if config.search is None:
        raise ConfigError(f"{config_path}: search: missing (the config needs a [search] table)")
    require_admissible(from_family(config.shape))
    target = Path(output) if output else default_output(config_path, config.search.output)
    if resume and not target.exists():
        raise ConfigError(f"--resume: {target}: no such record to resume")
    progress = (lambda line: None) if quiet else (lambda line: print(line, flush=True))
    run_search(config.shape, config.search, config.invariants, config_text=config.text,
               source=str(config_path), output=target, resume=resume, steps=steps,
               progress=progress)
    record = read_record(target)
    print("\n".join(["", "summary:"] + ["  " + line for line in summary_lines(record)]
                    + [f"  record: {target}"]), flush=True)
    return target


def run_run(args: argparse.Namespace) -> int:
    execute(args.config, args.output, args.steps, args.resume, args.quiet)
    return 0


def inspect_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("record", help="HDF5 record written by deform run")
    p.add_argument("--all", action="store_true", help="print every step (default: at most 60)")


def inspect_run(args: argparse.Namespace) -> int:
    from .record import read_record
    from .review import inspect_text

    print(inspect_text(read_record(args.record), None if args.all else 60))
    return 0


def plot_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("record", help="HDF5 record written by deform run")
    p.add_argument("--out", default=None,
                   help="directory for the PNG files (default: next to the record, NAME_plots/)")


def plot_run(args: argparse.Namespace) -> int:
    from .record import read_record
    from .review import plot_record

    written = plot_record(read_record(args.record), args.out)
    for path in written:
        print(path)
    return 0


def demo_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--output", default="runs/demo.h5", help="record file (default runs/demo.h5)")
    p.add_argument("--steps", type=positive_int, default=None,
                   help="accepted steps (default: the demo config's)")


def demo_run(args: argparse.Namespace) -> int:
    from .demo import run_demo

    run_demo(args.output, args.steps)
    return 0
