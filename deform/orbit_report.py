"""`deform measure` sections for periodic orbits: bouncing balls, p/q orbits, wave trace, and the
class-hypothesis checklist of a designated bouncing ball.

All four sections share one cold orbit search per (shape, max_period), kept in a one-entry cache.
"""

from __future__ import annotations

import numpy as np

from objectives import orbits as orb
from objectives import wave
from objectives.status import Status

_CACHE: dict = {}


def _orbits(shape, max_period: int, iterates: int = 3):
    key = (id(shape), max_period, iterates)
    if _CACHE.get("key") != key or _CACHE.get("shape") is not shape:
        _CACHE.clear()
        _CACHE.update(key=key, shape=shape,
                      value=orb.find_orbits(shape.curve(), max_period, iterates=iterates))
    return _CACHE["value"]


def _finite(x: float):
    return float(x) if np.isfinite(x) else None


def bouncing_balls_section(shape, options):
    curve = shape.curve()
    orbits = _orbits(shape, options.max_period)
    idx = [k for k in np.argsort(-orbits.length, kind="stable") if orbits.q[k] == 2]
    data, rows = [], []
    for k in idx:
        ends = orb.polar_angles(curve, orbits.t[k][:2])
        admissible = bool(orbits.status[k] != Status.orbit_leaves_domain)
        item = {
            "length": float(orbits.length[k]),
            "kind": orb.KINDS[int(orbits.kind[k])],
            "trace": float(orbits.trace[k]),
            "angle": _finite(orbits.angle[k]),
            "endpoints": [float(e) for e in ends],
            "admissible": admissible,
        }
        data.append(item)
        angle = f", α = {item['angle']:.10g}" if item["angle"] is not None else ""
        rows.append((f"L = {item['length']:.12g}",
                     f"{item['kind']}, tr P = {item['trace']:.10g}{angle}, ends at polar angles "
                     f"{ends[0]:.6f}, {ends[1]:.6f}"
                     + ("" if admissible else "  INADMISSIBLE (chord leaves the domain)")))
    if not rows:
        rows.append(("none", "no bouncing ball found"))
    return {"bouncing_balls": data}, rows


def orbits_section(shape, options):
    orbits = _orbits(shape, options.max_period)
    data, rows = [], []
    for k in range(orbits.size):
        if orbits.branch[k] == orb.CRITICAL:
            continue
        item = {"p": int(orbits.p[k]), "q": int(orbits.q[k]),
                "branch": orb.BRANCHES[int(orbits.branch[k])], "length": float(orbits.length[k]),
                "trace": float(orbits.trace[k]), "residual": float(orbits.residual[k])}
        data.append(item)
        status = Status(int(orbits.status[k]))
        flags = [status.name] if status != Status.ok else []
        if orbits.near_tie[k]:
            flags.append("near-tie with another orbit of this kind")
        rows.append((f"{item['p']}/{item['q']} {item['branch']}",
                     f"L = {item['length']:.12g}, tr P = {item['trace']:.8g} "
                     f"({orb.KINDS[int(orbits.kind[k])]}), index {int(orbits.hessian_index[k])}, "
                     f"Maslov {list(map(int, orbits.maslov[k]))}, residual {item['residual']:.1e}"
                     + (f"  [{'; '.join(flags)}]" if flags else "")))
    return {"orbits": data}, rows


def wave_section(shape, options):
    orbits = _orbits(shape, options.max_period)
    labels = orbits.labels()
    terms = wave.wave_coefficients(orbits, options.boundary)
    data, rows = [], []
    order = np.argsort(np.asarray(terms.length), kind="stable")
    for i in order:
        if not bool(terms.usable[i]):
            continue
        item = {"orbit": labels[int(terms.orbit[i])], "iterate": int(terms.iterate[i]),
                "length": float(terms.length[i]), "amplitude": float(terms.amplitude[i]),
                "phase": float(terms.phase[i])}
        data.append(item)
        rows.append((f"{item['orbit']} ×{item['iterate']}",
                     f"t = {item['length']:.10g}, A = {item['amplitude']:.8g}, "
                     f"phase = {item['phase'] / np.pi:.3g}π"))
    rows.append(("normalization", f"d(k) ∋ A cos(kL − phase), {options.boundary}; degenerate "
                                  "orbit families omitted"))
    return {"wave": data}, rows


def designated_bouncing_ball(orbits) -> int | None:
    """The shortest admissible elliptic bouncing ball, else the 1/2 min-max orbit."""
    cand = [k for k in np.argsort(orbits.length, kind="stable") if orbits.q[k] == 2
            and orbits.kind[k] == orb.ELLIPTIC and orbits.status[k] != Status.orbit_leaves_domain]
    if cand:
        return int(cand[0])
    width = np.nonzero((orbits.q == 2) & (orbits.branch == orb.MINIMAX))[0]
    return int(width[0]) if width.size else None


def hypotheses_section(shape, options):
    orbits = _orbits(shape, options.max_period)
    k = designated_bouncing_ball(orbits)
    if k is None:
        return {"class_hypotheses": None}, [("none", "no bouncing ball")]
    check = orb.class_hypotheses(shape.curve(), orbits, k)
    label = f"bouncing ball L = {float(orbits.length[k]):.12g}"
    data = {"orbit": label, "passed": check.passed(),
            "checks": {name: {"passed": bool(v[0]), "detail": v[1]}
                       for name, v in zip(check._fields, check)}}
    rows = [("orbit", label)] + [(f"[{'x' if v[0] else ' '}] {name.replace('_', ' ')}", v[1])
                                 for name, v in zip(check._fields, check)]
    return {"class_hypotheses": data}, rows
