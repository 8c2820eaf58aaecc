"""HDF5 trajectory records: layout, committed rows, survival of SIGKILL, resume."""

import json
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

from deform.errors import ConfigError
from deform.record import Column, open_writer, provenance, read_record, resume_rows

TABLES = {"steps": {"step": Column((), "i8"), "params": Column((3,), "f8", ("a", "b", "c")),
                    "status": Column((), "i4")}}


def _row(i):
    return {"step": i, "params": np.arange(3.0) + i, "status": 0}


def test_roundtrip_attributes_labels_and_rows(tmp_path):
    path = tmp_path / "r.h5"
    attrs = provenance("continuation", "[shape]\nfamily = 'disk'\n", "x.toml", 7, {"note": 1})
    with open_writer(path, attrs, TABLES) as w:
        for i in range(5):
            w.append("steps", _row(i))
        w.event(4, "stop", "done")
    rec = read_record(path)
    assert rec.rows("steps") == 5
    np.testing.assert_array_equal(rec.table("steps")["step"], np.arange(5))
    np.testing.assert_array_equal(rec.table("steps")["params"][3], [3.0, 4.0, 5.0])
    assert rec.labels["steps"]["params"] == ("a", "b", "c")
    assert rec.config_text.startswith("[shape]")
    assert rec.attrs["seed"] == 7 and rec.attrs["kind"] == "continuation"
    assert "jax" in rec.versions and rec.meta["note"] == 1
    assert rec.meta["status_names"]["0"] == "ok"
    assert rec.events() == [(4, "stop", "done")]


def test_row_must_match_declaration(tmp_path):
    with open_writer(tmp_path / "r.h5", provenance("x", "", "", 0), TABLES) as w:
        with pytest.raises(ValueError, match="missing"):
            w.append("steps", {"step": 0, "params": np.zeros(3)})
        with pytest.raises(ValueError, match="shape"):
            w.append("steps", {"step": 0, "params": np.zeros(4), "status": 0})


def test_file_closed_and_rows_kept_on_exception(tmp_path):
    path = tmp_path / "r.h5"
    with pytest.raises(RuntimeError):
        with open_writer(path, provenance("x", "", "", 0), TABLES) as w:
            w.append("steps", _row(0))
            raise RuntimeError("boom")
    assert read_record(path).rows("steps") == 1


def test_not_a_record_is_one_line_error(tmp_path):
    bad = tmp_path / "bad.h5"
    bad.write_bytes(b"not hdf5")
    with pytest.raises(ConfigError, match="bad.h5"):
        read_record(bad)
    with pytest.raises(ConfigError, match="no such record"):
        read_record(tmp_path / "missing.h5")


WRITER = textwrap.dedent("""
    import sys, numpy as np
    from deform.record import Column, open_writer, provenance
    tables = {"steps": {"step": Column((), "i8"), "params": Column((200,), "f8")}}
    with open_writer(sys.argv[1], provenance("x", "", "", 0), tables) as w:
        i = 0
        while True:
            w.append("steps", {"step": i, "params": np.full(200, float(i))})
            if i == 20:
                print("ready", flush=True)
            i += 1
""")


def test_sigkill_leaves_every_completed_row(tmp_path):
    """A real writer process killed with SIGKILL mid-run: the file opens, rows are whole."""
    path = tmp_path / "killed.h5"
    script = tmp_path / "writer.py"
    script.write_text(WRITER)
    proc = subprocess.Popen([sys.executable, str(script), str(path)], stdout=subprocess.PIPE,
                            text=True)
    assert proc.stdout.readline().strip() == "ready"
    time.sleep(0.3)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    rec = read_record(path)
    steps = rec.table("steps")
    n = rec.rows("steps")
    assert n > 20
    np.testing.assert_array_equal(steps["step"], np.arange(n))
    # every committed row was written completely (no zero-filled tail)
    np.testing.assert_array_equal(steps["params"][:, 0], np.arange(n, dtype=float))
    np.testing.assert_array_equal(steps["params"][:, -1], np.arange(n, dtype=float))
    # and a resumed writer continues from it, producing a normally closed file
    with open_writer(path, dict(rec.attrs), {"steps": {"step": Column((), "i8"),
                                                       "params": Column((200,), "f8")}},
                     initial=resume_rows(rec)) as w:
        w.append("steps", {"step": n, "params": np.full(200, float(n))})
    again = read_record(path)
    np.testing.assert_array_equal(again.table("steps")["step"], np.arange(n + 1))
    assert not (tmp_path / "killed.h5.partial").exists()


def test_resume_rows_cut_at_step(tmp_path):
    path = tmp_path / "r.h5"
    with open_writer(path, provenance("x", "", "", 0), TABLES) as w:
        for i in range(6):
            w.append("steps", _row(i))
    cut = resume_rows(read_record(path), last_step=2)
    np.testing.assert_array_equal(cut["steps"]["step"], [0, 1, 2])
    assert json.loads(read_record(path).attrs["versions"])["python"]
