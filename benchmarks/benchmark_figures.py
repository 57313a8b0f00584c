"""Time to draw a cell's figures, as a ratio to the time to measure the same cell, in one run.

Usage:  python benchmarks/benchmark_figures.py [--sweeps 30] [--sweep-s 1.0] [--repeats 3]

1. Simulates a 30-sweep step series of the adapting cortical model (Pospischil et al. 2008;
   spikemeasure.simulation), 50 kHz, 0.2 mV noise, steps from -100 pA by 20 pA, and writes it
   as NWB with pynwb's intracellular API.
2. Baseline: measuring the cell as a run's per-file task does without figures: read the file,
   measure every sweep, summarize the cell (read_recording, measure_recording, cell_summary).
3. Figures: write_cell_figures on the same results, in PNG, SVG and PDF, as the per-file task
   does with figures on.
Times are the best of `--repeats` runs each; the first figure call (which also imports
matplotlib, once per process) is reported on its own. Prints JSON and writes it to
benchmarks/output/benchmark_figures.json.
"""
from __future__ import annotations

import argparse
import datetime
import json
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

RATE_HZ = 50_000.0


def write_cell(path: Path, sweeps: int, sweep_s: float) -> int:
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    from spikemeasure.simulation import simulate_current_steps

    steps = -100.0 + 20.0 * np.arange(sweeps)
    sim = simulate_current_steps("cortical_adapting", steps, sampling_rate_hz=RATE_HZ,
                                 duration_s=sweep_s, step_start_s=0.1 * sweep_s,
                                 step_end_s=0.8 * sweep_s, noise_mv=0.2, seed=5)
    nwb = NWBFile(session_description="figure benchmark", identifier="figure-benchmark",
                  session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    device = nwb.create_device(name="amplifier")
    electrode = nwb.create_icephys_electrode(name="electrode", description="benchmark",
                                             device=device)
    for k in range(sweeps):
        start = float(k) * 3 * sweep_s
        response = CurrentClampSeries(
            name=f"voltage_{k}", data=sim.voltage_mv[k].astype(np.float32), electrode=electrode,
            gain=1.0, rate=RATE_HZ, starting_time=start, sweep_number=k, conversion=1e-3)
        stimulus = CurrentClampStimulusSeries(
            name=f"command_{k}", data=sim.command_pa[k].astype(np.float32),
            electrode=electrode, gain=1.0, rate=RATE_HZ, starting_time=start, sweep_number=k,
            conversion=1e-12)
        nwb.add_intracellular_recording(electrode=electrode, stimulus=stimulus,
                                        response=response)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwb)
    return int(sim.voltage_mv.size)


def best(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sweeps", type=int, default=30)
    parser.add_argument("--sweep-s", type=float, default=1.0)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    from spikemeasure.reading import read_recording
    from spikemeasure.tables import cell_summary, measure_recording

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "cell_30_sweeps.nwb"
        samples = write_cell(path, args.sweeps, args.sweep_s)
        state = {}

        def measure():
            recording = read_recording(path, shown_as=path.name)
            results = measure_recording(recording)
            state.update(recording=recording, results=results, cell=cell_summary(results))

        measure()  # warm: imports, file cache
        t_measure = best(measure, args.repeats)
        start = time.perf_counter()
        from spikemeasure.figures import write_cell_figures

        write_cell_figures(state["recording"], state["results"], Path(tmp) / "first", "png",
                           cell=state["cell"])
        t_first = time.perf_counter() - start
        t_fig = {}
        for fmt in ("png", "svg", "pdf"):
            t_fig[fmt] = best(lambda: write_cell_figures(
                state["recording"], state["results"], Path(tmp) / fmt, fmt,
                cell=state["cell"]), args.repeats)
        spikes = sum(len(r.spikes) for r in state["results"] if r.spikes is not None)
    result = {
        "sweeps": args.sweeps, "sweep_s": args.sweep_s, "samples": samples, "spikes": spikes,
        "measure_s": round(t_measure, 3),
        "figures_s": {fmt: round(t, 3) for fmt, t in t_fig.items()},
        "ratio_to_measure": {fmt: round(t / t_measure, 3) for fmt, t in t_fig.items()},
        "first_call_with_matplotlib_import_s": round(t_first, 3),
    }
    text = json.dumps(result, indent=2)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / "benchmark_figures.json").write_text(text + "\n")


if __name__ == "__main__":
    main()
