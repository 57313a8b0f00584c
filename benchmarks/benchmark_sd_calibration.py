"""Calibration of the spike SD columns: one noise-free recording under many noise draws.

Usage:  python benchmarks/benchmark_sd_calibration.py                  # all acquisitions
        python benchmarks/benchmark_sd_calibration.py --draws 40 --models wang_buzsaki_1996

Each spiking model of benchmarks/benchmark_accuracy.py is simulated once per acquisition and
artefact set (the same cells, steps, 200 kHz simulation, Bessel filter, hum and drift); the
truth is the reference measurement (spikemeasure.testing.reference) of the noise-free 200 kHz
trace less its filtered hum and drift, as in the accuracy benchmark. The noise-free recording
(that trace taken every n-th sample) is then measured under `--draws` independent draws of
white noise per noise level, the spikes and their SDs by the pipeline's own functions
(measure_sweep, as a run measures a sweep: hum and drift removed, then the spikes and
their SDs; the step from the command by find_current_step).

Per SD column and per acquisition, noise level and artefact set it reports:

- coverage: the share of spikes whose truth lies within +/- 2 SD of the measured value;
- clean bias / SD: the RMS over spikes of (value on the noise-free recording - truth) over
  the spike's mean SD;
- bias / SD: the same of (mean of the noisy values - truth), less the mean's own scatter:
  sampling and the estimator's own bias at that noise (its windows follow the noise), which
  the noise does not hold;
- spread / SD: the RMS over spikes of the SD of the value over the noise draws over its mean
  SD: 1 when the SD is right about the noise.

Markdown goes to stdout and to benchmarks/output/benchmark_sd_calibration.md (not committed).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from benchmark_accuracy import (ACQUISITIONS, ARTEFACTS, CELLS, END_S, NOISE_MV,  # noqa: E402
                                SIMULATION_RATE_HZ, filtered_artefacts, step_commands)

from spikemeasure.analysis.spike_uncertainty import SD_COLUMNS  # noqa: E402
from spikemeasure.io import Sweep  # noqa: E402
from spikemeasure.tables.build import measure_sweep  # noqa: E402
from spikemeasure.analysis.sweeps import find_current_step  # noqa: E402
from spikemeasure.testing import record_commands  # noqa: E402
from spikemeasure.testing.reference import reference_spikes  # noqa: E402

SPIKING = ("hodgkin_huxley_1952", "wang_buzsaki_1996", "cortical_adapting")
MATCH_S = 0.001


def _spiking_steps(model: str) -> tuple[int, ...]:
    return tuple(s for s in CELLS[model] if s > 0)


def simulate(model: str, acquisition: str, artefacts: str, seed: int):
    """(noise-free recording, its rate, commands at that rate, truth per sweep)."""
    steps = _spiking_steps(model)
    rate_hz, bessel_hz = ACQUISITIONS[acquisition]
    command = step_commands(steps)
    chain = record_commands(model, command, simulation_rate_hz=SIMULATION_RATE_HZ,
                            decimation=1, bessel_hz=bessel_hz, noise_mv=0.0, seed=seed,
                            **ARTEFACTS[artefacts])
    membrane = chain.voltage_mv - filtered_artefacts(chain.time_s, bessel_hz,
                                                     **ARTEFACTS[artefacts])
    truth = [reference_spikes(v, SIMULATION_RATE_HZ, step_end_s=END_S) for v in membrane]
    decimation = SIMULATION_RATE_HZ // rate_hz
    return (chain.voltage_mv[:, ::decimation], float(rate_hz), command[:, ::decimation], truth)


def _spikes(v: np.ndarray, rate: float, command: np.ndarray, step):
    """The spikes of one sweep with their SDs, as a run measures them (measure_sweep: the
    hum and drift the sweep's fit keeps removed first)."""
    return measure_sweep(Sweep(v, rate, command, file="draw.nwb", index=0), step=step).spikes


def measure_draws(clean: np.ndarray, rate: float, commands: np.ndarray, truth, noise: float,
                  draws: int, rng: np.random.Generator) -> dict:
    """Per SD column: rows of (spike key, truth, clean value, measured value, SD)."""
    rows = {name: [] for name in SD_COLUMNS}
    for sweep, (v0, command, true) in enumerate(zip(clean, commands, truth)):
        step = find_current_step(command, rate)
        reference = _spikes(v0, rate, command, step)
        for draw in range(draws):
            v = v0 + rng.standard_normal(v0.size) * noise
            spikes = _spikes(v, rate, command, step)
            for k, t_peak in enumerate(true.peak_s):
                j = np.argmin(np.abs(spikes.peak_s - t_peak)) if len(spikes) else -1
                i = np.argmin(np.abs(reference.peak_s - t_peak)) if len(reference) else -1
                if j < 0 or i < 0 or abs(spikes.peak_s[j] - t_peak) > MATCH_S \
                        or abs(reference.peak_s[i] - t_peak) > MATCH_S:
                    continue
                for name in SD_COLUMNS:
                    value = name.removesuffix("_sd")
                    rows[name].append(((sweep, k), getattr(true, value)[k],
                                       getattr(reference, value)[i], getattr(spikes, value)[j],
                                       getattr(spikes, name)[j]))
    return rows


def summarize(rows: list) -> tuple[float, float, float, float, int]:
    """(coverage, RMS clean bias / SD, RMS bias / SD, RMS spread / SD, values) of one
    column's rows; the bias of the noisy values is their mean over the draws less the truth
    (its square less the mean's own variance, spread**2 / draws)."""
    rows = [r for r in rows if np.isfinite(r[1]) and np.isfinite(r[3]) and np.isfinite(r[4])]
    if not rows:
        return np.nan, np.nan, np.nan, np.nan, 0
    truth = np.array([r[1] for r in rows])
    clean = np.array([r[2] for r in rows])
    value = np.array([r[3] for r in rows])
    sd = np.array([r[4] for r in rows])
    coverage = float(np.mean(np.abs(value - truth) <= 2 * sd))
    keys = {}
    for n, r in enumerate(rows):
        keys.setdefault(r[0], []).append(n)
    clean_bias, bias, spread = [], [], []
    for idx in keys.values():
        idx = np.asarray(idx)
        mean_sd = np.sqrt(np.mean(sd[idx] ** 2))
        clean_bias.append((clean[idx[0]] - truth[idx[0]]) / mean_sd)
        if idx.size > 2:
            s = np.std(value[idx], ddof=1) / mean_sd
            spread.append(s)
            bias.append(((np.mean(value[idx]) - truth[idx[0]]) / mean_sd) ** 2
                        - s * s / idx.size)
    rms = (lambda x: float(np.sqrt(max(np.nanmean(x), 0.0))) if len(x) else np.nan)
    return (coverage, rms(np.square(clean_bias)), rms(bias), rms(np.square(spread)),
            len(rows))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--draws", type=int, default=20, help="noise draws per recording")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--models", nargs="+", choices=SPIKING, default=list(SPIKING))
    parser.add_argument("--acquisitions", nargs="+", choices=list(ACQUISITIONS),
                        default=list(ACQUISITIONS))
    parser.add_argument("--artefacts", nargs="+", choices=list(ARTEFACTS),
                        default=list(ARTEFACTS))
    parser.add_argument("--noise", nargs="+", type=float, default=list(NOISE_MV))
    args = parser.parse_args()
    start = time.perf_counter()
    results = {}  # (acquisition, artefacts, noise) -> column -> rows
    seed = args.seed
    for model in args.models:
        for acquisition in args.acquisitions:
            for artefacts in args.artefacts:
                clean, rate, commands, truth = simulate(model, acquisition, artefacts, seed)
                rng = np.random.default_rng(seed)
                seed += 1
                for noise in args.noise:
                    found = measure_draws(clean, rate, commands, truth, noise, args.draws, rng)
                    for name, rows in found.items():
                        key = (model, acquisition, artefacts, noise)
                        results.setdefault(key, {}).setdefault(name, []).extend(
                            ((key, r[0]),) + r[1:] for r in rows)
                print(f"{model}, {acquisition}, {artefacts}: done "
                      f"({time.perf_counter() - start:.0f} s)", file=sys.stderr)
    lines = [f"SD calibration: {args.draws} noise draws per recording, models "
             f"{', '.join(args.models)}; {time.perf_counter() - start:.0f} s", ""]
    for group in ("acquisition", "noise", "artefacts", "model", "all"):
        lines += [f"### per {group}: coverage (clean bias / SD, bias / SD, spread / SD)", ""]
        position = {"model": 0, "acquisition": 1, "artefacts": 2, "noise": 3}.get(group)
        names = (["all"] if position is None else
                 list(dict.fromkeys(str(k[position]) for k in results)))
        lines += ["| column | " + " | ".join(names) + " |", "| --- |" + " --- |" * len(names)]
        for column in SD_COLUMNS:
            cells = []
            for name in names:
                rows = [r for k, by in results.items()
                        if position is None or str(k[position]) == name for r in by[column]]
                cov, clean_bias, bias, spread, count = summarize(rows)
                cells.append(f"{cov:.1%} ({clean_bias:.2f}, {bias:.2f}, {spread:.2f})")
            lines.append(f"| {column} | " + " | ".join(cells) + " |")
        lines.append("")
    worst = []
    for key, by in results.items():
        for column in SD_COLUMNS:
            cov, clean_bias, bias, spread, count = summarize(by[column])
            worst.append((cov, column, key, clean_bias, bias, spread, count))
    lines += ["### lowest and highest coverage per (model, acquisition, artefacts, noise)", ""]
    for cov, column, key, clean_bias, bias, spread, count in (sorted(worst)[:15]
                                                              + sorted(worst)[-5:]):
        lines.append(f"- {column} {key}: {cov:.1%} (clean bias/SD {clean_bias:.2f}, bias/SD "
                     f"{bias:.2f}, spread/SD {spread:.2f}, n={count})")
    text = "\n".join(lines)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / "benchmark_sd_calibration.md").write_text(text + "\n")


if __name__ == "__main__":
    main()
