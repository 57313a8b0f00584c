"""Time to draw a cell's figures, as a ratio to the time to read and measure the same cell, in
one run.

Usage:  python benchmarks/benchmark_figures.py [--cells 6] [--sweeps 30] [--sweep-s 1.0]
                                               [--repeats 3]

1. Simulates two 30-sweep step series of the adapting cortical model (Pospischil et al. 2008;
   spikemeasure.testing), 50 kHz, steps from -100 pA by 20 pA and from -150 pA by 25 pA,
   and writes `--cells` NWB files with pynwb's intracellular API, the two series taking turns,
   each file with its own 0.2 mV of measurement noise. Consecutive cells therefore differ in
   their values, their step range (colour bar, f-I axes) and their file name (titles), as the
   cells of a folder do.
2. Baseline: reading and measuring each cell as a run's per-file task does without figures:
   read the file, measure every sweep, summarize the cell (read_recording,
   measure_recording, cell_summary).
3. Figures in a warm worker (one that has drawn cells before, the usual case in a run): every
   cell's write_cell_figures, under names not drawn before, in PNG, SVG and PDF.
4. Figures of the first cell a worker draws: the kept figures and the rendered texts
   forgotten before each cell (the matplotlib import excluded, reported on its own).
5. The same as 3 in PNG on matplotlib's plain Agg canvas (spikemeasure.figures.common.CACHE_TEXT
   false), its own figures kept: what rendering each distinct text once saves.
6. The floor matplotlib sets: the warm figures drawn again with every line and collection
   hidden (axes, ticks, labels, legends and titles only) and saved as PNG.
Each is timed by the wall clock (time.perf_counter) and by the processor time of this process
(time.process_time, which another job sharing the cores moves much less), in `--repeats`
rounds, a round taking the cells in turn and each cell through 2 to 6 before the next, so
that a change of the machine's load touches the baseline and the figures alike; best of the
rounds per cell, averaged over the cells.
Prints JSON and writes it to benchmarks/output/benchmark_figures.json.
"""
from __future__ import annotations

import argparse
import dataclasses
import datetime
import json
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

RATE_HZ = 50_000.0
PROTOCOLS = ((-100.0, 20.0), (-150.0, 25.0))  # first step and increment, pA


def clock() -> np.ndarray:
    """(wall, processor) seconds: time.perf_counter and time.process_time."""
    return np.array([time.perf_counter(), time.process_time()])


def simulate(sweeps: int, sweep_s: float, first_pa: float, step_pa: float):
    from spikemeasure.testing import simulate_current_steps

    steps = first_pa + step_pa * np.arange(sweeps)
    return simulate_current_steps("cortical_adapting", steps, sampling_rate_hz=RATE_HZ,
                                  duration_s=sweep_s, step_start_s=0.1 * sweep_s,
                                  step_end_s=0.8 * sweep_s, noise_mv=0.0)


