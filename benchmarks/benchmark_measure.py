"""Speed and memory of `measure`, each figure a ratio to a baseline measured in the same run.

Usage:  python benchmarks/benchmark_measure.py [--repeats 3] [--files 40] [--samples 10000000]
        python benchmarks/benchmark_measure.py --uncertainty [--samples 5000000]

One run reports four rows; every command runs in a fresh child process, so that its processor
time and peak resident memory are its own (``os.wait4`` returns the child's resource usage,
the same record ``resource.getrusage(RUSAGE_CHILDREN)`` sums):

1. Batch: `--files` copies of the files in sample_data/ (NWB and NIX, taken in turn).
   ``spikemeasure measure DIR --jobs 1 --no-figures --force`` processor time (user + system)
   against a child that reads every floating-point dataset of the same files with h5py and
   makes one numpy pass over each (its maximum).
2. Long file: one NIX file written with neo's NixIO, 40 sweeps of 5 s at 50 kHz (10 million
   voltage samples, float32 in V, and the command in nA), spikes every 25 ms during a 3 s step
   and 0.3 mV of noise. ``spikemeasure measure FILE --no-figures --force`` wall time against a
   child in which neo loads the file (``NixIO.read_block``) and one numpy pass runs over every
   signal.
3. Peak memory of that run (the child's ru_maxrss), against the voltage signal's size as
   float64 (80 MB); also given above the peak of the same command on one small sample file
   (the interpreter, the imports and the fixed costs of a run).
4. ``spikemeasure --help`` wall time, against ``python -c pass``.

Times are the best of `--repeats` runs of each, after one warm-up run of each (file cache).
Every child is started as ``python -m spikemeasure``, so a ``PYTHONPATH`` given to this script
chooses the version measured. Results print as JSON and go to benchmarks/output/.
With ``--uncertainty``: a file whose spikes lie only inside each sweep's step (a quiet second
before it, where the noise is measured), measured in this process, and the baseline is the
same job with the spike SD columns switched off (``tables.build.with_uncertainty`` replaced by
a pass-through in this process): the ratio is what the SDs cost. The two jobs take turns,
`--repeats` pairs (the order within a pair alternating), so that a load that comes and goes
falls on both; reported are the median of the pairs' ratios and the ratio of the best times,
of wall time and of processor time (``time.process_time``). This process runs numpy's linear
algebra on one thread, as the command does (``spikemeasure.cli.main.SINGLE_THREAD_VARIABLES``).
"""
from __future__ import annotations

import argparse
import datetime
import gc
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")  # as the command sets them, before numpy loads

import numpy as np  # noqa: E402

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


SAMPLE_DATA = Path(__file__).resolve().parent.parent / "sample_data"
LONG_SWEEPS = 40
LONG_SWEEP_SAMPLES = 250_000  # 5 s at 50 kHz

#: The baseline of row 1: every floating-point dataset of the files, read whole with h5py,
#: and one numpy pass (the maximum) over each.
READ_DATASETS = """
import sys
import h5py
import numpy as np
total = 0.0
def visit(name, obj):
    global total
    if isinstance(obj, h5py.Dataset) and obj.dtype.kind == "f" and obj.size:
        total += float(np.max(obj[()]))
for path in sys.argv[1:]:
    with h5py.File(path, "r") as fh:
        fh.visititems(visit)
"""

#: The baseline of row 2: neo loads the NIX file, and one numpy pass runs over every signal.
LOAD_WITH_NEO = """
import sys
import warnings
import numpy as np
import neo
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    io = neo.io.NixIO(sys.argv[1], mode="ro")
    block = io.read_block()
    io.close()
total = 0.0
for segment in block.segments:
    for signal in segment.analogsignals:
        total += float(np.max(signal.magnitude))
"""


