"""Benchmark of the periodic-orbit engine (plain script; prints figures, no assertions).

For a 16-mode and a 64-mode polar shape, all orbits q ≤ 7 (18 max/min-max orbits plus the
bouncing balls) with monodromy:
  cold solve (global search + refinement), warm solve, reverse-mode gradient of a scalar loss,
  full Jacobian of the 18 lengths and traces, autodiff gradient vs central finite differences
  side by side, compile times (fresh and from the persistent cache, in subprocesses),
  robustness on 20 random shapes (curvature > 0.6 of the circle's) vs a 4× finer global search.

Usage: .venv/bin/python tests/bench/bench_orbits.py [--quick]
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time

os.environ.setdefault("JAX_PLATFORMS", "cpu")

from deform.runtime import configure_jax  # noqa: E402

configure_jax()

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402

from deform.families import Polar  # noqa: E402
from objectives import orbits as orb  # noqa: E402
from objectives.curve import Curve  # noqa: E402
from objectives.geometry import curvature, perimeter  # noqa: E402
from objectives.status import Status  # noqa: E402

Q = 7


def family(modes: int) -> Polar:
    return Polar.build(1.0, modes=modes)


def _relative_min_curvature(fam: Polar):
    """x ↦ min κ · L/2π on 512 nodes (jitted once per family: eager evaluation was slow)."""

    def value(x):
        curve = Curve(fam.boundary, x)
        kappa = jax.vmap(lambda s: curvature(curve, s))(jnp.linspace(0, 2 * np.pi, 512))
        return jnp.min(kappa) * perimeter(curve) / (2 * np.pi)

    return jax.jit(value)


_CURVATURE = {}


def random_params(fam: Polar, rng, amplitude=0.1, floor=0.6):
    """Free parameters with decaying random modes, rejection-sampled so min κ > floor·(2π/L)."""
    check = _CURVATURE.setdefault(fam, _relative_min_curvature(fam))
    while True:
        full = np.zeros(2 * fam.modes + 1)
        full[0] = 1.0
        k = np.arange(1, fam.modes + 1)
        full[1:fam.modes + 1] = rng.normal(size=fam.modes) * amplitude / k**2.5
        full[fam.modes + 1:] = rng.normal(size=fam.modes) * amplitude / k**2.5
        params = jnp.asarray(full[list(fam.free)])
        if float(check(params)) > floor:
            return params


def best_of(fn, repeat=7, number=5):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            jax.block_until_ready(fn())
        times.append((time.perf_counter() - t0) / number)
    return min(times)


def timings(modes: int, rng) -> dict:
    fam = family(modes)
    x = random_params(fam, rng)
    curve = Curve(fam.boundary, x)
    t0 = time.perf_counter()
    cold = orb.find_orbits(curve, Q)
    first = time.perf_counter() - t0
    n = 2 * len(orb.rotation_numbers(Q))
    state = jax.tree_util.tree_map(jnp.asarray, cold.select(np.arange(n)))

    def warm(x):
        return orb.refine_orbits(Curve(fam.boundary, x), state)

    def loss(x):
        out = warm(x)
        return jnp.sum(out.length) + 0.01 * jnp.sum(jnp.tanh(out.trace))

    def lengths_traces(x):
        out = warm(x)
        return jnp.concatenate([out.length, out.trace])

    grad = jax.jit(jax.grad(loss))
    jac = jax.jit(jax.jacrev(lengths_traces))
    compile_start = time.perf_counter()
    jax.block_until_ready(warm(x))
    c_warm = time.perf_counter() - compile_start
    compile_start = time.perf_counter()
    jax.block_until_ready(grad(x))
    c_grad = time.perf_counter() - compile_start
    compile_start = time.perf_counter()
    jax.block_until_ready(jac(x))
    c_jac = time.perf_counter() - compile_start

    out = {
        "modes": modes,
        "params": int(x.shape[0]),
        "orbits": n,
        "first cold (incl. compile) s": first,
        "cold ms": best_of(lambda: orb.find_orbits(curve, Q).length, repeat=3, number=3) * 1e3,
        "warm ms": best_of(lambda: warm(x).length) * 1e3,
        "grad ms": best_of(lambda: grad(x)) * 1e3,
        "jacobian (lengths+traces) ms": best_of(lambda: jac(x)) * 1e3,
        "compile warm/grad/jac s": (c_warm, c_grad, c_jac),
    }
    # Autodiff vs central differences over the same parameters, side by side.
    loss_jit = jax.jit(loss)
    jax.block_until_ready(loss_jit(x))
    h = 1e-6
    eye = np.eye(x.shape[0])

    def fd():
        return jnp.stack([(loss_jit(x + h * e) - loss_jit(x - h * e)) / (2 * h) for e in eye])

    t_fd = best_of(fd, repeat=3, number=1)
    t_ad = best_of(lambda: grad(x), repeat=3, number=5)
    g_ad = np.asarray(grad(x))
    # Accuracy check with a smaller step: high modes make the truncation error (h² times the
    # third derivative) large; at 64 modes h = 1e-6 is off by ~1e-2 relative, h = 1e-8 by ~1e-6.
    h = 1e-8
    g_fd = np.asarray(fd())
    out["warm statuses"] = np.bincount(np.asarray(warm(x).status), minlength=10).tolist()
    out["fd/autodiff time ratio"] = t_fd / t_ad
    out["fd vs autodiff max rel diff"] = float(np.max(np.abs(g_fd - g_ad)) / np.max(np.abs(g_ad)))
    out["statuses"] = np.bincount(np.asarray(cold.status), minlength=10).tolist()
    return out


def robustness(count=20, seed=7, amplitude=0.25) -> tuple[int, int, float, list[str]]:
    """Shapes on which the default search and a 4× finer one agree on every orbit length, the
    worst |ΔL|, and per mismatch which search found the better orbit (longer max; for a min-max,
    the shorter one counts only if it is a converged index-1 orbit)."""
    rng = np.random.default_rng(seed)
    fam = family(16)
    agree, worst, notes = 0, 0.0, []
    n = 2 * len(orb.rotation_numbers(Q))
    for shape in range(count):
        curve = Curve(fam.boundary, random_params(fam, rng, amplitude=amplitude))
        coarse = orb.find_orbits(curve, Q)
        fine = orb.find_orbits(curve, Q, grid=4 * 32)
        delta = np.abs(coarse.length[:n] - fine.length[:n])
        worst = max(worst, float(np.max(delta)))
        agree += bool(np.all(delta < 1e-9))
        for k in np.nonzero(delta >= 1e-9)[0]:
            label = coarse.labels()[k]
            ok = (Status.ok, Status.degenerate)
            if label.endswith(",max"):
                better = "ours" if coarse.length[k] > fine.length[k] else "finer search"
            else:
                ours = coarse.status[k] in ok and (fine.status[k] not in ok
                                                   or coarse.length[k] < fine.length[k])
                better = "ours" if ours else "finer search"
            notes.append(f"shape {shape} {label}: ours {coarse.length[k]:.12f} (status "
                         f"{coarse.status[k]}), finer {fine.length[k]:.12f} (status "
                         f"{fine.status[k]}): better = {better}")
    return agree, count, worst, notes


COMPILE_SCRIPT = r"""
import os, time, sys
os.environ["DEFORM_CACHE"] = sys.argv[1]
from deform.runtime import configure_jax; configure_jax()
import jax, jax.numpy as jnp, numpy as np
from deform.families import Polar
from objectives import orbits as orb
from objectives.curve import Curve
fam = Polar.build(1.0, cos=[0.0, 0.05, 0.02], sin=[0.0, 0.01, 0.0, 0.01], modes=16)
x = jnp.asarray(fam.initial_params()); curve = Curve(fam.boundary, x)
t0 = time.perf_counter(); o = orb.find_orbits(curve, 7); t_cold = time.perf_counter() - t0
state = jax.tree_util.tree_map(jnp.asarray, o)
t0 = time.perf_counter(); jax.block_until_ready(orb.refine_orbits(curve, state)); t_warm = time.perf_counter() - t0
g = jax.jit(jax.grad(lambda x: jnp.sum(orb.refine_orbits(Curve(fam.boundary, x), state).length)))
t0 = time.perf_counter(); jax.block_until_ready(g(x)); t_grad = time.perf_counter() - t0
print(f"{t_cold:.2f} {t_warm:.2f} {t_grad:.2f}")
"""


def compile_times() -> tuple[list[float], list[float]]:
    with tempfile.TemporaryDirectory() as cache:
        runs = []
        for _ in range(2):
            proc = subprocess.run([sys.executable, "-c", COMPILE_SCRIPT, cache],
                                  capture_output=True, text=True, check=True)
            runs.append([float(v) for v in proc.stdout.split()])
    return runs[0], runs[1]


def main() -> None:
    quick = "--quick" in sys.argv
    print(f"machine load (1-min average): {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    print("prototype figures: cold 33 ms (16 modes) / 69 ms (64); warm 1.4 / 3.8 ms; grad 2.2 ms;")
    print("                   compile ~5 s idle (11 s gradient, 0.2 s from cache); robustness 15/20")
    print("targets:           cold ≤ 20 / 40 ms; warm ≤ 1 / 3 ms; grad ≤ 1.5× warm; jac ≤ 5 ms;")
    print("                   compile ≤ 15 s all, ≤ 1 s each cached; robustness ≥ 19/20; fd/ad ≥ 20×")
    rng = np.random.default_rng(2026)
    for modes in (16, 64):
        for key, value in timings(modes, rng).items():
            if isinstance(value, float):
                value = f"{value:.4g}"
            elif isinstance(value, tuple):
                value = ", ".join(f"{v:.3g}" for v in value)
            print(f"  {modes:2d} modes  {key:32s} {value}")
    fresh, cached = compile_times()
    print(f"compile in a fresh process (cold/warm/grad first-call s): {fresh}")
    print(f"same, from the persistent cache (s):                     {cached}")
    if not quick:
        for seed in (7, 8, 9):
            agree, count, worst, notes = robustness(seed=seed)
            print(f"robustness (seed {seed}, amplitude 0.25): {agree}/{count} random shapes agree "
                  f"with a 4× finer global search on all {2 * len(orb.rotation_numbers(Q))} "
                  f"orbits (worst |ΔL| = {worst:.2e})")
            for note in notes:
                print("   ", note)


if __name__ == "__main__":
    main()
