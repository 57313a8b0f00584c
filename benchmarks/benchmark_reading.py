"""Reading NWB and NIX files: the h5py readers against the neo/pynwb path, with a baseline
measured in the same run.

Usage:  python benchmarks/benchmark_reading.py [--copies 40] [--repeats 3] [--samples 10000000]

1. CPU time (``time.process_time``, best of `--repeats`) of reading the sample_data files and
   `--copies` copies of them (sample-sized NWB and NIX files) with ``read_recording``: through
   the h5py readers, and through neo and pynwb (the h5py readers switched off in this
   process). Baseline: h5py reads every floating-point dataset of the same files and one
   numpy pass runs over each (its sum). Imports are done before timing.
2. The same files measured (``measure_paths``, ``--jobs 1``, no figures, forced), both ways,
   once each, as a ratio to the same baseline.
3. Peak memory (tracemalloc; numpy reports its buffers to it) of reading, and of measuring,
   a NIX file written with neo's NixIO holding `--samples` voltage samples (40 sweeps of 5 s
   at 50 kHz by default) in V with its command in nA, both float32: as a ratio to the
   voltage's size as float64.
Results print as JSON and go to benchmarks/output/.
"""
from __future__ import annotations

import argparse
import gc
import json
import shutil
import tempfile
import time
import tracemalloc
import warnings
from contextlib import contextmanager
from pathlib import Path
from unittest import mock

import numpy as np

REPOSITORY = Path(__file__).resolve().parents[1]
RATE_HZ = 50_000.0
SWEEP_SAMPLES = 250_000  # 5 s sweeps


@contextmanager
def through_neo():
    """The h5py readers switched off: every NWB and NIX file goes through neo and pynwb."""
    from spikemeasure.io import nix, nwb
    from spikemeasure.io.nwb_hdf5 import FastPathUnsupported

    off = mock.Mock(side_effect=FastPathUnsupported("switched off"))
    with mock.patch.object(nwb, "_read_nwb_fast", off), \
            mock.patch.object(nix, "_read_nix_fast", off):
        yield


def sample_sized_files(folder: Path, copies: int) -> list[Path]:
    """The sample_data recordings and `copies` copies of them, cycling through them."""
    originals = sorted(p for p in (REPOSITORY / "sample_data").iterdir()
                       if p.suffix in (".nwb", ".nix"))
    files = list(originals)
    for k in range(copies):
        source = originals[k % len(originals)]
        target = folder / f"copy_{k:02d}{source.suffix}"
        shutil.copyfile(source, target)
        files.append(target)
    return files


def h5py_baseline(files: list[Path]) -> float:
    """Every floating-point dataset read with h5py, and one numpy pass over each."""
    import h5py

    total = 0.0
    for path in files:
        with h5py.File(path, "r") as fh:
            found = []
            fh.visititems(lambda name, obj: found.append(obj) if isinstance(obj, h5py.Dataset)
                          and obj.dtype.kind == "f" else None)
            for dataset in found:
                total += float(np.sum(dataset[()]))
    return total


def read_all(files: list[Path]) -> int:
    from spikemeasure.io import read_recording

    sweeps = 0
    for path in files:
        with read_recording(path) as recording:
            sweeps += len(recording.sweeps)
    return sweeps


