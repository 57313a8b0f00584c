"""Speed and memory of `measure` against a baseline measured in the same run.

Usage:  python benchmarks/benchmark_measure.py [--samples 10000000] [--repeats 3]

1. Writes an NWB file (pynwb's intracellular API) of current-clamp sweeps at 50 kHz holding
   `--samples` voltage samples in all, with spikes every 25 ms and 0.3 mV noise, plus the
   matching command channel.
2. Baseline: neo alone loads the file (``NWBIO.read_block``) and one numpy pass runs over the
   voltage samples (``np.max`` of each signal).
3. Job: ``spikemeasure.run.measure_paths`` on the file (read, detect, measure spikes,
   sweeps and the cell, hash the input, keep the outcome, write the tables and run.json), as
   ``spikemeasure measure --force`` runs it.
With ``--uncertainty``: the file's spikes lie only inside each sweep's step (a quiet second
before it, where the noise is measured), and the baseline is the same job with the spike SD
columns switched off (``tables.build.with_uncertainty`` replaced by a pass-through in this
process): the ratio is what the SDs cost.
Times are the best of `--repeats` runs of each. Peak memory is the peak of tracemalloc (numpy
reports its buffers to it) during one run of each, as a ratio to the voltage signal's size as
float64. Results print as JSON and go to benchmarks/output/.
"""
from __future__ import annotations

import argparse
import datetime
import gc
import json
import tempfile
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np

RATE_HZ = 50_000.0
SWEEP_SAMPLES = 500_000  # 10 s sweeps


def write_file(path: Path, n_samples: int, seed: int = 3, quiet_start: bool = False) -> int:
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    rng = np.random.default_rng(seed)
    n_sweeps = max(1, n_samples // SWEEP_SAMPLES)
    t_ms = np.arange(SWEEP_SAMPLES) / RATE_HZ * 1e3
    phase = np.mod(t_ms, 25.0) - 12.5
    spikes = -65.0 + 100.0 * np.exp(-phase ** 2 / (2 * 0.3 ** 2))
    if quiet_start:  # spikes only during the step, so each sweep has a quiet stretch
        outside = np.ones(SWEEP_SAMPLES, dtype=bool)
        outside[SWEEP_SAMPLES // 10: 9 * SWEEP_SAMPLES // 10] = False
        spikes[outside] = -65.0
    nwb = NWBFile(session_description="benchmark", identifier="benchmark",
                  session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    device = nwb.create_device(name="amplifier")
    electrode = nwb.create_icephys_electrode(name="electrode", description="benchmark",
                                             device=device)
    command = np.zeros(SWEEP_SAMPLES, dtype=np.float32)
    command[SWEEP_SAMPLES // 10: 9 * SWEEP_SAMPLES // 10] = 200.0
    for k in range(n_sweeps):
        v = (spikes + rng.normal(0.0, 0.3, SWEEP_SAMPLES)).astype(np.float32)
        response = CurrentClampSeries(name=f"voltage_{k}", data=v, electrode=electrode, gain=1.0,
                                      rate=RATE_HZ, starting_time=float(k) * 20, sweep_number=k,
                                      conversion=1e-3)
        stimulus = CurrentClampStimulusSeries(name=f"command_{k}", data=command,
                                              electrode=electrode, gain=1.0, rate=RATE_HZ,
                                              starting_time=float(k) * 20, sweep_number=k,
                                              conversion=1e-12)
        nwb.add_intracellular_recording(electrode=electrode, stimulus=stimulus,
                                        response=response)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwb)
    return n_sweeps * SWEEP_SAMPLES


def baseline(path: Path) -> float:
    import neo

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        block = neo.io.NWBIO(str(path), mode="r").read_block(lazy=False)
    total = 0.0
    for seg in block.segments:
        for sig in seg.analogsignals:
            total += float(np.max(sig.magnitude))
    return total


def job(path: Path, out: Path) -> int:
    from spikemeasure.run import measure_paths

    # force: every repeat measures again instead of reusing the outcome kept by the first;
    # one process, so that switching the SDs off in this process holds
    return measure_paths([str(path)], out, force=True, jobs=1).spikes


def job_without_sds(path: Path, out: Path) -> int:
    """The same job with the spike SD columns switched off."""
    from spikemeasure.tables import build

    kept = build.with_uncertainty
    build.with_uncertainty = lambda spikes, *args, **kwargs: spikes
    try:
        return job(path, out)
    finally:
        build.with_uncertainty = kept


def uncertainty_cost(samples: int, repeats: int) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "benchmark.nwb"
        n = write_file(path, samples, quiet_start=True)
        out = Path(tmp) / "results"
        spikes = job(path, out)
        job_without_sds(path, out)
        t_without = best_time(lambda: job_without_sds(path, out), repeats)
        t_with = best_time(lambda: job(path, out), repeats)
    return {"samples": n, "spikes": spikes, "without_sds_s": round(t_without, 3),
            "with_sds_s": round(t_with, 3), "sd_cost_ratio": round(t_with / t_without, 3),
            "date": datetime.date.today().isoformat()}


def best_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        gc.collect()
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def peak_memory(fn) -> int:
    gc.collect()
    tracemalloc.start()
    fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=10_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--uncertainty", action="store_true",
                        help="measure what the spike SD columns cost instead")
    args = parser.parse_args()
    if args.uncertainty:
        text = json.dumps(uncertainty_cost(args.samples, args.repeats), indent=2)
        print(text)
        target = Path(__file__).resolve().parent / "output"
        target.mkdir(exist_ok=True)
        (target / "benchmark_uncertainty.json").write_text(text + "\n")
        return
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "benchmark.nwb"
        n = write_file(path, args.samples)
        out = Path(tmp) / "results"
        # warm up imports and file caches for both sides alike
        baseline(path)
        spikes = job(path, out)
        t_base = best_time(lambda: baseline(path), args.repeats)
        t_job = best_time(lambda: job(path, out), args.repeats)
        m_base = peak_memory(lambda: baseline(path))
        m_job = peak_memory(lambda: job(path, out))
        signal_bytes = n * 8
        result = {
            "samples": n, "sweeps": n // SWEEP_SAMPLES, "sampling_rate_hz": RATE_HZ,
            "file_mb": round(path.stat().st_size / 1e6, 1), "spikes": spikes,
            "baseline_s": round(t_base, 3), "measure_s": round(t_job, 3),
            "time_ratio": round(t_job / t_base, 2),
            "signal_mb_float64": round(signal_bytes / 1e6, 1),
            "baseline_peak_mb": round(m_base / 1e6, 1), "measure_peak_mb": round(m_job / 1e6, 1),
            "baseline_memory_ratio": round(m_base / signal_bytes, 2),
            "measure_memory_ratio": round(m_job / signal_bytes, 2),
            "date": datetime.date.today().isoformat(),
        }
    text = json.dumps(result, indent=2)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / "benchmark_measure.json").write_text(text + "\n")


if __name__ == "__main__":
    main()
