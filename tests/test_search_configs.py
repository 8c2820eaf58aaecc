"""Examples are tests: every config in configs/ checks, and every search config runs shortened."""

from pathlib import Path

import numpy as np
import pytest

from deform import search
from deform.cli import main
from deform.config import load_config
from deform.record import read_record

CONFIGS = sorted((Path(__file__).resolve().parents[1] / "configs").glob("*.toml"))


@pytest.mark.parametrize("path", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_config_checks_and_runs_shortened(path, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("DEFORM_CACHE", str(tmp_path / "cache"))  # the run traces its step once
    assert main(["check", str(path)]) == 0
    config = load_config(path)
    if config.search is None:  # shape-only configs are for `deform measure`
        assert config.shape is not None
        return
    out = tmp_path / "run.h5"
    traces = sum(search.TRACES.values())
    assert main(["run", str(path), "--steps", "2", "--output", str(out), "--quiet"]) == 0
    assert sum(search.TRACES.values()) - traces == 1  # one trace for the whole run
    printed = capsys.readouterr().out
    assert "summary:" in printed and str(out) in printed
    rec = read_record(out)
    steps = rec.table("steps")
    assert rec.rows("steps") >= 2
    assert np.all(steps["status"] == 0)
    assert rec.config_text == path.read_text()
    assert [k for _, k, _ in rec.events()][-1] == "stop"
    # review commands work on it
    assert main(["inspect", str(out)]) == 0
    assert "summary:" in capsys.readouterr().out
