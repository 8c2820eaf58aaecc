"""Pair hunts (deform.hunt): toy problems with known answers, guards, records, configs, CLI."""

from pathlib import Path

import jax
import numpy as np
import pytest

from deform.cli import main
from deform.config import parse_config
from deform.errors import ConfigError
from deform.hunt import (hunt, inspect_lines, make_problem, plot_hunt_record, random_start,
                         run_start, start_seeds)
from deform.record import read_record
from deform.rigidity import build_evaluators

CONFIGS = Path(__file__).resolve().parents[1] / "configs"

TOY = """
[shape]
family = "polar"
radius = 1.0
cos = [0.0, 0.1]
modes = 4
[hunt]
keep = ["area", "perimeter"]
check = ["heat_dirichlet"]
starts = 2
seed = 3
steps = 100
floor = 0.05
spread = 0.1
decay = 0.5
learning_rate = 0.01
polish = 12
workers = 2
"""


def test_area_and_perimeter_alone_admit_far_apart_pairs(tmp_path):
    # Two numbers cannot pin down a 6-parameter class: by the implicit function theorem their
    # common level sets are 4-dimensional away from the disk (common practice), so pairs at
    # distance well above the floor with mismatch at round-off must be found. The Dirichlet heat
    # invariant c₃ = (1/256√π)∮κ² ds (Stewartson & Waechter 1971) then tells them apart.
    config = parse_config(TOY, "toy.toml")
    ranked, report = hunt(config, str(tmp_path))  # two starts in a local 2-process pool
    assert all(r.accepted for r in ranked), report
    for r in ranked:
        assert r.mismatch < 1e-13 and r.distance >= 0.05
        np.testing.assert_allclose(r.values_a, r.values_b, rtol=1e-13)
    assert "first family that tells them apart: heat_dirichlet" in report
    # runs are pure functions of (config, seed): the serial rerun of start 0 agrees
    problem = make_problem(config.shape, build_evaluators([("area", {}), ("perimeter", {})]),
                           0.05, 1.0)
    first = next(r for r in ranked if r.index == 0)
    again = run_start(problem, config.hunt, 0, start_seeds(3, 2)[0], None)
    np.testing.assert_allclose(again.params_a, first.params_a, atol=1e-10)
    np.testing.assert_allclose(again.params_b, first.params_b, atol=1e-10)
    # records: one per start plus the ranking, self-describing by their kind
    summary = read_record(tmp_path / "hunt.h5")
    assert summary.attrs["kind"] == "hunt" and summary.meta["found"]
    start = read_record(tmp_path / "start_0000.h5")
    assert start.attrs["kind"] == "hunt_start"
    assert "verdict: accepted" in "\n".join(inspect_lines(start))
    names = {p.name for p in plot_hunt_record(summary, tmp_path / "png")}
    assert names == {"pair.png", "progress.png"}
    assert main(["inspect", str(tmp_path / "hunt.h5")]) == 0  # dispatched on the record kind


def test_area_and_perimeter_pin_down_ellipses(tmp_path):
    # An ellipse is fixed up to congruence by its area πab and perimeter 4aE(1 − b²/a²): at fixed
    # area the perimeter grows strictly with eccentricity (classical, from memory). Swapping a
    # and b is a rotation, so every matching pair is congruent: the hunt must say that no pair
    # beyond the floor exists rather than return one.
    text = """
[shape]
family = "ellipse"
a = 1.0
b = 0.7
[hunt]
keep = ["area", "perimeter"]
starts = 2
seed = 5
steps = 80
floor = 0.05
spread = 0.1
learning_rate = 0.01
"""
    ranked, report = hunt(parse_config(text), str(tmp_path))
    assert not any(r.accepted for r in ranked)
    assert "no pair beyond the distance floor" in report
    assert all("below the floor" in r.reason or "above tolerance" in r.reason for r in ranked)
    assert not read_record(tmp_path / "hunt.h5").meta["found"]


def test_random_starts_decay_with_mode_number():
    # Start distribution: amplitude spread·k^(−decay) per Fourier mode (our definition), checked
    # by the sample standard deviation over many draws (seeded).
    config = parse_config(TOY)
    family = config.shape
    draws = np.stack([np.asarray(random_start(family, jax.random.PRNGKey(s), 0.1, 2.0))
                      for s in range(400)])
    std = draws.std(axis=0)
    labels = family.param_labels
    for lbl, sd in zip(labels, std):
        k = 1 if lbl == "radius" else int(lbl[lbl.index("[") + 1:-1])
        assert sd == pytest.approx(0.1 / k**2, rel=0.15), (lbl, sd)  # seeds 0..399


def test_hunt_config_runs_shortened(tmp_path):
    text = (CONFIGS / "hunt.toml").read_text()
    for old, new in (("starts = 4", "starts = 1"), ("steps = 200", "steps = 10"),
                     ("max_period = 4", "max_period = 2"), ("polish = 20", "polish = 2")):
        assert old in text
        text = text.replace(old, new)
    ranked, report = hunt(parse_config(text, "hunt.toml"), str(tmp_path))
    assert len(ranked) == 1 and "pair hunt in the polar family" in report
    assert (tmp_path / "start_0000.h5").exists() and (tmp_path / "hunt.h5").exists()


def test_bad_hunt_input_is_one_line(tmp_path, capsys):
    with pytest.raises(ConfigError, match=r"hunt.keep\[0\]: unknown invariant"):
        parse_config('[hunt]\nkeep = ["nothing"]\n')
    with pytest.raises(ConfigError, match=r"hunt.floor: expected a positive number"):
        parse_config('[hunt]\nkeep = ["area"]\nfloor = -1\n')
    bad = tmp_path / "bad.toml"
    bad.write_text('[shape]\nfamily = "disk"\nradius = 1.0\n')
    assert main(["hunt", str(bad)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "hunt: missing" in err[0]
