"""Timing of the foundation's pure functions: geometry, heat coefficients (+ gradient), distance.

Plain script (`make bench`): compiles once, then reports the median of repeated calls, and the
gradient/evaluation ratios side by side. Target from issue 4: heat invariants and their gradient
≤ 1 ms on a 32-mode shape.
"""

from __future__ import annotations

import time

from deform.runtime import configure_jax

configure_jax()

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402

from deform.families import Polar  # noqa: E402
from deform.shape import from_family, rotated  # noqa: E402
from objectives import geometry, heat  # noqa: E402
from objectives.distance import shape_distance  # noqa: E402


def median_time(fn, *args, repeats: int = 30) -> tuple[float, float]:
    """(compile + first call seconds, median seconds of later calls)."""
    start = time.perf_counter()
    jax.block_until_ready(fn(*args))
    first = time.perf_counter() - start
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        jax.block_until_ready(fn(*args))
        times.append(time.perf_counter() - start)
    return first, float(np.median(times))


def main() -> None:
    rng = np.random.default_rng(0)
    modes = 32
    k = np.arange(1, modes + 1)
    cos = 0.05 * rng.standard_normal(modes) / k**2
    sin = 0.05 * rng.standard_normal(modes) / k**2
    family = Polar.build(1.0, cos=cos, sin=sin, modes=modes)
    shape = from_family(family)
    params = shape.params
    print(f"shape: polar, {modes} modes, {family.n_params} free parameters; median of 30 calls")

    def curve(p):
        return shape.with_params(p).curve()

    cases = {
        "area+perimeter (256)": jax.jit(lambda p: jnp.stack([geometry.area(curve(p)),
                                                             geometry.perimeter(curve(p))])),
        "curvature moments n=1..4": jax.jit(lambda p: jnp.stack(
            [geometry.curvature_moment(curve(p), n) for n in (1, 2, 3, 4)])),
        "simplicity (256)": jax.jit(lambda p: geometry.simplicity(curve(p)).margin),
        "fourier decay rate": jax.jit(lambda p: geometry.fourier_decay_rate(curve(p))),
    }
    for name, fn in cases.items():
        first, med = median_time(fn, params)
        print(f"  {name:28s} compile+first {first:7.2f} s   call {1e3 * med:8.3f} ms")

    for boundary in heat.BOUNDARIES:
        for resolution in (128, 256):
            value = jax.jit(lambda p: heat.heat_coefficients(curve(p), boundary, 5, resolution))
            grad = jax.jit(jax.jacrev(value))
            _, t_val = median_time(value, params)
            both = jax.jit(jax.value_and_grad(lambda p: jnp.sum(value(p) ** 2)))
            _, t_grad = median_time(grad, params)
            _, t_both = median_time(both, params)
            print(f"  heat {boundary:9s} c0..c5, n={resolution:3d}  value {1e3 * t_val:7.3f} ms   "
                  f"jacobian {1e3 * t_grad:7.3f} ms   ratio {t_grad / t_val:5.1f}   "
                  f"value+gradient of a scalar loss {1e3 * t_both:7.3f} ms")

    other = rotated(shape.with_params(params + 1e-3), 0.3).curve()
    dist = jax.jit(lambda p: shape_distance(curve(p), other, smooth=True))
    dgrad = jax.jit(jax.grad(dist))
    first, t_val = median_time(dist, params, repeats=10)
    _, t_grad = median_time(dgrad, params, repeats=10)
    print(f"  shape distance² (128 pts)    compile+first {first:7.2f} s   value {1e3 * t_val:7.3f} ms"
          f"   gradient {1e3 * t_grad:7.3f} ms   ratio {t_grad / t_val:5.1f}")


if __name__ == "__main__":
    main()
