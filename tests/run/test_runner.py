"""Batch runs: parallel equals serial, failures listed, interrupted runs resume cleanly."""
import csv
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from conftest import gaussian_train, step_command, write_nix
from spikemeasure.analysis.detection import DetectionSettings
from spikemeasure.run import CACHE_FOLDER, measure_paths

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = sorted(p for p in (ROOT / "sample_data").iterdir() if p.suffix in (".nwb", ".nix"))
TABLES = ("spikes.csv", "sweeps.csv", "cells.csv", "errors.csv")
RATE = 20_000.0


def tables(out: Path) -> dict:
    return {name: (out / name).read_bytes() for name in TABLES}


@pytest.fixture(scope="module")
def many_cells(tmp_path_factory):
    """Eight recordings in two nested folders (two copies of each sample cell)."""
    root = tmp_path_factory.mktemp("many")
    for k in range(8):
        src = SAMPLES[k % len(SAMPLES)]
        dst = root / f"day_{k // 4}" / f"cell_{k:02d}{src.suffix}"
        dst.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy(src, dst)
    return root


@pytest.fixture(scope="module")
def many_cells_serial(many_cells, tmp_path_factory):
    """`many_cells` measured once in this process (jobs=1): the reference other runs of the
    same cells are compared with. Returns the run's summary and its folder (read only)."""
    out = tmp_path_factory.mktemp("serial") / "serial"
    return measure_paths([str(many_cells)], out, jobs=1), out


@pytest.fixture(scope="module")
def distinct_cells(tmp_path_factory):
    """Twelve recordings with different content (identical files share one kept outcome)."""
    root = tmp_path_factory.mktemp("distinct")
    n = int(0.6 * RATE)
    for k in range(12):
        sweeps = []
        for j in range(8):
            peaks = list(np.arange(120.0 + 3 * k, 480.0, 40.0 - 2 * j))
            _, v = gaussian_train(RATE, peaks, n / RATE * 1e3)
            sweeps.append((v, step_command(n, RATE, 20.0 * j, 0.1, 0.5)))
        write_nix(root / f"cell_{k:02d}.nix", sweeps, rate_hz=RATE)
    return root


@pytest.fixture(scope="module")
def distinct_run(distinct_cells, tmp_path_factory):
    """The folder of one uninterrupted run over `distinct_cells` (read only: copy it first)."""
    out = tmp_path_factory.mktemp("reference") / "out"
    measure_paths([str(distinct_cells)], out, jobs=1)
    return out


@pytest.fixture(scope="module")
def distinct_reference(distinct_run):
    """The tables of `distinct_run`."""
    return tables(distinct_run)


@pytest.fixture(scope="module")
def few_cells(distinct_cells, tmp_path_factory):
    """The first four of `distinct_cells`, for tests that need a few files, not twelve."""
    root = tmp_path_factory.mktemp("few")
    for k in range(4):
        shutil.copy(distinct_cells / f"cell_{k:02d}.nix", root)
    return root


def test_parallel_and_serial_tables_are_byte_identical(many_cells, many_cells_serial,
                                                       tmp_path):
    serial, serial_out = many_cells_serial
    parallel = measure_paths([str(many_cells)], tmp_path / "parallel", jobs=2)
    assert serial.files_measured == parallel.files_measured == 8
    assert tables(serial_out) == tables(tmp_path / "parallel")
    with open(serial_out / "cells.csv", newline="") as fh:
        files = [row["file"] for row in csv.DictReader(fh)]
    assert files == sorted(files) and files[0] == "day_0/cell_00.nwb"


