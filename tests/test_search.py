"""Search engine: continuation and penalty modes against closed forms, rank stops, no retracing.

Outside references used here:
* area of a polar curve r(θ) = a₀ + Σ (c_k cos kθ + s_k sin kθ): A = ½∮r² dθ
  = π a₀² + (π/2) Σ (c_k² + s_k²) (Parseval's identity; classical closed form).
* perimeter of an ellipse: scipy.special.ellipe (L = 4a E(1 − b²/a²)).
"""

import numpy as np
import pytest
import scipy.special

from deform import search
from deform.config import parse_config
from deform.errors import ConfigError
from deform.record import read_record
from deform.run import run_search


def polar_area(params, labels):
    """Parseval: A = π a₀² + (π/2) Σ_k (c_k² + s_k²) (classical closed form)."""
    values = dict(zip(labels, params))
    radius = values.pop("radius")
    return np.pi * radius**2 + 0.5 * np.pi * sum(v * v for v in values.values())


def run(text, tmp_path, name="run.h5", **kw):
    cfg = parse_config(text, "test.toml")
    out = run_search(cfg.shape, cfg.search, cfg.invariants, config_text=cfg.text,
                     source="test.toml", output=tmp_path / name, progress=lambda line: None,
                     **kw)
    return cfg, read_record(out)


DISK_AREA = """
[shape]
family = "polar"
radius = 1.0
modes = 3
[search]
mode = "continuation"
keep = ["area"]
steps = 6
seed = 5
[search.continuation]
step_size = 0.02
max_step = 0.05
"""


def test_continuation_keeping_area_stays_on_the_area_level_set(tmp_path):
    cfg, rec = run(DISK_AREA, tmp_path)
    steps = rec.table("steps")
    labels = cfg.shape.param_labels
    assert rec.rows("steps") == 7, "seed 5"
    assert np.all(steps["status"] == 0)
    areas = np.array([polar_area(p, labels) for p in steps["params"]])
    # the start is the unit disk; every accepted shape keeps A = π (Parseval closed form)
    np.testing.assert_allclose(areas, np.pi, rtol=1e-10, atol=0)
    assert np.max(np.abs(steps["residuals"])) <= 1e-10
    # it really moves: the distance from the disk grows step after step
    assert np.all(np.diff(steps["distance"]) > 0) and steps["distance"][-1] > 0.02
    # and it is not just the radius changing (the disk class's neighbourhood is left)
    assert np.max(np.abs(steps["params"][-1][1:])) > 0.01
    # review: the figures are written as PNG files
    from deform.review import plot_record

    figures = plot_record(rec, tmp_path / "plots")
    assert sorted(p.name for p in figures) == ["distance.png", "drift.png", "path.png",
                                               "shapes.png"]
    assert all(p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for p in figures)


def test_full_column_rank_cannot_move(tmp_path):
    """Ellipse (a, b) keeping area and perimeter: 2 independent values, 2 parameters."""
    text = """
[shape]
family = "ellipse"
a = 1.0
b = 0.6
[search]
keep = ["area", "perimeter"]
steps = 5
"""
    cfg, rec = run(text, tmp_path)
    assert rec.rows("steps") == 1 and rec.rows("rejected") == 0
    status, reason = [e for e in rec.events() if e[1] == "stop"][0][2].split('"reason": ')
    assert "cannot move" in reason and "full column rank 2 = 2" in reason
    assert rec.meta["rank"] == 2
    inv = dict(zip(rec.labels["steps"]["invariants"], rec.table("steps")["invariants"][0]))
    # the recorded start values are right: A = πab; L = 4a E(e²) (scipy.special.ellipe)
    assert inv["area:area"] == pytest.approx(np.pi * 0.6, rel=1e-12)
    assert inv["perimeter:perimeter"] == pytest.approx(4 * scipy.special.ellipe(1 - 0.36),
                                                       rel=1e-12)


