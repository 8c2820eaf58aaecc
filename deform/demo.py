"""`deform demo` (`make run`): the default demo search, its record, figures and a short report.

The scenario is configs/demo.toml, an invented egg-shaped drum pushed away from itself while
its kept invariants stay fixed. Prints where the record and figures are and what was found.
"""

from __future__ import annotations

from pathlib import Path

from .errors import ConfigError

DEMO_CONFIG = Path(__file__).resolve().parents[1] / "configs" / "demo.toml"


def run_demo(output: str | Path = "runs/demo.h5", steps: int | None = None) -> Path:
    from .record import read_record
    from .review import plot_record
    from .runcli import execute

    if not DEMO_CONFIG.exists():
        raise ConfigError(f"demo: {DEMO_CONFIG} is missing (run from a source checkout)")
    print(f"demo: {DEMO_CONFIG.name}: an invented egg-shaped drum; keeping its invariants fixed "
          "while moving it as far as it will go\n", flush=True)
    target = execute(str(DEMO_CONFIG), str(output), steps, quiet=False)
    figures = plot_record(read_record(target))
    print(f"  figures: {', '.join(str(p) for p in figures)}", flush=True)
    return target