@pytest.mark.slow
def test_bad_files_are_listed_and_the_rest_measured(tmp_path):
    d = tmp_path / "mixed"
    d.mkdir()
    shutil.copy(SAMPLES[0], d / "good.nwb")
    corrupt = bytearray(SAMPLES[0].read_bytes())
    corrupt[2000:200000] = np.random.default_rng(0).bytes(198000)  # fixed damage
    (d / "corrupt.nwb").write_bytes(bytes(corrupt))
    (d / "truncated.nwb").write_bytes(SAMPLES[0].read_bytes()[:50000])
    (d / "empty.nix").write_bytes(b"")
    (d / "notes.txt").write_text("meeting notes, not a recording\n")
    import neo
    import quantities as pq
    block = neo.Block()
    seg = neo.Segment()
    seg.analogsignals.append(neo.AnalogSignal(np.zeros((500, 1)), units="pA",
                                              sampling_rate=RATE * pq.Hz))
    block.segments.append(seg)
    with neo.io.NixIO(str(d / "current_only.nix"), mode="ow") as io:
        io.write_block(block)
    (d / "~good.nwb.tmp").write_bytes(b"partial copy")
    out = tmp_path / "out"
    result = subprocess.run([sys.executable, "-m", "spikemeasure", "measure", str(d), "--out",
                             str(out), "--jobs", "2"], capture_output=True, text=True)
    assert result.returncode == 1
    assert "Traceback" not in result.stderr
    with open(out / "errors.csv", newline="") as fh:
        errors = {row["file"]: row for row in csv.DictReader(fh)}
    assert set(errors) == {"corrupt.nwb", "truncated.nwb", "empty.nix", "notes.txt",
                           "current_only.nix"}
    assert "truncated" in errors["truncated.nwb"]["message"]
    assert "empty" in errors["empty.nix"]["message"]
    assert "no voltage column" in errors["notes.txt"]["message"] or \
        "no data rows" in errors["notes.txt"]["message"]
    assert "no channel in volts" in errors["current_only.nix"]["message"]
    with open(out / "cells.csv", newline="") as fh:
        assert [row["file"] for row in csv.DictReader(fh)] == ["good.nwb"]
    assert "1 file measured, 5 failed" in result.stderr


def test_rerun_reuses_unchanged_files_and_force_redoes(many_cells, many_cells_serial, tmp_path):
    first, first_out = many_cells_serial
    out = tmp_path / "out"
    shutil.copytree(first_out, out)  # the first run, with its kept outcomes
    again = measure_paths([str(many_cells)], out, jobs=1)
    assert (again.files_reused, again.files_measured) == (8, 0)
    assert tables(out) == tables(first_out) and again.spikes == first.spikes > 0
    # four of the files (one copy of each sample), kept under the same content hashes
    day = [str(many_cells / "day_0")]
    assert measure_paths(day, out, jobs=1).files_reused == 4
    changed = measure_paths(day, out, jobs=1,
                            settings=DetectionSettings(onset_rate_v_per_s=25.0))
    assert changed.files_measured == 4  # a parameter changed: everything is measured again
    forced = measure_paths(day, out, jobs=1, force=True,
                           settings=DetectionSettings(onset_rate_v_per_s=25.0))
    assert forced.files_measured == 4 and forced.files_reused == 0


# SIGINT and SIGHUP reach the very handler SIGTERM does (tests/run/test_execute.py); SIGKILL
# cannot be handled at all
@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_interrupted_run_resumes_to_the_same_tables(distinct_cells, distinct_reference,
                                                    tmp_path, sig):
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "spikemeasure", "measure", str(distinct_cells), "--out", str(out),
           "--jobs", "1", "--quiet"]
    if sig == signal.SIGKILL:
        cmd.append("--no-figures")  # a killed run draws nothing after the kill anyway
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    cache = out / CACHE_FOLDER
    deadline = time.time() + 120
    while time.time() < deadline and proc.poll() is None:
        if cache.exists() and len(list(cache.glob("*.json"))) >= 3:
            break
        time.sleep(0.05)
    assert proc.poll() is None, "the run ended before it could be interrupted"
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=120)
    finished = len(list(cache.glob("*.json")))
    assert 3 <= finished < 12
    record = json.loads((out / "run.json").read_text())
    if sig == signal.SIGKILL:
        # written before the first file was measured: a killed run is never "complete"
        assert record["status"] == "running" and record["interrupted"] is False
        assert len(record["inputs"]) == 12
    else:
        # Ctrl-C, SIGTERM and SIGHUP alike: the shell's code for the signal (128 + its number)
        assert proc.returncode == 128 + sig and "Interrupted" in err
        assert signal.Signals(sig).name in err and "Traceback" not in err
        done = [i for i in record["inputs"] if i["status"] == "measured"]
        assert record["interrupted"] is True and record["status"] == "interrupted"
        with open(out / "cells.csv", newline="") as fh:
            cells = [row["file"] for row in csv.DictReader(fh)]
        # complete tables for the files finished; each of them is kept for the rerun (the
        # interrupt may fall after a file is kept and before it reaches the tables)
        assert cells == [i["file"] for i in done]
        assert finished - 1 <= len(cells) <= finished
        # the report and the batch figure cover the files finished, too
        report = (out / "report.html").read_text()
        assert "interrupted" in report and all(f in report for f in cells)
        assert (out / "figures" / "cell_features_by_group.png").is_file()
        assert not list(out.rglob(".*.part"))  # a handled signal leaves no temporary
    # SIGKILL may fall inside a write and leave a temporary: the rerun removes it (without
    # figures: the tables are what it is checked on, and drawing is most of its time)
    rerun = subprocess.run(cmd + ["--no-figures"] * (sig != signal.SIGKILL), capture_output=True,
                           text=True, timeout=300)
    assert rerun.returncode == 0, rerun.stderr
    assert not list(out.rglob(".*.part"))
    record = json.loads((out / "run.json").read_text())
    statuses = [i["status"] for i in record["inputs"]]
    assert statuses.count("reused") == finished  # none measured twice
    assert statuses.count("measured") == 12 - finished  # none lost
    assert record["status"] == "complete" and record["interrupted"] is False
    assert tables(out) == distinct_reference


