"""Accuracy of the measurements against the noise-free truth of simulated recordings.

Usage:  python benchmarks/benchmark_accuracy.py            # quick: 40 cells, a few minutes
        python benchmarks/benchmark_accuracy.py --full     # 120 cells, about 15 minutes

For each model of spikemeasure.testing (three spiking, two passive) and each acquisition (a
sampling rate and a 4-pole Bessel corner) a step series is simulated at 200 kHz and passed
through the acquisition chain (record_commands: filter, hum, drift) without noise and without
decimation; the truth is that trace less its filtered hum and drift (they are not the cell),
what a file can still tell of the membrane. Each recording is that trace decimated to
the acquisition's rate with white noise added (the last two steps of record_commands), once
per noise level, each noise level one electrode of an NWB file (write_electrodes_nwb) in a
temporary folder, measured by spikemeasure.api.measure as a user would. The truth is measured
by spikemeasure.testing.reference, a plain implementation of the definitions of
docs/measurements.md on the noise-free trace at 200 kHz. Results: per feature, the share within
tolerance, the median error and, for the uncertainty (_sd) columns the tables have, the share
of values whose truth lies within +/- 2 SD (also per acquisition, noise level and artefacts);
missed and extra spikes. Markdown goes to stdout
and to benchmarks/output/benchmark_accuracy.md (not committed).
"""
from __future__ import annotations

import argparse
import datetime
import sys
import tempfile
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from spikemeasure.api import measure
from spikemeasure.testing import record_commands
from spikemeasure.testing.nwb_files import ElectrodeSweeps, write_electrodes_nwb
from spikemeasure.testing.reference import (
    ReferenceSpikes,
    reference_cell,
    reference_spikes,
    reference_sweep,
    reference_tau_ms,
)

SIMULATION_RATE_HZ = 200_000
SWEEP_S, ONSET_S, END_S = 0.5, 0.12, 0.42

#: acquisition name: (output sampling rate, Bessel -3 dB corner), Hz
ACQUISITIONS = {
    "10 kHz, 3 kHz filter": (10_000, 3_000),
    "20 kHz, 5 kHz filter": (20_000, 5_000),
    "25 kHz, 10 kHz filter": (25_000, 10_000),
    "50 kHz, 10 kHz filter": (50_000, 10_000),
}
#: what the rig adds before the filter besides the membrane
ARTEFACTS = {
    "clean": {},
    "hum and drift": {"hum_mv": 0.3, "hum_hz": 50.0, "drift_mv_per_s": 1.0},
}
NOISE_MV = (0.1, 0.3, 0.5)

#: model: current steps (pA); a few hyperpolarizing (input resistance, tau, sag), then steps
#: around rheobase and above (rheobase, f-I slope), none driving the cell into block. The
#: Hodgkin-Huxley membrane charges with a tau of about 1.5 ms and turns back within 4-8 ms:
#: its -60, -40 and -20 pA steps (about 10, 6 and 3 mV at their minimum) give the time
#: constant over the noise; the -60 and -40 pA steps evoke a rebound spike at their offset.
CELLS = {
    "hodgkin_huxley_1952": (-60, -40, -20, 10, 20, 30, 40, 70, 85, 100),
    "wang_buzsaki_1996": (-60, -40, -20, 10, 20, 30, 40, 60, 80, 100),
    "cortical_adapting": (-60, -40, -20, 40, 60, 80, 100, 150, 200),
    "passive_rc": (-100, -60, -20, 20, 60),
    "passive_sag": (-150, -100, -50, 20, 50),
}
#: sweeps longer than SWEEP_S, per model: the Hodgkin-Huxley cell's rebound spike after its
#: hyperpolarizing steps settles within about 30 ms, before the last 100 ms of the sweep that
#: the baseline drift (and with it the sag's noise rule) reads
LONGER_SWEEPS_S = {"hodgkin_huxley_1952": 0.6}

