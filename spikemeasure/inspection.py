"""A plain-text summary of one file: what a person checks before trusting the numbers."""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from .analysis.detection import DetectionSettings
from .analysis.epochs import Epoch, Stimulus, main_stimulus
from .analysis.sweeps import CurrentStep
from .io import Recording, read_recording
from .analysis.cell_features import CELL_FLAG_TEXT
from .tables.build import SweepResult, cell_summary, measure_recording

__all__ = ["describe_file", "inspect_file", "Inspection"]


@dataclass(frozen=True)
class Inspection:
    """What :func:`inspect_file` found: the text, whether any sweep was measured, and the
    results (for figures)."""

    text: str
    ok: bool
    results: list[SweepResult]
    recording: Recording | None = None

    def close(self) -> None:
        """Close the file long sweeps are read from (see :meth:`Recording.close`)."""
        if self.recording is not None:
            self.recording.close()


def _fmt(value: float, unit: str, digits: int = 1) -> str:
    return "-" if value is None or math.isnan(value) else f"{value:.{digits}f} {unit}"


def describe_file(path: str, settings: DetectionSettings = DetectionSettings(), *,
                  step_s: tuple[float, float] | None = None,
                  step_sizes_pa: tuple[float, float] | None = None,
                  sampling_rate_hz: float | None = None) -> tuple[str, bool]:
    """Describe a recording: format, channels, sweeps, steps and spike counts.

    Returns (text, ok) where ok is False when no sweep could be measured.
    Raises :class:`~spikemeasure.errors.UnreadableInputError` when the file cannot be read.
    """
    found = inspect_file(path, settings, step_s=step_s, step_sizes_pa=step_sizes_pa,
                         sampling_rate_hz=sampling_rate_hz)
    found.close()
    return found.text, found.ok


def inspect_file(path: str, settings: DetectionSettings = DetectionSettings(), *,
                 step_s: tuple[float, float] | None = None,
                 step_sizes_pa: tuple[float, float] | None = None,
                 sampling_rate_hz: float | None = None,
                 max_sweep_samples: int | None = None) -> Inspection:
    """As :func:`describe_file`, keeping the sweep results and the recording too (for figures;
    call :meth:`Inspection.close` when done with them)."""
    recording = read_recording(path, sampling_rate_hz=sampling_rate_hz,
                               max_sweep_samples=max_sweep_samples)
    electrodes = recording.electrodes()
    try:  # each electrode's sweeps are one cell, with its own step series
        by_cell = [measure_recording(replace(recording, sweeps=recording.sweeps_of(e),
                                             release=None), settings, step_s, step_sizes_pa)
                   for e in electrodes]
    except BaseException:
        recording.close()
        raise
    results = [r for found in by_cell for r in found]
    named = len(electrodes) > 1  # an electrode column for a file of several cells
    width = max([9] + [len(e) for e in electrodes])
    rates = sorted({s.sampling_rate_hz for s in recording.sweeps})
    lines = [
        f"file:          {recording.path} ({Path(path).stat().st_size / 1e6:.2f} MB)",
        f"format:        {recording.format}",
        f"sweeps:        {len(recording.sweeps)}"
        + (f" ({len(electrodes)} cells, one per electrode)" if named
           else f" (electrode {electrodes[0]})" if electrodes and electrodes[0] else ""),
        "sampling rate: " + ", ".join(f"{r / 1e3:g} kHz" for r in rates),
        "channels:      " + (", ".join(f"{c.name} [{c.units}] as {c.role}"
                                       for c in recording.channels) or "-"),
        "",
        (f"{'electrode':<{width}}  " if named else "")
        + f"{'sweep':>5}  {'duration':>9}  {'holding':>10}  {'stimulus':>10}  {'from':>9}  "
        f"{'to':>7}  {'spikes':>6}  note",
    ]
    measured = 0
    for r in results:
        s = r.sweep
        step = r.step
        if r.error is None:
            measured += 1
        note = r.error.split(": ", 1)[-1] if r.error else ""
        spikes = "-" if r.spikes is None else str(len(r.spikes))
        sweep_flags = r.features.flags if r.features is not None else ()
        if "too_slow_for_spikes" in sweep_flags:
            spikes = "-"
        elif "spike_count_lower_bound" in sweep_flags:
            spikes = f">={spikes}"
        if sweep_flags:
            note = ", ".join(f.replace("_", " ") for f in sweep_flags)
        if step is None:
            hold = size = start = stop = "-"
            if r.error is None:
                note = note or ("gap-free, read in pieces" if s.is_lazy else
                                "no command channel: give --step START END"
                                if s.command_pa is None else "no current step")
        else:
            if step.shape != "step":
                note = f"{step.shape}, {note}" if note else step.shape
            hold, size = _fmt(step.holding_pa, "pA"), _fmt(step.size_pa, "pA")
            start, stop = _fmt(step.onset_s, "s", 3), _fmt(step.offset_s, "s", 3)
        lines.append((f"{s.electrode:<{width}}  " if named else "")
                     + f"{s.index:>5}  {s.duration_s:>7.3f} s  {hold:>10}  {size:>10}  "
                     f"{start:>9}  {stop:>7}  {spikes:>6}  {note}")
    lines += _epoch_lines(results, named)
    if recording.problems:
        lines += ["", "skipped:"] + [f"  {p}" for p in recording.problems]
    total = sum(len(r.spikes) for r in results if r.spikes is not None)
    lines += ["", f"{measured} of {len(results)} sweeps measured, {total} spikes"]
    for electrode, found in zip(electrodes, by_cell):
        if any(r.error is None for r in found):
            title = f"cell (electrode {electrode}):" if len(electrodes) > 1 else "cell:"
            lines += ["", title] + _cell_lines(cell_summary(found))
    return Inspection("\n".join(lines), measured > 0, results, recording)


