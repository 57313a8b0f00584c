"""The comparison with the accepted results.

Source of the expected answers: tables edited by the test by a known amount, compared with
tolerances whose arithmetic is done by hand here; a change of a published model's parameter
(a higher onset rate is crossed later on the rising phase of a spike).
"""
from __future__ import annotations

import shutil

import pytest

from checks_support import (lab, sample_results, failing, write_rows, read_rows, keep_files,
                            recount, accepted, regression, edit_cell)
from spikemeasure.checks.findings import report_text
from spikemeasure.checks.regression import regression_cases
from spikemeasure.checks.run_tables import CheckInputError, read_tables
from spikemeasure.checks.settings import CheckSettings, Tolerance
from spikemeasure.analysis.detection import DetectionSettings
from spikemeasure.run import measure_paths


class TestRegression:
    def test_unchanged_results_pass(self, accepted):
        accepted_dir, run_dir = accepted
        report = regression(run_dir, accepted_dir)
        assert report.passed, report_text(report)
        assert {c.check for c in report.cases} == {"measured", "regression"}
        # one per file of the sample data (sample_data/README.md: six files)
        assert len([c for c in report.cases if c.check == "regression"]) == 6

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
        accepted_dir, run_dir = accepted
        rows = read_rows(run_dir / "sweeps.csv")
        write_rows(run_dir / "sweeps.csv", rows + rows[-1:])
        cases, _ = regression_cases(read_tables(run_dir), read_tables(accepted_dir,
                                                                      "accepted results"),
                                    CheckSettings(accepted_dir=accepted_dir))
        finding, = [f for c in cases for f in c.findings]
        assert finding.file == rows[-1]["file"] and finding.sweep == int(rows[-1]["sweep"])
        where = (f"electrode {rows[-1]['electrode']}, " if rows[-1]["file"] == "region_b_pair_1.nwb"
                 else "")  # a file of several cells names the electrode too
        assert f"sweeps.csv: {where}sweep {rows[-1]['sweep']} is in this run 2 times (the same " \
            f"row, lines {len(rows) + 1}, {len(rows) + 2})" in finding.message

    def test_a_cell_row_in_one_side_only_fails(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / "cells.csv")
        write_rows(accepted_dir / "cells.csv", rows[1:])
        finding, = regression(run_dir, accepted_dir).findings
        assert finding.file == rows[0]["file"] and finding.electrode == rows[0]["electrode"]
        assert (f"cells.csv: the row of electrode {rows[0]['electrode']} is not in the "
                "accepted results") in finding.message

    def test_a_column_this_version_does_not_write_gets_a_note(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / "cells.csv")
        write_rows(accepted_dir / "cells.csv", [dict(r, reviewer_note="ok") for r in rows])
        report = regression(run_dir, accepted_dir)
        assert report.passed
        assert any("cells.csv: column(s) reviewer_note in accepted results are not columns "
                   "this version writes" in n for n in report.notes), report.notes


    def test_absolute_tolerance(self, accepted):
        """threshold_mv moved by 0.3 mV: within 0.5 mV, beyond 0.2 mV."""
        accepted_dir, run_dir = accepted
        edit_cell(run_dir, "spikes.csv", "threshold_mv", lambda v: f"{float(v) + 0.3:.4f}")
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
        edit_cell(run_dir, "spikes.csv", "half_width_ms", lambda v: f"{float(v) * 1.015:.5f}")
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
        column = next(c for c in rows[0] if c not in ("file", "electrode", "flags")
                      and rows[0][c] != "")
        edit_cell(run_dir, "cells.csv", column, lambda v: "")
        report = regression(run_dir, accepted_dir, default_tolerance=Tolerance(1e9))
        finding, = report.findings
        assert finding.column == column and finding.value == "" and "now empty" in finding.message
        empty_before = [r for r in read_rows(accepted_dir / "spikes.csv") if r["isi_ms"] == ""]
        assert empty_before   # every sweep's first spike: empty in both runs, and it passed

    def test_results_accepted_before_a_column_existed_pass_with_a_note(self, accepted):
        accepted_dir, run_dir = accepted
        rows = read_rows(accepted_dir / "sweeps.csv")
        for row in rows:
            del row["baseline_drift_mv"]
        write_rows(accepted_dir / "sweeps.csv", rows)
        report = regression(run_dir, accepted_dir)
        assert report.passed
        assert any("baseline_drift_mv not in the accepted results" in n for n in report.notes)

    def test_missing_accepted_results_is_an_input_error(self, sample_results, tmp_path):
        with pytest.raises(CheckInputError, match="no such folder of accepted results.*accept"):
            regression(sample_results, tmp_path / "nothing")


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