#: feature: (table, absolute tolerance, relative tolerance); 0, 0 means exact
TOLERANCES = {
    "threshold_mv": ("spike", 1.5, 0.0),
    "peak_mv": ("spike", 1.0, 0.0),
    "amplitude_mv": ("spike", 2.0, 0.0),
    "half_width_ms": ("spike", 0.03, 0.05),
    "rise_time_ms": ("spike", 0.03, 0.10),
    "max_dvdt_v_per_s": ("spike", 0.0, 0.10),
    "min_dvdt_v_per_s": ("spike", 0.0, 0.10),
    "trough_mv": ("spike", 1.0, 0.0),
    "ahp_depth_mv": ("spike", 1.5, 0.0),
    "isi_ms": ("spike", 0.1, 0.0),
    "spike_count": ("sweep", 0.0, 0.0),
    "baseline_mv": ("sweep", 0.5, 0.0),
    "first_spike_latency_ms": ("sweep", 0.2, 0.0),
    "adaptation_index": ("sweep", 0.05, 0.0),
    "sag_fraction": ("sweep", 0.03, 0.0),
    "input_resistance_mohm": ("cell", 0.0, 0.05),
    "membrane_tau_ms": ("cell", 0.0, 0.10),
    "rheobase_pa": ("cell", 0.0, 0.0),
    "fi_slope_hz_per_pa": ("cell", 0.0, 0.10),
}
#: the uncertainty columns, each named after its value's column
SD_FEATURES = ("threshold_mv", "peak_mv", "half_width_ms", "max_dvdt_v_per_s", "ahp_depth_mv",
               "sag_fraction", "input_resistance_mohm", "membrane_tau_ms")
MATCH_S = 0.001  # a measured spike is a true one when their peaks lie within 1 ms


@dataclass
class Comparisons:
    """Every measured value beside its truth, by feature, and the spike bookkeeping."""

    truth: dict[str, list[float]] = field(default_factory=dict)
    measured: dict[str, list[float]] = field(default_factory=dict)
    sd: dict[str, list[float]] = field(default_factory=dict)
    condition: dict[str, list[dict[str, str]]] = field(default_factory=dict)
    empty_flags: dict[str, Counter] = field(default_factory=dict)
    true_spikes: int = 0
    missed_spikes: int = 0
    extra_spikes: int = 0
    cells: int = 0

    def add(self, feature: str, truth: float, measured: float, sd: float,
            condition: dict[str, str], flags: str = "") -> None:
        if np.isnan(truth) and np.isnan(measured):
            return  # empty by definition on both sides (no sag on a depolarizing step)
        self.truth.setdefault(feature, []).append(float(truth))
        self.measured.setdefault(feature, []).append(float(measured))
        self.sd.setdefault(feature, []).append(float(sd))
        self.condition.setdefault(feature, []).append(condition)
        if np.isnan(measured):
            reasons = self.empty_flags.setdefault(feature, Counter())
            reasons.update(flags.split(";") if flags else ["no flag"])


def step_commands(steps_pa: tuple[int, ...], sweep_s: float = SWEEP_S) -> np.ndarray:
    """One sweep per step, at the simulation rate: 0 pA holding, the step from ONSET to END."""
    n = int(round(sweep_s * SIMULATION_RATE_HZ))
    command = np.zeros((len(steps_pa), n))
    on, off = int(round(ONSET_S * SIMULATION_RATE_HZ)), int(round(END_S * SIMULATION_RATE_HZ))
    command[:, on:off] = np.asarray(steps_pa, dtype=float)[:, None]
    return command


@dataclass(frozen=True)
class Truth:
    """The reference values of one simulated cell, from its noise-free trace."""

    spikes: list[ReferenceSpikes]
    sweeps: list
    cell: dict[str, float]


