"""`deform measure --eigenvalues`, `deform compare` and the eigenvalue invariant families."""

from __future__ import annotations

import json

import jax
import numpy as np
import pytest
import scipy.special as sp

from deform import invariants
from deform.cli import main
from deform.compare import compare_spectra, load_shape
from deform.shape import rotated, scaled, translated


def _write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def test_measure_json_reports_eigenvalues(tmp_path, capsys):
    """Unit disk, Neumann: 0, j'₁₁² (twice), j'₂₁² (twice) from scipy.special.jnp_zeros."""
    path = _write(tmp_path, "disk.toml", '[shape]\nfamily = "disk"\nradius = 1.0\n')
    assert main(["measure", path, "--eigenvalues", "5", "--boundary", "neumann", "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    got = report["eigenvalues"]["neumann"]
    want = [0.0] + [sp.jnp_zeros(1, 1)[0] ** 2] * 2 + [sp.jnp_zeros(2, 1)[0] ** 2] * 2
    np.testing.assert_allclose(got, want, rtol=1e-11, atol=1e-12)
    assert report["eigenvalue_multiplicities"]["neumann"] == [1, 2, 2, 2, 2]
    assert report["eigenvalue_status"]["neumann"] == "ok"


def test_measure_table_and_bad_arguments(tmp_path, capsys):
    path = _write(tmp_path, "ell.toml", '[shape]\nfamily = "ellipse"\na = 1.0\nb = 0.6\n')
    assert main(["measure", path, "--eigenvalues", "2"]) == 0
    out = capsys.readouterr().out
    # ellipse (1, 0.6): λ₁ = 10.845674793676, computed numerically (Mathieu functions)
    assert "λ_1" in out and "10.8456747936" in out
    assert main(["measure", path, "--eigenvalues", "0"]) == 2
    assert "--eigenvalues" in capsys.readouterr().err
    assert main(["measure", path, "--eigenvalues", "2", "--boundary", "robin"]) == 2
    assert "--boundary" in capsys.readouterr().err


def test_compare_verdicts(tmp_path, capsys):
    a = _write(tmp_path, "a.toml", '[shape]\nfamily = "ellipse"\na = 1.0\nb = 0.6\n')
    b = _write(tmp_path, "b.toml", '[shape]\nfamily = "ellipse"\na = 1.0\nb = 0.6000001\n')
    assert main(["compare", a, a, "--eigenvalues", "3", "--json"]) == 0
    same = json.loads(capsys.readouterr().out)
    assert same["distinguishable"] is False
    assert main(["compare", a, b, "--eigenvalues", "3", "--json"]) == 0
    near = json.loads(capsys.readouterr().out)
    # Hadamard: δλ₁ ≈ −26.069·δb (b-derivative determined numerically, Mathieu functions)
    np.testing.assert_allclose(near["relative_difference"][0] * 10.845674793676,
                               -26.0690554737e-7, rtol=1e-4)
    assert near["distinguishable"] is True
    assert main(["compare", a, str(tmp_path / "missing.h5")]) == 2


def test_compare_is_blind_to_rigid_motions():
    """Isometric drums are isospectral (common practice): not distinguishable."""
    from deform.config import parse_config
    from deform.shape import from_family

    config = parse_config('[shape]\nfamily = "polar"\nradius = 1.0\ncos = [0.0, 0.1, 0.03]\n'
                          'sin = [0.0, 0.0, 0.04]\n')
    shape = from_family(config.shape)
    moved = translated(rotated(shape, 0.8), [0.3, -0.2])
    result = compare_spectra(shape, moved, 4, "dirichlet")
    assert not result.distinguishable, result.verdict
    assert result.distance < 1e-6
    bigger = compare_spectra(shape, scaled(shape, 1.0 + 1e-6), 4, "dirichlet")
    assert bigger.distinguishable  # λ scales like 1/s²: δ = −2e-6, far above the error bars
    np.testing.assert_allclose(bigger.relative_difference, -2e-6, rtol=1e-4)


def test_eigenvalue_invariant_family_is_differentiable():
    """Registered family: values, status and a gradient (Hadamard) that matches the
    exact scaling law λ(s·Ω) = λ(Ω)/s² for the disk radius."""
    evaluator = invariants.build("eigenvalues_dirichlet", {"count": 3})
    from deform.config import parse_config
    from deform.shape import from_family

    shape = from_family(parse_config('[shape]\nfamily = "disk"\nradius = 1.0\n').shape)
    curve = shape.curve()
    state = evaluator.init(curve)
    values, _, status = evaluator.evaluate(curve, state)
    j01, j11 = sp.jn_zeros(0, 1)[0], sp.jn_zeros(1, 1)[0]
    np.testing.assert_allclose(values, [j01**2, j11**2, j11**2], rtol=1e-11)
    assert int(status) == 0

    def first(params):
        return evaluator.evaluate(shape.with_params(params).curve(), state)[0][0]

    grad = jax.jit(jax.grad(first))(shape.params)
    np.testing.assert_allclose(grad, [-2 * j01**2], rtol=1e-10)
    assert evaluator.labels == ("λD_1", "λD_2", "λD_3")
    with pytest.raises(Exception, match="count"):
        invariants.build("eigenvalues_neumann", {"count": 0})


def test_load_shape_rejects_missing_files(tmp_path):
    with pytest.raises(Exception, match="no such"):
        load_shape(str(tmp_path / "nothing.toml"))


def test_compare_reads_run_records(tmp_path, capsys):
    """A record's shape at a chosen step (HDF5 written by deform.record) against a config."""
    from deform.record import FORMAT, Column, open_writer

    text = '[shape]\nfamily = "ellipse"\na = 1.0\nb = 0.6\n'
    config = _write(tmp_path, "ell.toml", text)
    record = tmp_path / "run.h5"
    tables = {"steps": {"step": Column((), "i8"), "params": Column((2,), "f8", ("a", "b"))}}
    with open_writer(record, {"format": FORMAT, "config": text}, tables) as writer:
        writer.append("steps", {"step": 0, "params": np.array([1.0, 0.6])})
        writer.append("steps", {"step": 1, "params": np.array([1.0, 0.61])})
    assert main(["compare", config, str(record), "--step", "0", "--eigenvalues", "2",
                 "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["distinguishable"] is False
    assert main(["compare", config, str(record), "--eigenvalues", "2", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["distinguishable"] is True
    assert main(["compare", config, str(record), "--step", "7"]) == 2
    assert "--step" in capsys.readouterr().err
