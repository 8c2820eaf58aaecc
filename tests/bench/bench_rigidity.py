"""Benchmarks for rigidity scans and pair hunts (plain script; prints figures).

1. Rigidity scan of 100 invariants over 32 parameters: polar mirror class with 32 free
   parameters (radius, cos 2θ … cos 32θ); 100 rows: area, 12 symmetric orbit lengths (periods
   2–7), 12 heat coefficients (Dirichlet and Neumann c₀…c₅) and ∮κⁿ ds, n = 2…16, at five
   quadrature resolutions (75 rows; the registry caps max_power at 16, so the rows repeat at
   different resolutions: they cost what distinct rows would). First call (compiles) and warm
   call, side by side.
2. Pair-hunt throughput: 16-mode mirror polar class keeping symmetric orbit lengths up to
   period 5; starts per minute with 1 and with 2 worker processes in the same run.

Usage: .venv/bin/python tests/bench/bench_rigidity.py [--starts N] [--steps S] [--skip-hunt]
"""

import argparse
import tempfile
import time

from deform.runtime import configure_jax


def bench_scan():
    import jax.numpy as jnp

    from deform.families import Polar
    from deform.rigidity import build_evaluators, rigidity_scan
    from deform.shape import Shape
    from deform.symmetry import Symmetry

    family = Polar.build(1.0, [], [], modes=32, symmetry=Symmetry("mirror"))
    params = jnp.zeros(family.n_params).at[0].set(1.0).at[1].set(0.08).at[2].set(0.03)
    params = params.at[4].set(0.01)
    shape = Shape(family, params)
    evaluators = build_evaluators(
        [("area", {}), ("symmetric_orbits", {"max_period": 7}),
         ("heat_dirichlet", {}), ("heat_neumann", {})]
        + [("curvature_moments", {"max_power": 16, "resolution": n})
           for n in (256, 320, 384, 448, 512)])
    rows = sum(len(e.evaluator.labels) for e in evaluators)
    times = []
    for _ in range(2):
        t = time.perf_counter()
        result = rigidity_scan(shape, evaluators)
        times.append(time.perf_counter() - t)
    print(f"rigidity scan: {rows} invariants x {family.n_params} parameters, "
          f"rank {result.rank} of {result.dimension}")
    print(f"  first call (includes compilation): {times[0]:8.2f} s")
    print(f"  warm call (same shape family):     {times[1]:8.2f} s")
    print(f"  ratio first/warm:                  {times[0] / times[1]:8.1f}")


HUNT = """
[shape]
family = "polar"
radius = 1.0
cos = [0.0, 0.1]
modes = 16
symmetry = "mirror"
[hunt]
keep = ["symmetric_orbits"]
starts = {starts}
seed = 11
steps = {steps}
floor = 0.02
spread = 0.05
learning_rate = 0.003
polish = 10
[invariants.symmetric_orbits]
max_period = 5
"""


def bench_hunt(starts: int, steps: int):
    from deform.config import parse_config
    from deform.hunt import hunt

    config = parse_config(HUNT.format(starts=starts, steps=steps), "bench")
    print(f"pair hunt: 16-mode mirror class ({config.shape.n_params} free parameters), keeping "
          f"symmetric orbit lengths up to period 5; {starts} starts of {steps} Adam steps + "
          "10 polish")
    rates = {}
    for workers in (1, 2):
        with tempfile.TemporaryDirectory() as out:
            t = time.perf_counter()
            ranked, _ = hunt(config, out, starts, workers)
            elapsed = time.perf_counter() - t
        rates[workers] = 60.0 * starts / elapsed
        accepted = sum(r.accepted for r in ranked)
        print(f"  workers={workers}: {elapsed:8.1f} s, {rates[workers]:6.2f} starts/minute "
              f"({accepted} accepted)")
    print(f"  speed-up 2 workers / 1 worker: {rates[2] / rates[1]:.2f}")


if __name__ == "__main__":
    parser = argparse.ArgumentParser()
    parser.add_argument("--starts", type=int, default=4)
    parser.add_argument("--steps", type=int, default=100)
    parser.add_argument("--skip-hunt", action="store_true")
    args = parser.parse_args()
    configure_jax()
    bench_scan()
    if not args.skip_hunt:
        bench_hunt(args.starts, args.steps)