@pytest.mark.slow
def test_dask_cluster_gives_the_same_tables(many_cells, many_cells_serial, tmp_path):
    """Source of truth: the local run; the cluster is a distributed.LocalCluster."""
    distributed = pytest.importorskip("distributed")
    _, local = many_cells_serial
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        remote = tmp_path / "remote"
        summary = measure_paths([str(many_cells)], remote, cluster=cluster.scheduler_address)
        assert summary.files_measured == 8
        assert tables(remote) == tables(local)
        again = measure_paths([str(many_cells)], remote, cluster=cluster.scheduler_address)
        assert again.files_reused == 8 and tables(remote) == tables(local)


def test_unreachable_cluster_is_a_clear_error(tmp_path):
    from spikemeasure.errors import SpikemeasureError

    (tmp_path / "in").mkdir()
    shutil.copy(SAMPLES[0], tmp_path / "in" / "a.nwb")
    with pytest.raises(SpikemeasureError, match="cannot reach the Dask scheduler"):
        measure_paths([str(tmp_path / "in")], tmp_path / "out", cluster="tcp://127.0.0.1:9",
                      cluster_timeout_s=2.0)


# --------------------------------------------------------------------------- file identity

def _small_cell(path):
    """A cell of a passive RC membrane with spikes (conftest), quick to measure."""
    from conftest import RC_RATE_HZ, rc_cell_sweeps

    return write_nix(path, rc_cell_sweeps()[2:5], rate_hz=RC_RATE_HZ)