def true_values(voltage_mv: np.ndarray, steps_pa: tuple[int, ...]) -> Truth:
    """Reference measurements of every sweep and of the cell, at the simulation rate."""
    fs = SIMULATION_RATE_HZ
    spikes = [reference_spikes(v, fs, step_end_s=END_S) for v in voltage_mv]
    sweeps = [reference_sweep(v, fs, ONSET_S, END_S, s, sp)
              for v, s, sp in zip(voltage_mv, steps_pa, spikes)]
    passive = [k for k, s in enumerate(steps_pa) if s < 0 and sweeps[k].spike_count == 0]
    # the three smallest hyperpolarizing spike-free steps, as the definition of
    # membrane_tau_ms says
    smallest = sorted(passive, key=lambda k: -steps_pa[k])[:3]
    tau = reference_tau_ms(voltage_mv[smallest], fs, ONSET_S, END_S) if passive else np.nan
    return Truth(spikes, sweeps, reference_cell(np.asarray(steps_pa), sweeps, tau))


def _column(table, name: str, rows: np.ndarray) -> np.ndarray:
    """A column's values on `rows`, NaN throughout when the table lacks the column."""
    if name not in table.names:
        return np.full(int(np.count_nonzero(rows)), np.nan)
    return np.asarray(table[name], dtype=float)[rows]


def compare_spikes(out: Comparisons, truth: Truth, spikes, electrode: str,
                   condition: dict[str, str]) -> None:
    """Match measured spikes to true ones by peak time; compare each matched spike."""
    in_cell = spikes["electrode"] == electrode
    for sweep, true in enumerate(truth.spikes):
        rows = in_cell & (spikes["sweep"] == sweep)
        peaks = _column(spikes, "peak_s", rows)
        used = np.zeros(peaks.size, dtype=bool)
        out.true_spikes += true.peak_s.size
        for k, t_peak in enumerate(true.peak_s):
            gaps = np.where(used, np.inf, np.abs(peaks - t_peak))
            j = int(np.argmin(gaps)) if gaps.size else -1
            if j < 0 or gaps[j] > MATCH_S:
                out.missed_spikes += 1
                continue
            used[j] = True
            for feature, (level, _, _) in TOLERANCES.items():
                if level == "spike":
                    out.add(feature, getattr(true, feature)[k],
                            _column(spikes, feature, rows)[j],
                            _column(spikes, feature + "_sd", rows)[j], condition,
                            str(spikes["flags"][rows][j]))
        out.extra_spikes += int(np.count_nonzero(~used))


def compare_sweeps_and_cell(out: Comparisons, truth: Truth, results, electrode: str,
                            condition: dict[str, str]) -> None:
    """Compare the sweep rows of one cell and its cell row."""
    rows = results.sweeps["electrode"] == electrode
    sweep_index = results.sweeps["sweep"][rows]
    for feature, (level, _, _) in TOLERANCES.items():
        if level == "sweep":
            measured = _column(results.sweeps, feature, rows)
            sds = _column(results.sweeps, feature + "_sd", rows)
            flags = results.sweeps["flags"][rows]
            for sweep, true in enumerate(truth.sweeps):
                at = np.nonzero(sweep_index == sweep)[0]
                if at.size == 0:
                    out.add(feature, float(getattr(true, feature)), np.nan, np.nan, condition,
                            "sweep not measured")
                    continue
                out.add(feature, float(getattr(true, feature)), measured[at[0]], sds[at[0]],
                        condition, str(flags[at[0]]))
    cell_rows = results.cells["electrode"] == electrode
    for feature, (level, _, _) in TOLERANCES.items():
        if level == "cell":
            measured = _column(results.cells, feature, cell_rows)
            sds = _column(results.cells, feature + "_sd", cell_rows)
            flags = results.cells["flags"][cell_rows]
            out.add(feature, truth.cell[feature], measured[0] if measured.size else np.nan,
                    sds[0] if sds.size else np.nan, condition,
                    str(flags[0]) if flags.size else "cell not measured")
    out.cells += 1


