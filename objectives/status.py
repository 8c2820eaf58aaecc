"""Readable statuses that travel with numerical results.

Inside jitted code a status is an int32 array holding a :class:`Status` value; outside it
is converted with ``Status(int(code))`` and stored by name. When several checks apply,
``combine`` keeps the most severe (largest) value.
"""

from __future__ import annotations

import enum

import jax.numpy as jnp


class Status(enum.IntEnum):
    ok = 0
    degenerate = 1            # det(I − Pᵐ) ≈ 0, a family of orbits, or a singular Jacobian
    not_elliptic = 2          # |tr P| ≥ 2 where an elliptic orbit's normal form is asked for
    resonant = 3              # mα ∈ 2πℤ for a small m where a normal form is asked for
    branch_changed = 4        # a tracked orbit is no longer the one it was seeded as
    orbit_not_converged = 5   # gradient residual of a periodic orbit above tolerance
    orbit_leaves_domain = 6   # a chord of the orbit leaves the domain (non-convex shapes)
    not_convex = 7            # convexity was required and min κ ≤ 0
    self_intersection = 8     # the boundary is not a simple closed curve
    solver_failed = 9         # an inner solver (eigenvalues, corrector) failed otherwise
    nonfinite = 10            # NaN or inf in a result

    @property
    def message(self) -> str:
        return _MESSAGES[self]


_MESSAGES = {
    Status.ok: "ok",
    Status.degenerate: "degenerate: orbit family or singular linearization",
    Status.not_elliptic: "the orbit is not elliptic (|trace| >= 2): no elliptic normal form",
    Status.resonant: "resonant rotation angle: normal form not defined to this order",
    Status.branch_changed: "a tracked orbit changed branch",
    Status.orbit_not_converged: "periodic orbit solver did not converge",
    Status.orbit_leaves_domain: "an orbit chord leaves the domain",
    Status.not_convex: "the shape is not convex",
    Status.self_intersection: "the boundary intersects itself",
    Status.solver_failed: "an inner solver failed",
    Status.nonfinite: "non-finite value (NaN or inf)",
}


def code(status: Status):
    return jnp.asarray(int(status), dtype=jnp.int32)


def combine(*codes):
    """Most severe of several status codes (elementwise max)."""
    out = jnp.asarray(codes[0], dtype=jnp.int32)
    for c in codes[1:]:
        out = jnp.maximum(out, jnp.asarray(c, dtype=jnp.int32))
    return out


def finite_or(values, status):
    """``status`` unless ``values`` contain NaN/inf, in which case ``nonfinite``."""
    bad = ~jnp.all(jnp.isfinite(values))
    return jnp.where(bad, code(Status.nonfinite), jnp.asarray(status, dtype=jnp.int32))