def run_child(argv: list[str]) -> dict:
    """Run a command to its end; its wall time (s), processor time (user + system, s) and peak
    resident memory (bytes), from ``os.wait4``. It runs in the temporary folder, so that the
    version on ``PYTHONPATH`` (or installed) is imported, not the one in the current folder."""
    start = time.perf_counter()
    child = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                             cwd=tempfile.gettempdir())
    _, status, usage = os.wait4(child.pid, 0)
    wall = time.perf_counter() - start
    child.returncode = os.waitstatus_to_exitcode(status)
    message = child.stderr.read().decode(errors="replace")
    child.stderr.close()
    if child.returncode not in (0, 1):
        raise RuntimeError(f"{argv[:4]} failed ({child.returncode}): {message[-2000:]}")
    return {"wall_s": wall, "cpu_s": usage.ru_utime + usage.ru_stime,
            "peak_bytes": usage.ru_maxrss * 1024}


def best_of(argv: list[str], repeats: int) -> dict:
    """The least wall time, processor time and peak memory of `repeats` runs, after one
    warm-up run."""
    run_child(argv)
    runs = [run_child(argv) for _ in range(repeats)]
    return {key: min(r[key] for r in runs) for key in runs[0]}


def spikemeasure_command(*args: str) -> list[str]:
    return [sys.executable, "-m", "spikemeasure", *args]


def copy_sample_files(folder: Path, n_files: int) -> list[Path]:
    """`n_files` copies of the NWB and NIX files of sample_data/, taken in turn."""
    sources = sorted(p for p in SAMPLE_DATA.iterdir() if p.suffix in (".nwb", ".nix"))
    folder.mkdir(parents=True)
    copies = []
    for k in range(n_files):
        source = sources[k % len(sources)]
        copies.append(folder / f"copy_{k:02d}_{source.name}")
        shutil.copyfile(source, copies[-1])
    return copies


def write_long_nix(path: Path, n_sweeps: int = LONG_SWEEPS, seed: int = 4) -> int:
    """The NIX file of row 2, written with neo's NixIO; returns its voltage samples."""
    import neo
    import quantities as pq

    rng = np.random.default_rng(seed)
    n = LONG_SWEEP_SAMPLES
    t_ms = np.arange(n) / RATE_HZ * 1e3
    in_step = (t_ms >= 1000.0) & (t_ms < 4000.0)
    phase = np.mod(t_ms, 25.0) - 12.5
    spikes = np.where(in_step, 100.0 * np.exp(-phase ** 2 / (2 * 0.3 ** 2)), 0.0)
    command_na = np.where(in_step, 0.2, 0.0).astype(np.float32)
    block = neo.Block(name="benchmark")
    for k in range(n_sweeps):
        segment = neo.Segment(name=f"sweep {k}", index=k)
        voltage_v = ((-65.0 + spikes + rng.normal(0.0, 0.3, n)) * 1e-3).astype(np.float32)
        t_start = k * 10.0 * pq.s
        segment.analogsignals.append(neo.AnalogSignal(
            voltage_v[:, None], units="V", sampling_rate=RATE_HZ * pq.Hz, t_start=t_start,
            name="membrane_potential"))
        segment.analogsignals.append(neo.AnalogSignal(
            command_na[:, None], units="nA", sampling_rate=RATE_HZ * pq.Hz, t_start=t_start,
            name="command_current"))
        block.segments.append(segment)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        io = neo.io.NixIO(str(path), mode="ow")
        io.write_block(block)
        io.close()
    return n_sweeps * n


def ratio_row(job: dict, base: dict, key: str) -> dict:
    return {"baseline": round(base[key], 3), "measure": round(job[key], 3),
            "ratio": round(job[key] / base[key], 2)}