def best_cpu(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        gc.collect()
        start = time.process_time()
        fn()
        times.append(time.process_time() - start)
    return min(times)


def peak_memory(fn) -> int:
    gc.collect()
    tracemalloc.start()
    fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak


def write_long_nix(path: Path, n_samples: int, seed: int = 7) -> int:
    """A NIX file (neo's NixIO) of 5 s sweeps at 50 kHz: spikes every 25 ms over 0.3 mV
    noise in V, and a 0.2 nA step command in nA, both float32."""
    import neo
    import quantities as pq

    rng = np.random.default_rng(seed)
    n_sweeps = max(1, n_samples // SWEEP_SAMPLES)
    t_ms = np.arange(SWEEP_SAMPLES) / RATE_HZ * 1e3
    phase = np.mod(t_ms, 25.0) - 12.5
    spikes_mv = -65.0 + 100.0 * np.exp(-phase ** 2 / (2 * 0.3 ** 2))
    command_na = np.zeros(SWEEP_SAMPLES, dtype=np.float32)
    command_na[SWEEP_SAMPLES // 10: 9 * SWEEP_SAMPLES // 10] = 0.2
    block = neo.Block(name="benchmark")
    for k in range(n_sweeps):
        segment = neo.Segment(name=f"sweep {k}")
        volts = ((spikes_mv + rng.normal(0.0, 0.3, SWEEP_SAMPLES)) * 1e-3).astype(np.float32)
        segment.analogsignals.append(neo.AnalogSignal(
            volts[:, None], units="V", sampling_rate=RATE_HZ * pq.Hz, name="voltage",
            t_start=k * 10.0 * pq.s))
        segment.analogsignals.append(neo.AnalogSignal(
            command_na[:, None], units="nA", sampling_rate=RATE_HZ * pq.Hz, name="command",
            t_start=k * 10.0 * pq.s))
        block.segments.append(segment)
    with neo.io.NixIO(str(path), mode="ow") as io:
        io.write_block(block)
    return n_sweeps * SWEEP_SAMPLES


def measure(files: list[Path], out: Path) -> int:
    from spikemeasure.run import measure_paths

    return measure_paths([str(p) for p in files], out, force=True, jobs=1).spikes


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--copies", type=int, default=40)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--samples", type=int, default=10_000_000)
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    import neo.io  # noqa: F401  (imports are not what is timed)
    import pynwb  # noqa: F401

    result: dict = {}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        files = sample_sized_files(tmp, args.copies)
        read_all(files[:6])
        with through_neo():
            read_all(files[:6])
        base = best_cpu(lambda: h5py_baseline(files), args.repeats)
        fast = best_cpu(lambda: read_all(files), args.repeats)
        with through_neo():
            reference = best_cpu(lambda: read_all(files), args.repeats)
        fast_measure = best_cpu(lambda: measure(files, tmp / "out_fast"), 1)
        with through_neo():
            reference_measure = best_cpu(lambda: measure(files, tmp / "out_neo"), 1)
        result["files"] = len(files)
        result["baseline_cpu_s"] = round(base, 3)
        result["read_h5py_cpu_s"] = round(fast, 3)
        result["read_neo_cpu_s"] = round(reference, 3)
        result["read_h5py_ratio"] = round(fast / base, 2)
        result["read_neo_ratio"] = round(reference / base, 2)
        result["measure_h5py_ratio"] = round(fast_measure / base, 2)
        result["measure_neo_ratio"] = round(reference_measure / base, 2)

        long_file = tmp / "long.nix"
        n = write_long_nix(long_file, args.samples)
        voltage_bytes = 8 * n
        result["long_file_samples"] = n
        result["read_peak_h5py_ratio"] = round(peak_memory(
            lambda: read_all([long_file])) / voltage_bytes, 2)
        with through_neo():
            result["read_peak_neo_ratio"] = round(peak_memory(
                lambda: read_all([long_file])) / voltage_bytes, 2)
        result["measure_peak_h5py_ratio"] = round(peak_memory(
            lambda: measure([long_file], tmp / "out_long_fast")) / voltage_bytes, 2)
        with through_neo():
            result["measure_peak_neo_ratio"] = round(peak_memory(
                lambda: measure([long_file], tmp / "out_long_neo")) / voltage_bytes, 2)
    text = json.dumps(result, indent=2)
    print(text)
    output = REPOSITORY / "benchmarks" / "output"
    output.mkdir(exist_ok=True)
    (output / "benchmark_reading.json").write_text(text + "\n")


if __name__ == "__main__":
    main()
