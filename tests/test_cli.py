"""The `deform` command line: malformed configs give one line naming the key, exit code 2.

A table of malformed configs runs through the real entry point: in-process ``main()`` for most,
a subprocess (``python -m deform``) for a few so the console path is exercised end to end.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
import scipy.special

import deform
from deform.cli import COMMANDS, main

ROOT = Path(__file__).resolve().parents[1]

POLAR_OK = 'family = "polar"\nradius = 1.0\n'

# (id, config text, fragment the one-line message must contain)
MALFORMED = [
    ("not-toml", "[shape\nfamily = ", "not valid TOML"),
    ("shape-not-table", "shape = 3\n", "shape: expected a table"),
    ("unknown-section", "[shap]\nfamily = \"polar\"\n", "shap: unknown key"),
    ("family-missing", "[shape]\nradius = 1.0\n", "shape.family: missing"),
    ("family-unknown", "[shape]\nfamily = \"blob\"\n", "shape.family: expected one of"),
    ("radius-string", "[shape]\nfamily = \"polar\"\nradius = \"one\"\n",
     "shape.radius: expected a number, got 'one'"),
    ("radius-negative", "[shape]\nfamily = \"polar\"\nradius = -1.0\n",
     "shape.radius: expected a positive number"),
    ("radius-zero", "[shape]\nfamily = \"disk\"\nradius = 0\n",
     "shape.radius: expected a positive number"),
    ("radius-bool", "[shape]\nfamily = \"disk\"\nradius = true\n",
     "shape.radius: expected a number, got True"),
    ("cos-item", f"[shape]\n{POLAR_OK}cos = [0.0, \"x\"]\n", "shape.cos[1]: expected a number"),
    ("cos-scalar", f"[shape]\n{POLAR_OK}cos = 0.1\n", "shape.cos: expected a list of numbers"),
    ("unknown-key", f"[shape]\n{POLAR_OK}colour = \"red\"\n", "shape.colour: unknown key"),
    ("symmetry-unknown", f"[shape]\n{POLAR_OK}symmetry = \"spiral\"\n",
     "shape.symmetry: expected one of"),
    ("order-missing", f"[shape]\n{POLAR_OK}symmetry = \"rotational\"\n", "shape.order: missing"),
    ("order-too-small", f"[shape]\n{POLAR_OK}symmetry = \"dihedral\"\norder = 1\n",
     "shape.order: expected a value >= 2"),
    ("order-without-rotation", f"[shape]\n{POLAR_OK}order = 3\n",
     "shape.order: expected a value <= 1"),
    ("forbidden-mode", f"[shape]\n{POLAR_OK}symmetry = \"mirror\"\nsin = [0.0, 0.1]\n",
     "shape.sin[2]: must be 0 in the mirror symmetry class"),
    ("modes-too-few", f"[shape]\n{POLAR_OK}cos = [0, 0, 0, 0.01]\nmodes = 2\n",
     "shape.modes: expected at least 4"),
    ("modes-float", f"[shape]\n{POLAR_OK}modes = 2.5\n", "shape.modes: expected an integer"),
    ("ellipse-b-missing", "[shape]\nfamily = \"ellipse\"\na = 1.0\n", "shape.b: missing"),
    ("ellipse-a-zero", "[shape]\nfamily = \"ellipse\"\na = 0.0\nb = 1.0\n",
     "shape.a: expected a positive number"),
    ("terms-missing", "[shape]\nfamily = \"curve\"\n", "shape.terms: missing"),
    ("terms-empty", "[shape]\nfamily = \"curve\"\nterms = []\n",
     "shape.terms: expected a non-empty list"),
    ("term-malformed", "[shape]\nfamily = \"curve\"\nterms = [[1, 1.0]]\n",
     "shape.terms[0]: expected [k, re, im]"),
    ("term-twice", "[shape]\nfamily = \"curve\"\nterms = [[1, 1.0, 0.0], [1, 0.5, 0.0]]\n",
     "shape.terms[1]: mode k = 1 appears twice"),
    ("fix-scale-string", f"[shape]\n{POLAR_OK}fix_scale = \"yes\"\n",
     "shape.fix_scale: expected true or false"),
    ("resolution-small", f"[shape]\n{POLAR_OK}[measure]\nresolution = 8\n",
     "measure.resolution: expected a value >= 32"),
    ("measure-unknown", f"[shape]\n{POLAR_OK}[measure]\nnodes = 64\n", "measure.nodes: unknown key"),
    ("invariant-unknown", f"[shape]\n{POLAR_OK}[invariants.loudness]\n", "loudness"),
    # shapes that are not domains: the message names where it fails
    ("radius-not-positive", f"[shape]\n{POLAR_OK}cos = [0.0, 1.5]\n",
     "radius r(θ) = "),
    ("self-intersecting", "[shape]\nfamily = \"curve\"\nterms = [[1, 1.0, 0.0], [-2, 0.7, 0.0]]\n",
     "not a simple closed curve: the boundary meets itself near t = "),
    ("support-not-convex", "[shape]\nfamily = \"support\"\nmean = 1.0\ncos = [0.0, 0.5]\n",
     "radius of curvature h + h''"),
    ("clockwise", "[shape]\nfamily = \"curve\"\nterms = [[-1, 1.0, 0.0]]\n", "clockwise"),
]


def run_main(argv, capsys):
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def assert_one_line_error(code, err, fragment):
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("deform: error: ") and fragment in lines[0], lines[0]
    assert "Traceback" not in err


@pytest.mark.parametrize("text, fragment", [c[1:] for c in MALFORMED], ids=[c[0] for c in MALFORMED])
def test_malformed_config_gives_one_line(tmp_path, capsys, text, fragment):
    path = tmp_path / "bad.toml"
    path.write_text(text, encoding="utf-8")
    code, out, err = run_main(["check", str(path)], capsys)
    assert_one_line_error(code, err, fragment)
    assert out == ""


def test_table_is_large_enough():
    assert len(MALFORMED) >= 20


def test_where_a_shape_fails_is_named(tmp_path, capsys):
    path = tmp_path / "dent.toml"
    path.write_text(f"[shape]\n{POLAR_OK}cos = [0.0, 1.5]\n", encoding="utf-8")
    code, _, err = run_main(["measure", str(path), "--max-period", "1"], capsys)
    assert_one_line_error(code, err, "is not positive at θ = ")
    # r(θ) = 1 + 1.5 cos 2θ is most negative (−0.5) at θ = π/2
    assert "r(θ) = -0.5 " in err and "θ = 1.5708" in err
    path.write_text("[shape]\nfamily = \"curve\"\nterms = [[1, 1.0, 0.0], [-2, 0.7, 0.0]]\n")
    code, _, err = run_main(["measure", str(path), "--max-period", "1"], capsys)
    assert_one_line_error(code, err, "(x, y = ")


@pytest.mark.parametrize("argv, fragment", [
    (["measure"], "the following arguments are required: config"),
    (["measure", "x.toml", "--resolution", "0"], "expected a positive integer"),
    (["measure", "x.toml", "--frobnicate"], "unrecognized arguments: --frobnicate"),
    (["transmogrify"], "invalid choice: 'transmogrify'"),
    (["check", "/nonexistent/drum.toml"], "no such config file"),
])
def test_bad_arguments(capsys, argv, fragment):
    code, _, err = run_main(argv, capsys)
    assert_one_line_error(code, err, fragment)


def _subprocess(*args, cwd=ROOT):
    return subprocess.run([sys.executable, "-m", "deform", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=300)


def test_subprocess_errors_are_one_line(tmp_path):
    """The real console path: exit status 2 and one stderr line for a few malformed configs."""
    for command, name in (("check", "radius-negative"), ("measure", "self-intersecting")):
        text, fragment = next((c[1], c[2]) for c in MALFORMED if c[0] == name)
        path = tmp_path / f"{name}.toml"
        path.write_text(text, encoding="utf-8")
        proc = _subprocess(command, str(path))
        assert_one_line_error(proc.returncode, proc.stderr, fragment)


def test_version_and_help():
    proc = _subprocess("--version")
    assert proc.returncode == 0 and proc.stdout.strip() == f"deform {deform.__version__}"
    proc = _subprocess("measure", "--help")
    assert proc.returncode == 0 and "--json" in proc.stdout and "--resolution" in proc.stdout


def test_help_lists_every_command(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--help"])
    assert stop.value.code == 0
    out = capsys.readouterr().out
    for command in COMMANDS:
        assert command.name in out


def test_measure_json_has_area_and_perimeter(tmp_path, capsys):
    path = tmp_path / "ellipse.toml"
    path.write_text("[shape]\nfamily = \"ellipse\"\na = 1.0\nb = 0.6\n", encoding="utf-8")
    code, out, err = run_main(["measure", str(path), "--json", "--resolution", "128",
                                "--max-period", "1"], capsys)
    assert code == 0, err
    report = json.loads(out)
    # area πab; perimeter 4a E(1 − b²/a²) (Abramowitz & Stegun 17.3, scipy.special.ellipe)
    assert abs(report["area"] - np.pi * 0.6) < 1e-12
    assert abs(report["perimeter"] - 4 * scipy.special.ellipe(1 - 0.36)) < 1e-12
    assert report["convex"] is True


def test_measure_table_and_check(capsys):
    code, out, _ = run_main(["check", str(ROOT / "configs" / "egg.toml")], capsys)
    assert code == 0 and "ok" in out and "polar" in out
    code, out, _ = run_main(["measure", str(ROOT / "configs" / "ellipse.toml"), "--max-period", "1"],
                            capsys)
    assert code == 0
    area_row = next(line for line in out.splitlines() if line.strip().startswith("area"))
    assert abs(float(area_row.split()[-1]) - np.pi * 0.6) < 1e-9


def test_no_command_prints_help(capsys):
    code, out, _ = run_main([], capsys)
    assert code == 2 and "usage" in out.lower()


def test_measure_subprocess_json(tmp_path):
    cfg = tmp_path / "disk.toml"
    cfg.write_text(textwrap.dedent("""
        [shape]
        family = "disk"
        radius = 2.0
    """), encoding="utf-8")
    proc = _subprocess("measure", str(cfg), "--json", "--resolution", "64", "--max-period", "1")
    assert proc.returncode == 0, proc.stderr
    report = json.loads(proc.stdout)
    assert abs(report["area"] - 4 * np.pi) < 1e-12 and abs(report["perimeter"] - 4 * np.pi) < 1e-12
