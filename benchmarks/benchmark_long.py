"""Memory and time of `measure` on long gap-free recordings, read in pieces.

Usage:  python benchmarks/benchmark_long.py [--minutes 15 30 60]

1. Writes, with pynwb's intracellular API, one NWB file per length in `--minutes`: a single
   gap-free current-clamp series at 20 kHz (float32, mV with NWB's conversion factor), with
   spikes at random intervals (mean 200 ms, at least 20 ms apart), each followed by an
   afterhyperpolarization, and 0.3 mV of white noise. The command channel holds 0 pA.
2. Baseline, in the same run on the same file: reading it alone, through the same path as the
   job (``read_recording``, then every piece of the lazily read voltage, via neo's lazy
   loading), with a sum over each piece so the samples are really read.
3. Job: ``measure_paths`` on the file, as ``spikemeasure measure FILE --out DIR --force`` runs
   it (hash, read, detect, measure, write the tables).

Each of the two runs in its own fresh process, so that its peak resident memory (ru_maxrss) is
its own; it is also given above the process's size after its imports. (tracemalloc is not
used: it slows the many small allocations of opening an NWB file tenfold.) Results print as
JSON and go to benchmarks/output/benchmark_long.json (not committed).
"""
from __future__ import annotations

import argparse
import datetime
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

RATE_HZ = 20_000.0
BLOCK_S = 10.0


def _block(rng: np.random.Generator, n: int, first_spike_s: float) -> tuple[np.ndarray, float]:
    """One block of samples; returns it and the time of the next spike after it."""
    t = np.arange(n) / RATE_HZ
    v = -68.0 + rng.normal(0.0, 0.3, n)
    spike_s = first_spike_s
    while spike_s < n / RATE_HZ:
        lo = max(0, int((spike_s - 0.003) * RATE_HZ))
        hi = min(n, int((spike_s + 0.08) * RATE_HZ))
        s = t[lo:hi] - spike_s
        v[lo:hi] += 95.0 * np.exp(-s ** 2 / (2 * 0.0004 ** 2))
        after = np.clip(s, 0.0, None)
        v[lo:hi] -= 8.0 * (1 - np.exp(-after / 0.001)) * np.exp(-after / 0.015)
        spike_s += 0.02 + rng.exponential(0.18)
    return v.astype(np.float32), spike_s - n / RATE_HZ


def write_file(path: Path, minutes: float, seed: int = 5) -> int:
    """Write the file: an NWB file with one extendable series each for voltage and command,
    then filled block by block with h5py, so the writer never holds the whole signal."""
    import h5py
    from hdmf.backends.hdf5.h5_utils import H5DataIO
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    rng = np.random.default_rng(seed)
    n_total = int(minutes * 60 * RATE_HZ)
    per_block = int(BLOCK_S * RATE_HZ)
    nwb = NWBFile(session_description="long benchmark", identifier="long-benchmark",
                  session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    device = nwb.create_device(name="amplifier")
    electrode = nwb.create_icephys_electrode(name="electrode", description="benchmark",
                                             device=device)

    def extendable():
        return H5DataIO(np.zeros(1, dtype=np.float32), maxshape=(None,), chunks=(1 << 16,))

    response = CurrentClampSeries(name="voltage", data=extendable(), electrode=electrode,
                                  gain=1.0, rate=RATE_HZ, starting_time=0.0, sweep_number=0,
                                  conversion=1e-3)
    stimulus = CurrentClampStimulusSeries(name="command", data=extendable(),
                                          electrode=electrode, gain=1.0, rate=RATE_HZ,
                                          starting_time=0.0, sweep_number=0, conversion=1e-12)
    nwb.add_intracellular_recording(electrode=electrode, stimulus=stimulus, response=response)
    with NWBHDF5IO(str(path), "w") as io:
        io.write(nwb)
    with h5py.File(path, "a") as fh:
        voltage, command = fh["acquisition/voltage/data"], fh["stimulus/presentation/command/data"]
        voltage.resize((n_total,))
        command.resize((n_total,))
        next_spike = 0.05
        for start in range(0, n_total, per_block):
            block, next_spike = _block(rng, min(per_block, n_total - start), next_spike)
            voltage[start:start + block.size] = block
            command[start:start + block.size] = 0.0
    return n_total


def _child(kind: str, path: str, out: str) -> None:
    """Run one of the two in this (fresh) process and print its time and memory."""
    import resource

    from spikemeasure.analysis.spikes import PIECE_SAMPLES
    from spikemeasure.io import read_recording
    from spikemeasure.run import measure_paths

    imported_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    started = time.perf_counter()
    detail = {}
    if kind == "read":
        total = 0.0
        with read_recording(path) as rec:
            sweep = rec.sweeps[0]
            detail["read_in_pieces"] = sweep.is_lazy
            for a in range(0, sweep.n_samples, PIECE_SAMPLES):
                total += float(np.sum(sweep.voltage_mv[a:a + PIECE_SAMPLES]))
    else:
        summary = measure_paths([path], out, jobs=1, force=True)
        detail["spikes"] = summary.spikes
        detail["files_failed"] = summary.files_failed
    elapsed = time.perf_counter() - started
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"time_s": elapsed, "peak_rss_mb": rss_mb,
                      "peak_rss_above_imports_mb": rss_mb - imported_mb, **detail}))


def _run_child(kind: str, path: Path, out: Path) -> dict:
    done = subprocess.run([sys.executable, __file__, "--child", kind, str(path), str(out)],
                          check=True, capture_output=True, text=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, nargs="+", default=[15.0, 30.0, 60.0])
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        _child(*args.child)
        return
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for minutes in args.minutes:
            path = Path(tmp) / f"gap_free_{minutes:g}min.nwb"
            n = write_file(path, minutes)
            read = _run_child("read", path, Path(tmp) / "unused")
            job = _run_child("measure", path, Path(tmp) / f"out_{minutes:g}")
            rows.append({"minutes": minutes, "samples": n,
                         "file_mb": path.stat().st_size / 1e6,
                         "signal_float64_mb": n * 8 / 1e6, "read": read, "measure": job,
                         "time_ratio_measure_to_read": job["time_s"] / read["time_s"]})
            path.unlink()
            print(f"{minutes:g} min: read {read['time_s']:.1f} s, measure {job['time_s']:.1f} s "
                  f"({rows[-1]['time_ratio_measure_to_read']:.1f} x), peak RSS "
                  f"{read['peak_rss_mb']:.0f} / {job['peak_rss_mb']:.0f} MB "
                  f"({read['peak_rss_above_imports_mb']:.0f} / "
                  f"{job['peak_rss_above_imports_mb']:.0f} MB above imports), "
                  f"{job['spikes']} spikes", file=sys.stderr)
    first = rows[0]
    result = {
        "date": datetime.date.today().isoformat(), "rate_hz": RATE_HZ, "runs": rows,
        "peak_rss_ratio_longest_to_shortest": rows[-1]["measure"]["peak_rss_mb"]
        / first["measure"]["peak_rss_mb"],
        "peak_rss_above_imports_ratio_longest_to_shortest":
            rows[-1]["measure"]["peak_rss_above_imports_mb"]
            / first["measure"]["peak_rss_above_imports_mb"],
        "length_ratio_longest_to_shortest": rows[-1]["samples"] / first["samples"],
    }
    out = Path(__file__).parent / "output"
    out.mkdir(exist_ok=True)
    (out / "benchmark_long.json").write_text(json.dumps(result, indent=2))
    print(json.dumps(result, indent=2))


if __name__ == "__main__":
    main()
