"""Wave-trace check: spectral side from computed eigenvalues vs the orbit engine's prediction.

Ellipse (1, 0.6), Dirichlet and Neumann eigenvalues with k ≤ K (default 32). Prints, for each
orbit (iterate) up to length 5 found by objectives.orbits.find_orbits, the predicted peak
(length, amplitude A = L^#/(π|det(I − P)|^{1/2}), phase σπ/2) against the smoothed spectral
trace F(ℓ) (objectives.spectrum.trace): peak position, 2|F(L)| / A and arg F(L). Writes the
figure runs/wave_trace_ellipse.png. The ellipse's p/q (q ≥ 3) orbits come in families
(det(I − P) = 0): their peaks are stronger and not covered by the isolated-orbit amplitude.
Run: .venv/bin/python tests/bench/bench_wave_trace.py [K]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import jax.numpy as jnp
import numpy as np

from deform.runtime import configure_jax


def ellipse(p, t):
    return jnp.stack([p[0] * jnp.cos(t), p[1] * jnp.sin(t)])


def main(k_max: float = 32.0) -> None:
    configure_jax()
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from objectives.curve import Curve
    from objectives.orbits import find_orbits
    from objectives.spectrum import eigenvalues
    from objectives.spectrum.trace import geometric_terms, spectral_trace

    curve = Curve(ellipse, jnp.array([1.0, 0.6]))
    orbits = find_orbits(curve, max_period=4)
    ell = np.linspace(0.5, 5.0, 1801)
    fig, axes = plt.subplots(2, 1, figsize=(8, 6), sharex=True)
    for ax, boundary in zip(axes, ("dirichlet", "neumann")):
        t0 = time.perf_counter()
        spec = eigenvalues(curve, k_max=k_max, boundary=boundary)
        dt = time.perf_counter() - t0
        k_lower = 0.2 * k_max
        f = spectral_trace(spec.wavenumbers[spec.values > 0], ell, k_lower, k_max)
        print(f"{boundary}: {spec.values.size} eigenvalues with k ≤ {k_max} in {dt:.1f} s "
              f"(status {spec.status.name}); window k ∈ [{k_lower:.1f}, {k_max:.1f}]")
        ax.plot(ell, 2 * np.abs(f), "k-", lw=1, label="2|F(ℓ)| from eigenvalues")
        for term in geometric_terms(orbits, boundary, ell[-1]):
            if term.degenerate:
                print(f"  {term.label:16s} L = {term.length:.6f}  family (det(I−P) = 0)")
                ax.axvline(term.length, color="0.7", lw=0.8, ls=":")
                continue
            near = np.abs(ell - term.length) < 0.15
            peak = ell[near][np.argmax(np.abs(f[near]))]
            at = spectral_trace(spec.wavenumbers[spec.values > 0], [term.length], k_lower,
                                k_max)[0]
            print(f"  {term.label:16s} L = {term.length:.6f}  peak at {peak:.4f}  "
                  f"A = {term.amplitude:.5f}  2|F(L)|/A = {2 * abs(at) / term.amplitude:.4f}  "
                  f"phase {np.angle(at) / np.pi:+.3f}π (predicted {term.phase / np.pi:+.3f}π)")
            ax.plot([term.length], [term.amplitude], "rv")
        ax.set_ylabel(f"{boundary}")
        ax.set_ylim(0, 2.5)
    axes[0].legend(loc="upper left")
    axes[1].set_xlabel("ℓ (orbit length); red: isolated-orbit prediction, dotted: families")
    out = Path("runs")
    out.mkdir(exist_ok=True)
    fig.savefig(out / "wave_trace_ellipse.png", dpi=110, bbox_inches="tight")
    print(f"figure: {out / 'wave_trace_ellipse.png'}")


if __name__ == "__main__":
    main(float(sys.argv[1]) if len(sys.argv) > 1 else 32.0)
