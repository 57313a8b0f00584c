"""The tables of the sample data and of the example lab's recordings against tests/accepted/.

These accepted tables are the record of what the tables said before the restructure of the
package: every value, column, row and file must stay as it was, to the last digit written.
They are not the evidence that the values are right: the other tests check each measurement
against published conductance models and closed forms (a Gaussian spike, a passive RC
membrane, scipy's peak widths). Re-accept only a change of values that is intended and
reviewed against those tests (DEVELOPERS.md, "Accepted results").

Sources of the expected answers: the accepted tables (tests/accepted/), and for the edited
copy the built-in tolerance of docs/ci.md, one unit in the last digit written (0.0001 mV for
threshold_mv).
"""
from __future__ import annotations

import csv
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from conftest import ACCEPTED, MEASURED_SETS
from spikemeasure.checks.apply import check_run
from spikemeasure.checks.findings import report_text
from spikemeasure.checks.run_tables import read_tables
from spikemeasure.checks.settings import CheckSettings
from spikemeasure.cli import main

SETS = sorted(MEASURED_SETS)


def regression_only(accepted_dir: Path) -> CheckSettings:
    """The comparison with the accepted results alone, with the built-in tolerances."""
    return CheckSettings(accepted_dir=accepted_dir)


def unexpected_notes(notes: list[str]) -> list[str]:
    """Notes other than a change of library versions (which may leave every value as it was):
    a column not compared or a change of parameters is a difference too."""
    return [n for n in notes if not n.startswith("versions changed")]


@pytest.mark.parametrize("name", SETS)
def test_tables_equal_the_accepted_ones(measured_runs, name):
    accepted_dir = ACCEPTED / name
    report = check_run(measured_runs[name], regression_only(accepted_dir))
    assert report.passed and not report.findings, report_text(report)
    assert not unexpected_notes(report.notes), report.notes
    accepted_files = set(read_tables(accepted_dir, "accepted results").table("cells.csv")
                         ["file"])
    compared = {c.file for c in report.cases if c.check == "regression"}
    assert accepted_files and compared == accepted_files


@pytest.mark.parametrize("name", SETS)
def test_check_command_passes_against_the_accepted_folder(measured_runs, name):
    r = CliRunner().invoke(main, ["check", str(measured_runs[name]),
                                  "--config", str(ACCEPTED / f"{name}.toml")])
    assert r.exit_code == 0, r.output
    assert r.output.strip().splitlines()[-1].startswith("passed:"), r.output
    notes = [line[len("note: "):] for line in r.output.splitlines() if line.startswith("note:")]
    assert not unexpected_notes(notes), r.output


def _shift_first_value(table: Path, column: str, shift: float) -> tuple[str, str]:
    """Add `shift` to `column` in the first row of a CSV table, written with the same
    decimals; returns the old and the new text."""
    lines = table.read_text().splitlines(keepends=True)
    index = lines[0].rstrip("\r\n").split(",").index(column)
    cells = lines[1].rstrip("\r\n").split(",")
    old = cells[index]
    decimals = len(old.split(".")[1])
    cells[index] = f"{float(old) + shift:.{decimals}f}"
    lines[1] = ",".join(cells) + lines[1][len(lines[1].rstrip("\r\n")):]
    table.write_text("".join(lines))
    return old, cells[index]


def test_a_value_moved_beyond_its_tolerance_fails(measured_runs, tmp_path):
    accepted_copy = tmp_path / "accepted"
    shutil.copytree(ACCEPTED / "sample_data", accepted_copy)
    # 0.0005 mV: five units of the last digit written, the built-in tolerance being one
    old, new = _shift_first_value(accepted_copy / "spikes.csv", "threshold_mv", 0.0005)
    assert old != new

    report = check_run(measured_runs["sample_data"], regression_only(accepted_copy))
    assert not report.passed
    (finding,) = report.findings
    assert (finding.check, finding.column) == ("regression", "threshold_mv")
    with open(accepted_copy / "spikes.csv", newline="") as fh:
        first = next(csv.DictReader(fh))
    assert (finding.file, finding.sweep, finding.spike) == \
        (first["file"], int(first["sweep"]), int(first["spike"]))
    assert (finding.accepted, finding.value) == (new, old)

    config = tmp_path / "project.toml"
    config.write_text('[regression]\naccepted_folder = "accepted"\n')
    r = CliRunner().invoke(main, ["check", str(measured_runs["sample_data"]),
                                  "--config", str(config)])
    assert r.exit_code == 1, r.output
    assert "threshold_mv" in r.output and "FAILED" in r.output
