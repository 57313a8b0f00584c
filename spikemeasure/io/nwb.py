"""NWB files (``.nwb``): current-clamp series paired with their stimulus series by sweep number.

Files not written with the intracellular series types are read as neo segments, each sweep
by the units its channels declare.
"""
from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

from ..errors import UnreadableInputError
from .sweep import LazyTrace, Sweep
from . import limits
from .lazy import LongSignal, is_long, settle_long_sweep
from .messages import library_failure, safe_name
from .recording import Recording
from .safety import HDF5_SIGNATURE
from .signals import segments_to_recording, sweep_from_signals
from .units import scale_to

__all__ = ["read_nwb"]

_CC_RESPONSE = {"CurrentClampSeries", "IZeroClampSeries"}
_CC_STIMULUS = {"CurrentClampStimulusSeries"}
_VC_TYPES = {"VoltageClampSeries", "VoltageClampStimulusSeries"}


def _nwb_type(signal) -> str:
    kind = signal.annotations.get("nwb_neurodata_type", ("", ""))
    return kind[-1] if isinstance(kind, (tuple, list)) else str(kind)


def _nwb_series_problem(series, where: str) -> str | None:
    """What makes an NWB series' time axis or scale unusable, checked before neo sees it."""
    rate = series.rate
    start = series.starting_time
    conversion = getattr(series, "conversion", 1.0)
    try:
        rate, conversion = float(rate), float(conversion)
        start = 0.0 if start is None else float(start)
    except (TypeError, ValueError):
        return f"{where}: the rate, starting time or conversion factor is not a number"
    if not (np.isfinite(rate) and rate > 0):
        return (f"{where}: the sampling rate is {rate:g} Hz; it must be a positive, finite "
                "number, so the sweep was not read. The file's time axis is damaged")
    if not np.isfinite(start):
        return (f"{where}: the starting time is {start:g} s; it must be a finite number, so "
                "the sweep was not read. The file's time axis is damaged")
    if not (np.isfinite(conversion) and conversion > 0):
        return (f"{where}: the conversion factor to {series.unit if series.unit in ('volts', 'amperes') else 'SI units'} "
                f"is {conversion:g}; it must be a positive, finite number, so the sweep was "
                "not read")
    return None


def _nwb_signals(path: Path, shown: str, max_sweep_samples: int
                 ) -> tuple[list, object, dict]:
    """The analog series of an NWB file as neo signals: neo's lazy proxies opened on the
    file's acquisition and stimulus series, short ones loaded, long ones left in the file.

    Series whose time axis or scale is unusable, or whose declared size is beyond
    `max_sweep_samples` or the memory available, are not loaded.

    Returns (signals, the open pynwb reader, to be closed when the long ones are read,
    {sweep number or None: why that series was refused}).
    """
    import pynwb
    from neo.io.nwbio import AnalogSignalProxy

    reader = pynwb.NWBHDF5IO(str(path), mode="r", load_namespaces=True)
    refused: dict = {}
    try:
        nwbfile = reader.read()
        signals = []
        for group_name in ("acquisition", "stimulus"):
            for series in getattr(nwbfile, group_name).values():
                if isinstance(series, pynwb.misc.AnnotationSeries):
                    continue
                number = getattr(series, "sweep_number", None)
                name = safe_name(series.name)
                where = (f"{shown}, series {name or 'without a plain name'}"
                         + (f" (sweep_number {int(number)})" if number is not None else ""))
                if getattr(series, "rate", None) is None:
                    if type(series).__name__ in _CC_RESPONSE | _CC_STIMULUS:
                        refused.setdefault(None if number is None else int(number), (
                            f"{where}: sampled at listed times (timestamps), not at a "
                            "constant rate; spikemeasure needs a constant sampling rate, so "
                            "the sweep was not read"))
                    continue  # other series without a rate (timestamps) are not signals here
                problem = _nwb_series_problem(series, where)
                if problem is None:
                    shape = tuple(series.data.shape)
                    problem = limits.size_problem(where, shape, max_sweep_samples,
                                                  whole=not limits.is_long_shape(shape))
                if problem is not None:
                    refused.setdefault(None if number is None else int(number), problem)
                    continue
                proxy = AnalogSignalProxy(series, group_name)
                signals.append(LongSignal(proxy, shown) if is_long(proxy) else proxy.load())
    except BaseException:
        reader.close()
        raise
    return signals, reader, refused


def read_nwb(path: Path, shown: str, max_sweep_samples: int) -> Recording:
    """Read an NWB file: its current-clamp series, each paired with the stimulus series of
    the same sweep number (or, in files without those types, neo's segments).

    Parameters
    ----------
    path : Path
        The file.
    shown : str
        How the file is named in sweeps and messages.
    max_sweep_samples : int
        Sweeps declaring more samples are refused before they are read.

    Returns
    -------
    Recording
        Close it (or use it in ``with``) when long sweeps were left in the file.

    Raises
    ------
    UnreadableInputError
        The file is not HDF5, cannot be read as NWB, or holds no measurable sweep.
    """
    with open(path, "rb") as fh:
        if fh.read(8) != HDF5_SIGNATURE:
            raise UnreadableInputError(
                f"{shown}: not an NWB file (NWB files are HDF5, and this one does not start "
                "with the HDF5 signature; it may be truncated or of another format)")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            signals, reader, refused = _nwb_signals(path, shown, max_sweep_samples)
    except Exception as exc:  # the NWB stack raises many types; keep the cause
        raise UnreadableInputError(
            f"{shown}: cannot be read as NWB ({library_failure(exc)})") from exc
    try:
        recording = _nwb_recording(signals, path, shown, refused)
    except BaseException:
        reader.close()
        raise
    if not any(sw.is_lazy for sw in recording.sweeps):
        reader.close()
        return recording
    return Recording(recording.path, recording.format, recording.sweeps, recording.channels,
                     recording.problems, release=reader.close)