def test_continuation_to_a_coefficient_target_matches_closed_form(tmp_path):
    """Keep area, drive cos[2] to 0.1: the end radius is √(1 − 0.1²/2) (Parseval)."""
    text = DISK_AREA.replace("steps = 6", "steps = 40") + """
[search.move]
kind = "coefficient"
coefficient = "cos[2]"
target = 0.1
tolerance = 1e-9
"""
    text = text.replace("modes = 3", "modes = 2")
    cfg, rec = run(text, tmp_path)
    steps = rec.table("steps")
    last = dict(zip(cfg.shape.param_labels, steps["params"][-1]))
    assert "target reached" in rec.events()[-1][2]
    assert last["cos[2]"] == pytest.approx(0.1, abs=1e-9)
    assert last["radius"] == pytest.approx(np.sqrt(1 - 0.1**2 / 2), abs=1e-9)


def test_penalty_adam_reaches_target_with_small_residual(tmp_path, monkeypatch):
    monkeypatch.setenv("DEFORM_CACHE", str(tmp_path / "cache"))  # its step is traced here
    text = """
[shape]
family = "polar"
radius = 1.0
modes = 2
[search]
mode = "penalty"
keep = ["area"]
steps = 600
seed = 1
[search.move]
kind = "coefficient"
coefficient = "cos[2]"
target = 0.1
tolerance = 1e-3
[search.penalty]
optimizer = "adam"
learning_rate = 0.01
weight = 1e3
move_weight = 10.0
multiplier_every = 10
tolerance = 2e-5
"""
    cfg, rec = run(text, tmp_path)
    steps = rec.table("steps")
    last = dict(zip(cfg.shape.param_labels, steps["params"][-1]))
    assert "target reached" in rec.events()[-1][2], rec.events()
    assert abs(last["cos[2]"] - 0.1) <= 1e-3
    # area held: Parseval closed form at the final parameters
    assert polar_area(steps["params"][-1], cfg.shape.param_labels) == pytest.approx(
        np.pi, rel=2e-5)
    assert search.TRACES["penalty"] >= 1  # the penalty step program was traced, not reloaded


def test_no_retracing_between_steps(tmp_path, monkeypatch):
    """Trace counter (equinox-style): one trace for a whole multi-step run."""
    monkeypatch.setenv("DEFORM_CACHE", str(tmp_path / "cache"))  # no program kept from before
    before = search.TRACES["continuation"]
    cfg, rec = run(DISK_AREA.replace("steps = 6", "steps = 3"), tmp_path)
    assert rec.rows("steps") == 4
    assert search.TRACES["continuation"] - before == 1


@pytest.mark.parametrize("mode", ["continuation", "penalty"])
def test_a_second_run_of_a_config_reuses_the_kept_step_program(tmp_path, monkeypatch, mode):
    """The step program is exported once per config: the second run does not trace it and
    records the same trajectory bit for bit (common practice for build caches)."""
    monkeypatch.setenv("DEFORM_CACHE", str(tmp_path / "cache"))
    text = DISK_AREA.replace("steps = 6", "steps = 3").replace(
        '"continuation"', f'"{mode}"').replace("keep = [\"area\"]",
                                               'keep = ["area"]\nwatch = ["perimeter"]')
    before = search.TRACES[mode]
    _, first = run(text, tmp_path, name="first.h5")
    assert search.TRACES[mode] - before == 1
    assert list((tmp_path / "cache" / "programs").iterdir())
    _, second = run(text, tmp_path, name="second.h5")
    assert search.TRACES[mode] - before == 1
    for column in ("params", "invariants", "state"):
        np.testing.assert_array_equal(first.table("steps")[column],
                                      second.table("steps")[column])
    # a damaged program file is replaced, not trusted
    for path in (tmp_path / "cache" / "programs").iterdir():
        path.write_bytes(b"not a program")
    _, third = run(text, tmp_path, name="third.h5")
    assert search.TRACES[mode] - before == 2
    np.testing.assert_array_equal(first.table("steps")["params"], third.table("steps")["params"])


