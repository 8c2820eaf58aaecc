"""Rigidity scans (deform.rigidity): ranks known from first-order calculus, autodiff vs finite
differences, detection of non-smooth invariants, the [scan] config and `deform scan`."""

from pathlib import Path

import jax.numpy as jnp
import numpy as np
import pytest

from deform.cli import main
from deform.config import parse_config
from deform.errors import ConfigError
from deform.families import FourierCurve, Polar
from deform.rigidity import (build_evaluators, deformation_basis, evaluate_jacobian, rank_profile,
                             rigidity_scan, run_scan)
from deform.shape import Shape
from deform.symmetry import Symmetry

CONFIGS = Path(__file__).resolve().parents[1] / "configs"
POLAR = Polar.build(1.0, [], [], modes=5)  # no symmetry: [radius, cos2..5, sin3..5]
DISK = jnp.zeros(POLAR.n_params).at[0].set(1.0)
EGG = jnp.array([1.0, 0.12, 0.0, 0.0, 0.03, 0.05, -0.02, 0.0])
AREA_PERIMETER = build_evaluators([("area", {}), ("perimeter", {})])


def test_area_perimeter_rank_two_generic_one_at_disk():
    # First variations: δ|Ω| = ∮ v ds and δ|∂Ω| = ∮ κ v ds for an outward normal velocity v
    # (classical; e.g. the proof of the isoperimetric inequality). They are proportional exactly
    # when κ is constant, i.e. at the disk: rank 1 there, rank 2 at a generic shape.
    assert POLAR.param_labels[:2] == ("radius", "cos[2]")
    generic = rigidity_scan(Shape(POLAR, EGG), AREA_PERIMETER)
    disk = rigidity_scan(Shape(POLAR, DISK), AREA_PERIMETER)
    assert generic.smooth and disk.smooth
    assert generic.rank == 2 and disk.rank == 1
    assert generic.singular_values[1] > 1e-3 * generic.singular_values[0]
    assert disk.singular_values[1] < 1e-13 * disk.singular_values[0]
    assert generic.nullity == generic.dimension - 2
    # null directions really are invisible to both invariants
    np.testing.assert_allclose(generic.jacobian @ generic.null_directions.T, 0.0, atol=1e-12)


def test_curve_family_counts_shape_changes_not_coefficients():
    # z = Σ_{|k|≤3} ĉ_k e^{ikt} around the unit circle: δĉ_k = 1 (or i) moves the boundary with
    # normal velocity −cos((k−1)t) (or sin((k−1)t)) (differentiate z = e^{it}; common practice).
    # Free coefficients (ĉ₀, Im ĉ₁, Im ĉ₋₁ held) reach cos mt, m = 0..4 and sin mt, m = 1..4;
    # removing the two translations (cos t, sin t; rotation is tangential on a circle) leaves 7.
    family = FourierCurve.build([(1, 1.0, 0.0)], modes=3)
    circle = Shape(family, jnp.asarray(family.initial_params()))
    assert family.n_params == 10
    assert deformation_basis(circle).shape[1] == 7
    result = rigidity_scan(circle, AREA_PERIMETER)
    assert result.rank == 1 and result.dimension == 7


def test_jacobian_matches_central_differences():
    # Forward-mode Jacobian against central differences, step 1e-6 (float64; common practice).
    evaluators = build_evaluators([("area", {}), ("perimeter", {}), ("heat_dirichlet", {}),
                                   ("curvature_moments", {"max_power": 4})])
    shape = Shape(POLAR, EGG)
    values, jac, codes, states = evaluate_jacobian(shape, evaluators)
    assert not np.any(codes)

    def stacked(params):
        curve = shape.with_params(params).curve()
        return np.concatenate([np.atleast_1d(np.asarray(e.evaluator.evaluate(curve, s)[0]))
                               for e, s in zip(evaluators, states)])

    h = 1e-6
    fd = np.stack([(stacked(EGG.at[i].add(h)) - stacked(EGG.at[i].add(-h))) / (2 * h)
                   for i in range(EGG.size)], axis=1)
    np.testing.assert_allclose(jac, fd, rtol=1e-7, atol=1e-8 * np.abs(values).max())


def test_rank_profile_grows_with_heat_invariants():
    # Heat coefficients c₀, c₁ are area and perimeter (Kac 1966; Pleijel 1954), c₂ = 1/6 is a
    # constant (McKean–Singer 1967), so adding the heat family to area and perimeter can add at
    # most 3 (c₃, c₄, c₅) to the rank.
    evaluators = build_evaluators([("area", {}), ("perimeter", {}), ("heat_dirichlet", {})])
    result = rigidity_scan(Shape(POLAR, EGG), evaluators)
    profile = rank_profile(result)
    assert [p[0] for p in profile] == ["area", "perimeter", "heat_dirichlet"]
    assert [p[2] for p in profile] == [1, 2, 5]
    assert result.rank == 5


MIRROR = Polar.build(1.0, [], [], modes=3, symmetry=Symmetry("mirror"))  # radius, cos2, cos3
MIRROR_DISK = jnp.array([1.0, 0.0, 0.0])


