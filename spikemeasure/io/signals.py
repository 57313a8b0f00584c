"""neo signals and segments into sweeps, by the units each channel declares.

Shared by the readers of NWB, NIX and the other formats neo reads.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..errors import UnreadableInputError
from .sweep import Sweep
from .lazy import LongSignal, settle_long_sweep
from .messages import safe_name
from .recording import ChannelInfo, Recording
from .units import scale_to, unit_text

__all__ = ["Segment", "rate_problem", "looks_like_command", "signal_columns", "sweep_where",
           "sweep_from_signals", "segments_to_recording", "close_rawio"]


def rate_problem(where: str, signal) -> str | None:
    """Why a signal's time axis cannot be used (a sampling rate that is zero, negative, NaN or
    infinite, or a starting time that is not finite), or None."""
    rate = float(signal.sampling_rate.rescale("Hz"))
    start = float(signal.t_start.rescale("s")) if getattr(signal, "t_start", None) is not None \
        else 0.0
    if not np.isfinite(start):
        return (f"{where}: the starting time is {start:g} s; it must be a finite number, so "
                "the sweep was not read. The file's time axis is damaged")
    if np.isfinite(rate) and rate > 0:
        return None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            interval = float(signal.sampling_period.rescale("s"))
    except (AttributeError, ValueError, ZeroDivisionError):
        interval = float("nan")
    return (f"{where}: the sampling rate is {rate:g} Hz (sampling interval {interval:g} s); it "
            "must be a positive, finite number, so the sweep was not read. The file's time "
            "axis is damaged")


def looks_like_command(voltage_mv: np.ndarray) -> bool:
    """A voltage channel made of a few flat levels is a voltage-clamp command, not a response.

    The first 100,000 samples tell as well as all of them.
    """
    head = voltage_mv[:100_000]
    if head.size < 100:
        return False
    return np.count_nonzero(np.diff(head)) < 0.01 * head.size


def signal_columns(signal):
    """Yield (name, 1-D float64 column, signal) for every channel of a neo AnalogSignal.

    Names are the file's own only when they are plain identifiers (:func:`safe_name`).
    """
    if isinstance(signal, LongSignal):
        names = list(signal.array_annotations.get("channel_names", []))
        name = safe_name(names[0]) if names else ""
        yield name or safe_name(signal.name, "signal"), signal.trace(), signal
        return
    data = np.asarray(signal.magnitude, dtype=np.float64)
    if data.ndim == 1:
        data = data[:, None]
    names = list(signal.array_annotations.get("channel_names", [])) if hasattr(
        signal, "array_annotations") else []
    base = safe_name(signal.name, "signal")
    for c in range(data.shape[1]):
        own = safe_name(names[c]) if c < len(names) else ""
        name = own or (base if data.shape[1] == 1 else f"{base}[{c}]")
        yield name, data[:, c], signal


def sweep_where(path: str, index: int, label: str) -> str:
    shown_label = label and label != f"sweep {index}"
    return f"{path}, sweep {index}" + (f" ({label})" if shown_label else "")


def sweep_from_signals(signals, path: str, index: int, label: str
                        ) -> tuple[Sweep | None, list[ChannelInfo], list[str]]:
    """Make one sweep from the analog signals of a segment by their declared units.

    Returns (sweep or None, channels, problems). A voltage channel after the first is named
    in the problems as not measured.
    """
    voltage = command = None
    channels: list[ChannelInfo] = []
    where = sweep_where(path, index, label)
    extra_voltages: list[str] = []
    voltage_name = ""
    for signal in signals:
        problem = rate_problem(where, signal)
        if problem:
            return None, channels, [problem]
        to_mv, to_pa = scale_to(signal, "mV"), scale_to(signal, "pA")
        for name, column, sig in signal_columns(signal):
            role = "ignored"
            if to_mv is not None and voltage is None:
                voltage, role = (column * to_mv, float(sig.sampling_rate.rescale("Hz"))), "voltage"
                voltage_name = name
            elif to_mv is not None:
                extra_voltages.append(name)
            elif to_pa is not None and command is None:
                command, role = (column * to_pa, float(sig.sampling_rate.rescale("Hz"))), "command"
            channels.append(ChannelInfo(name, unit_text(sig), role))
    if voltage is None:
        units = ", ".join(c.units for c in channels)
        found = (f"{len(channels)} channel{'s' if len(channels) != 1 else ''} in {units}"
                 if channels else "no channels")
        return None, channels, [f"{where}: no channel in volts ({found}); spikemeasure needs "
                                "the membrane voltage"]
    problems = []
    if extra_voltages:
        problems.append(
            f"{where}: {len(extra_voltages)} more voltage channel"
            f"{'s were' if len(extra_voltages) != 1 else ' was'} not measured "
            f"({', '.join(extra_voltages)}); only the first, {voltage_name}, was. Split the "
            "channels into files of their own to measure them")
    v, rate = voltage
    if command is not None and looks_like_command(v) and not looks_like_command(command[0]):
        return None, channels, [f"{where}: this looks like a voltage-clamp recording (the "
                                "voltage channel is a few flat command levels); spikemeasure "
                                "measures current clamp"]
    cmd = None
    if command is not None:
        c, c_rate = command
        if abs(c_rate - rate) > 1e-6 * rate or c.size != v.size:
            problems.append(f"{where}: the current channel ({c.size} samples at {c_rate:g} Hz) "
                            f"does not match the voltage ({v.size} samples at {rate:g} Hz); it "
                            "was not used as the command")
        else:
            cmd = c
    try:
        sweep = settle_long_sweep(Sweep(voltage_mv=v, sampling_rate_hz=rate, command_pa=cmd,
                                         file=path, index=index, label=label,
                                         channel_info=tuple(channels)))
    except UnreadableInputError as exc:
        return None, channels, [str(exc)]
    return sweep, channels, problems


def segments_to_recording(segments, path: str, format_name: str,
                           problems: list[str] | None = None) -> Recording:
    sweeps, first_channels = [], []
    problems = list(problems or [])
    for index, segment in enumerate(segments):
        if getattr(segment, "refused", None):
            problems.append(segment.refused)
            continue
        sweep, channels, found = sweep_from_signals(segment.analogsignals, path, index,
                                                     safe_name(segment.name))
        if index == 0:
            first_channels = channels
        problems.extend(found)
        if sweep is not None:
            sweeps.append(sweep)
    if not sweeps:
        detail = problems[0] if problems else f"{path}: the file holds no analog signals"
        raise UnreadableInputError(detail if len(problems) <= 1 else
                                   f"{detail} (and {len(problems) - 1} more problems)")
    return Recording(path, format_name, sweeps, first_channels, problems)


@dataclass
class Segment:
    """A segment read lazily: its name, its loaded signals, and why it was refused ("" if
    it was not)."""

    name: str
    analogsignals: list
    refused: str = ""


def close_rawio(io) -> None:
    """Close the file a neo raw reader keeps open."""
    handle = getattr(io, "file", None)
    if handle is not None and hasattr(handle, "close"):
        handle.close()