#: At most this many epochs of a sweep are listed (an oscillating command has hundreds).
MAX_EPOCHS_LISTED = 12


def _pa(value: float) -> str:
    text = f"{value:.1f}"
    return "0.0" if text == "-0.0" else text


def _epoch_text(epoch: Epoch, role: str) -> str:
    span = f"{epoch.start_s:.3f}-{epoch.end_s:.3f} s"
    if epoch.shape == "ramp":
        what = (f"ramp {_pa(epoch.start_pa)} to {_pa(epoch.end_pa)} pA "
                f"({_pa(epoch.rate_pa_per_s)} pA/s)")
    else:
        what = f"{_pa(epoch.mean_pa)} pA"
    return f"{span} {what}" + (f" ({role})" if role else "")


def _epoch_roles(found: Stimulus, step: CurrentStep | None) -> list[str]:
    """'main' for the epochs of the stimulus the sweep was measured over, 'test pulse' for
    its test pulse (a sweep's only pulse, where the protocol's other sweeps have theirs,
    included)."""
    roles = []
    pulse_known = step is not None and np.isfinite(step.test_pulse_pa)
    for k, e in enumerate(found.epochs.epochs):
        if step is not None and step.onset_s <= e.start_s < step.offset_s:
            roles.append("main")
        elif pulse_known and (e.start_s == found.test_pulse_s[0]
                              or found.main[0] <= k <= found.main[1]):
            roles.append("test pulse")
        else:
            roles.append("")
    return roles


def _epoch_lines(results: list[SweepResult], named: bool = False) -> list[str]:
    """Each sweep's command as epochs, the main stimulus and test pulse marked (each sweep
    named by its electrode too when `named`: a file of several cells)."""
    lines = []
    for r in results:
        s = r.sweep
        if s.command_pa is None or s.is_lazy or s.command_pa.size < 3:
            continue
        found = main_stimulus(np.asarray(s.command_pa, dtype=float), s.sampling_rate_hz)
        roles = _epoch_roles(found, r.step)
        texts = [_epoch_text(e, role) for e, role in zip(found.epochs.epochs, roles)]
        if r.step is not None and "main" not in roles:
            texts.append(f"no stimulus of its own: measured over {r.step.onset_s:.3f}-"
                         f"{r.step.offset_s:.3f} s as a {_pa(r.step.size_pa)} pA step")
        more = len(texts) - MAX_EPOCHS_LISTED
        texts = texts[:MAX_EPOCHS_LISTED] + ([f"and {more} more"] if more > 0 else [])
        shape = r.step.shape if r.step is not None else "none"
        where = f"{s.electrode}, sweep {s.index}" if named else f"sweep {s.index}"
        lines.append(f"  {where}: {shape}; " + ", ".join(texts))
    if not lines:
        return []
    return ["", "command epochs (levels and ramps; main stimulus and test pulse marked):"] + lines


def _cell_lines(cell) -> list[str]:
    rheobase = _fmt(cell.rheobase_pa, "pA")
    if rheobase != "-" and cell.rheobase_resolution_pa == cell.rheobase_resolution_pa:
        rheobase += f" (steps {cell.rheobase_resolution_pa:g} pA apart)"
    rows = [
        ("resting potential", _fmt(cell.resting_mv, "mV")),
        ("rheobase", rheobase),
        ("ramp rheobase", _fmt(cell.ramp_rheobase_pa, "pA")),
        ("f-I slope", _fmt(cell.fi_slope_hz_per_pa, "Hz/pA", 3)),
        ("max firing rate", _fmt(cell.max_firing_rate_hz, "Hz")),
        ("input resistance", _fmt(cell.input_resistance_mohm, "MOhm")),
        ("membrane time constant", _fmt(cell.membrane_tau_ms, "ms", 2)
         + (f" (fit R^2 {cell.membrane_tau_fit_r2:.3f})"
            if cell.membrane_tau_fit_r2 == cell.membrane_tau_fit_r2 else "")),
        ("sag fraction", _fmt(cell.sag_fraction, "", 3).strip()),
        ("bridge error", _fmt(cell.bridge_error_mohm, "MOhm")),
        ("depolarization block", "-" if cell.block_stimulus_pa != cell.block_stimulus_pa
         else f"from the {cell.block_stimulus_pa:g} pA step"),
        ("first spike at rheobase", "-" if cell.rheobase_threshold_mv != cell.rheobase_threshold_mv
         else f"threshold {cell.rheobase_threshold_mv:.1f} mV, amplitude "
              f"{cell.rheobase_amplitude_mv:.1f} mV, half-width {cell.rheobase_half_width_ms:.2f}"
              f" ms, AHP {cell.rheobase_ahp_depth_mv:.1f} mV"),
    ]
    out = [f"  {name:<24} {value}" for name, value in rows]
    out += [f"  note: {CELL_FLAG_TEXT[f]}" for f in cell.flags]
    return out
