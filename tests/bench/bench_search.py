"""Search-engine timings: penalty and continuation steps, compile cold vs from the cache.

Plain script (`python tests/bench/bench_search.py [--quick]`). Figures, measured in one run:
* a penalty-mode step (warm invariants, gradient, optax Adam update), 32-mode polar shape
  keeping ~50 values (orbit lengths and traces q ≤ 7, heat c₀..c₅, bouncing balls, area,
  perimeter); issue target ≤ 2 ms;
* continuation on the same problem, Gauss–Newton and chord correctors, coefficient and distance
  moves: attempts of the real loop (rejections halve the step), ms per attempt and per accepted
  step (target ≤ 30 ms), with the cost of one Jacobian and of one warm evaluation;
* 1000 Adam steps on 18 warm orbit lengths of a 16-mode shape (prototype figure: 1.5 s);
* compile time of prepare + first step as `deform run` does it (with the kept step program of
  objectives.programs) in a fresh process with an empty cache (cold) and again in a second fresh
  process with the same cache (cached), for a small problem and (full run) the problem above;
  targets 20 s / 2 s.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

BIG = """
[shape]
family = "polar"
radius = 1.0
cos = [0.0, 0.06, 0.02, 0.01]
sin = [0.0, 0.0, 0.015]
modes = {modes}
[search]
mode = "{mode}"
keep = {keep}
steps = 10
[search.move]
{move}
[invariants.orbit_lengths]
max_period = {period}
[invariants.orbit_traces]
max_period = {period}
[invariants.heat_dirichlet]
order = 5
"""
COEFFICIENT = 'kind = "coefficient"\ncoefficient = "cos[3]"\ntarget = 0.05'
DISTANCE = 'kind = "distance"'
STEP = 0.005  # initial continuation step in the weighted coordinates (adapted by the run)
KEEP_BIG = '["area", "perimeter", "heat_dirichlet", "bouncing_balls", "orbit_lengths", ' \
           '"orbit_traces"]'


def _prepared(text, keep_program=False):
    """Prepare as a run does (``keep_program``: with the on-disk step program keyed by the
    config text, as `deform run` does)."""
    import jax

    from deform.config import parse_config
    from deform.search import build_problem, prepare

    cfg = parse_config(text)
    problem = build_problem(cfg.shape, cfg.search, cfg.invariants)
    t0 = time.perf_counter()
    prepared = prepare(problem, cfg.search, identity=text if keep_program else None)
    t_prepare = time.perf_counter() - t0
    t0 = time.perf_counter()
    state, info = prepared.update(prepared.ctx, prepared.state)
    jax.block_until_ready(info)
    return prepared, state, t_prepare, time.perf_counter() - t0


def _per_step(prepared, state, count):
    import jax

    t0 = time.perf_counter()
    for _ in range(count):
        state, info = prepared.update(prepared.ctx, state)
    jax.block_until_ready(info)
    return (time.perf_counter() - t0) / count, info


def _attempts(prepared, state, count):
    """(ms per attempt, accepted attempts, mean corrector iterations) over ``count`` attempts of
    the real loop (a rejection halves the step, as in a run)."""
    import jax

    accepted, iterations = 0, 0
    t0 = time.perf_counter()
    for _ in range(count):
        state, info = prepared.update(prepared.ctx, state)
        info = jax.device_get(info)
        accepted += bool(info.accepted)
        iterations += int(info.iterations)
    return (time.perf_counter() - t0) / count * 1e3, accepted, iterations / count


def _components(prepared):
    """ms for one Jacobian of every tracked value and for one warm evaluation."""
    import jax

    from deform.search import _evaluate_all, _linearized

    problem, state = prepared.problem, prepared.state
    jac = jax.jit(lambda x, s: _linearized(problem, x, s)[1])
    val = jax.jit(lambda x, s: _evaluate_all(problem, x, s)[0])
    out = []
    for fn in (jac, val):
        jax.block_until_ready(fn(state.params, state.evaluator_states))
        t0 = time.perf_counter()
        for _ in range(10):
            jax.block_until_ready(fn(state.params, state.evaluator_states))
        out.append((time.perf_counter() - t0) / 10 * 1e3)
    return out


def compile_only(text: str) -> None:
    """Child process: print the seconds spent on prepare + first step."""
    from deform.runtime import configure_jax

    configure_jax()
    _, _, t_prepare, t_first = _prepared(text, keep_program=True)
    print(f"{t_prepare:.3f} {t_first:.3f}")


def main(quick: bool) -> None:
    from deform.runtime import configure_jax

    configure_jax()
    modes, period = (16, 5) if quick else (32, 7)
    big = dict(modes=modes, keep=KEEP_BIG, period=period)
    print(f"isodrum search bench ({'quick' if quick else 'full'}): polar shape, {modes} modes, "
          f"orbits q <= {period}")

    text = BIG.format(mode="penalty", move=COEFFICIENT, **big)
    prepared, state, t_prep, t_first = _prepared(text)
    n, m = prepared.ctx.start.size, len(prepared.problem.labels)
    first = 20 if quick else 50
    per, info = _per_step(prepared, state, first)
    later, _ = _per_step(prepared, state, 5 * first)  # the same steps and more, caches warm
    print(f"  problem: {n} free parameters, {m} kept values, rank {prepared.rank}")
    print(f"  penalty (adam) step:        {per * 1e3:8.2f} ms   (target <= 2 ms; mean of the "
          f"first {first} steps; {later * 1e3:.2f} ms over the first {5 * first} in a second "
          f"pass; prepare {t_prep:.1f} s, first step incl. compile {t_first:.1f} s)")

    t_jac, t_val = _components(prepared)
    print(f"  one Jacobian of all {m} values: {t_jac:.2f} ms; one warm evaluation: {t_val:.2f} ms")
    count = 10 if quick else 30
    for corrector in ("newton", "chord"):
        for move in (COEFFICIENT, DISTANCE):
            text = BIG.format(mode="continuation", move=move, **big).replace(
                "[search.move]", f"[search.continuation]\nstep_size = {STEP}\n"
                                 f"corrector = \"{corrector}\"\n[search.move]")
            prepared, state, t_prep, t_first = _prepared(text)
            per, accepted, iterations = _attempts(prepared, state, count)
            what = "coefficient" if move is COEFFICIENT else "distance"
            print(f"  continuation ({corrector}, {what} move): {per:8.2f} ms per attempt, "
                  f"{accepted}/{count} accepted, {iterations:.1f} corrector iterations on "
                  f"average; per accepted step {per * count / max(accepted, 1):.1f} ms "
                  f"(target <= 30 ms; first step incl. compile {t_first:.1f} s)")

    proto = BIG.format(mode="penalty", move=COEFFICIENT, modes=16, keep='["orbit_lengths"]',
                       period=7)
    prepared, state, _, _ = _prepared(proto)
    count = 1000
    per_p, _ = _per_step(prepared, state, count)
    print(f"  prototype comparison: {count} adam steps on {len(prepared.problem.labels)} warm "
          f"orbit lengths, 16 modes: {per_p * count:.2f} s ({1 / per_p:.0f} steps/s; "
          "prototype 1.5 s)")

    small = BIG.format(mode="continuation", move=COEFFICIENT, modes=16,
                       keep='["area", "perimeter", "heat_dirichlet", "bouncing_balls"]', period=5)
    problems = [("16 modes, area/perimeter/heat/bouncing balls", small)]
    if not quick:
        problems.append((f"{modes} modes, the {m} kept values above",
                         BIG.format(mode="continuation", move=COEFFICIENT, **big)))
    for what, text in problems:
        with tempfile.TemporaryDirectory() as cache:
            env = dict(os.environ, DEFORM_CACHE=cache)
            runs = []
            for _ in range(2):
                out = subprocess.run([sys.executable, __file__, "--compile-only", text], env=env,
                                     capture_output=True, text=True, check=True)
                runs.append([float(v) for v in out.stdout.split()[-2:]])
        (p_cold, f_cold), (p_warm, f_warm) = runs
        print(f"  compile ({what}), continuation:")
        print(f"    fresh process, empty cache:  prepare {p_cold:.1f} s + first step "
              f"{f_cold:.1f} s (target <= 20 s)")
        print(f"    fresh process, cached:       prepare {p_warm:.1f} s + first step "
              f"{f_warm:.1f} s (target <= 2 s); speed-up "
              f"{(p_cold + f_cold) / (p_warm + f_warm):.1f}x")


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--compile-only":
        compile_only(sys.argv[2])
    else:
        main("--quick" in sys.argv)
