"""Batch throughput, per-file overhead and rerun cost, measured in one run.

Usage:  python benchmarks/benchmark_batch.py [--files 200]

1. Copies the sample cells into a folder of `--files` recordings.
2. Baseline: reading and measuring each file with the Python API in this process
   (read_recording + measure_recording + cell_summary), no tables, no hashing, no cache.
3. ``measure_paths`` with jobs=1 and with jobs=2 into fresh output folders: the throughput
   ratio, and the per-file overhead of jobs=1 beyond the baseline (hashing, cache, tables).
4. A rerun with nothing changed into the jobs=1 folder: its time as a ratio to the first run.
Prints JSON and writes it to benchmarks/output/benchmark_batch.json.
"""
from __future__ import annotations

import argparse
import json
import shutil
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--files", type=int, default=200)
    args = parser.parse_args()
    from spikemeasure.io import read_recording
    from spikemeasure.run.discovery import find_recordings
    from spikemeasure.run import measure_paths
    from spikemeasure.tables.build import cell_summary, measure_recording

    samples = sorted(p for p in (ROOT / "sample_data").iterdir() if p.suffix in (".nwb", ".nix"))
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "cells"
        for k in range(args.files):
            src = samples[k % len(samples)]
            dst = folder / f"batch_{k // 50:02d}" / f"cell_{k:04d}{src.suffix}"
            dst.parent.mkdir(parents=True, exist_ok=True)
            shutil.copy(src, dst)
        read_recording(samples[0])  # warm imports
        start = time.perf_counter()
        for path, shown in find_recordings([folder]):
            cell_summary(measure_recording(read_recording(path, shown_as=shown)))
        t_api = time.perf_counter() - start
        times = {}
        for jobs in (1, 2):
            out = Path(tmp) / f"out_{jobs}"
            start = time.perf_counter()
            measure_paths([str(folder)], out, jobs=jobs)
            times[jobs] = time.perf_counter() - start
        start = time.perf_counter()
        rerun = measure_paths([str(folder)], Path(tmp) / "out_1", jobs=1)
        t_rerun = time.perf_counter() - start
        assert rerun.files_reused == args.files
        same = all((Path(tmp) / "out_1" / n).read_bytes() == (Path(tmp) / "out_2" / n).read_bytes()
                   for n in ("spikes.csv", "sweeps.csv", "cells.csv"))
    result = {
        "files": args.files,
        "api_read_and_measure_s": round(t_api, 2),
        "jobs_1_s": round(times[1], 2), "jobs_2_s": round(times[2], 2),
        "throughput_ratio_jobs_2_over_1": round(times[1] / times[2], 2),
        "overhead_per_file_ms": round((times[1] - t_api) / args.files * 1e3, 1),
        "rerun_s": round(t_rerun, 2), "rerun_ratio": round(t_rerun / times[1], 3),
        "tables_identical": same,
    }
    text = json.dumps(result, indent=2)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / "benchmark_batch.json").write_text(text + "\n")


if __name__ == "__main__":
    main()