def filtered_artefacts(time_s: np.ndarray, bessel_hz: float, hum_mv: float = 0.0,
                       hum_hz: float = 50.0, drift_mv_per_s: float = 0.0) -> np.ndarray:
    """Hum and drift as the recording holds them, through the same 4-pole Bessel filter.

    They are not the cell: the truth is the filtered membrane without them. The filter is
    linear, so the filtered recording minus this is exactly the filtered membrane."""
    from spikemeasure.testing.acquisition import bessel_lowpass

    artefact = hum_mv * np.sin(2 * np.pi * hum_hz * time_s) + drift_mv_per_s * time_s
    return bessel_lowpass(artefact, SIMULATION_RATE_HZ, bessel_hz)


def run_condition(out: Comparisons, model: str, acquisition: str, artefacts: str,
                  noise_levels: tuple[float, ...], folder: Path, seed: int) -> float:
    """Simulate one cell for an acquisition, record it at every noise level, measure, compare.

    Returns the seconds spent measuring (spikemeasure.api.measure alone).
    """
    steps = CELLS[model]
    rate_hz, bessel_hz = ACQUISITIONS[acquisition]
    command = step_commands(steps, LONGER_SWEEPS_S.get(model, SWEEP_S))
    chain = record_commands(model, command, simulation_rate_hz=SIMULATION_RATE_HZ,
                            decimation=1, bessel_hz=bessel_hz, noise_mv=0.0, seed=seed,
                            **ARTEFACTS[artefacts])
    truth = true_values(chain.voltage_mv - filtered_artefacts(chain.time_s, bessel_hz,
                                                             **ARTEFACTS[artefacts]), steps)
    decimation = SIMULATION_RATE_HZ // rate_hz
    rng = np.random.default_rng(seed)
    electrodes = [ElectrodeSweeps(
        name=f"noise_{noise:g}_mv",
        voltage_mv=chain.voltage_mv[:, ::decimation]
        + rng.standard_normal(chain.voltage_mv[:, ::decimation].shape) * noise,
        command_pa=command[:, ::decimation], sampling_rate_hz=float(rate_hz))
        for noise in noise_levels]
    path = write_electrodes_nwb(folder / f"{model}_{seed}.nwb", electrodes)
    start = time.perf_counter()
    results = measure(path)
    seconds = time.perf_counter() - start
    for problem in results.problems:
        print(f"problem: {problem}", file=sys.stderr)
    for noise, electrode in zip(noise_levels, electrodes):
        condition = {"model": model, "acquisition": acquisition, "artefacts": artefacts,
                     "noise": f"{noise:g} mV"}
        compare_spikes(out, truth, results.spikes, electrode.name, condition)
        compare_sweeps_and_cell(out, truth, results, electrode.name, condition)
    return seconds


def within_tolerance(feature: str, truth: np.ndarray, measured: np.ndarray) -> np.ndarray:
    """Whether each value lies within its feature's tolerance (an empty value does not)."""
    _, absolute, relative = TOLERANCES[feature]
    allowed = np.maximum(absolute, relative * np.abs(truth))
    if absolute == 0 and relative == 0:
        allowed = np.full(truth.shape, 1e-6)  # exact, up to the CSV's rounding of a pA
    with np.errstate(invalid="ignore"):
        return np.abs(measured - truth) <= allowed


def _number(x: float, digits: int = 3) -> str:
    return "-" if not np.isfinite(x) else f"{x:.{digits}g}"


