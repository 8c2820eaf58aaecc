"""Benchmark: Birkhoff invariants τ₁..τ₃ at a bouncing ball of a 32-mode shape.

Prints compile time (persistent cache off), evaluation time, gradient time and the ratio
gradient / evaluation, plus the split between the curve-dependent part (orbit refinement and
arclength charts) and the boundary-independent series algebra. Targets (issue 4): compile
≤ 20 s CPU, evaluation ≤ 2 ms, gradient ≤ 5× evaluation.

Run: .venv/bin/python tests/bench/bench_birkhoff.py [order]
"""

from __future__ import annotations

import sys
import time

from deform.runtime import configure_jax

configure_jax(compilation_cache=False)

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402

from deform.families import Polar  # noqa: E402
from deform.shape import from_family  # noqa: E402
from deform.symmetry import Symmetry  # noqa: E402
from objectives import birkhoff as bk  # noqa: E402


def timed(fn, *args, repeats: int = 200):
    """(compile CPU seconds, compile wall seconds, seconds per run)."""
    start, cpu = time.perf_counter(), time.process_time()
    compiled = jax.jit(fn).lower(*args).compile()
    compile_s = time.perf_counter() - start
    compile_cpu = time.process_time() - cpu
    jax.block_until_ready(compiled(*args))
    start = time.perf_counter()
    for _ in range(repeats):
        out = compiled(*args)
    jax.block_until_ready(out)
    return compile_cpu, compile_s, (time.perf_counter() - start) / repeats


def main(order: int = 3) -> None:
    rng = np.random.default_rng(0)
    modes = 32
    decay = 0.04 * np.exp(-0.35 * np.arange(1, modes + 1))
    cos = decay * rng.normal(size=modes)
    cos[0] = 0.0
    cos[1] = -0.08  # short x-axis: the bouncing ball along it is elliptic
    family = Polar.build(1.0, cos=list(cos), symmetry=Symmetry("mirror"))
    shape = from_family(family)
    axis = jnp.array([0.0, np.pi])
    params = shape.params

    def invariants(x):
        return bk.birkhoff_invariants(shape.with_params(x).curve(), axis, order=order)

    def tau_sum(x):
        return jnp.sum(invariants(x).tau)

    result = invariants(params)
    print(f"shape: polar, {modes} modes, {params.size} free parameters; order {order} "
          f"(Taylor degree {2 * order + 1})")
    print(f"α = {float(result.angle):.10f}, τ = {np.asarray(result.tau)}, "
          f"status = {int(result.status)}")

    c_eval, w_eval, t_eval = timed(lambda x: invariants(x).tau, params)
    c_grad, w_grad, t_grad = timed(jax.grad(tau_sum), params, repeats=50)
    curve = shape.curve()
    charts = bk.bounce_charts(curve, axis, 2 * order + 1)
    c_geom, w_geom, t_geom = timed(lambda c: bk.bounce_charts(c, bk.refine_bounces(c, axis)[0],
                                                      2 * order + 1), curve)
    c_alg, w_alg, t_alg = timed(lambda ch: bk.invariants_from_charts.__wrapped__(order, ch), charts)
    print(f"{'':28s}{'compile CPU [s]':>16s}{'compile wall [s]':>17s}{'run [ms]':>10s}")
    for name, c, w, t in [("τ (full)", c_eval, w_eval, t_eval),
                          ("  refine + charts", c_geom, w_geom, t_geom),
                          ("  series algebra", c_alg, w_alg, t_alg),
                          ("grad Σ τ (reverse mode)", c_grad, w_grad, t_grad)]:
        print(f"{name:28s}{c:16.2f}{w:17.2f}{1e3 * t:10.3f}")
    print(f"gradient / evaluation = {t_grad / t_eval:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 3)
