"""spikemeasure check and accept: quality limits, regression against accepted results, reports.

Sources of the expected answers:
- the quality rules: recordings built to break one rule each, from a Wang & Buzsaki (1996)
  simulation (spikemeasure.testing) with a known change: white noise of a known SD, a
  linear ramp of known slope (drift = slope x the time between the windows' centres), peaks
  cut at a known level, every 4th sample kept (a known rate), a known offset of the voltage;
  the four sample cells (sample_data/) pass limits of common practice;
- the regression: tables edited by the test by a known amount, compared with tolerances
  whose arithmetic is done by hand here;
- the JUnit report: the structure of the common JUnit XML schemas (from memory): the XSD
  CI servers validate against (junit-10.xsd, also pytest's format) allows name, tests,
  failures, errors and time on <testsuites>, and tests, failures, errors, skipped, time,
  timestamp, hostname, id and package on <testsuite>, whose children are properties (each
  with at least one property), testcase*, system-out, system-err in that order; the stricter
  XSD of the Ant report format requires name, tests, failures, errors, time, timestamp
  (YYYY-MM-DDTHH:MM:SS, no zone), hostname, id and package on every suite, and properties,
  system-out and system-err present. A <testcase> has name, classname and time and at most
  one <failure> with message and type.
"""
from __future__ import annotations

import csv
import json
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from conftest import write_nwb
from spikemeasure.checks import (QUALITY_RULES, CheckInputError, check_run, read_tables,
                                 report_dict, report_text)
from spikemeasure.cli import main
from spikemeasure.columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from spikemeasure.config import (QUALITY_KEYS, CheckSettings, ConfigError, Tolerance,
                                 load_check_settings)
from spikemeasure.detection import DetectionSettings
from spikemeasure.junit import junit_xml
from spikemeasure.quality_rules import quality_rules_markdown
from spikemeasure.run import measure_paths
from spikemeasure.testing import simulate_current_steps

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_data"
EXAMPLE = ROOT / "docs" / "example-lab"
RATE = 20_000.0

#: Limits a lab might set (common practice): every sample cell passes them.
LIMITS = {"max_baseline_noise_mv": 0.5, "max_baseline_drift_mv": 5.0,
          "min_sampling_rate_hz": 10_000.0, "resting_range_mv": (-80.0, -55.0),
          "min_highest_peak_mv": 0.0, "max_clipped_spikes": 0}

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
    }


def write_cell(path, voltage, command, rate):
    return write_nwb(path, list(zip(voltage, command)), rate_hz=rate)


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """A folder with the four sample cells, one good simulated cell and the broken ones,
    measured once; and a copy of the sample cells alone (`samples`, recordings to measure
    again; their tables are the session's `measured_runs["sample_data"]`)."""
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


class TestQualityRules:
    def test_every_key_has_a_rule(self):
        assert [r.key for r in QUALITY_RULES] == list(QUALITY_KEYS)

    def test_each_rule_reads_a_declared_column_and_its_example_is_valid(self, tmp_path):
        tables = {"spikes.csv": SPIKE_COLUMNS, "sweeps.csv": SWEEP_COLUMNS,
                  "cells.csv": CELL_COLUMNS}
        for rule in QUALITY_RULES:
            assert rule.column in [c.name for c in tables[rule.table]], rule.key
        project = tmp_path / "spikemeasure.toml"
        project.write_text("[quality]\n" + "".join(f"{r.key} = {r.example}\n"
                                                   for r in QUALITY_RULES))
        assert set(load_check_settings(project).quality) == set(QUALITY_KEYS)

    def test_docs_table_is_generated_from_the_rules(self):
        docs = (Path(__file__).resolve().parents[1] / "docs" / "ci.md").read_text()
        assert quality_rules_markdown() in docs, \
            "regenerate the table in docs/ci.md from quality_rules_markdown()"

    def test_sample_cells_and_the_good_cell_pass_every_rule(self, lab):
        report = check_run(lab / "all", CheckSettings(quality=LIMITS, compare=False))
        bad = failing(report)
        for name in ["good.nwb"] + [p.name for p in SAMPLE.iterdir() if p.suffix in
                                    (".nwb", ".nix")]:
            assert name not in bad, (name, [f.message for f in report.findings
                                            if f.file == name])
        cases = [c for c in report.cases if c.file == "good.nwb"]
        assert [c.check for c in cases] == ["measured"] + list(QUALITY_KEYS)

    @pytest.mark.parametrize("name", sorted(BROKEN))
    def test_each_broken_recording_fails_its_rule_only(self, lab, name):
        report = check_run(lab / "all", CheckSettings(quality=LIMITS, compare=False))
        assert failing(report).get(name) == {BROKEN[name]}, [
            f.message for f in report.findings if f.file == name]

    def test_messages_name_file_sweep_rule_and_values(self, lab):
        report = check_run(lab / "all", CheckSettings(quality=LIMITS, compare=False))
        by = {(f.file, f.check): f for f in report.findings}
        noisy = by[("noisy.nwb", "max_baseline_noise_mv")]
        assert noisy.sweep is not None and noisy.column == "baseline_noise_mv"
        assert 0.8 < float(noisy.value) < 1.2           # white noise of SD 1 mV (+0.2 mV)
        assert "at most 0.5 mV" in noisy.message
        drift = by[("drifting.nwb", "max_baseline_drift_mv")]
        # the ramp's 6 mV on top of the simulated cell's own drift (under 0.5 mV)
        assert float(drift.value) == pytest.approx(6.0, abs=0.5)
        rate = by[("low_rate.nwb", "min_sampling_rate_hz")]
        assert float(rate.value) == 5000.0 and "at least 10000 Hz" in rate.message
        clipped = [f for f in report.findings if f.file == "clipped.nwb"]
        assert {f.sweep for f in clipped} == {2}        # only the 150 pA sweep fires
        assert int(clipped[0].value) > 0
        rest = by[("depolarized.nwb", "resting_range_mv")]
        assert float(rest.value) == pytest.approx(-64.0 + 20.0, abs=0.5)
        assert "-80 to -55" in rest.message
        peak = by[("small_spikes.nwb", "min_highest_peak_mv")]
        assert float(peak.value) < 0 and peak.sweep == 2 and peak.spike is not None
        text = report_text(report)
        assert "noisy.nwb" in text and "max_baseline_noise_mv" in text and "FAILED" in text

    def test_clipped_spikes_are_flagged_in_the_spike_table(self, lab):
        tables = read_tables(lab / "all")
        flags = [r["flags"] for r in tables.spikes if r["file"] == "clipped.nwb"]
        assert flags and all("clipped_peak" in f for f in flags)
        counts = {r["sweep"]: int(r["clipped_spike_count"]) for r in tables.sweeps
                  if r["file"] == "clipped.nwb"}
        assert counts == {"0": 0, "1": 0, "2": len(flags)}
        assert not any("clipped_peak" in r["flags"] for r in tables.spikes
                       if r["file"] != "clipped.nwb")

    def test_unmeasured_value_fails_the_rule(self, sample_results, tmp_path):
        out = tmp_path / "run"
        shutil.copytree(sample_results, out)
        rows = list(csv.DictReader(open(out / "sweeps.csv", newline="")))
        rows[0]["baseline_drift_mv"] = ""
        write_rows(out / "sweeps.csv", rows)
        report = check_run(out, CheckSettings(quality={"max_baseline_drift_mv": 5.0},
                                              compare=False))
        finding, = report.findings
        assert finding.sweep == 0 and "empty (not measured)" in finding.message

    def test_a_file_that_failed_to_measure_fails_measured(self, tmp_path):
        folder = tmp_path / "in"
        folder.mkdir()
        (folder / "empty.nwb").write_bytes(b"")
        cell = simulated_cell()
        write_cell(folder / "good.nwb", cell.voltage_mv, cell.command_pa, RATE)
        measure_paths([str(folder)], tmp_path / "out")
        report = check_run(tmp_path / "out", CheckSettings(quality=LIMITS, compare=False))
        assert failing(report)["empty.nwb"] == {"measured"} | set(LIMITS)
        assert "good.nwb" not in failing(report)


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
    from spikemeasure.checks import accept_results

    accept_results(sample_results, tmp_path / "accepted", project_dir=tmp_path)
    run_copy = tmp_path / "run"
    shutil.copytree(sample_results, run_copy)
    return tmp_path / "accepted", run_copy