def test_orbit_lengths_not_smooth_at_the_disk_symmetric_ones_are():
    # At the disk every p/q orbit lies in a rotation family, so generic (unmarked) orbit lengths
    # are not differentiable in the shape: the scan must refuse a Jacobian and say why. The
    # symmetric orbits of a mirror class stay smooth, and at first order L_{1/2} sees radius and
    # cos 2θ, L_{1/3} radius and cos 3θ, so they pin down this 3-parameter class
    # (De Simoi–Kaloshin–Wei, Ann. of Math. 186, 2017: the linearized marked length spectrum).
    shape = Shape(MIRROR, MIRROR_DISK)
    free = rigidity_scan(shape, build_evaluators([("symmetric_orbits",
                                                   {"max_period": 3, "free": True})]))
    assert not free.smooth
    assert free.jacobian is None and free.rank is None
    assert "not smooth" in free.message and "degenerate" in free.message
    marked = rigidity_scan(shape, build_evaluators([("symmetric_orbits", {"max_period": 3})]))
    assert marked.smooth and marked.dimension == 3 and marked.rank == 3
    # rank as orbits are added by increasing period: q = 2 sees radius and cos 2θ, q = 3 adds cos 3θ
    profile = rank_profile(marked)
    assert [(name, rank) for name, _, rank, _ in profile] == [
        ("symmetric_orbits q≤2", 2), ("symmetric_orbits q≤3", 3)]


def test_scan_config_runs_and_writes_record_and_figures(tmp_path):
    # configs/scan.toml, shortened: orbits up to period 2 and a two-point ellipse path.
    text = (CONFIGS / "scan.toml").read_text()
    text = text.replace("max_period = 4", "max_period = 2")
    text = text.replace("ratios = [1.0, 0.9, 0.8, 0.7, 0.6]", "ratios = [1.0, 0.7]")
    config = parse_config(text, "scan.toml")
    result, report, figures = run_scan(config, str(tmp_path / "scan.h5"), str(tmp_path / "png"))
    assert result.smooth and "rank" in report and "along the path" in report
    names = {p.name for p in figures}
    assert {"singular_values.png", "rank_profile.png", "path_singular_values.png"} <= names
    from deform.record import read_record
    from deform.rigidity import inspect_lines

    record = read_record(tmp_path / "scan.h5")
    assert record.attrs["kind"] == "rigidity"
    lines = "\n".join(inspect_lines(record))
    assert "rank as families are added" in lines and "path (ellipses)" in lines
    # `deform inspect` / `deform plot` dispatch on the record kind
    assert main(["inspect", str(tmp_path / "scan.h5")]) == 0
    assert main(["plot", str(tmp_path / "scan.h5"), "--out", str(tmp_path / "again")]) == 0
    assert (tmp_path / "again" / "rank_profile.png").exists()


def test_null_modes_are_drawn(tmp_path):
    text = """
[shape]
family = "polar"
radius = 1.0
cos = [0.0, 0.12, 0.0, 0.0, 0.03]
sin = [0.0, 0.0, 0.05, -0.02]
[scan]
families = ["area", "perimeter"]
null_modes = 2
"""
    result, _, figures = run_scan(parse_config(text), str(tmp_path / "s.h5"), str(tmp_path))
    assert result.rank == 2 and result.nullity == result.dimension - 2
    assert "null_modes.png" in {p.name for p in figures}


def test_bad_scan_configs_are_one_line_errors(tmp_path, capsys):
    with pytest.raises(ConfigError, match=r"scan.families\[1\]: unknown invariant"):
        parse_config('[scan]\nfamilies = ["area", "nope"]\n')
    with pytest.raises(ConfigError, match=r"scan.path.ratios\[0\]: expected 0 < b/a <= 1"):
        parse_config('[scan]\nfamilies = ["area"]\n[scan.path]\nkind = "ellipses"\n'
                     'ratios = [1.5]\n')
    bad = tmp_path / "bad.toml"
    bad.write_text('[shape]\nfamily = "disk"\nradius = 1.0\n')
    assert main(["scan", str(bad)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "scan: missing" in err[0]


def test_generic_orbit_lengths_flagged_near_the_disk():
    # The orbit engine's Birkhoff orbit lengths near the disk (r = 1 + 10⁻⁷ cos 2θ): the p/q
    # orbits are nearly a rotation family (Birkhoff 1927), the length Hessian is nearly singular,
    # and the scan reports the family as not smooth instead of a Jacobian.
    family = Polar.build(1.0, [], [], modes=3)
    shape = Shape(family, jnp.array([1.0, 1e-7, 0.0, 0.0]))
    result = rigidity_scan(shape, build_evaluators([("orbit_lengths", {"max_period": 3})]))
    assert not result.smooth and result.jacobian is None
    assert result.statuses["orbit_lengths"] == "degenerate"
    assert "orbit_lengths: degenerate" in result.message


def test_path_from_a_search_record(tmp_path):
    # A continuation record's accepted shapes as the path: a disk then two ovals. Area and
    # perimeter have rank 1 at the disk and 2 elsewhere (first variations, as above).
    from deform.record import Column, open_writer, provenance
    from deform.rigidity import path_scan, record_path
    from deform.scanspec import PathSpec

    n = POLAR.n_params
    columns = {"steps": {"step": Column((), "i8"), "params": Column((n,), "f8")}}
    with open_writer(tmp_path / "run.h5", provenance("continuation", "", "test", 0),
                     columns) as writer:
        for step, params in enumerate((DISK, EGG, 0.5 * (DISK + EGG))):
            writer.append("steps", {"step": step, "params": np.asarray(params)})
    shapes, parameter = record_path(PathSpec(kind="record", record=str(tmp_path / "run.h5")),
                                    POLAR)
    scan = path_scan(shapes, parameter, AREA_PERIMETER, count=2)
    assert list(parameter) == [0.0, 1.0, 2.0]
    assert list(scan.ranks) == [1, 2, 2]
    assert scan.smallest[0, 1] > 1e-3 and scan.smallest[0, 0] < 1e-12  # σ_min vs σ_min2 at the disk
