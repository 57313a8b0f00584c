"""A run's tables as typed columns, and the refusal of unfinished or inconsistent runs.

Sources: the CSV text of the tables written by a run (read back by Python's csv module here),
the run record written by the same run, and edits of known effect.
"""
from __future__ import annotations

import json
import math
import shutil

import numpy as np
import pytest

from checks_support import (LIMITS, accepted, read_rows, regression, run, sample_results,
                            write_rows)
from spikemeasure.checks.accept import accept_results
from spikemeasure.checks.apply import check_run, check_tables
from spikemeasure.checks.findings import report_dict
from spikemeasure.checks.run_tables import (TABLE_FILES, CheckInputError, cell_text,
                                            read_tables, tables_from_columns, typed_columns)
from spikemeasure.checks.settings import CheckSettings
from spikemeasure.columns import SPIKE_COLUMNS, SWEEP_COLUMNS
from spikemeasure.tables.write import TEXT_COLUMN_NAMES


def csv_columns(path) -> dict[str, list[str]]:
    """A table's cells by column, as Python's csv module reads them."""
    rows = read_rows(path)
    return {name: [r[name] for r in rows] for name in rows[0]}


class TestTypedColumns:
    def test_each_column_gets_the_type_of_its_kind(self, sample_results):
        tables = read_tables(sample_results)
        cells = csv_columns(sample_results / "spikes.csv")
        assert [*tables.spikes] == [c.name for c in SPIKE_COLUMNS]
        assert tables.spikes["file"].dtype == object and tables.spikes["sweep"].dtype == np.int64
        assert tables.spikes["peak_mv"].dtype == np.float64
        assert tables.spikes["file"].tolist() == cells["file"]
        assert tables.spikes["sweep"].tolist() == [int(v) for v in cells["sweep"]]
        # Python's float() of the CSV text; an empty cell (a first spike's interval) is NaN
        for name in ("peak_mv", "isi_ms"):
            expected = [float(v) if v else math.nan for v in cells[name]]
            np.testing.assert_array_equal(tables.spikes[name], expected)
        assert "" in cells["isi_ms"]

    def test_values_written_back_give_the_csv_text(self, sample_results):
        """cell_text of every typed value is the cell the run wrote (csv module's reading)."""
        tables = read_tables(sample_results)
        for name, (_, columns) in TABLE_FILES.items():
            cells = csv_columns(sample_results / name)
            for column in columns:
                texts = [cell_text(column, v) for v in tables.table(name)[column.name].tolist()]
                assert texts == cells[column.name], (name, column.name)

    def test_unrounded_values_are_taken_at_the_written_resolution(self):
        """4 decimals written: 0.12344999 is 0.1234 and 0.12346 is 0.1235, as Python's
        format() rounds; whole-number and text columns are kept."""
        columns = [c for c in SWEEP_COLUMNS if c.name in ("file", "sweep", "baseline_mv",
                                                           "spike_count", "flags")]
        typed = typed_columns({"file": ["a.nwb", "a.nwb"], "sweep": [0, 1],
                               "baseline_mv": [0.12344999, 0.12346], "spike_count": [3, None],
                               "flags": ["", "gap"]}, columns, "sweeps")
        assert typed["baseline_mv"].tolist() == [0.1234, 0.1235]
        assert typed["sweep"].tolist() == [0, 1] and typed["flags"].tolist() == ["", "gap"]
        assert typed["spike_count"][0] == 3.0 and math.isnan(typed["spike_count"][1])

    @pytest.mark.parametrize("column, cell, expected", [
        ("peak_mv", "12..5", "column peak_mv is not a number or empty"),
        ("sweep", "", "column sweep is not a whole number"),
        ("spike", "1.5", "column spike is not a whole number"),
    ])
    def test_a_cell_not_of_its_kind_names_file_line_and_column(self, sample_results, tmp_path,
                                                               column, cell, expected):
        out = tmp_path / "run"
        shutil.copytree(sample_results, out)
        rows = read_rows(out / "spikes.csv")
        rows[2][column] = cell
        write_rows(out / "spikes.csv", rows)
        with pytest.raises(CheckInputError) as info:
            read_tables(out)
        message = str(info.value)
        assert message.startswith(f"{out / 'spikes.csv'}, line 4: {expected}")
        if cell:
            assert cell not in message   # a file's content is never copied into a message

    def test_tables_held_in_memory_check_as_their_folder_does(self, sample_results):
        """The same run, given as columns (numbers, not text) or read from its folder: the
        same report, with the quality limits and the regression against itself."""
        record = json.loads((sample_results / "run.json").read_text())
        given = {}
        for name, (_, columns) in TABLE_FILES.items():
            cells = csv_columns(sample_results / name)
            given[name] = {c.name: [v if c.name in TEXT_COLUMN_NAMES or v == "" else float(v)
                                    for v in cells[c.name]] for c in columns}
        in_memory = tables_from_columns(sample_results, given["spikes.csv"],
                                        given["sweeps.csv"], given["cells.csv"], record=record)
        from_folder = read_tables(sample_results)
        settings = CheckSettings(quality=LIMITS, accepted_dir=sample_results)
        one = check_tables(in_memory, settings, accepted=from_folder)
        two = check_run(sample_results, settings)
        assert report_dict(one) == report_dict(two)
        # six sample files (sample_data/README.md): "measured" and each limit, and regression
        assert one.passed and len(one.cases) == 6 * (1 + len(LIMITS)) + 6

    def test_a_missing_column_in_memory_is_named(self, sample_results):
        spikes = csv_columns(sample_results / "spikes.csv")
        del spikes["peak_mv"]
        with pytest.raises(CheckInputError, match="spikes.csv: no column peak_mv"):
            tables_from_columns(sample_results, spikes, csv_columns(
                sample_results / "sweeps.csv"), csv_columns(sample_results / "cells.csv"))

    def test_arguments_are_checked(self, sample_results):
        with pytest.raises(TypeError, match="tables must be RunTables"):
            check_tables(sample_results, CheckSettings(compare=False))
        with pytest.raises(TypeError, match="settings must be CheckSettings"):
            check_tables(read_tables(sample_results), {"compare": False})


class TestFinishedRuns:
    @pytest.mark.parametrize("change", [
        {"interrupted": True},                               # a record without status
        {"status": "interrupted", "interrupted": True},
        {"status": "running", "interrupted": False},         # still going, or killed
        {"status": "something else", "interrupted": False},
    ])
    def test_an_unfinished_run_is_refused_by_check_and_accept(self, accepted, change,
                                                              monkeypatch):
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
