"""Recordings, measured runs and helpers shared by the tests of spikemeasure.checks.

The recordings built to break one quality rule each come from a Wang & Buzsaki (1996)
simulation (spikemeasure.testing) with a known change: white noise of a known SD, a linear ramp
of known slope (drift = slope x the time between the windows' centres), peaks cut at a known
level, every 4th sample kept (a known rate), a known offset of the voltage; the four sample
cells (sample_data/) pass limits of common practice. The JUnit structure checked by
:func:`validate_junit` is described in test_checks_junit.py.
"""
from __future__ import annotations

import csv
import json
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from conftest import write_nwb
from spikemeasure.checks.accept import accept_results
from spikemeasure.checks.apply import check_run
from spikemeasure.checks.findings import CheckReport
from spikemeasure.checks.settings import CheckSettings
from spikemeasure.cli import main
from spikemeasure.run import measure_paths
from spikemeasure.testing import simulate_current_steps

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "sample_data"
EXAMPLE = ROOT / "docs" / "example-lab"
RATE = 20_000.0

#: Limits a lab might set (common practice): every sample cell passes them. Not
#: max_bridge_error_mohm: the squid-axon sample cell's bridge error cannot be measured (see
#: BRIDGE_LIMIT).
LIMITS = {"max_baseline_noise_mv": 0.5, "max_baseline_drift_mv": 5.0,
          "min_sampling_rate_hz": 10_000.0, "resting_range_mv": (-80.0, -55.0),
          "min_highest_peak_mv": 0.0, "max_clipped_spikes": 0}

#: A bridge-error limit (common practice: a few MOhm to tens) and the recording that breaks
#: it, measured with the others but not in BROKEN, since LIMITS leaves the rule out.
BRIDGE_LIMIT = {"max_bridge_error_mohm": 10.0}
UNBALANCED = "unbalanced.nwb"

#: Each broken recording and the one rule it is made to break.
BROKEN = {"noisy.nwb": "max_baseline_noise_mv", "drifting.nwb": "max_baseline_drift_mv",
          "low_rate.nwb": "min_sampling_rate_hz", "clipped.nwb": "max_clipped_spikes",
          "depolarized.nwb": "resting_range_mv", "small_spikes.nwb": "min_highest_peak_mv"}


def run(args, **kw):
    return CliRunner().invoke(main, args, **kw)


def simulated_cell():
    """Three sweeps of a fast-spiking model cell (-50, 20 and 150 pA; 150 pA fires), 0.5 s
    at 20 kHz, step 0.1 to 0.35 s, 0.2 mV of noise."""
    return simulate_current_steps("wang_buzsaki_1996", [-50.0, 20.0, 150.0],
                                  sampling_rate_hz=RATE, duration_s=0.5, step_start_s=0.1,
                                  step_end_s=0.35, noise_mv=0.2, seed=7)


def broken_variants(cell) -> dict[str, tuple[np.ndarray, np.ndarray, float]]:
    """(voltage, command, rate) per broken file name; each breaks one rule by a known amount."""
    v, cmd = cell.voltage_mv, cell.command_pa
    t = cell.time_s
    rng = np.random.default_rng(3)
    # 15 mV/s: drift = 15 x (0.45 - 0.05) s = 6 mV, over the 5 mV limit
    ramp = 15.0 * t
    squeezed = np.where(v > -30.0, -30.0 + (v + 30.0) * 0.3, v)  # peaks near -13 mV
    return {
        "noisy.nwb": (v + rng.normal(0.0, 1.0, v.shape), cmd, RATE),   # SD ~1 mV > 0.5
        "drifting.nwb": (v + ramp, cmd, RATE),
        "low_rate.nwb": (v[:, ::4], cmd[:, ::4], RATE / 4),            # 5 kHz < 10 kHz
        "clipped.nwb": (np.minimum(v, 10.0), cmd, RATE),                # peaks cut at +10 mV
        "depolarized.nwb": (v + 20.0, cmd, RATE),                       # rest near -44 mV
        "small_spikes.nwb": (squeezed, cmd, RATE),
        # Ohm's law: 30 MOhm x I pA = 0.03 I mV on the recorded voltage, over the 10 MOhm limit
        UNBALANCED: (v + 30.0 * cmd * 1e-3, cmd, RATE),
    }


def write_cell(path, voltage, command, rate):
    return write_nwb(path, list(zip(voltage, command)), rate_hz=rate)


#: Measured once per test process: the recordings of `lab` take a while to measure.
_MEASURED: dict[str, Path] = {}


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """A folder with the four sample cells, one good simulated cell and the broken ones,
    measured once; and a copy of the sample cells alone (`samples`, recordings to measure
    again; their tables are the session's `measured_runs["sample_data"]`)."""
    if "lab" in _MEASURED:
        return _MEASURED["lab"]
    base = tmp_path_factory.mktemp("lab")
    recordings = base / "recordings"
    recordings.mkdir()
    for p in SAMPLE.iterdir():
        if p.suffix in (".nwb", ".nix"):
            shutil.copy(p, recordings / p.name)
    cell = simulated_cell()
    write_cell(recordings / "good.nwb", cell.voltage_mv, cell.command_pa, RATE)
    for name, (v, cmd, rate) in broken_variants(cell).items():
        write_cell(recordings / name, v, cmd, rate)
    summary = measure_paths([str(recordings)], base / "all", jobs=2)
    assert not summary.failures, summary.failures
    samples = base / "samples"
    samples.mkdir()
    for p in SAMPLE.iterdir():
        if p.suffix in (".nwb", ".nix"):
            shutil.copy(p, samples / p.name)
    _MEASURED["lab"] = base
    return base


