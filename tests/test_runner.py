"""Batch runs: parallel equals serial, failures listed, interrupted runs resume cleanly."""
import csv
import json
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from conftest import gaussian_train, step_command, write_nix
from spikemeasure.detection import DetectionSettings
from spikemeasure.runner import CACHE_FOLDER, measure_paths

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = sorted(p for p in (ROOT / "sample_data").iterdir() if p.suffix in (".nwb", ".nix"))
TABLES = ("spikes.csv", "sweeps.csv", "cells.csv", "errors.csv")
RATE = 20_000.0


def tables(out: Path) -> dict:
    return {name: (out / name).read_bytes() for name in TABLES}


@pytest.fixture(scope="module")
def many_cells(tmp_path_factory):
    """Twelve recordings in nested folders (copies of the sample cells)."""
    root = tmp_path_factory.mktemp("many")
    for k in range(12):
        src = SAMPLES[k % len(SAMPLES)]
        dst = root / f"day_{k // 4}" / f"cell_{k:02d}{src.suffix}"
        dst.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy(src, dst)
    return root


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


def test_parallel_and_serial_tables_are_byte_identical(many_cells, tmp_path):
    serial = measure_paths([str(many_cells)], tmp_path / "serial", jobs=1)
    parallel = measure_paths([str(many_cells)], tmp_path / "parallel", jobs=2)
    assert serial.files_measured == parallel.files_measured == 12
    assert tables(tmp_path / "serial") == tables(tmp_path / "parallel")
    with open(tmp_path / "serial" / "cells.csv", newline="") as fh:
        files = [row["file"] for row in csv.DictReader(fh)]
    assert files == sorted(files) and files[0] == "day_0/cell_00.nwb"


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


def test_rerun_reuses_unchanged_files_and_force_redoes(many_cells, tmp_path):
    out = tmp_path / "out"
    first = measure_paths([str(many_cells)], out, jobs=1)
    before = tables(out)
    again = measure_paths([str(many_cells)], out, jobs=1)
    assert (again.files_reused, again.files_measured) == (12, 0)
    assert tables(out) == before
    changed = measure_paths([str(many_cells)], out, jobs=1,
                            settings=DetectionSettings(
                                onset_rate_v_per_s=25.0))
    assert changed.files_measured == 12  # a parameter changed: everything is measured again
    forced = measure_paths([str(many_cells)], out, jobs=1, force=True,
                           settings=DetectionSettings(
                               onset_rate_v_per_s=25.0))
    assert forced.files_measured == 12 and forced.files_reused == 0
    assert first.spikes > 0


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGKILL])
def test_interrupted_run_resumes_to_the_same_tables(distinct_cells, tmp_path, sig):
    reference = tmp_path / "reference"
    measure_paths([str(distinct_cells)], reference, jobs=1)
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "spikemeasure", "measure", str(distinct_cells), "--out", str(out),
           "--jobs", "1", "--quiet"]
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
    if sig == signal.SIGINT:
        assert proc.returncode == 130 and "Interrupted" in err
        record = json.loads((out / "run.json").read_text())
        done = [i for i in record["inputs"] if i["status"] == "measured"]
        assert record["interrupted"] is True
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
    assert not list(out.glob(".*.part"))
    rerun = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert rerun.returncode == 0, rerun.stderr
    record = json.loads((out / "run.json").read_text())
    statuses = [i["status"] for i in record["inputs"]]
    assert statuses.count("reused") == finished  # none measured twice
    assert statuses.count("measured") == 12 - finished  # none lost
    assert tables(out) == tables(reference)


def test_dask_cluster_gives_the_same_tables(many_cells, tmp_path):
    """Source of truth: the local run; the cluster is a distributed.LocalCluster."""
    distributed = pytest.importorskip("distributed")
    local = tmp_path / "local"
    measure_paths([str(many_cells)], local, jobs=1)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        remote = tmp_path / "remote"
        summary = measure_paths([str(many_cells)], remote, cluster=cluster.scheduler_address)
        assert summary.files_measured == 12
        assert tables(remote) == tables(local)
        again = measure_paths([str(many_cells)], remote, cluster=cluster.scheduler_address)
        assert again.files_reused == 12 and tables(remote) == tables(local)


def test_unreachable_cluster_is_a_clear_error(tmp_path):
    from spikemeasure.errors import SpikemeasureError

    (tmp_path / "in").mkdir()
    shutil.copy(SAMPLES[0], tmp_path / "in" / "a.nwb")
    with pytest.raises(SpikemeasureError, match="cannot reach the Dask scheduler"):
        measure_paths([str(tmp_path / "in")], tmp_path / "out", cluster="tcp://127.0.0.1:9",
                      cluster_timeout_s=2.0)
