"""Examples are tests: every snippet in README.md runs here (shortened where needed).

* ```sh blocks: `make` lines are checked with `make -n` (the clean-clone run of `make test` is a
  release step, see DEVELOPERS.md); `deform ...` lines run through the real entry point, with
  long searches shortened (fewer steps, smaller orbit periods) and outputs redirected to a
  temporary directory.
* ```toml blocks parse as configs; ```python blocks are executed.
* Every config in configs/ is exercised: shape-only configs are measured here, search configs
  run shortened in tests/test_search_configs.py, the scan and hunt configs in tests/test_rigidity.py
  and tests/test_hunt.py (and, through their README lines, below).
"""

from __future__ import annotations

import re
import shlex
import subprocess
from pathlib import Path

import pytest

from deform.cli import COMMANDS, main
from deform.config import load_config, parse_config

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")
BLOCKS = re.findall(r"```(\w+)\n(.*?)```", README, flags=re.S)


def blocks(kind: str) -> list[str]:
    return [body for lang, body in BLOCKS if lang == kind]


def commands() -> list[list[str]]:
    out = []
    for body in blocks("sh"):
        for line in body.splitlines():
            line = line.split("#", 1)[0].strip()
            if line:
                out.append(shlex.split(line))
    return out


def test_readme_starts_with_one_paragraph_and_two_setup_commands():
    text = README.split("\n## ", 1)[0]
    paragraphs = [p for p in text.split("\n\n")[1:] if p.strip()]
    assert len(paragraphs) == 1, "one paragraph stating the job before the first section"
    make_lines = [c for c in commands() if c[0] == "make"]
    assert make_lines == [["make", "run"], ["make", "test"]]


@pytest.mark.parametrize("target, expected", [("run", "deform demo"),
                                              ("test", "pytest -n 2 -q tests")])
def test_make_targets(target, expected):
    # -n prints what `make` would do; -B ignores the stamp so the set-up steps are shown too
    proc = subprocess.run(["make", "-n", "-B", target], cwd=ROOT, capture_output=True, text=True,
                          timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert "-m venv .venv" in proc.stdout and 'pip install --quiet -e ".[test]"' in proc.stdout
    assert expected in proc.stdout


def test_every_readme_command_exists():
    names = {c.name for c in COMMANDS}
    for argv in commands():
        assert argv[0] in ("make", "deform"), argv
        if argv[0] == "deform":
            assert argv[1] in names, argv


def test_every_command_is_in_the_readme():
    mentioned = {argv[1] for argv in commands() if argv[0] == "deform"}
    assert {c.name for c in COMMANDS} <= mentioned, {c.name for c in COMMANDS} - mentioned


def _shortened_config(path: str, tmp_path: Path) -> str:
    """configs/scan.toml and configs/hunt.toml with fewer starts, steps and orbit periods."""
    text = (ROOT / path).read_text(encoding="utf-8")
    for old, new in (("max_period = 4", "max_period = 2"),
                     ("ratios = [1.0, 0.9, 0.8, 0.7, 0.6]", "ratios = [1.0, 0.7]"),
                     ("starts = 4", "starts = 1"), ("steps = 200", "steps = 5"),
                     ("polish = 20", "polish = 1")):
        text = text.replace(old, new)
    short = tmp_path / Path(path).name
    short.write_text(text, encoding="utf-8")
    return str(short)


DEFORM_LINES = [argv[1:] for argv in commands() if argv[0] == "deform"]


@pytest.fixture(scope="module")
def records(tmp_path_factory):
    """Records the README's `deform run` lines write, made once (shortened to 2 steps)."""
    folder = tmp_path_factory.mktemp("records")
    made = {}
    for args in DEFORM_LINES:
        if args[0] == "run":
            out = folder / Path(args[1]).with_suffix(".h5").name
            assert main(args + ["--steps", "2", "--output", str(out), "--quiet"]) == 0
            made[f"runs/{out.name}"] = str(out)
    return made


@pytest.mark.parametrize("args", DEFORM_LINES, ids=[" ".join(a[:2]) for a in DEFORM_LINES])
def test_readme_command_runs(args, records, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(ROOT)
    args = list(args)
    name = args[0]
    if name == "run":
        assert args[1].endswith(".toml") and f"runs/{Path(args[1]).stem}.h5" in records
        return  # ran (shortened) in the fixture
    if name == "demo":
        args += ["--steps", "1", "--output", str(tmp_path / "demo.h5")]
    elif name in ("scan", "hunt"):
        args[1] = _shortened_config(args[1], tmp_path)
        args += ["--output", str(tmp_path / (f"{name}.h5" if name == "scan" else name))]
    elif name == "plot":
        args += ["--out", str(tmp_path / "plots")]
    elif name == "measure" and "--max-period" in args:
        args[args.index("--max-period") + 1] = "2"  # shortened: orbits up to period 2
    args = [records.get(a, a) for a in args]
    capsys.readouterr()
    code = main(args)
    captured = capsys.readouterr()
    assert code == 0, (args, captured.err)
    assert captured.out.strip(), args


def test_readme_toml_blocks_parse():
    for body in blocks("toml"):
        config = parse_config(body, "README.md")
        assert config.shape is not None


def test_readme_python_blocks_run(capsys):
    assert blocks("python")
    for body in blocks("python"):
        exec(compile(body, "README.md", "exec"), {"__name__": "readme"})
    printed = capsys.readouterr().out.split("\n")
    assert float(printed[-2]) < 1e-6  # the congruent copy is at distance 0


CONFIGS = sorted((ROOT / "configs").glob("*.toml"))


@pytest.mark.parametrize("path", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_every_config_is_exercised(path, capsys):
    assert main(["check", str(path)]) == 0
    config = load_config(path)
    text = path.read_text(encoding="utf-8")
    if config.shape is not None and not re.search(r"^\[(search|scan|hunt)\]", text, flags=re.M):
        # shape-only configs are for `deform measure`: run it here
        assert main(["measure", str(path), "--json", "--max-period", "2"]) == 0
        assert '"area"' in capsys.readouterr().out
    else:
        runner = {"search": "test_search_configs.py", "scan": "test_rigidity.py",
                  "hunt": "test_hunt.py"}
        section = re.search(r"^\[(search|scan|hunt)\]", text, flags=re.M).group(1)
        test_file = ROOT / "tests" / runner[section]
        assert test_file.exists() and (path.name in test_file.read_text() or section == "search")