def _rows(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def test_name_not_utf8_reaches_every_output_as_text(tmp_path):
    """Outputs are checked as UTF-8 by Python's strict decoder, run.json by the json module."""
    folder = tmp_path / "cells"
    folder.mkdir()
    raw = os.path.join(os.fsencode(folder), b"caf\xe9.nix")
    os.rename(_small_cell(tmp_path / "cafe.nix"), raw)  # the HDF5 writer wants a UTF-8 name
    out = tmp_path / "out"
    result = subprocess.run([sys.executable, "-m", "spikemeasure", "measure", str(folder),
                             "--out", str(out), "--jobs", "1"], capture_output=True)
    assert result.returncode == 0, result.stderr.decode("utf-8", "replace")
    assert "caf\\xe9.nix" in result.stderr.decode("utf-8")
    shown = "caf\\xe9.nix"
    for table in TABLES:
        (out / table).read_bytes().decode("utf-8")
    assert [r["file"] for r in _rows(out / "cells.csv")] == [shown]
    assert {r["file"] for r in _rows(out / "spikes.csv")} == {shown}
    record = json.loads((out / "run.json").read_bytes().decode("utf-8"))
    (entry,) = record["inputs"]
    assert entry["file"] == shown and entry["status"] == "measured"
    assert bytes.fromhex(entry["path_bytes_hex"]) == raw  # the real file can be found
    assert "\\udc" not in (out / "run.json").read_text()  # no lone surrogate escapes
    report = (out / "report.html").read_bytes().decode("utf-8")
    assert shown in report
    (figures,) = record["figures"]["cells"].values()
    folder_name = figures[0].split("/")[1]
    folder_name.encode("utf-8")
    assert all((out / p).is_file() for p in figures)


def test_same_name_in_two_folders_stays_two_cells(tmp_path):
    for day in ("day1", "day2"):
        (tmp_path / day).mkdir()
        _small_cell(tmp_path / day / "cell.nix")
    out = tmp_path / "out"
    summary = measure_paths([str(tmp_path / "day1" / "cell.nix"),
                             str(tmp_path / "day2" / "cell.nix")], out, figure_format="png")
    assert summary.files_measured == 2
    names = ["day1/cell.nix", "day2/cell.nix"]
    assert [r["file"] for r in _rows(out / "cells.csv")] == names
    record = json.loads((out / "run.json").read_text())
    figure_sets = record["figures"]["cells"]
    assert list(figure_sets) == names
    folders = {p.rsplit("/", 1)[0] for paths in figure_sets.values() for p in paths}
    assert len(folders) == 2 and all((out / p).is_file() for ps in figure_sets.values()
                                     for p in ps)
    report = (out / "report.html").read_text()
    assert all(f">{n}</h2>" in report for n in names)
    # two folders given, each holding cell.nix
    both = measure_paths([str(tmp_path / "day1"), str(tmp_path / "day2")], tmp_path / "out2")
    assert both.files_measured == 2
    assert [r["file"] for r in _rows(tmp_path / "out2" / "cells.csv")] == names


def test_same_file_twice_is_measured_once_with_a_note(tmp_path):
    folder = tmp_path / "cells"
    folder.mkdir()
    _small_cell(folder / "cell.nix")
    (tmp_path / "link.nix").symlink_to(folder / "cell.nix")
    summary = measure_paths([str(folder), str(folder / "cell.nix"), str(tmp_path / "link.nix")],
                            tmp_path / "out")
    assert summary.files_measured == 1 and not summary.failures
    assert [r["file"] for r in _rows(tmp_path / "out" / "cells.csv")] == ["cell.nix"]
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    assert len(record["inputs"]) == 1
    assert sum("the same file as cell.nix; measured once" in n for n in record["notes"]) == 2


def test_unsearchable_folders_and_outside_links_are_failures_of_the_run(tmp_path,
                                                                         monkeypatch):
    folder = tmp_path / "cells"
    (folder / "locked").mkdir(parents=True)
    _small_cell(folder / "good.nix")
    _small_cell(folder / "locked" / "unseen.nix")
    outside = tmp_path / "private.txt"
    outside.write_text("a file outside the folder measured\n")
    (folder / "x.txt").symlink_to(outside)
    real = os.scandir

    def scandir(path="."):
        if os.path.abspath(os.fsdecode(path)) == str(folder / "locked"):
            raise PermissionError(13, "Permission denied", os.fsdecode(path))
        return real(path)

    monkeypatch.setattr(os, "scandir", scandir)
    too_long = str(tmp_path / ("y" * 300))
    from click.testing import CliRunner
    from spikemeasure.cli import main

    result = CliRunner().invoke(main, ["measure", str(folder), too_long, "--out",
                                       str(tmp_path / "out"), "--jobs", "1", "--no-figures"])
    assert result.exit_code == 1, result.output
    assert result.exception is None or isinstance(result.exception, SystemExit)
    assert "Traceback" not in result.output
    assert "1 file measured, 0 failed" in result.output
    assert "3 problems" in result.output and "cannot search this folder" in result.output
    summary = measure_paths([str(folder), too_long], tmp_path / "out")
    assert summary.files_measured + summary.files_reused == 1
    errors = {r["file"]: r for r in _rows(tmp_path / "out" / "errors.csv")}
    assert set(errors) == {str(folder / "locked"), str(folder / "x.txt"), too_long}
    assert all(r["stage"] == "input" for r in errors.values())
    assert "permission denied" in errors[str(folder / "locked")]["message"]
    assert "not followed" in errors[str(folder / "x.txt")]["message"]
    assert "longer than the system allows" in errors[too_long]["message"]
    assert len(summary.failures) == 3
    assert "a file outside" not in (tmp_path / "out" / "errors.csv").read_text()


def test_names_like_formulas_are_escaped_and_matched_by_check(tmp_path, monkeypatch):
    """The escape is the OWASP guidance on CSV injection: a leading ' and quotes."""
    from click.testing import CliRunner
    from spikemeasure.cli import main

    folder = tmp_path / "cells"
    folder.mkdir()
    _small_cell(folder / "=cell.nix")
    _small_cell(folder / "+cell.nix")
    (folder / "@broken.nix").write_bytes(b"")
    out, accepted = tmp_path / "out", tmp_path / "accepted"
    monkeypatch.chdir(tmp_path)
    first = CliRunner().invoke(main, ["measure", str(folder), "--out", str(out), "--jobs", "1",
                                      "--no-figures"])
    assert first.exit_code == 1  # the empty file
    cells = (out / "cells.csv").read_text().splitlines()
    assert [line.split(",")[0] for line in cells[1:]] == ['"\'+cell.nix"', '"\'=cell.nix"']
    assert all(line.split(",")[1] == "" for line in cells[1:])  # one cell per file: no electrode
    assert all(line.split(",")[3].startswith("-") for line in cells[1:])  # numbers as they are
    for table in ("spikes.csv", "sweeps.csv"):
        assert {line.split(",")[0] for line in (out / table).read_text().splitlines()[1:]} \
            == {'"\'+cell.nix"', '"\'=cell.nix"'}
    assert (out / "errors.csv").read_text().splitlines()[1].startswith('"\'@broken.nix"')
    record = json.loads((out / "run.json").read_text())
    assert {i["file"] for i in record["inputs"]} == {"=cell.nix", "+cell.nix", "@broken.nix"}
    (folder / "@broken.nix").unlink()
    second = CliRunner().invoke(main, ["measure", str(folder), "--out", str(out), "--jobs", "1",
                                       "--no-figures"])
    assert second.exit_code == 0, second.output
    # without a project file, the accepted results are ./accepted
    accept = CliRunner().invoke(main, ["accept", str(out)])
    assert accept.exit_code == 0, accept.output
    assert "'=cell.nix" in (accepted / "cells.csv").read_text()
    check = CliRunner().invoke(main, ["check", str(out), "--json"])
    assert check.exit_code == 0, check.output
    # the tables' names read back as run.json has them: every file measured and compared
    cases = json.loads(check.stdout)["cases"]
    assert {c["file"] for c in cases} == {"=cell.nix", "+cell.nix"}
    assert all(c["passed"] for c in cases)


def test_text_cells_escaped_numbers_not_and_read_back_by_csv(tmp_path):
    """OWASP guidance on CSV injection: a text cell starting with = + - @ tab or CR gets a
    leading ' and quotes; Python's csv module reads every cell back."""
    from spikemeasure.columns import ERROR_COLUMNS
    from spikemeasure.tables.write import escape_csv_text, unescape_csv_text, write_rows_csv

    texts = ["=1+1", "+cell", "-cell", "@cell", "\tcell", "\rcell", "'=x", "''", "'plain",
             "plain", "", "a,b", 'say "hi"']
    for t in texts:
        assert unescape_csv_text(escape_csv_text(t)) == t
    assert escape_csv_text("'plain") == "'plain"  # a quote before ordinary text stays as is
    path = write_rows_csv(tmp_path / "errors.csv", ERROR_COLUMNS,
                          [[t, t, "sweep 1", f"{t}: -55.2 mV"] for t in texts])
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))[1:]
    for t, row in zip(texts, rows):
        for cell in row[:2]:  # the file and the electrode, both text from outside
            assert cell == escape_csv_text(t) and cell[:1] not in ("=", "+", "-", "@", "\t",
                                                                   "\r")
    lines = path.read_text().split("\n")
    assert lines[1] == "\"'=1+1\",\"'=1+1\",sweep 1,\"'=1+1: -55.2 mV\""
    # a number in a numeric column is never changed
    from spikemeasure.columns import CELL_COLUMNS
    row = ["=c.nix", "-e"] + ["-55.2"] * (len(CELL_COLUMNS) - 2)
    cells = write_rows_csv(tmp_path / "cells.csv", CELL_COLUMNS, [row]).read_text()
    assert cells.splitlines()[1].startswith("\"'=c.nix\",\"'-e\",-55.2,-55.2")