def write_cell(path: Path, voltage_mv: np.ndarray, command_pa: np.ndarray) -> None:
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    nwb = NWBFile(session_description="figure benchmark", identifier=path.stem,
                  session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    device = nwb.create_device(name="amplifier")
    electrode = nwb.create_icephys_electrode(name="electrode", description="benchmark",
                                             device=device)
    duration_s = voltage_mv.shape[1] / RATE_HZ
    for k in range(voltage_mv.shape[0]):
        start = float(k) * 3 * duration_s
        response = CurrentClampSeries(
            name=f"voltage_{k}", data=voltage_mv[k].astype(np.float32), electrode=electrode,
            gain=1.0, rate=RATE_HZ, starting_time=start, sweep_number=k, conversion=1e-3)
        stimulus = CurrentClampStimulusSeries(
            name=f"command_{k}", data=command_pa[k].astype(np.float32),
            electrode=electrode, gain=1.0, rate=RATE_HZ, starting_time=start, sweep_number=k,
            conversion=1e-12)
        nwb.add_intracellular_recording(electrode=electrode, stimulus=stimulus,
                                        response=response)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwb)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=6)
    parser.add_argument("--sweeps", type=int, default=30)
    parser.add_argument("--sweep-s", type=float, default=1.0)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    from spikemeasure.io import read_recording
    from spikemeasure.tables import cell_summary, measure_recording

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        series = [simulate(args.sweeps, args.sweep_s, *p) for p in PROTOCOLS]
        paths = []
        for k in range(args.cells):
            sim = series[k % len(series)]
            noise = np.random.default_rng(100 + k).normal(0.0, 0.2, sim.voltage_mv.shape)
            paths.append(tmp / f"cell_{k + 1:02d}.nwb")
            write_cell(paths[-1], sim.voltage_mv + noise, sim.command_pa)
        samples = int(series[0].voltage_mv.size)

        measured = {}

        def measure(path: Path) -> np.ndarray:
            start = clock()
            recording = read_recording(path, shown_as=path.name)
            results = measure_recording(recording)
            measured[path] = (recording, results, cell_summary(results))
            return clock() - start

        for path in paths:
            measure(path)  # warm: imports, file cache
        spikes = float(np.mean([sum(len(r.spikes) for r in results if r.spikes is not None)
                                for _, results, _ in measured.values()]))

        start = time.perf_counter()
        from matplotlib.figure import Figure  # the import cost, reported on its own

        from spikemeasure import figures
        from spikemeasure.figures import cell as cell_figures_module
        from spikemeasure.figures import common, text_cache

        t_import = time.perf_counter() - start
        del Figure
        kept = cell_figures_module._kept_for_this_thread()
        kept_plain: dict = {}

        def figures_of(path: Path, name: str, how: str) -> np.ndarray:
            """Seconds (wall, processor) to write the cell's figures `how`, under a title not
            drawn before."""
            recording, results, cell = measured[path]
            recording = dataclasses.replace(recording, path=name)
            folder = tmp / "figures" / how / name
            if how == "first_png":  # a worker's first cell: no figure kept, no text rendered
                kept.clear()
                text_cache.clear_text_cache()
            if how == "plain_png":  # the same, drawn and saved on matplotlib's plain canvas
                start = clock()
                common.CACHE_TEXT = False
                try:
                    drawn = figures.cell_figures(results, cell, name=name, reuse=kept_plain)
                finally:
                    common.CACHE_TEXT = True
                for stem, fig in drawn.items():
                    common.save_figure(fig, folder / f"{stem}.png", "png")
                return clock() - start
            if how == "decorations_png":  # axes, ticks, labels, legends and titles only
                drawn = figures.cell_figures(results, cell, name=name, reuse=kept)
                for fig in drawn.values():
                    for ax in fig.axes:
                        for artist in [*ax.lines, *ax.collections]:
                            artist.set_visible(False)
                start = clock()
                for stem, fig in drawn.items():
                    common.save_figure(fig, folder / f"{stem}.png", "png")
                return clock() - start
            start = clock()
            figures.write_cell_figures(recording, results, folder, how.split("_")[-1],
                                       cell=cell)
            return clock() - start

        kinds = ("png", "svg", "pdf", "first_png", "plain_png", "decorations_png")
        for path in paths:  # warm up matplotlib itself (fonts, first draws) and both canvases
            figures_of(path, f"warm/{path.name}", "png")
            figures_of(path, f"warm/{path.name}", "plain_png")
        # rounds: each cell read and measured, then drawn every way, in turn, so that a change
        # of the machine's load touches the baseline and the figures alike
        times = {kind: {p: [] for p in paths} for kind in ("measure",) + kinds}
        for r in range(args.repeats):
            for path in paths:
                times["measure"][path].append(measure(path))
                for kind in kinds:
                    times[kind][path].append(figures_of(path, f"round_{r}/{path.name}", kind))
        kept.clear()
    # per cell the best round, by wall time and by processor time apart; mean over the cells
    best = {kind: np.mean([np.min(np.array(t), axis=0) for t in by_path.values()], axis=0)
            for kind, by_path in times.items()}
    result = {"cells": args.cells, "sweeps": args.sweeps, "sweep_s": args.sweep_s,
              "samples_per_cell": samples, "mean_spikes_per_cell": round(spikes, 1),
              "matplotlib_import_s": round(t_import, 3)}
    for clock_name, j in (("wall", 0), ("processor", 1)):
        base = float(best["measure"][j])
        result[clock_name] = {
            "read_and_measure_s_per_cell": round(base, 3),
            "figures_s_per_cell": {k: round(float(best[k][j]), 3) for k in kinds},
            "ratio_to_read_and_measure": {k: round(float(best[k][j]) / base, 3) for k in kinds},
            "text_cache_speedup": round(float(best["plain_png"][j] / best["png"][j]), 2),
        }
    text = json.dumps(result, indent=2)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / "benchmark_figures.json").write_text(text + "\n")


if __name__ == "__main__":
    main()
