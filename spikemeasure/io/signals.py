"""neo signals and segments into sweeps, by the units each channel declares.

Shared by the readers of NWB, NIX and the other formats neo reads.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np

from ..errors import UnreadableInputError
from .sweep import Sweep
from .lazy import LongSignal, settle_long_sweep
from .messages import safe_name
from .recording import ChannelInfo, Recording
from .units import scale_to, unit_text

__all__ = ["unit_object", "Segment", "rate_problem", "looks_like_command", "signal_columns",
           "sweep_where", "sweep_from_signals", "sweeps_from_signals", "segments_to_recording",
           "close_rawio"]


def unit_object(name: str):
    """The quantities unit named `name` ("Hz", "s"): the unit object itself, so that a
    rescale does not parse the name again (the same conversion either way)."""
    import quantities as pq

    return getattr(pq, name)


def rate_problem(where: str, signal) -> str | None:
    """Why a signal's time axis cannot be used (a sampling rate that is zero, negative, NaN or
    infinite, or a starting time that is not finite), or None."""
    rate = float(signal.sampling_rate.rescale(unit_object("Hz")))
    t_start = getattr(signal, "t_start", None)
    start = float(t_start.rescale(unit_object("s"))) if t_start is not None else 0.0
    if not np.isfinite(start):
        return (f"{where}: the starting time is {start:g} s; it must be a finite number, so "
                "the sweep was not read. The file's time axis is damaged")
    if np.isfinite(rate) and rate > 0:
        return None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            interval = float(signal.sampling_period.rescale(unit_object("s")))
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
    if hasattr(signal, "stored_columns"):  # samples left in the file until measured
        columns = signal.stored_columns()
    else:
        data = np.asarray(signal.magnitude, dtype=np.float64)
        if data.ndim == 1:
            data = data[:, None]
        columns = [data[:, c] for c in range(data.shape[1])]
    names = list(signal.array_annotations.get("channel_names", [])) if hasattr(
        signal, "array_annotations") else []
    base = safe_name(signal.name, "signal")
    for c, column in enumerate(columns):
        own = safe_name(names[c]) if c < len(names) else ""
        name = own or (base if len(columns) == 1 else f"{base}[{c}]")
        yield name, column, signal


def sweep_where(path: str, index: int, label: str, electrode: str = "") -> str:
    """'file, sweep N (label)' or 'file, electrode E, sweep N (label)', as
    :meth:`Sweep.where` says it."""
    shown_label = label and label != f"sweep {index}"
    cell = f", electrode {electrode}" if electrode else ""
    return f"{path}{cell}, sweep {index}" + (f" ({label})" if shown_label else "")


def _signal_channels(signals, where: str
                     ) -> tuple[list, list, list[ChannelInfo], str | None]:
    """The voltage and current channels of a segment's signals, in the file's order, as
    (name, column in mV or pA, sampling rate in Hz); every channel as declared; or why the
    time axis of a signal cannot be used."""
    voltages, currents, channels = [], [], []
    for signal in signals:
        problem = rate_problem(where, signal)
        if problem:
            return voltages, currents, channels, problem
        to_mv, to_pa = scale_to(signal, "mV"), scale_to(signal, "pA")
        for name, column, sig in signal_columns(signal):
            rate = float(sig.sampling_rate.rescale(unit_object("Hz")))
            if to_mv is not None:
                voltages.append((name, column * to_mv, rate, len(channels)))
            elif to_pa is not None:
                currents.append((name, column * to_pa, rate, len(channels)))
            channels.append(ChannelInfo(name, unit_text(sig), "ignored"))
    return voltages, currents, channels, None


def _electrode_names(voltages: list) -> list[str]:
    """Each voltage channel's electrode: "" when there is one; else the channels' names when
    they are distinct, else their positions ("0", "1", ...)."""
    if len(voltages) <= 1:
        return [""] * len(voltages)
    names = [v[0] for v in voltages]
    if all(names) and len(set(names)) == len(names):
        return names
    return [str(k) for k in range(len(voltages))]


def sweeps_from_signals(signals, path: str, index: int, label: str
                        ) -> tuple[list[Sweep], list[ChannelInfo], list[tuple[str, str]]]:
    """Make the sweeps of one segment from its analog signals by their declared units: one
    per voltage channel, each with its own command.

    The k-th voltage channel is paired with the k-th current channel, when there is one.
    With several voltage channels each sweep's ``electrode`` is its channel's name (their
    positions when the names are missing or alike); with one it is "".

    Returns
    -------
    (sweeps, channels, problems)
        Problems are (electrode, message) pairs; electrode "" for the segment as a whole.
    """
    where = sweep_where(path, index, label)
    voltages, currents, channels, problem = _signal_channels(signals, where)
    if problem:
        return [], channels, [("", problem)]
    if not voltages:
        units = ", ".join(c.units for c in channels)
        found = (f"{len(channels)} channel{'s' if len(channels) != 1 else ''} in {units}"
                 if channels else "no channels")
        return [], channels, [("", f"{where}: no channel in volts ({found}); spikemeasure "
                                   "needs the membrane voltage")]
    electrodes = _electrode_names(voltages)
    roles = {}
    for k, (_, _, _, position) in enumerate(voltages):
        roles[position] = "voltage"
        if k < len(currents):
            roles[currents[k][3]] = "command"
    channels = [ChannelInfo(c.name, c.units, roles.get(i, c.role))
                for i, c in enumerate(channels)]
    sweeps, problems = [], []
    for k, (name, v, rate, _) in enumerate(voltages):
        own = sweep_where(path, index, label, electrodes[k])
        command = currents[k][1:3] if k < len(currents) else None
        if command is not None and looks_like_command(v) and not looks_like_command(command[0]):
            problems.append((electrodes[k], f"{own}: this looks like a voltage-clamp recording "
                             "(the voltage channel is a few flat command levels); "
                             "spikemeasure measures current clamp"))
            continue
        cmd = None
        if command is not None:
            c, c_rate = command
            if abs(c_rate - rate) > 1e-6 * rate or c.size != v.size:
                problems.append((electrodes[k], (
                    f"{own}: the current channel ({c.size} samples at {c_rate:g} Hz) does not "
                    f"match the voltage ({v.size} samples at {rate:g} Hz); it was not used as "
                    "the command")))
            else:
                cmd = c
        try:
            sweeps.append(settle_long_sweep(Sweep(
                voltage_mv=v, sampling_rate_hz=rate, command_pa=cmd, file=path, index=index,
                label=label, channel_info=tuple(channels), electrode=electrodes[k],
                cells_in_file=len(voltages))))
        except UnreadableInputError as exc:
            problems.append((electrodes[k], str(exc)))
    return sweeps, channels, problems


def sweep_from_signals(signals, path: str, index: int, label: str
                        ) -> tuple[Sweep | None, list[ChannelInfo], list[str]]:
    """Make one sweep from the analog signals of a segment by their declared units: the
    first voltage channel, with the first current channel as its command.

    Returns (sweep or None, channels, problems). A voltage channel after the first is named
    in the problems as not measured.
    """
    sweeps, channels, found = sweeps_from_signals(signals, path, index, label)
    voltages = [c.name for c in channels if c.role == "voltage"]
    if len(voltages) <= 1:
        return (sweeps[0] if sweeps else None), channels, [m for _, m in found]
    first = _electrode_names([(n,) for n in voltages])[0]
    sweep = next((replace(s, electrode="", cells_in_file=1) for s in sweeps
                  if s.electrode == first), None)
    seen_first = False
    kept = []
    for c in channels:
        role = c.role
        if role == "voltage":
            role, seen_first = ("voltage" if not seen_first else "ignored"), True
        kept.append(ChannelInfo(c.name, c.units, role))
    problems = [m for e, m in found if e in ("", first)]
    extra = voltages[1:]
    problems.append(
        f"{sweep_where(path, index, label)}: {len(extra)} more voltage channel"
        f"{'s were' if len(extra) != 1 else ' was'} not measured ({', '.join(extra)}); only "
        f"the first, {voltages[0]}, was. Split the channels into files of their own to "
        "measure them")
    return sweep, kept, problems


def segments_to_recording(segments, path: str, format_name: str,
                           problems: list[str] | None = None) -> Recording:
    """The sweeps of neo segments, one per segment and voltage channel (see
    :func:`sweeps_from_signals`); the sweep index is the segment's position."""
    sweeps, first_channels = [], []
    problems = list(problems or [])
    problem_electrodes = [""] * len(problems)
    for index, segment in enumerate(segments):
        if getattr(segment, "refused", None):
            problems.append(segment.refused)
            problem_electrodes.append("")
            continue
        made, channels, found = sweeps_from_signals(segment.analogsignals, path, index,
                                                    safe_name(segment.name))
        if index == 0:
            first_channels = channels
        problems.extend(m for _, m in found)
        problem_electrodes.extend(e for e, _ in found)
        sweeps.extend(made)
    if not sweeps:
        detail = problems[0] if problems else f"{path}: the file holds no analog signals"
        raise UnreadableInputError(detail if len(problems) <= 1 else
                                   f"{detail} (and {len(problems) - 1} more problems)")
    return Recording(path, format_name, sweeps, first_channels, problems,
                     problem_electrodes=problem_electrodes)


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