def _wait_for(condition, limit_s: float = 120.0) -> bool:
    """Poll `condition` until it holds or `limit_s` passes (a bounded wait, not a timing)."""
    deadline = time.time() + limit_s
    while time.time() < deadline:
        if condition():
            return True
        time.sleep(0.05)
    return condition()


def _measure_command(folder: Path, out: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "spikemeasure", "measure", str(folder), "--out", str(out),
            "--quiet", *extra]


def _kept(out: Path) -> int:
    cache = out / CACHE_FOLDER
    return len(list(cache.glob("*.json"))) if cache.exists() else 0


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_rerun_stopped_midway_never_passes_for_the_previous_run(distinct_cells, distinct_run,
                                                                tmp_path, sig):
    """A rerun with a changed parameter, stopped midway: run.json and report.html speak of the
    new run (its parameters, not complete), never of the previous complete one."""
    out = tmp_path / "out"
    shutil.copytree(distinct_run, out)  # the previous run, complete
    assert json.loads((out / "run.json").read_text())["status"] == "complete"
    kept_before = _kept(out)
    proc = subprocess.Popen(_measure_command(distinct_cells, out, "--jobs", "1", "--no-figures",
                                             "--onset-rate", "25"),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert _wait_for(lambda: proc.poll() is not None or _kept(out) >= kept_before + 3)
    assert proc.poll() is None, "the run ended before it could be stopped"
    proc.send_signal(sig)
    proc.communicate(timeout=120)
    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["onset_rate_v_per_s"] == 25.0  # the new run's record
    assert record["status"] == ("interrupted" if sig == signal.SIGTERM else "running")
    report = (out / "report.html").read_text()
    assert "<td>complete</td>" not in report
    assert ("interrupted" if sig == signal.SIGTERM else "in progress") in report
    if sig == signal.SIGTERM:
        with open(out / "cells.csv", newline="") as fh:
            cells = [row["file"] for row in csv.DictReader(fh)]
        assert cells == [i["file"] for i in record["inputs"] if i["status"] == "measured"]


def test_run_record_says_running_from_the_start_and_agrees_with_each_refresh(
        few_cells, tmp_path, monkeypatch):
    """Before the first file is measured run.json says "running", with this run's parameters
    and inputs; every refresh of the tables rewrites it to list the same files as they do."""
    from spikemeasure.run import record

    monkeypatch.setattr(record, "TABLE_REFRESH_S", -1.0)  # refresh after every file
    out = tmp_path / "out"
    seen = []

    def look(event):
        record = json.loads((out / "run.json").read_text())
        assert record["status"] == "running" and record["interrupted"] is False
        assert record["parameters"]["onset_rate_v_per_s"] == 21.0
        assert len(record["inputs"]) == 4
        cells = []
        if (out / "cells.csv").exists():
            with open(out / "cells.csv", newline="") as fh:
                cells = [row["file"] for row in csv.DictReader(fh)]
        assert cells == [i["file"] for i in record["inputs"] if i["status"] == "measured"]
        seen.append(len(cells))

    summary = measure_paths([str(few_cells)], out, DetectionSettings(onset_rate_v_per_s=21.0),
                            jobs=1, progress=look)
    assert seen == list(range(4)) and summary.files_measured == 4
    assert json.loads((out / "run.json").read_text())["status"] == "complete"


def _children(pid: int) -> set[int]:
    """Child processes of `pid`, from Linux's /proc/<pid>/task/<tid>/children."""
    found = set()
    for path in Path(f"/proc/{pid}/task").glob("*/children"):
        try:
            found.update(int(c) for c in path.read_text().split())
        except OSError:
            pass
    return found


def _ended(pid: int) -> bool:
    """Gone, or a zombie waiting to be reaped (it runs no more)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return True
    return stat.rsplit(")", 1)[1].split()[0] == "Z"


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/self/task").is_dir(), reason="needs Linux's /proc")
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM])
def test_worker_processes_end_with_the_run(many_cells, tmp_path, sig):
    out = tmp_path / "out"
    proc = subprocess.Popen(_measure_command(many_cells, out, "--jobs", "2"),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert _wait_for(lambda: proc.poll() is not None or len(_children(proc.pid)) >= 2)
    workers = _children(proc.pid)
    assert proc.poll() is None and len(workers) >= 2, "no workers seen before the run ended"
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=120)
    if sig == signal.SIGTERM:
        assert proc.returncode == 143 and "Traceback" not in err
    # bounded wait for the workers: they end when the run ends, not minutes later
    assert _wait_for(lambda: all(_ended(p) for p in workers), limit_s=20.0), \
        f"worker processes still running after the run ended: {sorted(workers)}"


def test_a_bug_in_one_file_fails_that_file_only(few_cells, tmp_path, monkeypatch):
    """An unexpected exception in one file's task: that file fails (stage "internal error",
    the exception's type named, the traceback kept in run.json and shown with --debug), the
    other files keep their rows, exit 1."""
    from click.testing import CliRunner

    from spikemeasure.cli import main
    from spikemeasure.run import task

    original = task.measure_recording

    def buggy(recording, *args, **kwargs):
        if recording.sweeps and recording.sweeps[0].file == "cell_03.nix":
            return 1 / 0
        return original(recording, *args, **kwargs)

    monkeypatch.setattr(task, "measure_recording", buggy)
    out = tmp_path / "out"
    r = CliRunner().invoke(main, ["measure", str(few_cells), "--out", str(out), "--jobs",
                                  "1", "--no-figures"])
    assert r.exit_code == 1, r.output
    assert "Traceback" not in r.output
    assert "cell_03.nix: internal error (ZeroDivisionError)" in r.output
    with open(out / "errors.csv", newline="") as fh:
        errors = list(csv.DictReader(fh))
    assert [(e["file"], e["stage"]) for e in errors] == [("cell_03.nix", "internal error")]
    with open(out / "cells.csv", newline="") as fh:
        cells = [row["file"] for row in csv.DictReader(fh)]
    assert cells == [f"cell_{k:02d}.nix" for k in range(4) if k != 3]
    record = json.loads((out / "run.json").read_text())
    entry = {i["file"]: i for i in record["inputs"]}["cell_03.nix"]
    assert entry["status"] == "failed" and "ZeroDivisionError" in entry["traceback"]
    assert record["status"] == "complete"
    debug = CliRunner().invoke(main, ["--debug", "measure", str(few_cells), "--out",
                                      str(tmp_path / "debug"), "--jobs", "1", "--no-figures"])
    assert debug.exit_code == 1
    assert "Traceback" in debug.output and "ZeroDivisionError" in debug.output
    # not kept: the next run tries the file again
    monkeypatch.setattr(task, "measure_recording", original)
    again = measure_paths([str(few_cells)], out, jobs=1)
    assert (again.files_reused, again.files_measured, again.files_failed) == (3, 1, 0)


def test_first_ctrl_c_stops_inside_a_file_between_sweeps(distinct_cells, tmp_path, monkeypatch):
    """The first Ctrl-C stops the file being measured at its next sweep, not at its end."""
    from spikemeasure.tables import build as tables

    calls = []
    original = tables.measure_sweep

    def measure_and_press_ctrl_c(*args, **kwargs):
        calls.append(1)
        if len(calls) == 2:
            signal.raise_signal(signal.SIGINT)
        return original(*args, **kwargs)

    monkeypatch.setattr(tables, "measure_sweep", measure_and_press_ctrl_c)
    out = tmp_path / "out"
    with pytest.raises(KeyboardInterrupt):
        measure_paths([str(distinct_cells)], out, jobs=1)
    assert len(calls) == 2  # each file has 8 sweeps: the first file was left at its third
    record = json.loads((out / "run.json").read_text())
    assert record["status"] == "interrupted"
    assert all(i["status"] == "not measured (run interrupted)" for i in record["inputs"])


def test_measuring_can_be_cancelled_between_sweeps_and_pieces():
    """The cancel callable is called before each sweep and each piece of a long trace, and
    its exception stops the work there."""
    from conftest import GaussianSpike
    from spikemeasure.analysis.spikes_in_parts import measure_in_pieces
    from spikemeasure.io import Recording
    from spikemeasure.io import Sweep
    from spikemeasure.tables.build import measure_recording

    class Stop(Exception):
        pass

    calls = []

    def cancel_at_third():
        calls.append(1)
        if len(calls) == 3:
            raise Stop

    _, v = gaussian_train(RATE, [20.0, 60.0], 100.0, GaussianSpike())
    with pytest.raises(Stop):
        measure_in_pieces(np.concatenate([v] * 10), RATE, piece_samples=v.size,
                          cancel=cancel_at_third)
    assert len(calls) == 3
    calls.clear()
    recording = Recording(path="x.nix", format="test",
                          sweeps=[Sweep(voltage_mv=v, command_pa=None, sampling_rate_hz=RATE,
                                        file="x.nix", index=k) for k in range(6)])
    with pytest.raises(Stop):
        measure_recording(recording, cancel=cancel_at_third)
    assert len(calls) == 3


def test_edited_kept_outcome_is_measured_again(distinct_cells, distinct_run, distinct_reference,
                                               tmp_path):
    """A kept outcome whose content no longer matches its checksum is not reused: the file
    is measured again, with a note; the tables equal a fresh run's."""
    out = tmp_path / "out"
    shutil.copytree(distinct_run, out)
    kept = sorted((out / CACHE_FOLDER).glob("*.json"))
    assert len(kept) == 12
    data = json.loads(kept[0].read_text())
    body = data.get("outcome", data)
    body["tables"]["cells"]["resting_mv"]["values"][0] = 999.0  # a hand edit of one value
    kept[0].write_text(json.dumps(data))
    again = measure_paths([str(distinct_cells)], out, jobs=1)
    assert (again.files_reused, again.files_measured) == (11, 1)
    assert any("checksum" in note for note in again.notes) and not again.failures
    assert tables(out) == distinct_reference


def test_changed_column_declarations_measure_files_again(few_cells, tmp_path, monkeypatch):
    """Kept outcomes are keyed by the column declarations: a changed one measures again."""
    import dataclasses

    from spikemeasure.run import cache, record

    out = tmp_path / "out"
    measure_paths([str(few_cells)], out, jobs=1)
    changed = tuple(dataclasses.replace(c, decimals=2) if c.name == "threshold_mv" else c
                    for c in cache.SPIKE_COLUMNS)
    for module in (cache, record):
        monkeypatch.setattr(module, "SPIKE_COLUMNS", changed)
    again = measure_paths([str(few_cells)], out, jobs=1)
    assert (again.files_reused, again.files_measured) == (0, 4)
    with open(out / "spikes.csv", newline="") as fh:
        values = [row["threshold_mv"] for row in csv.DictReader(fh)]
    assert values and all(len(v.split(".")[1]) == 2 for v in values if v)


def test_a_worker_that_dies_fails_its_file_only(few_cells, tmp_path, monkeypatch):
    """A worker killed while measuring one file (as by the out-of-memory killer) breaks the
    process pool; the files it took with it are measured again, and only that file fails."""
    import multiprocessing
    import os

    from spikemeasure.run import task

    if multiprocessing.get_start_method() != "fork":
        pytest.skip("the replaced function reaches the workers only when they are forked")
    original = task.measure_recording

    def killed(recording, *args, **kwargs):
        if recording.sweeps and recording.sweeps[0].file == "cell_03.nix":
            os.kill(os.getpid(), signal.SIGKILL)
        return original(recording, *args, **kwargs)

    monkeypatch.setattr(task, "measure_recording", killed)
    summary = measure_paths([str(few_cells)], tmp_path / "out", jobs=2)
    assert [f["file"] for f in summary.failures] == ["cell_03.nix"]
    assert "ended unexpectedly" in summary.failures[0]["message"]
    assert (summary.files_measured, summary.files_failed) == (3, 1)


def test_a_bug_in_drawing_keeps_the_files_tables(few_cells, tmp_path, monkeypatch):
    """An unexpected exception while drawing one cell's figures is a failure of its figures;
    its rows stand and the other cells are drawn."""
    from spikemeasure import figures

    original = figures.write_cell_figures

    def buggy(recording, *args, **kwargs):
        if recording.sweeps[0].file == "cell_02.nix":
            raise ValueError("a drawing bug")
        return original(recording, *args, **kwargs)

    monkeypatch.setattr(figures, "write_cell_figures", buggy)
    out = tmp_path / "out"
    summary = measure_paths([str(few_cells)], out, jobs=1, figure_format="png")
    assert summary.files_measured == 4
    assert [(f["file"], f["stage"]) for f in summary.failures] == [("cell_02.nix", "figures")]
    assert "ValueError" in summary.failures[0]["message"]
    with open(out / "cells.csv", newline="") as fh:
        assert len(list(csv.DictReader(fh))) == 4
    record = json.loads((out / "run.json").read_text())
    entry = {i["file"]: i for i in record["inputs"]}["cell_02.nix"]
    assert "a drawing bug" in entry["traceback"]
    assert (out / "figures" / "cell_03.nix").is_dir()


def test_check_after_measuring_checks_the_tables_in_memory(few_cells, tmp_path, monkeypatch):
    """`check --out` checks the run's typed tables as the run holds them, without reading its
    CSV files back; the source of truth is `check` of the same folder afterwards, which reads
    them with the csv module: the same cases, the same verdicts."""
    from click.testing import CliRunner

    from spikemeasure.checks import apply
    from spikemeasure.cli import main

    monkeypatch.chdir(tmp_path)
    # accepted results (./accepted, without a project file) from a first run: the check
    # compares with them as well as applying the quality limits
    first = CliRunner().invoke(main, ["measure", str(few_cells), "--out", "first", "--jobs", "1",
                                      "--no-figures"])
    assert first.exit_code == 0, first.output
    assert CliRunner().invoke(main, ["accept", "first"]).exit_code == 0
    out = tmp_path / "res"
    read = []
    original = apply.read_tables

    def watched(folder, *args, **kwargs):
        read.append(Path(folder).resolve())
        return original(folder, *args, **kwargs)

    monkeypatch.setattr(apply, "read_tables", watched)
    measured = CliRunner().invoke(main, ["check", str(few_cells), "--out", str(out), "--json",
                                         "--quiet", "--jobs", "1"])
    assert out.resolve() not in read
    again = CliRunner().invoke(main, ["check", str(out), "--json"])
    assert out.resolve() in read
    assert measured.exit_code == again.exit_code, measured.output
    cases = json.loads(measured.stdout)["cases"]
    assert cases and cases == json.loads(again.stdout)["cases"]
