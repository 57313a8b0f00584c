"""A run's tables as typed columns, and the refusal of unfinished or inconsistent runs.

Sources: the CSV text of the tables written by a run (read back by Python's csv module here),
the run record written by the same run, and edits of known effect.
"""
from __future__ import annotations

import json

import pytest

from checks_support import run, sample_results, write_rows, read_rows, accepted, regression
from spikemeasure.checks.accept import accept_results
from spikemeasure.checks.apply import check_run
from spikemeasure.checks.run_tables import CheckInputError
from spikemeasure.checks.settings import CheckSettings


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
