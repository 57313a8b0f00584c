"""The README's commands, run as a user would, on sample_data/."""
import csv
import json
import re
import shutil
import subprocess
import sys

import pytest
from pathlib import Path


ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()


def readme_commands() -> list[str]:
    """Every `spikemeasure ...` command of the README's code blocks that uses sample_data/."""
    blocks = re.findall(r"```\n(.*?)```", README, flags=re.S)
    commands = []
    for block in blocks:
        for line in block.splitlines():
            line = line.split("#", 1)[0].strip()
            m = re.search(r"(?:^|/)(spikemeasure (?:measure|inspect) .*sample_data\S*.*)$", line)
            if m:
                commands.append(m.group(1).strip())
    return commands


def run_command(command: str, cwd: Path) -> subprocess.CompletedProcess:
    args = command.split()[1:]
    exe = shutil.which("spikemeasure")
    base = [exe] if exe and Path(exe).parent == Path(sys.executable).parent else [
        sys.executable, "-m", "spikemeasure"]
    return subprocess.run(base + args, cwd=cwd, capture_output=True, text=True, timeout=300)


def test_readme_has_the_two_setup_commands():
    assert re.search(r"pip install -q \. && \.venv/bin/spikemeasure measure sample_data/", README)
    assert 'pip install -q -e ".[test]" && .venv/bin/python -m pytest' in README
    ci = (ROOT / ".ci" / "run").read_text()
    assert 'python3 -m venv .venv && .venv/bin/pip install -q -e ".[test]" && ' \
           '.venv/bin/python -m pytest -q' in ci
    assert "qualified person" in README and "clinical" in README


@pytest.mark.slow
def test_readme_commands_produce_the_csv(tmp_path):
    commands = readme_commands()
    assert any(c.startswith("spikemeasure measure sample_data/") for c in commands)
    assert any(c.startswith("spikemeasure inspect sample_data/") for c in commands)
    work = tmp_path / "work"
    shutil.copytree(ROOT / "sample_data", work / "sample_data")
    for command in dict.fromkeys(commands):  # a command the README repeats runs once
        result = run_command(command, work)
        assert result.returncode == 0, (command, result.stderr)
        assert "Traceback" not in result.stderr
        if command.startswith("spikemeasure inspect"):
            assert "sweeps measured" in result.stdout
    out = work / "results"
    with open(out / "spikes.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    files = {r["file"] for r in rows}
    assert files == {p.name for p in (ROOT / "sample_data").iterdir()
                     if p.suffix in (".nwb", ".nix")}
    record = json.loads((out / "run.json").read_text())
    assert record["failures"] == []
    # the tour shows the report by the sample data's two regions (sample_data/README.md)
    assert set(record["groups"]["members"].values()) == {"region A", "region B"}
    assert record["totals"]["spikes"] == len(rows)


def test_readme_python_example_runs(monkeypatch):
    # The README's "In Python" block, run as written from the project folder; `voltage_mv`
    # and `sampling_rate_hz` stand for the user's own array (here the common-practice
    # textbook spike of conftest, threshold -55 mV).
    from conftest import textbook_trace

    (block,) = re.findall(r"```python\n(.*?)```", README, flags=re.S)
    voltage_mv, truth = textbook_trace(50_000.0)
    namespace = {"voltage_mv": voltage_mv, "sampling_rate_hz": 50_000.0}
    monkeypatch.chdir(ROOT)
    exec(compile(block, "README.md", "exec"), namespace)
    assert len(namespace["res"].cells) == 1
    assert namespace["spikes"]["threshold_mv"][0] == pytest.approx(
        truth["threshold_mv"], abs=0.5)
    assert len(namespace["recording"].sweeps) > 0