def regression(run_dir, accepted_dir, **kw) -> "CheckReport":  # noqa: F821
    return check_run(run_dir, CheckSettings(accepted_dir=accepted_dir, **kw))


class TestRegression:
    def test_unchanged_results_pass(self, accepted):
        accepted_dir, run_dir = accepted
        report = regression(run_dir, accepted_dir)
        assert report.passed, report_text(report)
        assert {c.check for c in report.cases} == {"measured", "regression"}
        assert len([c for c in report.cases if c.check == "regression"]) == 4

    def test_measuring_again_passes(self, lab, accepted, tmp_path):
        accepted_dir, _ = accepted
        measure_paths([str(lab / "samples")], tmp_path / "again", force=True)
        assert regression(tmp_path / "again", accepted_dir).passed

    def test_changed_parameter_moves_thresholds_and_fails_naming_the_column(
            self, lab, accepted, tmp_path):
        accepted_dir, _ = accepted
        measure_paths([str(lab / "samples")], tmp_path / "changed",
                      DetectionSettings(onset_rate_v_per_s=35.0))
        report = regression(tmp_path / "changed", accepted_dir)
        assert not report.passed
        columns = {f.column for f in report.findings}
        assert "threshold_mv" in columns and "threshold_s" in columns
        moved = next(f for f in report.findings if f.column == "threshold_mv")
        # a higher onset rate is crossed later on the rising phase: threshold rises
        assert float(moved.value) > float(moved.accepted)
        assert moved.spike is not None and moved.sweep is not None
        assert any("onset_rate_v_per_s 20.0 -> 35.0" in n for n in report.notes)

    def test_removed_file_fails(self, accepted):
        accepted_dir, run_dir = accepted
        keep_files(run_dir, [r for r in read_rows(run_dir / "cells.csv")
                             if r["file"] != "region_b_cell_2.nix"])
        report = regression(run_dir, accepted_dir)
        assert failing(report) == {"region_b_cell_2.nix": {"regression"}}
        finding, = report.findings
        assert "file removed" in finding.message

    def test_added_file_fails_unless_allowed(self, accepted):
        accepted_dir, run_dir = accepted
        for name in ("spikes.csv", "sweeps.csv", "cells.csv"):
            rows = read_rows(accepted_dir / name)
            write_rows(accepted_dir / name, [r for r in rows if r["file"] != "region_a_cell_1.nwb"])
        (accepted_dir / "run.json").unlink()
        report = regression(run_dir, accepted_dir)
        assert failing(report) == {"region_a_cell_1.nwb": {"regression"}}
        assert "file added" in report.findings[0].message
        assert regression(run_dir, accepted_dir, allow_new_files=True).passed

    def test_spike_lost(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(run_dir / "spikes.csv")
        lost = rows[3]
        del rows[3]
        write_rows(run_dir / "spikes.csv", rows)
        recount(run_dir)
        report = regression(run_dir, accepted_dir)
        finding, = report.findings
        assert finding.file == lost["file"] and finding.sweep == int(lost["sweep"])
        assert "1 spike lost" in finding.message

    @pytest.mark.parametrize("name", ["spikes.csv", "sweeps.csv", "cells.csv"])
    def test_a_duplicated_accepted_row_is_named_as_such(self, accepted, name):
        """A row present twice in the accepted table: one finding naming the table, the key
        and the lines; not `1 spike lost`, and not passed over."""
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / name)
        k = 3
        write_rows(accepted_dir / name, rows[:k + 1] + [rows[k]] + rows[k + 1:])
        report = regression(run_dir, accepted_dir)
        finding, = report.findings
        row = rows[k]
        assert finding.file == row["file"]
        assert finding.sweep == (int(row["sweep"]) if "sweep" in row else None)
        assert finding.spike == (int(row["spike"]) if "spike" in row else None)
        assert finding.message.startswith(f"{name}: ")
        assert f"is in the accepted results 2 times (the same row, lines {k + 2}, {k + 3})" \
            in finding.message
        assert "lost" not in finding.message

    def test_rows_sharing_a_key_name_the_columns_that_differ(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / "spikes.csv")
        other = dict(rows[0], peak_mv=f"{float(rows[0]['peak_mv']) + 1.0:.3f}")
        write_rows(accepted_dir / "spikes.csv", [rows[0], other] + rows[1:])
        finding, = regression(run_dir, accepted_dir).findings
        assert f"sweep {rows[0]['sweep']}, spike {rows[0]['spike']} is in the accepted " \
            f"results 2 times (rows with the same key that differ in peak_mv" in finding.message

    def test_a_duplicated_row_in_the_run_is_named_as_such(self, accepted):
        """Found by the comparison itself, for tables read without their run record."""
        from spikemeasure.checks import regression_cases

        accepted_dir, run_dir = accepted
        rows = read_rows(run_dir / "sweeps.csv")
        write_rows(run_dir / "sweeps.csv", rows + rows[-1:])
        cases, _ = regression_cases(read_tables(run_dir), read_tables(accepted_dir,
                                                                      "accepted results"),
                                    CheckSettings(accepted_dir=accepted_dir))
        finding, = [f for c in cases for f in c.findings]
        assert finding.file == rows[-1]["file"] and finding.sweep == int(rows[-1]["sweep"])
        assert f"sweeps.csv: sweep {rows[-1]['sweep']} is in this run 2 times (the same row, " \
            f"lines {len(rows) + 1}, {len(rows) + 2})" in finding.message

    def test_a_cell_row_in_one_side_only_fails(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / "cells.csv")
        write_rows(accepted_dir / "cells.csv", rows[1:])
        finding, = regression(run_dir, accepted_dir).findings
        assert finding.file == rows[0]["file"]
        assert "cells.csv: the file's row is not in the accepted results" in finding.message

    def test_a_column_this_version_does_not_write_gets_a_note(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / "cells.csv")
        write_rows(accepted_dir / "cells.csv", [dict(r, reviewer_note="ok") for r in rows])
        report = regression(run_dir, accepted_dir)
        assert report.passed
        assert any("cells.csv: column(s) reviewer_note in accepted results are not columns "
                   "this version writes" in n for n in report.notes), report.notes

    def edit(self, run_dir, name, column, change, row=0):
        rows = read_rows(run_dir / name)
        rows[row][column] = change(rows[row][column])
        write_rows(run_dir / name, rows)
        return rows[row]

    def test_absolute_tolerance(self, accepted):
        """threshold_mv moved by 0.3 mV: within 0.5 mV, beyond 0.2 mV."""
        accepted_dir, run_dir = accepted
        self.edit(run_dir, "spikes.csv", "threshold_mv", lambda v: f"{float(v) + 0.3:.4f}")
        assert not regression(run_dir, accepted_dir).passed   # default: 0.0001 mV
        assert regression(run_dir, accepted_dir,
                          tolerances={"threshold_mv": Tolerance(0.5)}).passed
        report = regression(run_dir, accepted_dir, tolerances={"threshold_mv": Tolerance(0.2)})
        finding, = report.findings
        assert finding.column == "threshold_mv" and finding.spike == 0 and finding.sweep is not None
        assert finding.limit == "0.2"
        assert float(finding.value) - float(finding.accepted) == pytest.approx(0.3, abs=1e-9)

    def test_relative_tolerance(self, accepted):
        """half_width_ms times 1.015: within 2 %, beyond 1 %."""
        accepted_dir, run_dir = accepted
        self.edit(run_dir, "spikes.csv", "half_width_ms", lambda v: f"{float(v) * 1.015:.5f}")
        two, one = Tolerance(0.02, relative=True), Tolerance(0.01, relative=True)
        assert regression(run_dir, accepted_dir, tolerances={"half_width_ms": two}).passed
        report = regression(run_dir, accepted_dir, tolerances={"half_width_ms": one})
        assert [f.column for f in report.findings] == ["half_width_ms"]
        assert report.findings[0].limit == "1%"
        # a default tolerance applies to every column without its own
        assert regression(run_dir, accepted_dir, default_tolerance=two).passed

    def test_empty_against_number_fails_empty_against_empty_passes(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(run_dir / "cells.csv")
        column = next(c for c in rows[0] if c not in ("file", "flags") and rows[0][c] != "")
        self.edit(run_dir, "cells.csv", column, lambda v: "")
        report = regression(run_dir, accepted_dir, default_tolerance=Tolerance(1e9))
        finding, = report.findings
        assert finding.column == column and finding.value == "" and "now empty" in finding.message
        empty_before = [r for r in read_rows(accepted_dir / "spikes.csv") if r["isi_ms"] == ""]
        assert empty_before   # every sweep's first spike: empty in both runs, and it passed

    def test_accepted_folder_from_the_project_file_and_defaults(self, tmp_path):
        assert load_check_settings(None, base_dir=tmp_path).accepted_dir == tmp_path / "accepted"
        project = tmp_path / "lab" / "spikemeasure.toml"
        project.parent.mkdir()
        project.write_text('[regression]\naccepted_folder = "reference"\n'
                           '[regression.tolerances]\nthreshold_mv = 0.5\n'
                           'half_width_ms = "2%"\n')
        settings = load_check_settings(project)
        assert settings.accepted_dir == project.parent.resolve() / "reference"
        assert settings.tolerances == {"threshold_mv": Tolerance(0.5),
                                       "half_width_ms": Tolerance(0.02, relative=True)}

    def test_results_accepted_before_a_column_existed_pass_with_a_note(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / "sweeps.csv")
        for row in rows:
            del row["baseline_drift_mv"]
        write_rows(accepted_dir / "sweeps.csv", rows)
        report = regression(run_dir, accepted_dir)
        assert report.passed
        assert any("baseline_drift_mv not in the accepted results" in n for n in report.notes)

    def test_accept_replaces_the_tables_and_keeps_other_files(self, accepted):
        from spikemeasure.checks import accept_results

        accepted_dir, run_dir = accepted
        (accepted_dir / "README.md").write_text("reviewed results\n")
        keep_files(run_dir, read_rows(run_dir / "cells.csv")[:1])
        accept_results(run_dir, accepted_dir, project_dir=accepted_dir.parent)
        assert len(read_rows(accepted_dir / "cells.csv")) == 1
        assert (accepted_dir / "README.md").read_text() == "reviewed results\n"
        assert sorted(p.name for p in accepted_dir.parent.iterdir()
                      if p.name.startswith(".accepted")) == []   # no temporary folders left

    def test_missing_accepted_results_is_an_input_error(self, sample_results, tmp_path):
        with pytest.raises(CheckInputError, match="no such folder of accepted results.*accept"):
            regression(sample_results, tmp_path / "nothing")


class TestProjectFileSections:
    @pytest.mark.parametrize("text, expected", [
        ("[quality]\nmax_noise_mv = 1\n", "did you mean `max_baseline_noise_mv`"),
        ("[quality]\nmax_baseline_noise_mv = -1\n", "must be positive"),
        ("[quality]\nresting_range_mv = [-50, -80]\n", "LOW < HIGH"),
        ("[quality]\nmax_clipped_spikes = 0.5\n", "whole number"),
        ("[regresion]\nenabled = true\n", "did you mean [regression]"),
        ("[regression]\nenabled = 1\n", "true or false"),
        ("[regression.tolerances]\nthreshold_mV = 1\n", "did you mean `threshold_mv`"),
        ("[regression.tolerances]\nflags = 1\n", "compared exactly"),
        ("[regression.tolerances]\nhalf_width_ms = \"two\"\n", "percentage in quotes"),
        ("[regression.tolerances]\nhalf_width_ms = -0.1\n", "zero or positive"),
    ])
    def test_errors_name_the_file_and_key(self, tmp_path, text, expected):
        path = tmp_path / "spikemeasure.toml"
        path.write_text(text)
        with pytest.raises(ConfigError) as info:
            load_check_settings(path)
        assert str(path) in str(info.value) and expected in str(info.value)

    def test_measure_accepts_a_file_with_check_sections(self, tmp_path):
        from spikemeasure.config import load_config

        path = tmp_path / "spikemeasure.toml"
        path.write_text("[measure]\nmin_rise_mv = 25\n[quality]\nmax_baseline_noise_mv = 1\n"
                        "[regression]\nenabled = false\n")
        assert load_config(path) == {"min_rise_mv": 25.0}
        settings = load_check_settings(path)
        assert settings.quality == {"max_baseline_noise_mv": 1.0} and not settings.compare


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


class TestReports:
    def test_junit_counts(self, lab):
        report = check_run(lab / "all", CheckSettings(quality=LIMITS, compare=False))
        root = validate_junit(junit_xml(report))
        files = len(read_tables(lab / "all").files())
        assert int(root.get("tests")) == files * (1 + len(LIMITS)) == len(report.cases)
        assert int(root.get("failures")) == len(BROKEN)
        failed = {(c.get("classname"), c.get("name")) for c in root.iter("testcase")
                  if c.find("failure") is not None}
        assert failed == set(BROKEN.items())

    def test_junit_with_regression_suite(self, accepted):
        accepted_dir, run_dir = accepted
        TestRegression().edit(run_dir, "cells.csv", "resting_mv", lambda v: f"{float(v) + 3:.4f}")
        report = regression(run_dir, accepted_dir)
        root = validate_junit(junit_xml(report))
        suites = {s.get("name"): s for s in root}
        assert set(suites) == {"quality", "regression"}
        assert suites["regression"].get("tests") == "4"
        assert suites["regression"].get("failures") == "1"
        failure = suites["regression"].find("testcase/failure")
        assert "resting_mv" in failure.get("message")

    def test_json_document(self, lab):
        report = check_run(lab / "all", CheckSettings(quality=LIMITS, compare=False))
        data = json.loads(json.dumps(report_dict(report)))
        assert data["passed"] is False
        assert data["checks"] == len(report.cases)
        assert data["checks_failed"] == len(BROKEN)
        assert {f["file"] for f in data["failures"]} == set(BROKEN)
        assert {"check", "file", "sweep", "spike", "column", "message", "accepted", "value",
                "limit"} == set(data["failures"][0])


class TestCommandLine:
    def test_accept_then_check_without_a_project_file(self, sample_results, tmp_path,
                                                    monkeypatch):
        monkeypatch.chdir(tmp_path)
        results = str(sample_results)
        r = run(["accept", results])
        assert r.exit_code == 0, r.output
        assert (tmp_path / "accepted" / "spikes.csv").read_text() == \
            (sample_results / "spikes.csv").read_text()
        record = json.loads((tmp_path / "accepted" / "run.json").read_text())
        assert record["parameters"]["onset_rate_v_per_s"] == 20.0 and record["versions"]
        r = run(["check", results, "--junit", "report.xml"])
        assert r.exit_code == 0, r.output
        assert "passed" in r.output
        validate_junit((tmp_path / "report.xml").read_text())
        r = run(["check", results, "--json"])
        assert r.exit_code == 0
        assert json.loads(r.stdout)["passed"] is True

    def test_failures_exit_1_with_a_table(self, lab, tmp_path, monkeypatch):
        monkeypatch.chdir(tmp_path)
        (tmp_path / "spikemeasure.toml").write_text(
            "[quality]\nmax_baseline_noise_mv = 0.5\n[regression]\nenabled = false\n")
        r = run(["check", str(lab / "all")])
        assert r.exit_code == 1
        assert "noisy.nwb" in r.output and "max_baseline_noise_mv" in r.output
        assert "FAILED: 1 of" in r.output

    def test_stopped_while_measuring_exits_128_plus_the_signal(self, lab, tmp_path,
                                                               monkeypatch):
        # POSIX shell convention (common practice): a process ended by signal N exits 128 + N.
        import signal as signals

        from spikemeasure import run as runner

        def stopped(*args, **kwargs):
            raise runner.RunStopped(int(signals.SIGTERM))

        monkeypatch.setattr(runner, "measure_paths", stopped)
        monkeypatch.chdir(tmp_path)
        r = run(["check", str(lab / "samples"), "--out", str(tmp_path / "res")])
        assert r.exit_code == 128 + int(signals.SIGTERM)
        assert "Interrupted (SIGTERM): nothing was checked" in r.output
        assert "Traceback" not in r.output

    def test_input_errors_exit_2_without_traceback(self, lab, sample_results, tmp_path,
                                                  monkeypatch):
        monkeypatch.chdir(tmp_path)
        r = run(["check", str(tmp_path / "nowhere")])
        assert r.exit_code == 2 and "nowhere: no such folder" in r.output
        assert "Traceback" not in r.output
        r = run(["check", str(lab / "samples")])   # recordings, not tables
        assert r.exit_code == 2 and "spikes.csv: no such file" in r.output
        assert "--out" in r.output
        r = run(["check", str(sample_results)])   # nothing accepted yet
        assert r.exit_code == 2 and "accepted" in r.output
        (tmp_path / "accepted").mkdir()
        r = run(["check", str(sample_results)])   # an empty accepted folder
        assert r.exit_code == 2 and "accepted" in r.output and "spikemeasure accept" in r.output
        (tmp_path / "accepted").rmdir()
        (tmp_path / "spikemeasure.toml").write_text("[quality]\nmax_noise = 1\n")
        r = run(["check", str(sample_results)])
        assert r.exit_code == 2 and "spikemeasure.toml" in r.output and "max_noise" in r.output
        r = run(["accept", str(sample_results)])
        assert r.exit_code == 2 and "max_noise" in r.output
        r = run(["--debug", "check", str(sample_results)])
        assert r.exit_code == 1 and isinstance(r.exception, ConfigError)
        r = run(["check", "a", "b"])
        assert r.exit_code == 2 and "--out" in r.output

    def test_help_states_the_interface(self):
        r = run(["check", "--help"])
        assert r.exit_code == 0
        for text in ("--out", "--junit", "--json", "run's tables", "0 all passed"):
            assert text in r.output


def example_commands() -> list[list[str]]:
    """The `spikemeasure ...` commands of the example's CI job, in order."""
    import yaml

    job = yaml.safe_load((EXAMPLE / "ci-job.yml").read_text())
    (name, spec), = job.items()
    return [line.split()[1:] for line in spec["script"] if line.startswith("spikemeasure ")]


class TestExampleLab:
    """docs/example-lab/ as a lab repository: its CI job's commands pass; a broken recording
    in place of a good one makes them fail."""

    def run_job(self, folder: Path) -> subprocess.CompletedProcess:
        result = None
        for args in example_commands():
            result = subprocess.run([sys.executable, "-m", "spikemeasure", *args], cwd=folder,
                                    capture_output=True, text=True, timeout=300)
            if result.returncode != 0:
                break
        return result

    def test_docs_show_the_job_file(self):
        import re

        import yaml

        text = (ROOT / "docs" / "ci.md").read_text()
        block = re.search(r"```yaml\n(.*?)```", text, flags=re.S).group(1)
        assert yaml.safe_load(block) == yaml.safe_load((EXAMPLE / "ci-job.yml").read_text())

    def test_the_job_checks_and_passes_then_fails_on_a_broken_file(self, tmp_path):
        commands = example_commands()
        assert any(c[0] == "check" and "--junit" in c for c in commands)
        folder = tmp_path / "lab"
        shutil.copytree(EXAMPLE, folder, ignore=shutil.ignore_patterns("results"))
        result = self.run_job(folder)
        assert result.returncode == 0, result.stdout + result.stderr
        report = next(c[c.index("--junit") + 1] for c in commands if "--junit" in c)
        validate_junit((folder / report).read_text())

        sys.path.insert(0, str(folder))
        try:
            import make_recordings
        finally:
            sys.path.remove(str(folder))
        recordings = sorted((folder / "recordings").glob("*.nwb"))
        assert len(recordings) >= 2
        make_recordings.write_cell(recordings[0], noise_mv=1.5)   # a noisy recording
        result = self.run_job(folder)
        assert result.returncode == 1, result.stdout + result.stderr
        assert recordings[0].name in result.stdout
        assert "max_baseline_noise_mv" in result.stdout
        root = validate_junit((folder / report).read_text())
        failed = {c.get("classname") for c in root.iter("testcase")
                  if c.find("failure") is not None}
        assert failed == {recordings[0].name}


class TestEdgeCases:
    def test_relative_tolerance_never_below_the_written_resolution(self, accepted):
        """baseline_drift_mv is written with 4 decimals: a change of 0.0001 mV passes even
        under a relative tolerance of 1 % of a value near zero; 0.0003 mV does not pass
        1 % of a value under 0.01 mV."""
        accepted_dir, run_dir = accepted
        rows = read_rows(run_dir / "sweeps.csv")
        k = min(range(len(rows)), key=lambda i: abs(float(rows[i]["baseline_drift_mv"])))
        value = float(rows[k]["baseline_drift_mv"])
        assert abs(value) < 0.01
        one = {"baseline_drift_mv": Tolerance(0.01, relative=True)}
        for change, passes in ((0.0001, True), (0.0003, False)):
            rows[k]["baseline_drift_mv"] = f"{value + change:.4f}"
            write_rows(run_dir / "sweeps.csv", rows)
            assert regression(run_dir, accepted_dir, tolerances=one).passed is passes

    @pytest.mark.parametrize("change", [
        {"interrupted": True},                               # a record without status
        {"status": "interrupted", "interrupted": True},
        {"status": "running", "interrupted": False},         # still going, or killed
        {"status": "something else", "interrupted": False},
    ])
    def test_an_unfinished_run_is_refused_by_check_and_accept(self, accepted, change,
                                                              monkeypatch):
        from spikemeasure.checks import accept_results

        accepted_dir, run_dir = accepted
        before = {p.name: p.read_bytes() for p in accepted_dir.iterdir()}
        record = json.loads((run_dir / "run.json").read_text())
        if "status" not in change:
            record.pop("status", None)          # as written before runs had a status
        record.update(change)
        (run_dir / "run.json").write_text(json.dumps(record))
        for settings in (CheckSettings(compare=False), CheckSettings(accepted_dir=accepted_dir)):
            with pytest.raises(CheckInputError, match=r"run\.json: the run .*measure command"):
                check_run(run_dir, settings)
        with pytest.raises(CheckInputError, match=r"run\.json: the run .*measure command"):
            accept_results(run_dir, accepted_dir, project_dir=accepted_dir.parent)
        monkeypatch.chdir(accepted_dir.parent)
        for command in ("check", "accept"):
            r = run([command, str(run_dir)])
            assert r.exit_code == 2, r.output
            assert "run.json" in r.output and "measure command again" in r.output
            assert "Traceback" not in r.output
        assert {p.name: p.read_bytes() for p in accepted_dir.iterdir()} == before
        record.update(status="complete", interrupted=False)   # the same run, finished
        (run_dir / "run.json").write_text(json.dumps(record))
        assert regression(run_dir, accepted_dir).passed
        assert run(["accept", str(run_dir)]).exit_code == 0

    @pytest.mark.parametrize("edit", ["rows_of_a_file_missing", "file_not_listed",
                                      "sweep_missing", "spike_missing", "cell_row_twice"])
    def test_tables_that_disagree_with_the_run_record_are_refused(self, accepted, edit,
                                                                  monkeypatch):
        """A check must never pass a run whose tables hold fewer (or other) files than its
        run.json lists as measured: the counts of run.json, written by the same run."""
        from spikemeasure.checks import accept_results

        accepted_dir, run_dir = accepted
        record = json.loads((run_dir / "run.json").read_text())
        first = record["inputs"][0]["file"]
        if edit == "rows_of_a_file_missing":
            for name in ("spikes.csv", "sweeps.csv", "cells.csv"):
                write_rows(run_dir / name, [r for r in read_rows(run_dir / name)
                                            if r["file"] != first])
            expected = f"run.json lists 1 file as measured that the tables do not hold \\({first}"
        elif edit == "file_not_listed":
            record["inputs"] = record["inputs"][1:]
            (run_dir / "run.json").write_text(json.dumps(record))
            expected = f"the tables hold 1 file that run.json does not list \\({first}"
        elif edit == "sweep_missing":
            rows = read_rows(run_dir / "sweeps.csv")
            write_rows(run_dir / "sweeps.csv", rows[1:])
            expected = f"{rows[0]['file']}: run.json counts .* sweeps, sweeps.csv holds"
        elif edit == "spike_missing":
            rows = read_rows(run_dir / "spikes.csv")
            write_rows(run_dir / "spikes.csv", rows[:-1])
            expected = f"{rows[-1]['file']}: run.json counts .* spikes, spikes.csv holds"
        else:
            rows = read_rows(run_dir / "cells.csv")
            write_rows(run_dir / "cells.csv", rows + rows[:1])
            expected = f"{rows[0]['file']}: cells.csv holds 2 rows of it"
        with pytest.raises(CheckInputError, match="the tables and run.json disagree: "
                                                  + expected):
            check_run(run_dir, CheckSettings(accepted_dir=accepted_dir))
        with pytest.raises(CheckInputError, match="disagree"):
            accept_results(run_dir, accepted_dir, project_dir=accepted_dir.parent)
        monkeypatch.chdir(accepted_dir.parent)
        r = run(["check", str(run_dir)])
        assert r.exit_code == 2 and "disagree" in r.output and "passed" not in r.output

    def test_a_run_without_a_record_is_refused(self, accepted):
        accepted_dir, run_dir = accepted
        (run_dir / "run.json").unlink()
        with pytest.raises(CheckInputError, match="run.json: no run record"):
            regression(run_dir, accepted_dir)

    def test_a_run_without_files_is_an_input_error(self, accepted):
        accepted_dir, run_dir = accepted
        for name in ("spikes.csv", "sweeps.csv", "cells.csv"):
            header = (run_dir / name).read_text().splitlines()[0]
            (run_dir / name).write_text(header + "\n")
        (run_dir / "run.json").unlink()
        with pytest.raises(CheckInputError, match="nothing to check"):
            regression(run_dir, accepted_dir)

    def test_damaged_table_names_the_line(self, accepted):
        accepted_dir, run_dir = accepted
        with open(run_dir / "cells.csv", "a") as fh:
            fh.write("x.nwb,1\n")
        lines = len((run_dir / "cells.csv").read_text().splitlines())
        with pytest.raises(CheckInputError, match=f"cells.csv, line {lines}: the number"):
            regression(run_dir, accepted_dir)

    def test_lost_file_is_one_finding(self, lab, accepted, tmp_path):
        """A file accepted, now failing to read: one `file lost` finding, no row noise."""
        accepted_dir, _ = accepted
        folder = tmp_path / "samples"
        shutil.copytree(lab / "samples", folder)
        (folder / "region_a_cell_2.nix").write_bytes(b"not a recording")
        measure_paths([str(folder)], tmp_path / "out")
        report = regression(tmp_path / "out", accepted_dir)
        regression_findings = [f for f in report.findings if f.check == "regression"]
        assert [(f.file, f.message.split(":")[0]) for f in regression_findings] == [
            ("region_a_cell_2.nix", "file lost")]
        assert failing(report) == {"region_a_cell_2.nix": {"measured", "regression"}}


# --------------------------------------------------------------------------- accept's safety


@pytest.fixture(scope="module")
def measured_lab(tmp_path_factory):
    """A lab repository: recordings (two sample cells, one of them in a subfolder), a .git
    folder, notes, spikemeasure.toml, and results/ measured from the lab's top (so run.json
    lists the recordings by paths relative to it), all without accepted results."""
    import os

    lab = tmp_path_factory.mktemp("labrepo") / "lab"
    (lab / "recordings" / "day_2").mkdir(parents=True)
    shutil.copy(SAMPLE / "region_a_cell_1.nwb", lab / "recordings" / "region_a_cell_1.nwb")
    shutil.copy(SAMPLE / "region_b_cell_1.nwb", lab / "recordings" / "day_2" / "b1.nwb")
    (lab / ".git" / "objects").mkdir(parents=True)
    (lab / ".git" / "HEAD").write_text("ref: refs/heads/main\n")
    (lab / ".git" / "objects" / "ab12").write_bytes(bytes(range(256)))
    (lab / "notes").mkdir()
    (lab / "notes" / "plan.md").write_text("# what to record next\n")
    (lab / "spikemeasure.toml").write_text("[measure]\nonset_rate_v_per_s = 20.0\n")
    here = os.getcwd()
    os.chdir(lab)
    try:
        summary = measure_paths(["recordings"], "results", jobs=1, figure_format=None)
    finally:
        os.chdir(here)
    assert not summary.failures, summary.failures
    return lab


def snapshot(folder: Path) -> dict[str, bytes | None]:
    """Every file (its bytes) and folder (None) under `folder`, by relative path; links by
    their target text."""
    out: dict[str, bytes | None] = {}
    for p in sorted(folder.rglob("*")):
        rel = p.relative_to(folder).as_posix()
        if p.is_symlink():
            out[rel] = ("link " + str(p.readlink())).encode()
        else:
            out[rel] = None if p.is_dir() else p.read_bytes()
    return out


class TestAcceptKeepsTheLabsFiles:
    """accept writes only its four files in a folder of its own; every other file of the
    lab survives byte for byte, and a folder that is not one of its own is refused."""

    @pytest.fixture
    def lab_copy(self, measured_lab, tmp_path, monkeypatch):
        lab = tmp_path / "lab"
        shutil.copytree(measured_lab, lab, symlinks=True)
        (tmp_path / "elsewhere").mkdir()
        (tmp_path / "elsewhere" / "keep.txt").write_text("outside the lab\n")
        (lab / "archive" / "2025").mkdir(parents=True)   # recordings not measured in this run
        shutil.copy(SAMPLE / "region_a_cell_2.nix", lab / "archive" / "2025" / "old.nix")
        monkeypatch.chdir(lab)
        return lab

    def accept_with(self, lab: Path, folder: str, *extra: str):
        (lab / "spikemeasure.toml").write_text(
            f'[measure]\nonset_rate_v_per_s = 20.0\n[regression]\naccepted_folder = '
            f'"{folder}"\n')
        return run(["accept", "results", *extra])

    def test_other_files_and_subfolders_of_the_accepted_folder_survive(self, lab_copy):
        lab = lab_copy
        assert self.accept_with(lab, "accepted").exit_code == 0
        (lab / "accepted" / "notes").mkdir()
        (lab / "accepted" / "notes" / "review.md").write_text("looked at by hand\n")
        (lab / "accepted" / "figures").mkdir()
        (lab / "accepted" / "figures" / "fi.png").write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(64))
        (lab / "accepted" / "README.md").write_text("reviewed results\n")
        (lab / "accepted" / "notes.txt").write_text("a note kept as plain text\n")
        before = snapshot(lab.parent)
        r = self.accept_with(lab, "accepted")
        assert r.exit_code == 0, r.output
        after = snapshot(lab.parent)
        written = {f"lab/accepted/{n}" for n in ("spikes.csv", "sweeps.csv", "cells.csv",
                                                 "run.json")}
        assert set(after) == set(before)            # nothing added, nothing removed
        changed = {k for k in before if before[k] != after[k]}
        assert changed <= written | {"lab/spikemeasure.toml"}
        for name in ("spikes.csv", "sweeps.csv", "cells.csv"):
            assert (lab / "accepted" / name).read_bytes() == (lab / "results" / name).read_bytes()

    @pytest.mark.parametrize("folder, reason", [
        (".", "is the project folder itself"),
        ("{lab}", "is the project folder itself"),
        ("../lab", "is the project folder itself"),
        ("./recordings/..", "is the project folder itself"),
        ("..", "contains the project folder"),
        ("../elsewhere", "lies outside the project folder"),
        ("{elsewhere}", "lies outside the project folder"),
        ("recordings", "holds recordings of this run"),
        ("archive", "holds 1 file that would be taken as recordings (2025/old.nix)"),
        ("recordings/day_2", "holds recordings of this run"),
        ("results", "is the results folder being accepted"),
        ("results/accepted", "lies inside the results folder"),
        ("notes/plan.md", "is a file, not a folder"),
    ])
    def test_refused_folders_leave_every_file_as_it_was(self, lab_copy, folder, reason):
        lab = lab_copy
        folder = folder.format(lab=lab.as_posix(), elsewhere=(lab.parent / "elsewhere").as_posix())
        (lab / "spikemeasure.toml").write_text(
            f'[regression]\naccepted_folder = "{folder}"\n')
        before = snapshot(lab.parent)
        r = run(["accept", "results"])
        assert r.exit_code == 2, r.output
        assert reason in r.output and "nothing was written" in r.output
        assert r.output.startswith("Error: ") and str(lab.parent) in r.output
        assert "Traceback" not in r.output
        assert snapshot(lab.parent) == before

    def test_a_folder_that_contains_the_results(self, lab_copy):
        lab = lab_copy
        (lab / "out").mkdir()
        shutil.move(lab / "results", lab / "out" / "results")
        before = snapshot(lab.parent)
        (lab / "spikemeasure.toml").write_text('[regression]\naccepted_folder = "out"\n')
        before = snapshot(lab.parent)
        r = run(["accept", "out/results"])
        assert r.exit_code == 2 and "contains the results folder" in r.output, r.output
        assert snapshot(lab.parent) == before

    def test_a_recording_of_another_format_given_by_pattern(self, lab_copy):
        """A file discovery takes only with --glob: refused as a recording of the run."""
        lab = lab_copy
        (lab / "raw").mkdir()
        shutil.copy(SAMPLE / "region_a_cell_1.nwb", lab / "raw" / "cell.dat")
        record = json.loads((lab / "results" / "run.json").read_text())
        record["inputs"][0]["path"] = "raw/cell.dat"
        (lab / "results" / "run.json").write_text(json.dumps(record))
        before = snapshot(lab.parent)
        r = self.accept_with(lab, "raw")
        assert r.exit_code == 2 and "holds recordings of this run (cell.dat)" in r.output
        assert snapshot(lab.parent) == before | {"lab/spikemeasure.toml":
                                                 (lab / "spikemeasure.toml").read_bytes()}

    def test_tables_accept_did_not_write_are_not_overwritten(self, lab_copy):
        lab = lab_copy
        (lab / "old").mkdir()
        (lab / "old" / "spikes.csv").write_text("file,sweep,spike\nmine.nwb,0,0\n")
        r = self.accept_with(lab, "old")
        assert r.exit_code == 2 and "not written by accept" in r.output, r.output
        assert (lab / "old" / "spikes.csv").read_text() == "file,sweep,spike\nmine.nwb,0,0\n"
        assert sorted(p.name for p in (lab / "old").iterdir()) == ["spikes.csv"]

    def test_a_folder_named_like_an_accepted_file_is_refused(self, lab_copy):
        lab = lab_copy
        (lab / "accepted" / "run.json").mkdir(parents=True)
        (lab / "accepted" / "run.json" / "kept.md").write_text("x\n")
        r = self.accept_with(lab, "accepted")
        assert r.exit_code == 2 and "run.json there is not a file accept wrote" in r.output
        assert (lab / "accepted" / "run.json" / "kept.md").read_text() == "x\n"

    def test_a_symlinked_folder_is_judged_by_its_target(self, lab_copy):
        lab = lab_copy
        (lab / "reference").mkdir()
        (lab / "accepted").symlink_to("reference", target_is_directory=True)
        r = self.accept_with(lab, "accepted")
        assert r.exit_code == 0, r.output
        assert (lab / "accepted").is_symlink()                       # the link is kept
        assert sorted(p.name for p in (lab / "reference").iterdir()) == [
            "cells.csv", "run.json", "spikes.csv", "sweeps.csv"]
        (lab / "to_recordings").symlink_to("recordings", target_is_directory=True)
        before = snapshot(lab.parent)
        r = self.accept_with(lab, "to_recordings")
        assert r.exit_code == 2 and "that is" in r.output and "recordings" in r.output
        (lab / "to_outside").symlink_to(lab.parent / "elsewhere", target_is_directory=True)
        r = self.accept_with(lab, "to_outside")
        assert r.exit_code == 2 and "lies outside the project folder" in r.output
        assert snapshot(lab.parent / "elsewhere") == {"keep.txt": b"outside the lab\n"}
        assert {k: v for k, v in snapshot(lab.parent).items()
                if "spikemeasure.toml" not in k and "to_outside" not in k} == \
            {k: v for k, v in before.items() if "spikemeasure.toml" not in k}

    def test_a_failure_midway_says_which_files_were_replaced(self, lab_copy, monkeypatch):
        import os

        lab = lab_copy
        assert self.accept_with(lab, "accepted").exit_code == 0
        (lab / "accepted" / "notes.md").write_text("kept\n")
        before = snapshot(lab / "accepted")
        rows = read_rows(lab / "results" / "cells.csv")
        keep_files(lab / "results", rows[:1])
        real_replace = os.replace
        calls = []

        def failing_replace(src, dst):
            calls.append(dst)
            if len(calls) == 2:
                raise OSError(28, "No space left on device")
            return real_replace(src, dst)

        monkeypatch.setattr(os, "replace", failing_replace)
        r = run(["accept", "results"])
        assert r.exit_code == 2, r.output
        assert "spikes.csv was replaced already" in r.output
        assert "No space left on device" in r.output and "accept again" in r.output
        after = snapshot(lab / "accepted")
        assert set(after) == set(before)                  # no temporary file left behind
        assert after["spikes.csv"] == (lab / "results" / "spikes.csv").read_bytes()
        for name in ("sweeps.csv", "cells.csv", "run.json", "notes.md"):
            assert after[name] == before[name]

    def test_an_unwritable_folder_replaces_nothing(self, lab_copy, monkeypatch):
        """As a read-only folder does (the tests may run as a user who can write anywhere)."""
        import tempfile

        lab = lab_copy
        assert self.accept_with(lab, "accepted").exit_code == 0
        before = snapshot(lab.parent)

        def refuse(*args, **kw):
            raise PermissionError(13, "Permission denied")

        monkeypatch.setattr(tempfile, "mkstemp", refuse)
        r = run(["accept", "results"])
        assert r.exit_code == 2, r.output
        assert "Permission denied" in r.output and "nothing was replaced" in r.output
        assert snapshot(lab.parent) == before
