"""Config parsing: frozen typed values, defaults, and one-line errors naming the key path.

The full table of malformed configs runs through the command line in tests/test_cli.py; here the
parser's values and its Reader are checked directly.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from deform.config import Reader, load_config, parse_config
from deform.errors import ConfigError
from deform.families import Disk, Ellipse, FourierCurve, Polar, Support


def test_polar_values_and_layout():
    config = parse_config("""
[shape]
family = "polar"
radius = 1.5
cos = [0.0, 0.12, 0.0, 0.0, 0.03]
sin = [0.0, 0.0, 0.05, -0.02]
""")
    fam = config.shape
    assert isinstance(fam, Polar) and fam.modes == 5
    full = dict(zip(fam.labels, fam.base))
    assert full["radius"] == 1.5 and full["cos[2]"] == 0.12 and full["cos[5]"] == 0.03
    assert full["sin[3]"] == 0.05 and full["sin[4]"] == -0.02 and full["sin[5]"] == 0.0
    assert config.measure.resolution == 256  # documented default
    with pytest.raises(dataclasses.FrozenInstanceError):
        config.shape = None  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        fam.modes = 3  # type: ignore[misc]


def test_other_families():
    e = parse_config('[shape]\nfamily = "ellipse"\na = 1.0\nb = 0.6\n').shape
    assert isinstance(e, Ellipse) and e.base == (1.0, 0.6)
    d = parse_config('[shape]\nfamily = "disk"\nradius = 2\n').shape
    assert isinstance(d, Disk) and d.base == (2.0,)
    s = parse_config('[shape]\nfamily = "support"\nmean = 1.0\ncos = [0, 0.1]\nsymmetry = "central"\n')
    assert isinstance(s.shape, Support) and s.shape.symmetry.rotation_order == 2
    c = parse_config('[shape]\nfamily = "curve"\nterms = [[1, 1.0, 0.0], [-2, 0.1, 0.05]]\nmodes = 3\n')
    assert isinstance(c.shape, FourierCurve) and c.shape.modes == 3
    assert dict(zip(c.shape.labels, c.shape.base))["im[-2]"] == 0.05


def test_symmetry_and_scale_options():
    config = parse_config('[shape]\nfamily = "polar"\nradius = 1.0\ncos = [0, 0, 0.1]\n'
                          'symmetry = "dihedral"\norder = 3\nfix_scale = true\n')
    fam = config.shape
    assert fam.symmetry.kind == "dihedral" and fam.symmetry.order == 3
    assert "radius" not in fam.param_labels and fam.param_labels == ("cos[3]",)


def test_config_text_is_kept_and_files_load(tmp_path):
    text = '[shape]\nfamily = "disk"\nradius = 1.0\n\n[measure]\nresolution = 512\n'
    path = tmp_path / "disk.toml"
    path.write_text(text, encoding="utf-8")
    config = load_config(path)
    assert config.text == text and config.source == str(path) and config.measure.resolution == 512
    with pytest.raises(ConfigError, match="no such config file"):
        load_config(tmp_path / "missing.toml")
    (tmp_path / "binary.toml").write_bytes(b"\xff\xfe\x00")
    with pytest.raises(ConfigError, match="cannot read config"):
        load_config(tmp_path / "binary.toml")


def test_reader_messages_name_the_key_path():
    r = Reader({"n": "x", "v": [1, "a"], "f": 2.5, "b": 1, "s": 3}, "search.move")
    with pytest.raises(ConfigError, match=r"^search\.move\.n: expected an integer, got 'x'$"):
        r.integer("n")
    with pytest.raises(ConfigError, match=r"^search\.move\.v\[1\]: expected a number, got 'a'$"):
        r.numbers("v")
    with pytest.raises(ConfigError, match=r"^search\.move\.f: expected a value <= 2, got 2.5$"):
        r.number("f", maximum=2)
    with pytest.raises(ConfigError, match=r"^search\.move\.b: expected true or false, got 1$"):
        r.boolean("b")
    with pytest.raises(ConfigError, match=r"^search\.move\.s: expected a string, got 3$"):
        r.string("s")
    with pytest.raises(ConfigError, match=r"^search\.move\.missing: missing \(required\)$"):
        r.number("missing")
    assert r.number("absent", 0.5) == 0.5
    with pytest.raises(ConfigError, match=r"^search\.move\.v: unknown key"):
        Reader({"v": 1}, "search.move").done()


def test_long_values_are_shortened_in_messages():
    long = "x" * 500
    with pytest.raises(ConfigError) as err:
        parse_config(f'[shape]\nfamily = "polar"\nradius = "{long}"\n')
    assert len(str(err.value)) < 120 and "..." in str(err.value)


def test_integer_valued_floats_are_numbers_and_booleans_are_not():
    fam = parse_config('[shape]\nfamily = "polar"\nradius = 2\ncos = [0, 1e-1]\n').shape
    assert np.isclose(fam.base[0], 2.0) and np.isclose(fam.base[2], 0.1)
    with pytest.raises(ConfigError, match="shape.cos\\[0\\]: expected a number, got False"):
        parse_config('[shape]\nfamily = "polar"\nradius = 1\ncos = [false]\n')


@pytest.mark.parametrize("name, options, message", [
    ("heat_dirichlet", {"order": 9}, "invariants.heat_dirichlet.order: expected an integer between 0 and 5"),
    ("heat_neumann", {"resolution": 4}, "invariants.heat_neumann.resolution: expected an integer"),
    ("area", {"resolution": 2.5}, "invariants.area.resolution: expected an integer"),
    ("curvature_moments", {"max_power": 1}, "invariants.curvature_moments.max_power"),
    ("perimeter", {"nodes": 64}, "invariants.perimeter.nodes: unknown option"),
])
def test_invariant_options_out_of_range_are_one_line(name, options, message):
    from deform import invariants

    with pytest.raises(ConfigError, match=message.replace(".", r"\.")):
        invariants.build(name, options)
