"""The output folder: never someone else's files, one run at a time, a killed run's
temporaries removed (spikemeasure.run.folder)."""
from pathlib import Path

import numpy as np
import pytest

from conftest import gaussian_train, step_command, write_nix, write_text
from spikemeasure.run import measure_paths

TABLES = ("spikes.csv", "sweeps.csv", "cells.csv", "errors.csv")
RATE = 20_000.0


def tables(out: Path) -> dict:
    return {name: (out / name).read_bytes() for name in TABLES}



def _one_cell(folder: Path) -> Path:
    n = int(0.6 * RATE)
    _, v = gaussian_train(RATE, [150.0, 250.0], n / RATE * 1e3)
    path = folder / "cell.nix"
    write_nix(path, [(v, step_command(n, RATE, 50.0, 0.1, 0.5))], rate_hz=RATE)
    return path


def _files(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.parametrize("foreign", [
    {"spikes.csv": b"my,own,table\n"},
    {"report.html": b"<p>my notes</p>\n", "notes.txt": b"kept\n"},
    {"figures/plan.png": b"\x89PNG not really\n"},
    {"run.json": b'{"tool": "something else"}\n', "cells.csv": b"x\n"},
    {"run.json": b"not json\n"},
])
def test_out_holding_files_this_tool_did_not_write_is_refused(tmp_path, foreign):
    """A run never overwrites what it did not write: a folder that holds a table, report,
    figures folder or run.json of someone else's (no run.json of this tool) is refused before
    anything is measured, and every file in it stays byte for byte."""
    from spikemeasure.errors import UnusableOutputError

    cell = _one_cell(tmp_path)
    out = tmp_path / "out"
    for name, data in foreign.items():
        (out / name).parent.mkdir(parents=True, exist_ok=True)
        (out / name).write_bytes(data)
    before = _files(out)
    with pytest.raises(UnusableOutputError, match="without a run.json written by spikemeasure"):
        measure_paths([str(cell)], out)
    assert _files(out) == before


def test_out_holding_accepted_results_is_refused_and_a_results_folder_is_reused(tmp_path):
    """The folder of an earlier run is written again (its run.json is this tool's); a folder
    of accepted results is not a place for a run."""
    from spikemeasure.checks.accept import accept_results
    from spikemeasure.errors import UnusableOutputError

    cell = _one_cell(tmp_path)
    out = tmp_path / "out"
    measure_paths([str(cell)], out)
    first = tables(out)
    measure_paths([str(cell)], out, force=True)
    assert tables(out) == first
    accept_results(out, tmp_path / "accepted", project_dir=tmp_path)
    before = _files(tmp_path / "accepted")
    with pytest.raises(UnusableOutputError, match="holds accepted results"):
        measure_paths([str(cell)], tmp_path / "accepted")
    assert _files(tmp_path / "accepted") == before


def test_a_second_run_into_a_folder_being_written_is_refused(tmp_path):
    """Two runs into one folder at once would mix their tables: while one holds the folder's
    lock, another is refused, naming the folder; once the first ends, the folder is free."""
    from spikemeasure.errors import UnusableOutputError
    from spikemeasure.run.folder import RunLock

    cell = _one_cell(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    with RunLock(out):
        with pytest.raises(UnusableOutputError, match="another spikemeasure run is writing"):
            measure_paths([str(cell)], out)
        assert not (out / "spikes.csv").exists()
    summary = measure_paths([str(cell)], out)
    assert summary.files_measured == 1


def test_a_rerun_removes_temporaries_a_killed_run_left_and_nothing_else(tmp_path):
    # A SIGKILL or a power cut inside an atomic write leaves `.NAME.XXXXXXXX.part` (mkstemp's
    # name) beside the file; the next run into the folder removes its own such files only.
    v = np.full(4000, -70.0)
    rec = tmp_path / "rec"
    rec.mkdir()
    write_text(rec / "flat.txt", v)
    out = tmp_path / "out"
    measure_paths([str(rec)], out, jobs=1, figure_format=None)
    stale = [out / ".spikes.csv.abcd1234.part", out / ".run.json.x_y9z0aB.part",
             out / "figures" / "flat" / ".traces.png.k2j3h4g5.part"]
    kept = [out / ".notes.txt.abcd1234.part", out / "spikes.csv.part", out / "mine.part"]
    for path in stale + kept:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text("partial")
    measure_paths([str(rec)], out, jobs=1, figure_format=None)
    assert not any(p.exists() for p in stale)
    assert all(p.read_text() == "partial" for p in kept)
