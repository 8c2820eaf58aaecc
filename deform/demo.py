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
    record = read_record(target)
    figures = plot_record(record)
    print(f"  figures: {', '.join(str(p) for p in figures)}")
    print(f"  found: {finding(record)}", flush=True)
    return target


def finding(record) -> str:
    """One sentence on how the distance from the start evolved along the accepted path."""
    import numpy as np

    distance = record.table("steps")["distance"]
    if distance.size < 3:
        return "too few steps to say how far the shape can move"
    best = int(np.argmax(distance))
    tail = distance[-max(2, distance.size // 4):]
    if best >= distance.size - 2 and np.all(np.diff(tail) > 0):
        return (f"still moving away at the last step (D = {distance[-1]:.4g}); more steps "
                "would push it further")
    return (f"the distance levelled off: max D = {distance[best]:.4g} at step {best}, and the "
            f"last {tail.size} steps stayed within [{tail.min():.4g}, {tail.max():.4g}]: with "
            "these values kept, this shape can only move that far along the path found")
