"""Kill a real `deform run` with SIGKILL, then --resume: same trajectory as an uninterrupted run."""

import signal
import subprocess
import sys

import numpy as np

from deform.cli import main
from deform.record import read_record

CONFIG = """
[shape]
family = "polar"
radius = 1.0
cos = [0.0, 0.05]
modes = 3
[search]
mode = "continuation"
keep = ["area", "perimeter"]
steps = 14
seed = 9
[search.move]
kind = "coefficient"
coefficient = "cos[3]"
target = 0.2
[search.continuation]
step_size = 0.002
max_step = 0.004
"""


def test_sigkill_then_resume_reproduces_the_uninterrupted_run(tmp_path, capsys):
    cfg = tmp_path / "walk.toml"
    cfg.write_text(CONFIG)
    reference, killed = tmp_path / "reference.h5", tmp_path / "killed.h5"
    assert main(["run", str(cfg), "--output", str(reference), "--quiet"]) == 0
    capsys.readouterr()

    proc = subprocess.Popen([sys.executable, "-m", "deform", "run", str(cfg), "--output",
                             str(killed)], stdout=subprocess.PIPE, text=True)
    seen = 0
    for line in proc.stdout:
        fields = line.split()
        if fields and fields[0].isdigit():
            seen = int(fields[0])
            if seen >= 4:
                break
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert seen >= 4, "the run never printed step 4"

    partial = read_record(killed)  # opens although its writer was killed
    n = partial.rows("steps")
    assert 5 <= n < 15
    assert not any(kind == "stop" for _, kind, _ in partial.events())
    np.testing.assert_array_equal(partial.table("steps")["step"], np.arange(n))

    assert main(["run", str(cfg), "--output", str(killed), "--resume", "--quiet"]) == 0
    assert "resuming" not in capsys.readouterr().err
    done, ref = read_record(killed), read_record(reference)
    assert done.rows("steps") == ref.rows("steps") == 15
    for column in ("step", "params", "invariants", "residuals", "distance", "step_size", "state"):
        np.testing.assert_array_equal(done.table("steps")[column], ref.table("steps")[column],
                                      err_msg=column)
    assert [e[1] for e in done.events()] == ["stop"]
    assert done.attrs["started"] == partial.attrs["started"]
