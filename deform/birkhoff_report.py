"""Birkhoff invariants of elliptic periodic orbits: the `deform measure` section and the
``birkhoff`` invariant family.

Both take their orbits from the periodic-orbit engine (:func:`objectives.orbits.find_orbits`
cold, :func:`objectives.orbits.refine_orbits` warm) and normalize the return map at each
elliptic one with :func:`objectives.birkhoff.birkhoff_invariants`. The normal-form algebra
compiles once per (order, period), so the measure section is limited to periods
q ≤ ``MEASURE_MAX_PERIOD``.
"""

from __future__ import annotations

import jax.numpy as jnp
import numpy as np

from objectives import orbits as orb
from objectives.birkhoff import MAX_ORDER, birkhoff_invariants
from objectives.status import Status, code, combine, finite_or

from . import orbit_report
from .errors import ConfigError
from .invariants import Evaluator, InvariantFamily, register

MEASURE_ORDER = 3
MEASURE_MAX_PERIOD = 3


def _finite(x) -> float | None:
    return float(x) if np.isfinite(x) else None


def birkhoff_section(shape, options):
    """JSON "birkhoff": per elliptic orbit p, q, length, angle, tau (τ₁..τ₃), resonance_order."""
    curve = shape.curve()
    orbits = orbit_report._orbits(shape, options.max_period)
    labels = orbits.labels()
    data, rows = [], []
    for k in np.argsort(np.asarray(orbits.length), kind="stable"):
        q = int(orbits.q[k])
        if orbits.kind[k] != orb.ELLIPTIC or q > MEASURE_MAX_PERIOD:
            continue
        if orbits.status[k] not in (Status.ok, Status.resonant):
            continue
        result = birkhoff_invariants(curve, jnp.asarray(orbits.t[k][:q]), order=MEASURE_ORDER)
        status = Status(int(result.status))
        item = {"p": int(orbits.p[k]), "q": q, "orbit": labels[k],
                "length": float(result.length), "angle": _finite(result.angle),
                "tau": [_finite(v) for v in np.asarray(result.tau)],
                "resonance_order": int(result.resonance_order), "status": status.name}
        data.append(item)
        taus = ", ".join("—" if v is None else f"{v:.10g}" for v in item["tau"])
        angle = "—" if item["angle"] is None else f"{item['angle']:.10g}"
        rows.append((labels[k], f"L = {item['length']:.10g}, α = {angle}, τ = [{taus}]"
                     + (f", resonance order {item['resonance_order']}"
                        if item["resonance_order"] else "")
                     + ("" if status == Status.ok else f"  [{status.name}]")))
    if not rows:
        rows.append(("none", f"no elliptic orbit with q ≤ {MEASURE_MAX_PERIOD}"))
    rows.append(("convention", "P: φ ↦ φ + α + τ₁I + τ₂I² + τ₃I³, I = (s, p)-area/2π, α ∈ (0, π)"))
    return {"birkhoff": data}, rows


# ----------------------------------------------------------------------------- invariant family
def _check_order(order) -> int:
    if not isinstance(order, int) or isinstance(order, bool) or not 1 <= order <= MAX_ORDER:
        raise ConfigError(f"invariants.birkhoff.order: expected an integer in 1..{MAX_ORDER}, "
                          f"got {order!r}")
    return order


def _check_orbits(orbits) -> tuple[tuple[int, int, int], ...]:
    names = tuple(orbits) if isinstance(orbits, (list, tuple)) else (orbits,)
    keys = []
    for name in names:
        try:
            fraction, branch = str(name).split(",")
            p, q = (int(x) for x in fraction.split("/"))
            keys.append((p, q, orb.BRANCHES.index(branch)))
        except ValueError:
            raise ConfigError(f"invariants.birkhoff.orbits: expected names like \"1/2,minimax\" "
                              f"or \"1/3,max\", got {name!r}") from None
        if not (1 <= p < q <= 12) or branch == "critical":
            raise ConfigError(f"invariants.birkhoff.orbits: {name!r} needs 1 ≤ p < q ≤ 12 and "
                              "branch max or minimax")
    if not keys:
        raise ConfigError("invariants.birkhoff.orbits: expected a non-empty list")
    return tuple(keys)


def _birkhoff_family(order, orbits):
    order = _check_order(order)
    keys = _check_orbits(orbits)
    max_period = max(2, max(q for _, q, _ in keys))
    names = tuple(f"{p}/{q},{orb.BRANCHES[b]}" for p, q, b in keys)
    labels = tuple(f"τ{k}[{n}]" for n in names for k in range(1, order + 1))

    def init(curve):
        found = orb.find_orbits(curve, max_period, iterates=1)
        rows = []
        for (p, q, b), name in zip(keys, names):
            match = np.nonzero((found.p == p) & (found.q == q) & (found.branch == b))[0]
            if match.size == 0:
                raise ConfigError(f"invariants.birkhoff.orbits: no {name} orbit found")
            if found.kind[match[0]] != orb.ELLIPTIC:
                raise ConfigError(f"invariants.birkhoff.orbits: the {name} orbit is "
                                  f"{orb.KINDS[int(found.kind[match[0]])]}, not elliptic")
            rows.append(int(match[0]))
        return orbit_report_state(found.select(rows))

    def evaluate(curve, state):
        fresh = orb.refine_orbits(curve, state)
        values, statuses = [], [jnp.max(fresh.status)]
        for k, (_, q, _) in enumerate(keys):
            result = birkhoff_invariants(curve, fresh.t[k, :q], order=order, newton_steps=2)
            values.append(result.tau)
            statuses.append(result.status)
        values = jnp.concatenate(values)
        return values, fresh, finite_or(values, combine(*statuses))

    def recheck(curve, state):
        statuses, _ = orb.same_orbits(curve, state)
        return state, code(Status(int(np.max(statuses, initial=0))))

    return Evaluator(labels, init, evaluate, recheck)


def orbit_report_state(orbits: orb.OrbitSet) -> orb.OrbitSet:
    """The OrbitSet as jnp arrays (the evaluator state)."""
    return orb.OrbitSet(*(jnp.asarray(f) for f in orbits))


register(InvariantFamily(
    "birkhoff", "Birkhoff invariants τ₁..τ_order of the return map at elliptic p/q orbits "
                "(φ ↦ φ + α + Σ τ_k I^k, I = area/2π in (s, p))",
    _birkhoff_family, (("order", 3), ("orbits", ("1/2,minimax",)))))