def feature_table(out: Comparisons) -> list[str]:
    """Markdown rows: per feature, checks, share within tolerance, errors, empty values and
    the +/- 2 SD coverage."""
    lines = ["| feature | level | checks | within tolerance | median error | "
             "median abs. error | empty | truth within +/- 2 SD |",
             "| --- | --- | --- | --- | --- | --- | --- | --- |"]
    for feature, (level, absolute, relative) in TOLERANCES.items():
        truth = np.asarray(out.truth.get(feature, []))
        measured = np.asarray(out.measured.get(feature, []))
        if truth.size == 0:
            lines.append(f"| {feature} | {level} | 0 | - | - | - | - | - |")
            continue
        ok = within_tolerance(feature, truth, measured)
        error = measured - truth
        finite = np.isfinite(error)
        if feature not in SD_FEATURES:
            coverage = ""
        else:
            sd = np.asarray(out.sd[feature])
            has_sd = finite & np.isfinite(sd)
            coverage = ("not in the tables" if not has_sd.any() else
                        f"{np.mean(np.abs(error[has_sd]) <= 2 * sd[has_sd]):.1%} "
                        f"of {int(has_sd.sum())}")
        median = np.median(error[finite]) if finite.any() else np.nan
        median_abs = np.median(np.abs(error[finite])) if finite.any() else np.nan
        if relative and finite.any():
            rel = np.median(np.abs(error[finite]) / np.abs(truth[finite]))
            median_abs_text = f"{_number(median_abs)} ({rel:.1%})"
        else:
            median_abs_text = _number(median_abs)
        lines.append(f"| {feature} | {level} | {truth.size} | {ok.mean():.1%} | "
                     f"{_number(median)} | {median_abs_text} | {int((~finite).sum())} | "
                     f"{coverage} |")
    return lines


def group_table(out: Comparisons, key: str, median: bool = False) -> list[str]:
    """Markdown rows: per feature and per value of a condition `key` (model, acquisition,
    artefacts, noise), in the order first met, the share within tolerance or (`median`) the
    median error, relative for features with a relative tolerance."""
    names = list(dict.fromkeys(c[key] for conds in out.condition.values() for c in conds))
    lines = ["| feature | " + " | ".join(names) + " |",
             "| --- |" + " --- |" * len(names)]
    for feature, (_, _, relative) in TOLERANCES.items():
        if feature not in out.truth:
            continue
        truth = np.asarray(out.truth[feature])
        measured = np.asarray(out.measured[feature])
        ok = within_tolerance(feature, truth, measured)
        error = (measured - truth) / np.abs(truth) if relative else measured - truth
        where = np.asarray([c[key] for c in out.condition[feature]])
        cells = []
        for name in names:
            here = (where == name) & np.isfinite(error)
            if not np.any(where == name):
                cells.append("-")
            elif not median:
                cells.append(f"{ok[where == name].mean():.1%}")
            elif not here.any():
                cells.append("empty")
            else:
                value = np.median(error[here])
                cells.append(f"{value:+.1%}" if relative else f"{value:+.3g}")
        lines.append(f"| {feature} | " + " | ".join(cells) + " |")
    return lines


def coverage_table(out: Comparisons, key: str) -> list[str]:
    """Markdown rows: per feature with an SD column the tables have and per value of a
    condition `key`, the share of values whose truth lies within +/- 2 SD."""
    names = list(dict.fromkeys(c[key] for conds in out.condition.values() for c in conds))
    lines = ["| feature | " + " | ".join(names) + " |", "| --- |" + " --- |" * len(names)]
    for feature in SD_FEATURES:
        if feature not in out.truth:
            continue
        error = np.asarray(out.measured[feature]) - np.asarray(out.truth[feature])
        sd = np.asarray(out.sd[feature])
        has_sd = np.isfinite(error) & np.isfinite(sd)
        if not has_sd.any():
            continue
        where = np.asarray([c[key] for c in out.condition[feature]])
        cells = []
        for name in names:
            here = has_sd & (where == name)
            cells.append(f"{np.mean(np.abs(error[here]) <= 2 * sd[here]):.1%}" if here.any()
                         else "-")
        lines.append(f"| {feature} | " + " | ".join(cells) + " |")
    return lines


def empty_table(out: Comparisons) -> list[str]:
    """Markdown rows: values left empty where the truth has one, with the rows' flags."""
    lines = ["| feature | empty | flags of those rows (count) |", "| --- | --- | --- |"]
    for feature, reasons in out.empty_flags.items():
        empty = int(np.count_nonzero(np.isnan(out.measured[feature])))
        text = ", ".join(f"{flag} ({n})" for flag, n in reasons.most_common())
        lines.append(f"| {feature} | {empty} | {text} |")
    return lines