def _nwb_recording(signals: list, path: Path, shown: str, refused: dict) -> Recording:
    import neo

    by_sweep: dict[int, dict[str, list]] = {}
    types = {_nwb_type(s) for s in signals}
    if not types & _CC_RESPONSE and not refused:
        if types & _VC_TYPES:
            raise UnreadableInputError(
                f"{shown}: a voltage-clamp recording (it holds VoltageClampSeries and no "
                "CurrentClampSeries); spikemeasure measures current clamp")
        # not written with the intracellular types: neo's segments (from the series' notes),
        # each sweep by the units its channels declare, read whole
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                block = neo.io.NWBIO(str(path), mode="r").read_block(lazy=False)
        except Exception as exc:  # the NWB stack raises many types; keep the cause
            raise UnreadableInputError(
                f"{shown}: cannot be read as NWB ({library_failure(exc)})") from exc
        return segments_to_recording(block.segments, shown, "NWB (by channel units)")
    for order, s in enumerate(signals):
        kind = _nwb_type(s)
        if kind not in _CC_RESPONSE | _CC_STIMULUS:
            continue
        number = s.annotations.get("nwb:sweep_number")
        key = int(number) if number is not None else order
        slot = by_sweep.setdefault(key, {"response": [], "stimulus": []})
        slot["response" if kind in _CC_RESPONSE else "stimulus"].append(s)
    problems = [why for number, why in refused.items() if number is None]
    for number in refused:
        if number is not None:
            by_sweep.setdefault(number, {"response": [], "stimulus": []})
    sweeps, first_channels = [], []
    for index, number in enumerate(sorted(by_sweep)):
        slot = by_sweep[number]
        label = f"sweep_number {number}"
        if number in refused:
            problems.append(refused[number].replace(
                f"{shown}, ", f"{shown}, sweep {index}, ", 1))
            continue
        if not slot["response"]:
            problems.append(f"{shown}, sweep {index} ({label}): a stimulus with no voltage "
                            "response; skipped")
            continue
        response = slot["response"][0]
        stimulus = slot["stimulus"][0] if slot["stimulus"] else None
        name = safe_name(response.name)
        label = f"sweep_number {number}" + (f", {name}" if name else "")
        parts = [response] + ([stimulus] if stimulus is not None else [])
        sweep, channels, found = sweep_from_signals(parts, shown, index, label)
        if (stimulus is not None and sweep is not None and sweep.command_pa is None
                and found and found[-1].endswith("it was not used as the command")):
            # align a stimulus that starts later or is longer than the response
            sweep, aligned = _align_stimulus(sweep, response, stimulus)
            if aligned:
                found = found[:-1]
        if not first_channels:
            first_channels = channels
        problems.extend(found)
        if len(slot["response"]) > 1:
            problems.append(f"{shown}, sweep {index} ({label}): {len(slot['response'])} responses "
                            "share this sweep number; the first was used")
        if sweep is not None:
            sweeps.append(sweep)
    if not sweeps:
        raise UnreadableInputError(
            f"{shown}: no current-clamp sweeps found" if not problems else problems[0]
            if len(problems) == 1 else f"{problems[0]} (and {len(problems) - 1} more problems)")
    return Recording(shown, "NWB (intracellular series paired by sweep number)", sweeps,
                     first_channels, problems)


def _align_stimulus(sweep: Sweep, response, stimulus) -> tuple[Sweep, bool]:
    """Cut a stimulus to the response's time span when both share a sampling rate.

    Either may be long and left in the file (:class:`LongSignal`); a long stimulus is cut
    lazily. Returns (the sweep, with the command when it could be aligned; whether it was).
    """
    rate = sweep.sampling_rate_hz
    s_rate = float(stimulus.sampling_rate.rescale("Hz"))
    if abs(s_rate - rate) > 1e-6 * rate:
        return sweep, False
    offset = int(round((float(response.t_start.rescale("s")) -
                        float(stimulus.t_start.rescale("s"))) * rate))
    to_pa = scale_to(stimulus, "pA")
    if to_pa is None:
        return sweep, False
    if isinstance(stimulus, LongSignal):
        column = stimulus.trace() * to_pa
    else:
        column = np.asarray(stimulus.magnitude, dtype=np.float64).reshape(-1) * to_pa
    n = sweep.n_samples
    if offset < 0 or offset + n > column.size:
        return sweep, False
    if isinstance(column, LazyTrace):
        whole = column
        aligned = LazyTrace(lambda a, b: whole[offset + a:offset + b], n)
    else:
        aligned = column[offset:offset + n]
    try:
        settled = settle_long_sweep(Sweep(sweep.voltage_mv, rate, aligned, sweep.file,
                                           sweep.index, sweep.label, sweep.channel_info))
    except UnreadableInputError:
        return sweep, False
    return settled, True