def test_kept_jacobian_matches_central_differences():
    """The Jacobian the predictor uses (jax.jacfwd) against central differences, float64."""
    import jax

    text = """
[shape]
family = "polar"
radius = 1.0
cos = [0.0, 0.1, 0.03]
sin = [0.0, 0.0, 0.02]
[search]
keep = ["area", "heat_dirichlet"]
[invariants.heat_dirichlet]
order = 5
resolution = 128
"""
    cfg = parse_config(text)
    problem = search.build_problem(cfg.shape, cfg.search, cfg.invariants)
    prepared = search.prepare(problem, cfg.search)
    ctx, states = prepared.ctx, prepared.state.evaluator_states
    f = jax.jit(lambda x: search._residual(problem, ctx, x, states)[0])
    J = np.asarray(jax.jacfwd(f)(ctx.start))
    x0, h = np.asarray(ctx.start), 1e-6
    for j in range(x0.size):
        e = np.zeros_like(x0)
        e[j] = h
        fd = (np.asarray(f(x0 + e)) - np.asarray(f(x0 - e))) / (2 * h)
        np.testing.assert_allclose(J[:, j], fd, rtol=1e-6, atol=1e-7)


def test_rejected_steps_are_recorded_but_never_results(tmp_path):
    """Drive r = a + c cos 2θ toward c = 0.5 keeping area, with convexity required.

    The curve is convex iff r² + 2r'² − r r'' > 0; at θ = π/2 this is (a − c)(a − 5c), so
    convexity is lost at c/a = 1/5 (classical polar-curvature formula). The run must stop
    there: failures land in 'rejected' (status not_convex) and never among the results.
    """
    text = """
[shape]
family = "polar"
radius = 1.0
cos = [0.0, 0.1]
modes = 2
[search]
keep = ["area"]
steps = 60
convex = true
seed = 2
max_retries = 12
[search.move]
kind = "coefficient"
coefficient = "cos[2]"
target = 0.5
[search.continuation]
step_size = 0.02
max_step = 0.1
min_step = 1e-5
"""
    cfg, rec = run(text, tmp_path)
    steps, rejected = rec.table("steps"), rec.table("rejected")
    from objectives.status import Status

    assert np.all(steps["status"] == int(Status.ok))
    assert rec.rows("rejected") >= 1
    assert Status.not_convex in {Status(int(s)) for s in rejected["status"]}
    ratio = steps["params"][:, 1] / steps["params"][:, 0]
    assert np.all(ratio < 0.2)
    assert ratio[-1] > 0.2 - 1e-3  # pushed up to the convexity limit c/a = 1/5
    assert "cannot continue" in rec.events()[-1][2]


@pytest.mark.parametrize("text, needle", [
    ('[search]\nkeep = ["area", "no_such_thing"]', "search.keep[1]: unknown invariant"),
    ('[search]\nkeep = []', "search.keep: expected at least one"),
    ('[search]\nkeep = ["area"]\n[search.move]\nkind = "invariant"\nfamily = "area"\ntarget = 1',
     "search.move.family: 'area' is kept"),
    ('[search]\nkeep = ["area"]\nmode = "walk"', "search.mode: expected one of"),
    ('[search]\nkeep = ["area"]\n[search.continuation]\nstep_size = 1.0\nmax_step = 0.1',
     "search.continuation.step_size"),
    ('[search]\nkeep = ["area"]\n[invariants.area]\nresolutoin = 3',
     "invariants.area.resolutoin: unknown option"),
    ('[search]\nkeep = ["area"]\n[invariants.nope]\nx = 1', "invariants.nope: unknown invariant"),
    ('[search]\nkeep = ["area"]\nstep = 3', "search.step: unknown key"),
])
def test_malformed_search_configs_are_one_line_errors(text, needle):
    with pytest.raises(ConfigError) as err:
        parse_config('[shape]\nfamily = "disk"\nradius = 1.0\n' + text)
    assert needle in str(err.value) and "\n" not in str(err.value)