def four_rows(n_files: int, repeats: int) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        files = copy_sample_files(tmp / "batch", n_files)
        batch_base = best_of([sys.executable, "-c", READ_DATASETS, *map(str, files)], repeats)
        batch_job = best_of(spikemeasure_command(
            "measure", str(tmp / "batch"), "--out", str(tmp / "out_batch"), "--jobs", "1",
            "--no-figures", "--force", "--quiet"), repeats)
        for path in files:
            path.unlink()
        long_file = tmp / "long.nix"
        n = write_long_nix(long_file)
        long_base = best_of([sys.executable, "-c", LOAD_WITH_NEO, str(long_file)], repeats)
        long_job = best_of(spikemeasure_command(
            "measure", str(long_file), "--out", str(tmp / "out_long"), "--no-figures",
            "--force", "--quiet"), repeats)
        small = best_of(spikemeasure_command(
            "measure", str(SAMPLE_DATA / "region_a_cell_1.nwb"), "--out", str(tmp / "out_small"),
            "--no-figures", "--force", "--quiet"), repeats)
        help_job = best_of(spikemeasure_command("--help"), repeats)
        bare = best_of([sys.executable, "-c", "pass"], repeats)
        signal_bytes = n * 8
        return {
            "batch_cpu_s": dict(ratio_row(batch_job, batch_base, "cpu_s"), files=n_files),
            "long_file_wall_s": dict(ratio_row(long_job, long_base, "wall_s"), samples=n,
                                     file_mb=round(long_file.stat().st_size / 1e6, 1)),
            "long_file_peak_memory_mb": {
                "signal_float64": round(signal_bytes / 1e6, 1),
                "measure": round(long_job["peak_bytes"] / 1e6, 1),
                "ratio": round(long_job["peak_bytes"] / signal_bytes, 2),
                "small_file_run": round(small["peak_bytes"] / 1e6, 1),
                "ratio_above_small_file_run": round(
                    (long_job["peak_bytes"] - small["peak_bytes"]) / signal_bytes, 2),
                "neo_load_baseline": round(long_base["peak_bytes"] / 1e6, 1)},
            "help_wall_s": ratio_row(help_job, bare, "wall_s"),
            "date": datetime.date.today().isoformat(),
            "cores": len(os.sched_getaffinity(0)),
        }


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
        pairs = []  # ((wall, processor) without SDs, (wall, processor) with SDs)
        for k in range(max(repeats, 1)):
            if k % 2 == 0:
                without = timed(lambda: job_without_sds(path, out))
                with_sds = timed(lambda: job(path, out))
            else:
                with_sds = timed(lambda: job(path, out))
                without = timed(lambda: job_without_sds(path, out))
            pairs.append((without, with_sds))
    result = {"samples": n, "spikes": spikes, "pairs": len(pairs)}
    for i, clock in enumerate(("wall", "processor")):
        t_without = [w[i] for w, _ in pairs]
        t_with = [s[i] for _, s in pairs]
        result[f"{clock}_without_sds_best_s"] = round(min(t_without), 3)
        result[f"{clock}_with_sds_best_s"] = round(min(t_with), 3)
        result[f"{clock}_ratio_of_best"] = round(min(t_with) / min(t_without), 3)
        result[f"{clock}_median_pair_ratio"] = round(
            float(np.median([b / a for a, b in zip(t_without, t_with)])), 3)
    result["date"] = datetime.date.today().isoformat()
    return result


def timed(fn) -> tuple[float, float]:
    """(wall, processor) seconds of one call."""
    gc.collect()
    start, start_cpu = time.perf_counter(), time.process_time()
    fn()
    return time.perf_counter() - start, time.process_time() - start_cpu


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--files", type=int, default=40, help="files of row 1")
    parser.add_argument("--samples", type=int, default=5_000_000,
                        help="samples of the --uncertainty file")
    parser.add_argument("--uncertainty", action="store_true",
                        help="measure what the spike SD columns cost instead")
    args = parser.parse_args()
    if args.uncertainty:
        result, name = uncertainty_cost(args.samples, args.repeats), "benchmark_uncertainty"
    else:
        result, name = four_rows(args.files, args.repeats), "benchmark_measure"
    text = json.dumps(result, indent=2)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / f"{name}.json").write_text(text + "\n")


if __name__ == "__main__":
    main()
