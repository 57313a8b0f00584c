"""Time to draw a cell's figures, as a ratio to the time to measure the same cell, in one run.

Usage:  python benchmarks/benchmark_figures.py [--cells 6] [--sweeps 30] [--sweep-s 1.0]
                                               [--repeats 3]

1. Simulates two 30-sweep step series of the adapting cortical model (Pospischil et al. 2008;
   spikemeasure.testing), 50 kHz, steps from -100 pA by 20 pA and from -150 pA by 25 pA,
   and writes `--cells` NWB files with pynwb's intracellular API, the two series taking turns,
   each file with its own 0.2 mV of measurement noise. Consecutive cells therefore differ in
   their values, their step range (colour bar, f-I axes) and their file name (titles), as the
   cells of a folder do.
2. Baseline: measuring each cell as a run's per-file task does without figures: read the
   file, measure every sweep, summarize the cell (read_recording, measure_recording,
   cell_summary); best of `--repeats` per cell, averaged over the cells.
3. Figures in a worker that has drawn cells before (the usual case in a run): every cell's
   write_cell_figures once, one after the other, under names not drawn before in the process,
   so no title is already rendered; the best of `--repeats` such rounds, per cell, in PNG, SVG
   and PDF.
4. Figures of the first cell a worker draws: the kept figures and the rendered texts
   forgotten before each cell (the matplotlib import excluded, reported on its own).
5. For comparison, the same figures drawn the plain way: new figures on matplotlib's own Agg
   canvas, written by savefig through Pillow (at its fastest PNG setting), as spikemeasure
   did before it kept figures and rendered texts.
6. The floor matplotlib sets: the warm figures drawn again with every line and collection
   hidden (axes, ticks, labels, legends and titles only) and encoded as PNG.
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


def best(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


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

        def measure(path: Path):
            recording = read_recording(path, shown_as=path.name)
            results = measure_recording(recording)
            measured[path] = (recording, results, cell_summary(results))

        for path in paths:
            measure(path)  # warm: imports, file cache
        t_measure = float(np.mean([best(lambda: measure(p), args.repeats) for p in paths]))
        spikes = float(np.mean([sum(len(r.spikes) for r in results if r.spikes is not None)
                                for _, results, _ in measured.values()]))

        start = time.perf_counter()
        from spikemeasure import figure_canvas, figures

        t_import = time.perf_counter() - start
        rounds = iter(range(10 ** 6))

        def per_cell(draw) -> float:
            """Mean seconds per cell of `draw(name, recording, results, cell)` (which returns
            the seconds it timed) over one round of all cells, each under a name not drawn
            before, so no title is already rendered."""
            r = next(rounds)
            times = []
            for path in paths:
                recording, results, cell = measured[path]
                name = f"round_{r}/{path.name}"
                times.append(draw(name, dataclasses.replace(recording, path=name), results,
                                  cell))
            return float(np.mean(times))

        def best_round(draw) -> float:
            return min(per_cell(draw) for _ in range(args.repeats))

        def written(fmt: str, cold: bool):
            def draw(name, recording, results, cell):
                if cold:  # a worker's first cell: nothing kept, no text rendered
                    figure_canvas.clear_text_cache()
                    figures._kept_for_this_thread().clear()
                start = time.perf_counter()
                figures.write_cell_figures(recording, results, tmp / "figures" / name, fmt,
                                           cell=cell)
                return time.perf_counter() - start
            return draw

        def plain(name, recording, results, cell):
            import io

            from matplotlib.backends.backend_agg import FigureCanvasAgg

            start = time.perf_counter()
            for fig in figures.cell_figures(results, cell, name=name).values():
                FigureCanvasAgg(fig)
                fig.savefig(io.BytesIO(), format="png", dpi=figures.DPI,
                            pil_kwargs={"compress_level": 1})
            return time.perf_counter() - start

        def decorations_only(name, recording, results, cell):
            drawn = figures.cell_figures(results, cell, name=name,
                                         reuse=figures._kept_for_this_thread())
            for fig in drawn.values():
                for ax in fig.axes:
                    for artist in [*ax.lines, *ax.collections]:
                        artist.set_visible(False)
            start = time.perf_counter()
            for fig in drawn.values():
                fig.canvas.draw()
                figure_canvas.png_bytes(np.asarray(fig.canvas.buffer_rgba()), dpi=figures.DPI)
            return time.perf_counter() - start

        per_cell(written("png", cold=True))  # warm up matplotlib itself (fonts, first draws)
        t_warm = {fmt: best_round(written(fmt, cold=False)) for fmt in ("png", "svg", "pdf")}
        t_cold = {"png": best_round(written("png", cold=True))}
        t_plain = best_round(plain)
        t_floor = best_round(decorations_only)
    result = {
        "cells": args.cells, "sweeps": args.sweeps, "sweep_s": args.sweep_s,
        "samples_per_cell": samples, "mean_spikes_per_cell": round(spikes, 1),
        "measure_s_per_cell": round(t_measure, 3),
        "figures_s_per_cell": {fmt: round(t, 3) for fmt, t in t_warm.items()},
        "ratio_to_measure": {fmt: round(t / t_measure, 3) for fmt, t in t_warm.items()},
        "first_cell_of_a_worker_png_s": round(t_cold["png"], 3),
        "first_cell_ratio_to_measure": round(t_cold["png"] / t_measure, 3),
        "matplotlib_import_s": round(t_import, 3),
        "plain_matplotlib_png_s_per_cell": round(t_plain, 3),
        "speedup_over_plain_png": round(t_plain / t_warm["png"], 2),
        "decorations_only_png_s_per_cell": round(t_floor, 3),
        "decorations_ratio_to_measure": round(t_floor / t_measure, 3),
    }
    text = json.dumps(result, indent=2)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / "benchmark_figures.json").write_text(text + "\n")


if __name__ == "__main__":
    main()