def summary(out: Comparisons, seconds: float, measuring: float, plan: str) -> list[str]:
    """The headline: all checks, the worst feature, spikes missed and extra."""
    shares, total_ok, total = {}, 0, 0
    for feature in TOLERANCES:
        if feature in out.truth:
            ok = within_tolerance(feature, np.asarray(out.truth[feature]),
                                  np.asarray(out.measured[feature]))
            shares[feature] = ok.mean()
            total_ok, total = total_ok + int(ok.sum()), total + ok.size
    worst = min(shares, key=shares.get) if shares else "-"
    return [
        f"Run: {plan}; {out.cells} cells, {datetime.date.today().isoformat()}, "
        f"{seconds:.0f} s in all ({measuring:.0f} s of it measuring).",
        "",
        f"- all checks within tolerance: **{total_ok / max(total, 1):.2%}** of {total} "
        "(target at least 99 %)",
        f"- lowest feature: {worst}, {shares.get(worst, np.nan):.1%} (target at least 97 %)",
        f"- spikes: {out.true_spikes} true, {out.missed_spikes} missed, "
        f"{out.extra_spikes} extra",
    ]


def plan_of(full: bool) -> tuple[list[str], list[str], tuple[float, ...]]:
    """Acquisitions, artefacts and noise levels of a quick or a full run."""
    if full:
        return list(ACQUISITIONS), list(ARTEFACTS), NOISE_MV
    return ["10 kHz, 3 kHz filter", "25 kHz, 10 kHz filter"], list(ARTEFACTS), (0.1, 0.5)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--full", action="store_true",
                        help="every acquisition, with and without hum and drift, 3 noise levels")
    parser.add_argument("--seed", type=int, default=1, help="first random seed")
    parser.add_argument("--models", nargs="+", choices=list(CELLS), metavar="MODEL",
                        help="only these models (each keeps the noise it has in a whole run); "
                             f"of {', '.join(CELLS)}")
    args = parser.parse_args()
    models = args.models or list(CELLS)
    acquisitions, artefacts, noise_levels = plan_of(args.full)
    out, measuring, seed = Comparisons(), 0.0, args.seed
    start = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        for model in CELLS:
            for acquisition in acquisitions:
                for artefact in artefacts:
                    if model not in models:
                        seed += 1
                        continue
                    measuring += run_condition(out, model, acquisition, artefact,
                                               noise_levels, Path(tmp), seed)
                    seed += 1
                    print(f"{model}, {acquisition}, {artefact}: done "
                          f"({time.perf_counter() - start:.0f} s)", file=sys.stderr)
    plan = (f"{'full' if args.full else 'quick'} ({len(acquisitions)} acquisitions x "
            f"{len(artefacts)} artefact sets x noise {', '.join(f'{n:g}' for n in noise_levels)}"
            f" mV x {len(models)} models)")
    lines = summary(out, time.perf_counter() - start, measuring, plan)
    lines += ["", "### Per feature", ""] + feature_table(out)
    for key in ("acquisition", "noise", "artefacts", "model"):
        lines += ["", f"### Share within tolerance per {key}", ""] + group_table(out, key)
    for key in ("acquisition", "noise", "artefacts"):
        lines += ["", f"### Truth within +/- 2 SD per {key}", ""] + coverage_table(out, key)
    lines += ["", "### Median error per acquisition (relative where the tolerance is)", ""]
    lines += group_table(out, "acquisition", median=True)
    lines += ["", "### Empty values", ""] + empty_table(out)
    text = "\n".join(lines)
    print(text)
    target = Path(__file__).resolve().parent / "output"
    target.mkdir(exist_ok=True)
    (target / "benchmark_accuracy.md").write_text(text + "\n")


if __name__ == "__main__":
    main()