@pytest.fixture(scope="module")
def sample_results(measured_runs) -> Path:
    """The four sample cells measured with the default parameters (shared by the session:
    tests copy it before changing anything)."""
    return measured_runs["sample_data"]


def failing(report) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for case in report.failed_cases:
        out.setdefault(case.file, set()).add(case.check)
    return out


def write_rows(path: Path, rows: list[dict]) -> None:
    with open(path, "w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)


def read_rows(path: Path) -> list[dict]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def keep_files(run_dir: Path, cells: list[dict]) -> None:
    """Keep only the files of `cells` in a run's tables and its run.json, as a run of those
    files alone would have written them."""
    files = {r["file"] for r in cells}
    for name in ("spikes.csv", "sweeps.csv", "cells.csv"):
        rows = read_rows(run_dir / name)
        write_rows(run_dir / name, [r for r in rows if r["file"] in files])
    record = json.loads((run_dir / "run.json").read_text())
    record["inputs"] = [i for i in record["inputs"] if i["file"] in files]
    (run_dir / "run.json").write_text(json.dumps(record))


def recount(run_dir: Path) -> None:
    """Set run.json's sweep and spike counts of each file to those of the edited tables, as
    the run that found them would have written them."""
    record = json.loads((run_dir / "run.json").read_text())
    for entry in record["inputs"]:
        for key, name in (("sweeps_measured", "sweeps.csv"), ("spikes", "spikes.csv")):
            entry[key] = sum(r["file"] == entry["file"] for r in read_rows(run_dir / name))
    (run_dir / "run.json").write_text(json.dumps(record))


@pytest.fixture
def accepted(sample_results, tmp_path):
    """The sample run accepted into tmp_path/accepted, and a copy of the run to edit."""
    accept_results(sample_results, tmp_path / "accepted", project_dir=tmp_path)
    run_copy = tmp_path / "run"
    shutil.copytree(sample_results, run_copy)
    return tmp_path / "accepted", run_copy


def regression(run_dir, accepted_dir, **kw) -> CheckReport:
    return check_run(run_dir, CheckSettings(accepted_dir=accepted_dir, **kw))


def edit_cell(run_dir, name, column, change, row=0):
    """Change one cell of a table (row `row`, `column`) by `change` of its text."""
    rows = read_rows(run_dir / name)
    rows[row][column] = change(rows[row][column])
    write_rows(run_dir / name, rows)
    return rows[row]


def validate_junit(text: str) -> ET.Element:
    """Check the document against the structure of the common JUnit schema (see the module
    docstring) and the consistency of its counts; return the root."""
    import re

    root = ET.fromstring(text)
    assert root.tag == "testsuites"
    assert set(root.attrib) <= {"name", "time", "tests", "failures", "disabled", "errors"}
    total_tests = total_failures = 0
    for suite in root:
        assert suite.tag == "testsuite"
        for attribute in ("name", "tests", "failures", "errors", "time", "timestamp",
                          "hostname", "id", "package"):
            assert attribute in suite.attrib, attribute
        assert set(suite.attrib) <= {"name", "tests", "failures", "errors", "group", "time",
                                     "skipped", "timestamp", "hostname", "id", "package",
                                     "file", "log", "url", "version"}
        assert re.fullmatch(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}", suite.get("timestamp"))
        assert suite.get("hostname")
        tags = [child.tag for child in suite]
        assert tags[0] == "properties" and tags[-2:] == ["system-out", "system-err"]
        assert set(tags[1:-2]) <= {"testcase"}
        properties = list(suite.find("properties"))
        assert properties and all(p.tag == "property" and {"name", "value"} <= set(p.attrib)
                                  for p in properties)
        cases = suite.findall("testcase")
        for case in cases:
            assert {"name", "classname", "time"} <= set(case.attrib)
            assert set(case.attrib) <= {"name", "assertions", "time", "classname", "status",
                                        "file", "line"}
            assert len(case) <= 1
            for child in case:
                assert child.tag == "failure" and {"message", "type"} <= set(child.attrib)
        failures = sum(1 for c in cases if c.find("failure") is not None)
        assert int(suite.get("tests")) == len(cases)
        assert int(suite.get("failures")) == failures
        assert int(suite.get("errors")) == 0 and int(suite.get("skipped")) == 0
        float(suite.get("time"))
        total_tests += len(cases)
        total_failures += failures
    assert int(root.get("tests")) == total_tests
    assert int(root.get("failures")) == total_failures
    return root