def test_impossible_constraints_are_one_line_errors(tmp_path):
    base = '[shape]\nfamily = "polar"\nradius = 1.0\ncos = [0.0, 0.4]\nmodes = 3\n'
    with pytest.raises(ConfigError, match=r"search.convex: the start shape is not convex"):
        run(base + '[search]\nkeep = ["area"]\nconvex = true\n', tmp_path)
    with pytest.raises(ConfigError, match=r"search.move.coefficient: 'sin\[2\]' is not a free"):
        run(base.replace("modes = 3", 'modes = 3\nsymmetry = "mirror"')
            + '[search]\nkeep = ["area"]\n[search.move]\nkind = "coefficient"\n'
              'coefficient = "sin[2]"\ntarget = 0.1\n', tmp_path)
    with pytest.raises(ConfigError, match="no free parameters"):
        run('[shape]\nfamily = "disk"\nradius = 1.0\nfix_scale = true\n'
            '[search]\nkeep = ["area"]\n', tmp_path)


def test_cli_errors_are_one_line_with_exit_code_2(tmp_path, capsys):
    from deform.cli import main

    cfg = tmp_path / "bad.toml"
    cfg.write_text('[shape]\nfamily = "disk"\nradius = 1.0\n[search]\nkeep = ["arae"]\n')
    assert main(["run", str(cfg)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("deform: error: search.keep[0]: unknown invariant 'arae'")
    assert "\n" not in err
    assert main(["inspect", str(tmp_path / "missing.h5")]) == 2
    assert "no such record" in capsys.readouterr().err


def _segments_cross(points):
    """Brute-force numpy test of every pair of non-adjacent polygon edges (common practice)."""
    a, b = points, np.roll(points, -1, axis=0)
    n = len(points)
    for i in range(n):
        for j in range(i + 2, n - (i == 0)):
            d1, d2 = b[i] - a[i], b[j] - a[j]
            den = d1[0] * d2[1] - d1[1] * d2[0]
            if den == 0:
                continue
            r = a[j] - a[i]
            u = (r[0] * d2[1] - r[1] * d2[0]) / den
            v = (r[0] * d1[1] - r[1] * d1[0]) / den
            if 0 <= u <= 1 and 0 <= v <= 1:
                return True
    return False


@pytest.mark.parametrize("d, convex, simple", [
    (0.05, True, True),    # hypotrochoid z = e^{it} + d e^{-2it}: convex for small d,
    (0.3, False, True),    # non-convex but simple below the cusp value d = 1/2,
    (0.8, False, False),   # looped (self-intersecting) above it (classical roulette curves)
])
def test_constraint_status_fast_path_agrees_with_a_brute_force_crossing_test(d, convex, simple):
    from types import SimpleNamespace

    import jax.numpy as jnp

    from deform.families import FourierCurve
    from objectives.curve import Curve
    from objectives.status import Status

    fam = FourierCurve.build([(1, 1.0, 0.0), (-2, d, 0.0)], modes=2)
    x = jnp.asarray(fam.initial_params())
    problem = SimpleNamespace(curve=lambda p: Curve(fam.boundary, p), convex=False)
    status = Status(int(search.constraint_status(problem, x)))
    points = np.asarray(jax_points(fam, x, search.CONSTRAINT_RESOLUTION))
    assert _segments_cross(points) == (not simple)
    assert status == (Status.ok if simple else Status.self_intersection)
    problem.convex = True
    status = Status(int(search.constraint_status(problem, x)))
    assert status == (Status.ok if convex else Status.not_convex if simple
                      else Status.self_intersection)


def jax_points(fam, x, n):
    import jax

    from objectives.curve import Curve, nodes

    return jax.vmap(Curve(fam.boundary, x))(nodes(n))


def test_kept_programs_are_evicted_least_recently_used_first(tmp_path):
    """LRU eviction of kept step programs by modification time (common practice for caches)."""
    import os

    from objectives import programs

    for i in range(5):
        path = tmp_path / f"p{i}{programs.SUFFIX}"
        path.write_bytes(b"x")
        os.utime(path, (1000 + i, 1000 + i))
    programs._evict(tmp_path, keep=3)
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        f"p{i}{programs.SUFFIX}" for i in (2, 3, 4)]
