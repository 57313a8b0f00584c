"""Read current-clamp recordings into :class:`~spikemeasure.sweeps.Sweep` objects.

This is the only module that imports neo. Formats:

- NWB (``.nwb``): current-clamp series paired with their stimulus series by sweep number.
- NIX (``.nix``): one sweep per neo segment.
- Plain text (``.txt``, ``.csv``, ``.tsv``): columns under a header row naming units, one sweep
  per file, parsed with numpy in float64. (neo's text reader parses as float32, which rounds a
  voltage of -70.1 mV to -70.09999847, and gives every column one unit, so a file holding mV
  and pA columns cannot be read with it.)
- Anything else neo reads, found by neo's own extension table.

Units are converted by the units each channel declares, never assumed. Readers that would
unpickle or evaluate file content are refused.

Messages never quote what a file holds (header lines, cell values, the text of a parser's
exception): they name the file, the sweep, and the line and column or the setting that is
wrong. Names a file gives its sweeps and channels are shown only when they are short plain
identifiers (:func:`_safe_name`). A sweep whose declared size exceeds ``max_sweep_samples``, or
that would not fit in the available memory when read whole, is refused before it is read.
"""
from __future__ import annotations

import errno
import inspect
import json
import os
import re
import stat
import sys
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from ..errors import InvalidSettingError, UnreadableInputError, printable_name
from ..sweeps import LazyTrace, Sweep

__all__ = ["Recording", "ChannelInfo", "read_recording", "find_recordings", "is_temporary",
           "search_recordings", "RecordingSearch",
           "TEXT_SUFFIXES", "RECORDING_SUFFIXES", "LONG_SWEEP_SAMPLES",
           "DEFAULT_MAX_SWEEP_SAMPLES"]

#: NWB and NIX sweeps longer than this (about 3.5 min at 20 kHz) stay in the file and are read
#: in pieces through neo's lazy loading, when their command current is constant (gap-free).
LONG_SWEEP_SAMPLES = 1 << 22

#: Sweeps declaring more samples than this are refused before anything is read from them
#: (the run parameter ``max_sweep_samples``). 10^9 samples is about 14 hours at 20 kHz, or
#: 8 GB as float64: more than any single current-clamp sweep, while a file that declares more
#: (a damaged or hostile header over a few kB of compressed fill values) would otherwise be
#: read for hours.
DEFAULT_MAX_SWEEP_SAMPLES = 1_000_000_000

TEXT_SUFFIXES = (".txt", ".csv", ".tsv")
#: The open formats a folder search picks up; other formats neo reads come in by pattern.
RECORDING_SUFFIXES = (".nwb", ".nix") + TEXT_SUFFIXES
_PICKLE_SUFFIXES = {".pkl", ".pickle", ".pck", ".joblib"}
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"

_VOLT_TO_MV = {"v": 1e3, "mv": 1.0, "uv": 1e-3, "µv": 1e-3}
_AMP_TO_PA = {"a": 1e12, "ma": 1e9, "ua": 1e6, "µa": 1e6, "na": 1e3, "pa": 1.0, "fa": 1e-3}
_SECOND_TO_S = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6}


@dataclass(frozen=True)
class ChannelInfo:
    """A channel as the file declares it, and the role spikemeasure gave it."""

    name: str
    units: str
    role: str  # "voltage", "command", or "ignored"


@dataclass(frozen=True)
class Recording:
    """The sweeps of one file and what the file said about itself.

    Attributes
    ----------
    path : str
        The path as given.
    format : str
        Which reader read it.
    sweeps : list of Sweep
    channels : list of ChannelInfo
        Channels of the first sweep.
    problems : list of str
        Parts of the file that were skipped, each naming the sweep and why.
    """

    path: str
    format: str
    sweeps: list[Sweep]
    channels: list[ChannelInfo] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    release: object = field(default=None, compare=False, repr=False)

    def close(self) -> None:
        """Close the file that long sweeps (:attr:`Sweep.is_lazy`) are read from."""
        if callable(self.release):
            self.release()

    def __enter__(self) -> "Recording":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


# --------------------------------------------------------------------------- safety checks

def _refuse_code_formats(path: Path, shown: str) -> None:
    if path.suffix.lower() in _PICKLE_SUFFIXES:
        raise UnreadableInputError(
            f"{shown}: pickle files can run code when loaded, so spikemeasure does not open "
            "them; export the recording to NWB, NIX or text")
    with open(path, "rb") as fh:
        head = fh.read(2)
    if len(head) == 2 and head[0] == 0x80 and 2 <= head[1] <= 5:
        raise UnreadableInputError(
            f"{shown}: the file is a Python pickle, which can run code when loaded; "
            "spikemeasure does not open it. Export the recording to NWB, NIX or text")


_UNSAFE_CALLS = re.compile(r"\bpickle\.loads?\(|\bjoblib\.load\(|(?<![\w.])eval\(|\bexec\(")
_unsafe_cache: dict[type, bool] = {}


def _reader_runs_file_content(cls: type) -> bool:
    """True when a neo reader's own source unpickles or evaluates what it reads.

    The check reads the source of the reader's modules (its class and its raw-reading base
    classes, not neo's shared base, whose optional cache is never switched on here).
    """
    if cls not in _unsafe_cache:
        unsafe = False
        for klass in inspect.getmro(cls):
            module = sys.modules.get(klass.__module__)
            name = getattr(module, "__name__", "")
            if not name.startswith("neo.") or name.endswith(("baseio", "baserawio",
                                                            "basefromrawio")):
                continue
            try:
                source = inspect.getsource(module)
            except (OSError, TypeError):
                unsafe = True  # cannot check it, so do not trust it
                break
            if _UNSAFE_CALLS.search(source):
                unsafe = True
                break
        _unsafe_cache[cls] = unsafe
    return _unsafe_cache[cls]


# --------------------------------------------------------------------------- names and sizes

_SAFE_NAME = re.compile(r"[A-Za-z0-9_ .()\[\]+-]{1,64}")


def _safe_name(name, fallback: str = "") -> str:
    """A name the file gives (a series, segment or channel) as it may appear in messages: kept
    only when it is a short plain identifier, else `fallback`, so that no other text of the
    file (a line of a system file read by mistake, say) reaches a message or a table."""
    text = str(name) if name is not None else ""
    return text if _SAFE_NAME.fullmatch(text) and text.strip() else fallback


def _library_failure(exc: BaseException) -> str:
    """A read failure of neo, pynwb, hdmf, nixio or h5py as its type and a fixed description.

    The libraries' own texts can quote the file (names, values, units as written), so only
    HDF5's own error-stack texts (``OSError`` from h5py, which never hold data) and the
    truncation numbers are kept.
    """
    text = str(exc)
    m = re.search(r"truncated file: eof = (\d+).*?stored_eof = (\d+)", text)
    if m:
        return (f"the file is truncated: {int(m.group(1)):,} of {int(m.group(2)):,} bytes are "
                "there; copy it again from its source")
    kind = type(exc).__name__
    if isinstance(exc, OSError) and type(exc).__module__ in ("builtins", "h5py._objects") and (
            re.fullmatch(r"[\w ,.;:()'=<>-]{1,200}", text)
            and not re.search(r"[\\/]", text)):
        return f"{kind}: {text}; the file may be truncated or damaged"
    return f"{kind} in the reading library; the file may be truncated, damaged or not valid"


def _available_memory_bytes() -> int | None:
    """Memory the system can give this process now (MemAvailable on Linux), or None."""
    try:
        with open("/proc/meminfo", "rb") as fh:
            for line in fh:
                if line.startswith(b"MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (AttributeError, ValueError, OSError):
        return None


def _size_problem(where: str, shape, max_sweep_samples: int, *, whole: bool) -> str | None:
    """Why a signal of the declared `shape` is not read, or None: more samples than
    `max_sweep_samples`, or (`whole`: read at once) more float64 bytes than the memory
    available."""
    dims = [int(d) for d in (shape or (0,))]
    n_samples = dims[0] if dims else 0
    n_values = int(np.prod(dims, dtype=object)) if dims else 0
    if n_samples > max_sweep_samples or n_values > max_sweep_samples:
        return (f"{where}: the file declares {n_values:,} samples for this sweep, more than "
                f"max_sweep_samples ({max_sweep_samples:,}); it was not read. Raise "
                "--max-sweep-samples if the recording really is that long")
    if whole:
        available = _available_memory_bytes()
        needed = 8 * n_values
        if available is not None and needed > available:
            return (f"{where}: the file declares {n_values:,} samples for this sweep, "
                    f"{needed / 2 ** 30:.1f} GiB as float64, more than the "
                    f"{available / 2 ** 30:.1f} GiB of memory available; it was not read")
    return None


def _rate_problem(where: str, signal) -> str | None:
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


# --------------------------------------------------------------------------- units

def _unit_text(signal) -> str:
    return signal.units.dimensionality.string


def _scale_to(signal, target: str) -> float | None:
    """Factor turning the signal's declared units into `target` ('mV' or 'pA'), or None."""
    import quantities as pq

    try:
        factor = float(signal.units.rescale(getattr(pq, target)).magnitude)
    except (ValueError, TypeError, AttributeError, LookupError):
        return None
    return factor if np.isfinite(factor) and factor != 0 else None


def _looks_like_command(voltage_mv: np.ndarray) -> bool:
    """A voltage channel made of a few flat levels is a voltage-clamp command, not a response.

    The first 100,000 samples tell as well as all of them.
    """
    head = voltage_mv[:100_000]
    if head.size < 100:
        return False
    return np.count_nonzero(np.diff(head)) < 0.01 * head.size


# --------------------------------------------------------------------------- neo blocks

class _LongSignal:
    """A one-channel neo signal proxy left in its file: what the readers need of a signal,
    with the samples as a :class:`LazyTrace` read through the proxy's ``load(time_slice=)``."""

    def __init__(self, proxy, shown: str) -> None:
        self.proxy = proxy
        self.shown = shown
        self.units = proxy.units
        self.sampling_rate = proxy.sampling_rate
        self.t_start = proxy.t_start
        self.sampling_period = getattr(proxy, "sampling_period", None)
        self.name = proxy.name
        self.annotations = getattr(proxy, "annotations", {})
        self.array_annotations = getattr(proxy, "array_annotations", {}) or {}
        self.n_samples = int(proxy.shape[0])

    def trace(self) -> LazyTrace:
        import quantities as pq

        proxy = self.proxy
        t0 = proxy.t_start.rescale("s")
        rate = float(proxy.sampling_rate.rescale("Hz"))

        def read(start: int, stop: int) -> np.ndarray:
            # neo rounds times to the nearest sample, so sample times give these samples
            try:
                part = proxy.load(time_slice=(t0 + start / rate * pq.s,
                                              t0 + stop / rate * pq.s), strict_slicing=False)
                return np.asarray(part.magnitude, dtype=np.float64)[:, 0]
            except Exception as exc:  # h5py and neo raise many types; keep the cause
                raise UnreadableInputError(
                    f"{self.shown}: samples {start}-{stop} of "
                    f"{_safe_name(self.name, 'the signal')} "
                    f"({start / rate:.1f}-{stop / rate:.1f} s) cannot be read "
                    f"({_library_failure(exc)})") from exc

        return LazyTrace(read, self.n_samples)


def _is_long(proxy) -> bool:
    shape = getattr(proxy, "shape", (0,))
    return len(shape) >= 1 and int(shape[0]) > LONG_SWEEP_SAMPLES and (
        len(shape) == 1 or int(shape[1]) == 1)


def _settle_long_sweep(sweep: Sweep) -> Sweep:
    """Keep a long sweep in its file only when it is gap-free (no current step): check its
    command piece by piece; a constant command is dropped (there is no step to find), a
    varying one makes the sweep be read whole, as the step features need it all.

    Raises UnreadableInputError when a sweep to be read whole does not fit in memory.
    """
    if not sweep.is_lazy:
        if isinstance(sweep.command_pa, LazyTrace):  # a long stimulus cut to a short response
            return Sweep(sweep.voltage_mv, sweep.sampling_rate_hz, np.asarray(sweep.command_pa),
                         sweep.file, sweep.index, sweep.label, sweep.channel_info)
        return sweep
    command = sweep.command_pa
    if isinstance(command, LazyTrace):
        low, high = np.inf, -np.inf
        piece = 1 << 21
        for start in range(0, command.size, piece):
            part = command[start:start + piece]
            low, high = min(low, float(part.min())), max(high, float(part.max()))
            if high - low > 1.0:  # pA: the command steps, so the step features need it all
                problem = _size_problem(sweep.where(), (sweep.n_samples, 2), 1 << 62, whole=True)
                if problem:
                    raise UnreadableInputError(
                        problem + " (its command current steps, so it must be read whole)")
                return Sweep(np.asarray(sweep.voltage_mv), sweep.sampling_rate_hz,
                             np.asarray(command), sweep.file, sweep.index, sweep.label,
                             sweep.channel_info)
        command = None
    return Sweep(sweep.voltage_mv, sweep.sampling_rate_hz, command, sweep.file, sweep.index,
                 sweep.label, sweep.channel_info)


def _columns(signal):
    """Yield (name, 1-D float64 column, signal) for every channel of a neo AnalogSignal.

    Names are the file's own only when they are plain identifiers (:func:`_safe_name`).
    """
    if isinstance(signal, _LongSignal):
        names = list(signal.array_annotations.get("channel_names", []))
        name = _safe_name(names[0]) if names else ""
        yield name or _safe_name(signal.name, "signal"), signal.trace(), signal
        return
    data = np.asarray(signal.magnitude, dtype=np.float64)
    if data.ndim == 1:
        data = data[:, None]
    names = list(signal.array_annotations.get("channel_names", [])) if hasattr(
        signal, "array_annotations") else []
    base = _safe_name(signal.name, "signal")
    for c in range(data.shape[1]):
        own = _safe_name(names[c]) if c < len(names) else ""
        name = own or (base if data.shape[1] == 1 else f"{base}[{c}]")
        yield name, data[:, c], signal


def _where(path: str, index: int, label: str) -> str:
    shown_label = label and label != f"sweep {index}"
    return f"{path}, sweep {index}" + (f" ({label})" if shown_label else "")


def _sweep_from_signals(signals, path: str, index: int, label: str
                        ) -> tuple[Sweep | None, list[ChannelInfo], list[str]]:
    """Make one sweep from the analog signals of a segment by their declared units.

    Returns (sweep or None, channels, problems). A voltage channel after the first is named
    in the problems as not measured.
    """
    voltage = command = None
    channels: list[ChannelInfo] = []
    where = _where(path, index, label)
    extra_voltages: list[str] = []
    voltage_name = ""
    for signal in signals:
        problem = _rate_problem(where, signal)
        if problem:
            return None, channels, [problem]
        to_mv, to_pa = _scale_to(signal, "mV"), _scale_to(signal, "pA")
        for name, column, sig in _columns(signal):
            role = "ignored"
            if to_mv is not None and voltage is None:
                voltage, role = (column * to_mv, float(sig.sampling_rate.rescale("Hz"))), "voltage"
                voltage_name = name
            elif to_mv is not None:
                extra_voltages.append(name)
            elif to_pa is not None and command is None:
                command, role = (column * to_pa, float(sig.sampling_rate.rescale("Hz"))), "command"
            channels.append(ChannelInfo(name, _unit_text(sig), role))
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
    if command is not None and _looks_like_command(v) and not _looks_like_command(command[0]):
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
        sweep = _settle_long_sweep(Sweep(voltage_mv=v, sampling_rate_hz=rate, command_pa=cmd,
                                         file=path, index=index, label=label,
                                         channel_info=tuple(channels)))
    except UnreadableInputError as exc:
        return None, channels, [str(exc)]
    return sweep, channels, problems


def _segments_to_recording(segments, path: str, format_name: str,
                           problems: list[str] | None = None) -> Recording:
    sweeps, first_channels = [], []
    problems = list(problems or [])
    for index, segment in enumerate(segments):
        if getattr(segment, "refused", None):
            problems.append(segment.refused)
            continue
        sweep, channels, found = _sweep_from_signals(segment.analogsignals, path, index,
                                                     _safe_name(segment.name))
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


# --------------------------------------------------------------------------- NWB

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
                name = _safe_name(series.name)
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
                    long_one = (len(shape) >= 1 and shape[0] > LONG_SWEEP_SAMPLES
                                and (len(shape) == 1 or shape[1] == 1))
                    problem = _size_problem(where, shape, max_sweep_samples,
                                            whole=not long_one)
                if problem is not None:
                    refused.setdefault(None if number is None else int(number), problem)
                    continue
                proxy = AnalogSignalProxy(series, group_name)
                signals.append(_LongSignal(proxy, shown) if _is_long(proxy) else proxy.load())
    except BaseException:
        reader.close()
        raise
    return signals, reader, refused


def _read_nwb(path: Path, shown: str, max_sweep_samples: int) -> Recording:

    with open(path, "rb") as fh:
        if fh.read(8) != _HDF5_SIGNATURE:
            raise UnreadableInputError(
                f"{shown}: not an NWB file (NWB files are HDF5, and this one does not start "
                "with the HDF5 signature; it may be truncated or of another format)")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            signals, reader, refused = _nwb_signals(path, shown, max_sweep_samples)
    except Exception as exc:  # the NWB stack raises many types; keep the cause
        raise UnreadableInputError(
            f"{shown}: cannot be read as NWB ({_library_failure(exc)})") from exc
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
                f"{shown}: cannot be read as NWB ({_library_failure(exc)})") from exc
        return _segments_to_recording(block.segments, shown, "NWB (by channel units)")
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
        name = _safe_name(response.name)
        label = f"sweep_number {number}" + (f", {name}" if name else "")
        parts = [response] + ([stimulus] if stimulus is not None else [])
        sweep, channels, found = _sweep_from_signals(parts, shown, index, label)
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

    Either may be long and left in the file (:class:`_LongSignal`); a long stimulus is cut
    lazily. Returns (the sweep, with the command when it could be aligned; whether it was).
    """
    rate = sweep.sampling_rate_hz
    s_rate = float(stimulus.sampling_rate.rescale("Hz"))
    if abs(s_rate - rate) > 1e-6 * rate:
        return sweep, False
    offset = int(round((float(response.t_start.rescale("s")) -
                        float(stimulus.t_start.rescale("s"))) * rate))
    to_pa = _scale_to(stimulus, "pA")
    if to_pa is None:
        return sweep, False
    if isinstance(stimulus, _LongSignal):
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
        settled = _settle_long_sweep(Sweep(sweep.voltage_mv, rate, aligned, sweep.file,
                                           sweep.index, sweep.label, sweep.channel_info))
    except UnreadableInputError:
        return sweep, False
    return settled, True


# --------------------------------------------------------------------------- NIX and others

def _nix_array_sizes(path: Path | str) -> tuple[int, int]:
    """The most rows and the most values of any data array in a NIX file, from the HDF5
    layout alone (nothing is read)."""
    import h5py

    longest = largest = 0

    def visit(name, obj):
        nonlocal longest, largest
        if isinstance(obj, h5py.Dataset) and name.endswith("/data") and obj.ndim >= 1:
            longest = max(longest, int(obj.shape[0]))
            largest = max(largest, int(np.prod([int(d) for d in obj.shape], dtype=object)))

    with h5py.File(path, "r") as fh:
        fh.visititems(visit)
    return longest, largest


def _read_nix_lazily(path: Path | str, shown: str, max_sweep_samples: int) -> Recording:
    """A NIX file with long or very large signals: neo's lazy NIX reader, long signals left
    in the file, and sweeps declaring more than `max_sweep_samples` samples (or more than the
    memory available, for those read whole) refused before they are read."""
    import neo

    io = neo.io.NixIOFr(str(path))
    try:
        blocks = io.read(lazy=True)
        segments = []
        for block in blocks:
            for segment in block.segments:
                where = _where(shown, len(segments), _safe_name(segment.name))
                refused = next((problem for problem in (
                    _size_problem(where, p.shape, max_sweep_samples, whole=not _is_long(p))
                    for p in segment.analogsignals) if problem), "")
                signals = [] if refused else [_LongSignal(p, shown) if _is_long(p) else p.load()
                                              for p in segment.analogsignals]
                segments.append(_Segment(segment.name or "", signals, refused))
        recording = _segments_to_recording(segments, shown, "NIX (one sweep per segment)")
    except BaseException:
        _close_rawio(io)
        raise
    if not any(sw.is_lazy for sw in recording.sweeps):
        _close_rawio(io)
        return recording
    return Recording(recording.path, recording.format, recording.sweeps, recording.channels,
                     recording.problems, release=lambda: _close_rawio(io))


@dataclass
class _Segment:
    name: str
    analogsignals: list
    refused: str = ""


def _close_rawio(io) -> None:
    handle = getattr(io, "file", None)
    if handle is not None and hasattr(handle, "close"):
        handle.close()


def _openable_text_path(path: Path) -> tuple[str, Callable[[], None]]:
    """A path as text that HDF5 libraries accept, and what to call when done with it.

    nixio refuses a path whose bytes are not UTF-8 (Python holds those bytes as surrogates);
    such a file is opened here and given by its descriptor's name (``/proc/self/fd/N``), so
    it is still read by its real path.
    """
    text = str(path)
    try:
        text.encode("utf-8")
        return text, lambda: None
    except UnicodeEncodeError:
        pass
    for folder in ("/proc/self/fd", "/dev/fd"):
        if os.path.isdir(folder):
            fd = os.open(path, os.O_RDONLY)
            closed = []

            def close() -> None:
                if not closed:
                    closed.append(True)
                    os.close(fd)

            return f"{folder}/{fd}", close
    return text, lambda: None  # no descriptor folder: the library says what it refuses


def _read_nix(path: Path, shown: str, max_sweep_samples: int) -> Recording:
    try:
        path_text, done = _openable_text_path(path)
    except OSError as exc:
        raise UnreadableInputError(f"{shown}: cannot be opened ({_os_reason(exc)})") from None
    try:
        recording = _read_nix_from(path, path_text, shown, max_sweep_samples)
    except BaseException:
        done()
        raise
    if recording.release is None:
        done()
        return recording
    release = recording.release
    return Recording(recording.path, recording.format, recording.sweeps, recording.channels,
                     recording.problems, release=lambda: (release(), done()))


def _read_nix_from(path: Path, path_text: str, shown: str,
                   max_sweep_samples: int) -> Recording:
    import neo

    with open(path, "rb") as fh:
        if fh.read(8) != _HDF5_SIGNATURE:
            raise UnreadableInputError(
                f"{shown}: not a NIX file (NIX files are HDF5, and this one does not start with "
                "the HDF5 signature; it may be truncated or of another format)")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            longest, largest = _nix_array_sizes(path_text)
            available = _available_memory_bytes()
            if (longest > LONG_SWEEP_SAMPLES or largest > max_sweep_samples
                    or (available is not None and 8 * largest > available)):
                return _read_nix_lazily(path_text, shown, max_sweep_samples)
            with neo.io.NixIO(path_text, mode="ro") as io:
                blocks = io.read_all_blocks(lazy=False)
    except UnreadableInputError:
        raise
    except Exception as exc:  # nixio and h5py raise many types; keep the cause
        raise UnreadableInputError(
            f"{shown}: cannot be read as NIX ({_library_failure(exc)})") from exc
    segments = [seg for blk in blocks for seg in blk.segments]
    return _segments_to_recording(segments, shown, "NIX (one sweep per segment)")


def _other_segments(io, lazy: bool, shown: str, max_sweep_samples: int) -> list:
    """The segments a neo reader gives; with `lazy`, each sweep's declared size is checked
    (:func:`_size_problem`) before its signals are loaded, and a sweep too large is refused."""
    blocks = io.read(lazy=lazy)
    if not lazy:
        return [seg for blk in blocks for seg in blk.segments]
    segments = []
    for block in blocks:
        for segment in block.segments:
            where = _where(shown, len(segments), _safe_name(segment.name))
            refused = next((problem for problem in (
                _size_problem(where, getattr(signal, "shape", (0,)), max_sweep_samples,
                              whole=True) for signal in segment.analogsignals) if problem), "")
            signals = [] if refused else [signal.load() if hasattr(signal, "load") else signal
                                          for signal in segment.analogsignals]
            segments.append(_Segment(segment.name or "", signals, refused))
    return segments


def _read_other(path: Path, shown: str, max_sweep_samples: int) -> Recording:
    import neo.io

    try:
        candidates = neo.io.list_candidate_ios(str(path))
    except Exception:  # neo's suffix table only; no reader is a clear answer below
        candidates = []
    if not candidates:
        raise UnreadableInputError(
            f"{shown}: no reader for files with this suffix; spikemeasure reads "
            "NWB, NIX, text (.txt/.csv/.tsv) and the formats neo recognizes by suffix")
    reasons = []
    unusable: UnreadableInputError | None = None
    for cls in candidates:
        if _reader_runs_file_content(cls):
            reasons.append(f"{cls.__name__}: refused, it unpickles or evaluates file content")
            continue
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                io = cls(str(path))
                segments = _other_segments(io, bool(getattr(cls, "support_lazy", False)),
                                           shown, max_sweep_samples)
        except Exception as exc:  # each neo reader raises its own types; keep every cause
            # the type only: a reader's text can quote the file
            reasons.append(f"{cls.__name__} failed with {type(exc).__name__}")
            continue
        try:
            return _segments_to_recording(segments, shown, f"neo {cls.__name__}")
        except UnreadableInputError as exc:  # read, but nothing measurable: say why, if no
            unusable = unusable or exc      # other reader does better
    if unusable is not None:
        raise unusable
    raise UnreadableInputError(
        f"{shown}: no reader could open it ({'; '.join(reasons)}); the file may be damaged "
        "or of another format")


# --------------------------------------------------------------------------- text

def _split_unit(column_name: str) -> tuple[str, str]:
    """'voltage_mV' -> ('voltage', 'mv'); also accepts 'voltage (mV)' and 'voltage [mV]'."""
    name = column_name.strip().strip('"').strip("'")
    m = re.match(r"^(.*?)[\s_]*[\(\[]\s*([^\)\]]+)\s*[\)\]]$", name)
    if m:
        return m.group(1).strip(), m.group(2).strip().lower()
    if "_" in name:
        base, unit = name.rsplit("_", 1)
        return base, unit.lower()
    return name, ""


_TEXT_BOMS = ((b"\xff\xfe\x00\x00", "UTF-32"), (b"\x00\x00\xfe\xff", "UTF-32"),
              (b"\xff\xfe", "UTF-16"), (b"\xfe\xff", "UTF-16"))
_UTF8_BOM = b"\xef\xbb\xbf"
_HEAD_BYTES = 1 << 16
_DECIMAL_COMMA = re.compile(r"[-+]?\d*,\d+(?:[eE][-+]?\d+)?")
_THOUSANDS = re.compile(r"[-+]?\d{1,3}(?:[,'\u00a0\u202f ]\d{3})+(?:\.\d*)?(?:[eE][-+]?\d+)?")
_SEPARATOR_NAMES = {"\t": "tabs", ",": "commas", ";": "semicolons", None: "spaces"}
_TEXT_RULES = ("spikemeasure reads text with columns separated by tabs, commas or spaces and "
               "numbers written with '.' as the decimal mark and no thousands separator")


def _separator_of(line: str) -> str | None:
    """The separator a line seems to use: tab, comma, semicolon, or None (spaces)."""
    for candidate in ("\t", ",", ";"):
        if candidate in line:
            return candidate
    return None


def _text_head(path: Path, shown: str) -> tuple[str, str]:
    """The header line and the first data line, decoded as UTF-8 (a UTF-8 byte-order mark is
    dropped), or an error saying why the file is not such text."""
    with open(path, "rb") as fh:
        head = fh.read(_HEAD_BYTES)
    for bom, encoding in _TEXT_BOMS:
        if head.startswith(bom):
            raise UnreadableInputError(
                f"{shown}: the file is {encoding} text (it starts with a {encoding} byte-order "
                "mark); save it as UTF-8 text")
    if b"\x00" in head:
        pairs = head[:len(head) // 2 * 2]
        if len(pairs) >= 8 and (pairs[1::2].count(0) > 0.9 * len(pairs) // 2
                                or pairs[0::2].count(0) > 0.9 * len(pairs) // 2):
            raise UnreadableInputError(
                f"{shown}: the file looks like UTF-16 text without a byte-order mark (every "
                "other byte is zero); save it as UTF-8 text")
        raise UnreadableInputError(
            f"{shown}: not a text file (it holds zero bytes, as binary files do); "
            f"{_TEXT_RULES}, under a header row")
    if head.startswith(_UTF8_BOM):
        head = head[len(_UTF8_BOM):]
    if not head.strip():
        raise UnreadableInputError(f"{shown}: the file holds only blank lines")
    lines = head.split(b"\n", 2)
    if len(lines) == 1 and len(head) >= _HEAD_BYTES - len(_UTF8_BOM):
        raise UnreadableInputError(
            f"{shown}: the first line is longer than {_HEAD_BYTES // 1024} KiB, so it is not a "
            "header row; the file may be binary or damaged")
    decoded = []
    for number, raw in enumerate(lines[:2], start=1):
        try:
            decoded.append(raw.decode("utf-8"))
        except UnicodeDecodeError:
            raise UnreadableInputError(
                f"{shown}: not UTF-8 text (line {number} holds bytes that are not UTF-8); the "
                "file may be binary, or text in another encoding: save it as UTF-8") from None
    return decoded[0], decoded[1] if len(decoded) > 1 else ""


def _cell_problem(cell: str) -> str | None:
    """Why a data cell is not a number, or None when it is one."""
    text = cell.strip()
    try:
        float(text)
        return None
    except ValueError:
        pass
    if not text:
        return "is empty"
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "\"'" and _cell_problem(
            text[1:-1]) is None:
        return "is a number in quotes; write numbers without quotes"
    if _THOUSANDS.fullmatch(text):
        return "is not a number: it seems to hold a thousands separator"
    if _DECIMAL_COMMA.fullmatch(text):
        return "is not a number: it seems to use ',' as the decimal mark"
    return "is not a number"


def _diagnose_rows(path: Path, shown: str, delimiter: str | None, n_columns: int) -> str:
    """Find the first data line numpy could not parse and say what is wrong with it (never
    quoting it): its encoding, its number of fields, its separator, or the cell that is not a
    number."""
    with open(path, "rb") as fh:
        for number, raw in enumerate(fh, start=1):
            if number == 1:
                continue
            try:
                line = raw.decode("utf-8")
            except UnicodeDecodeError:
                return (f"{shown}: line {number} holds bytes that are not UTF-8 text; the file "
                        "may be damaged, or text in another encoding: save it as UTF-8")
            line = line.split("#", 1)[0].strip("\r\n")
            if not line.strip():
                continue
            cells = line.split(delimiter) if delimiter else line.split()
            if len(cells) != n_columns:
                used = _separator_of(line)
                if used != delimiter and len(line.split(used) if used else line.split()) == n_columns:
                    return (f"{shown}: line {number} is separated by "
                            f"{_SEPARATOR_NAMES[used]} but the header by "
                            f"{_SEPARATOR_NAMES[delimiter]}; use one separator throughout")
                hint = ""
                if delimiter == "," and len(cells) > n_columns:
                    hint = (" (a ',' used as the decimal mark or as a thousands separator in a "
                            "comma-separated file does this)")
                return (f"{shown}: line {number} has {len(cells)} field"
                        f"{'s' if len(cells) != 1 else ''} but the header names {n_columns} "
                        f"columns{hint}; the file may be truncated, or {_TEXT_RULES}")
            for column, cell in enumerate(cells, start=1):
                why = _cell_problem(cell)
                if why:
                    return (f"{shown}: line {number}, column {column} {why}; {_TEXT_RULES}")
    return (f"{shown}: the data rows cannot be read as numbers; {_TEXT_RULES}")


def _text_size_problem(path: Path, shown: str, header: str, first_row: str, n_columns: int,
                       max_sweep_samples: int) -> str | None:
    """Why a text file is not read, judged from its size before it is read: its rows (at
    least its size over twice the longer of the header and the first data line, as numeric
    rows vary in length by less than that) beyond `max_sweep_samples`, or their float64 values
    beyond the memory available."""
    longest = max(len(first_row.encode("utf-8")), len(header.encode("utf-8"))) + 1
    rows = (path.stat().st_size - len(header.encode("utf-8"))) // (2 * longest)
    if rows > max_sweep_samples:
        return (f"{shown}, sweep 0: the file is at least {rows:,} rows long (from its size), "
                f"more than max_sweep_samples ({max_sweep_samples:,}); it was not read. Raise "
                "--max-sweep-samples if the recording really is that long")
    available = _available_memory_bytes()
    if available is not None and 8 * rows * n_columns > available:
        return (f"{shown}, sweep 0: the file is at least {rows:,} rows of {n_columns} columns "
                f"long (from its size), {8 * rows * n_columns / 2 ** 30:.1f} GiB as float64, "
                f"more than the {available / 2 ** 30:.1f} GiB of memory available; it was not "
                "read")
    return None


def _read_text(path: Path, shown: str, sampling_rate_hz: float | None,
               max_sweep_samples: int) -> Recording:
    header, second = _text_head(path, shown)
    if not header.strip():
        raise UnreadableInputError(
            f"{shown}: the first line is blank; it must be the header row naming each column "
            "with its unit, e.g. time_s, voltage_mV, current_pA")
    delimiter = _separator_of(header)
    if delimiter == ";":
        comma = " and numbers use ',' as the decimal mark" if re.search(r"\d,\d", second) else ""
        raise UnreadableInputError(
            f"{shown}: the columns are separated by semicolons{comma}; {_TEXT_RULES}. Export "
            "the file again with '.' as decimal mark and tabs or commas between columns")
    names = [n.strip() for n in (header.split(delimiter) if delimiter else header.split())]
    if all(re.fullmatch(r"[-+0-9.,eE]+", n or "x") for n in names):
        raise UnreadableInputError(
            f"{shown}: no header row; the first line must name each column with its unit, "
            "e.g. time_s, voltage_mV, current_pA")
    roles: dict[str, tuple[int, float]] = {}
    channels = []
    extra_voltages = []
    for col, raw in enumerate(names):
        _, unit = _split_unit(raw)
        role = "ignored"
        for kind, table in (("time", _SECOND_TO_S), ("voltage", _VOLT_TO_MV),
                            ("command", _AMP_TO_PA)):
            if unit in table and kind not in roles:
                roles[kind] = (col, table[unit])
                role = kind
                break
        name = _safe_name(raw.strip('"').strip("'"), f"column {col + 1}")
        if role == "ignored" and unit in _VOLT_TO_MV:
            extra_voltages.append(name)
        known = unit in _SECOND_TO_S or unit in _VOLT_TO_MV or unit in _AMP_TO_PA
        channels.append(ChannelInfo(name, unit if known else "?", role))
    if "voltage" not in roles:
        raise UnreadableInputError(
            f"{shown}: no voltage column: none of the {len(names)} column names of the header "
            "row ends in a voltage unit; name one such as voltage_mV or voltage_V")
    problem = _text_size_problem(path, shown, header, second, len(names), max_sweep_samples)
    if problem:
        raise UnreadableInputError(problem)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # numpy warns of an empty file; said below
            data = np.loadtxt(path, delimiter=delimiter, skiprows=1, dtype=np.float64,
                              ndmin=2, comments="#", encoding="utf-8-sig")
    except (ValueError, UnicodeDecodeError) as exc:
        raise UnreadableInputError(
            _diagnose_rows(path, shown, delimiter, len(names))) from exc
    if data.size == 0:
        raise UnreadableInputError(f"{shown}: a header row but no data rows")
    if data.shape[1] != len(names):
        raise UnreadableInputError(
            f"{shown}: the header names {len(names)} columns but rows have {data.shape[1]}")
    if data.shape[0] < 3:
        raise UnreadableInputError(
            f"{shown}: only {data.shape[0]} data row{'s' if data.shape[0] != 1 else ''}; a "
            "sweep needs at least 3")
    if data.shape[0] > max_sweep_samples:
        raise UnreadableInputError(
            f"{shown}, sweep 0: {data.shape[0]:,} samples, more than max_sweep_samples "
            f"({max_sweep_samples:,}); raise --max-sweep-samples if the recording really is "
            "that long")
    if "time" in roles:
        col, scale = roles["time"]
        t = data[:, col] * scale
        if not np.isfinite(t).all():
            row = int(np.argmin(np.isfinite(t))) + 1
            raise UnreadableInputError(
                f"{shown}: the time column is not a finite number at data row {row}; "
                "spikemeasure needs a constant sampling rate")
        steps = np.diff(t)
        if (steps <= 0).any():
            row = int(np.argmax(steps <= 0)) + 2
            raise UnreadableInputError(
                f"{shown}: the time column does not increase at data row {row} (a step of "
                "zero or less); spikemeasure needs increasing times at a constant sampling rate")
        dt = float(np.median(steps))
        if np.max(np.abs(steps - dt)) > 0.01 * dt:
            row = int(np.argmax(np.abs(steps - dt))) + 2
            raise UnreadableInputError(
                f"{shown}: the time column is not evenly spaced (around data row {row}); "
                "spikemeasure needs a constant sampling rate")
        rate = 1.0 / dt
        if sampling_rate_hz is not None and abs(rate - sampling_rate_hz) > 1e-3 * rate:
            raise UnreadableInputError(
                f"{shown}: the time column gives {rate:g} Hz but --sampling-rate says "
                f"{sampling_rate_hz:g} Hz; drop the option or fix the file")
    elif sampling_rate_hz is not None:
        rate = float(sampling_rate_hz)
    else:
        raise UnreadableInputError(
            f"{shown}: no time column (such as time_s or time_ms), so the sampling rate is "
            "unknown; give it with --sampling-rate HZ")
    v_col, v_scale = roles["voltage"]
    command = None
    if "command" in roles:
        c_col, c_scale = roles["command"]
        command = data[:, c_col] * c_scale
    voltage = data[:, v_col] * v_scale
    sweep = Sweep(voltage_mv=voltage, sampling_rate_hz=rate, command_pa=command, file=shown,
                  index=0, label="", channel_info=tuple(channels))
    problems = []
    if extra_voltages:
        problems.append(
            f"{shown}, sweep 0: {len(extra_voltages)} more voltage column"
            f"{'s were' if len(extra_voltages) != 1 else ' was'} not measured "
            f"({', '.join(extra_voltages)}); only the first, {channels[v_col].name}, was. Split "
            "the columns into files of their own to measure them")
    if command is not None and _looks_like_command(voltage) and not _looks_like_command(command):
        raise UnreadableInputError(
            f"{shown}: this looks like a voltage-clamp recording (the voltage column is a few "
            "flat command levels); spikemeasure measures current clamp")
    return Recording(shown, "plain text (numpy, float64)", [sweep], channels, problems)


# --------------------------------------------------------------------------- entry points

def read_recording(path: str | os.PathLike, *, shown_as: str | None = None,
                   sampling_rate_hz: float | None = None,
                   max_sweep_samples: int | None = None) -> Recording:
    """Read one file into sweeps.

    Parameters
    ----------
    path : str or path-like
        The file.
    shown_as : str, optional
        How to name the file in sweeps and messages (default: the path as given, as a
        :func:`~spikemeasure.errors.printable_name`).
    sampling_rate_hz : float, optional
        For text files without a time column.
    max_sweep_samples : int, optional
        Sweeps declaring more samples than this are refused before they are read (default
        :data:`DEFAULT_MAX_SWEEP_SAMPLES`); so are sweeps read whole whose declared float64
        size exceeds the memory available. Each refusal is a problem of the recording, or the
        error when no sweep is left.

    Returns
    -------
    Recording

    Raises
    ------
    UnreadableInputError
        The file does not exist, is empty, truncated, of an unknown or unsafe format, or holds
        no current-clamp voltage. The message names the file and, where it applies, the sweep,
        and never quotes the file's content.
    InvalidSettingError
        `max_sweep_samples` is not a positive whole number.
    """
    p = Path(path)
    shown = shown_as if shown_as is not None else printable_name(str(path))
    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise UnreadableInputError(f"{shown}: no such file") from None
    except OSError as exc:
        raise UnreadableInputError(f"{shown}: cannot be looked at ({_os_reason(exc)})") from None
    if stat.S_ISDIR(st.st_mode):
        raise UnreadableInputError(f"{shown}: is a folder; pass it to find_recordings")
    if not stat.S_ISREG(st.st_mode):
        raise UnreadableInputError(
            f"{shown}: not a regular file (a device, pipe or socket); spikemeasure reads "
            "recordings saved as files")
    if st.st_size == 0:
        raise UnreadableInputError(f"{shown}: the file is empty")
    if sampling_rate_hz is not None and not (np.isfinite(sampling_rate_hz)
                                             and sampling_rate_hz > 0):
        raise UnreadableInputError(f"{shown}: the sampling rate must be positive")
    if max_sweep_samples is None:
        max_sweep_samples = DEFAULT_MAX_SWEEP_SAMPLES
    if (isinstance(max_sweep_samples, bool) or not isinstance(max_sweep_samples, (int, np.integer))
            or max_sweep_samples < 1):
        raise InvalidSettingError(
            f"`max_sweep_samples` must be a positive whole number (got {max_sweep_samples!r})")
    max_sweep_samples = int(max_sweep_samples)
    try:
        _refuse_code_formats(p, shown)
        suffix = p.suffix.lower()
        if suffix == ".nwb":
            return _read_nwb(p, shown, max_sweep_samples)
        if suffix == ".nix":
            return _read_nix(p, shown, max_sweep_samples)
        if suffix in TEXT_SUFFIXES:
            return _read_text(p, shown, sampling_rate_hz, max_sweep_samples)
        return _read_other(p, shown, max_sweep_samples)
    except OSError as exc:  # opening or reading the file itself (permissions, I/O errors)
        raise UnreadableInputError(
            f"{shown}: cannot be read ({exc.strerror or type(exc).__name__})") from exc


_TEMPORARY = re.compile(r"^(~|\.~|\.#)|(~|\.tmp|\.temp|\.part|\.swp|\.crdownload|\.partial)$",
                        re.IGNORECASE)


def is_temporary(name: str) -> bool:
    """Editor, download and copy leftovers (``~$x``, ``x~``, ``x.tmp``, ``x.part``, ...).

    Parameters
    ----------
    name : str
        A file name (not a path).

    Returns
    -------
    bool
    """
    if not isinstance(name, str):
        raise InvalidSettingError(f"`name` must be a str (got {type(name).__name__})")
    return bool(_TEMPORARY.search(name))


@dataclass
class RecordingSearch:
    """What :func:`search_recordings` found.

    Attributes
    ----------
    files : list of (Path, str)
        Each recording once: the path to read it by, and its name in every output (distinct
        from every other file's, valid UTF-8, printable; see :func:`search_recordings`).
    problems : list of (str, str)
        Paths that could not be searched or were not followed: (the path as a printable
        name, what is wrong). Each is a failure of the run.
    notes : list of str
        Messages that are not failures (a file reached twice, measured once).
    """

    files: list[tuple[Path, str]] = field(default_factory=list)
    problems: list[tuple[str, str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def _os_reason(exc: OSError) -> str:
    """What an OSError of the file system means, without the path it quotes."""
    if exc.errno == errno.ENAMETOOLONG:
        return "the path is longer than the system allows (ENAMETOOLONG)"
    if isinstance(exc, PermissionError):
        return "permission denied"
    if exc.errno == errno.ELOOP:
        return "a loop of symbolic links"
    return exc.strerror or type(exc).__name__


def _inside(path: str, folder: str) -> bool:
    return path == folder or path.startswith(folder.rstrip(os.sep) + os.sep)


@dataclass
class _Found:
    path: Path
    unit: int          # which given path it came from
    base: tuple        # the given folder's absolute parts (a given file: its folder's)
    rel: tuple         # parts shown at least (a given file: its name)
    identity: tuple    # (device, inode): the same file reached twice is measured once
    via_link: bool = False  # reached through a symbolic link in a folder searched


def _holds_own_output(folder: str) -> bool:
    """Whether `folder` is a results or accepted folder of this tool: its CSV tables are not
    recordings. Told by its run.json (read as JSON data, at most 64 MiB), never by its name."""
    record = os.path.join(folder, "run.json")
    try:
        if os.path.getsize(record) > 1 << 26:
            return False
        with open(record, "rb") as fh:
            data = json.loads(fh.read())
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and data.get("tool") == "spikemeasure"


def _walk_folder(given: Path, unit: int, root_real: str, skip: str | None, wanted,
                 search: RecordingSearch) -> list[_Found]:
    """Every wanted file under `given`, by os.scandir: a folder that cannot be entered and a
    symbolic link leading out of `given` are problems, never skipped in silence."""
    base = Path(os.path.abspath(given)).parts[1:]
    found: list[_Found] = []
    seen_folders = {root_real}
    stack: list[tuple[Path, tuple, bool]] = [(given, (), False)]
    while stack:
        folder, rel, linked = stack.pop()
        try:
            with os.scandir(folder) as it:
                entries = sorted(it, key=lambda e: e.name)
        except OSError as exc:
            search.problems.append((printable_name(str(folder)),
                                    f"{printable_name(str(folder))}: cannot search this folder "
                                    f"({_os_reason(exc)}); its files are not measured"))
            continue
        for entry in entries:
            name = entry.name
            if name.startswith("."):
                continue  # hidden files and folders
            shown = printable_name(os.path.join(str(folder), name))
            try:
                link = entry.is_symlink()
                target = os.path.realpath(entry.path) if link else None
                is_dir = os.path.isdir(target) if link else entry.is_dir(follow_symlinks=False)
                if not is_dir and (name.lower().startswith("readme") or is_temporary(name)
                                   or not wanted(rel + (name,), name)):
                    continue
                if link and not _inside(target, root_real):
                    search.problems.append((shown, (
                        f"{shown}: a symbolic link to outside the folder searched; not "
                        "followed (give the file itself on the command line to measure it)")))
                    continue
                if link and not os.path.exists(target):
                    search.problems.append((shown, f"{shown}: a symbolic link to a path that "
                                                   "does not exist"))
                    continue
                real = target if link else os.path.realpath(entry.path)
                if skip is not None and _inside(real, skip):
                    continue  # the output folder
                if is_dir and _holds_own_output(real):
                    search.notes.append(f"{shown}: holds tables spikemeasure wrote (a results "
                                        "or accepted folder); not searched for recordings")
                    continue
                if is_dir:
                    if real not in seen_folders:  # else reached twice, through a link
                        seen_folders.add(real)
                        stack.append((Path(entry.path), rel + (name,), linked or link))
                    continue
                st = entry.stat()
                if not stat.S_ISREG(st.st_mode):
                    search.problems.append((shown, f"{shown}: not a regular file (a pipe, "
                                                   "socket or device); not read"))
                    continue
            except OSError as exc:
                search.problems.append((shown, f"{shown}: cannot be looked at "
                                               f"({_os_reason(exc)})"))
                continue
            found.append(_Found(Path(entry.path), unit, base, rel + (name,),
                                (st.st_dev, st.st_ino), linked or link))
    found.sort(key=lambda f: "/".join(f.rel))  # as a path: "a b/x" before "a/x"
    return found


def _display(parts: tuple) -> str:
    return printable_name("/".join(parts))


def _distinct_names(found: list[_Found]) -> list[str]:
    """Each file's shown name: its name (a given file) or its path relative to the given
    folder; where two files would share a name, the files of those given paths are named by
    as many more of their folders as tells them apart (``day1/cell.nwb``,
    ``day2/cell.nwb``). Names still alike (escaped bytes alike to typed text) get `` (2)``,
    `` (3)``, ... in order."""
    depth: dict[int, int] = {f.unit: 0 for f in found}
    max_depth = {f.unit: len(f.base) for f in found}

    def name(f: _Found) -> str:
        d = depth[f.unit]
        return _display((f.base[len(f.base) - d:] if d else ()) + f.rel)

    while True:
        names = [name(f) for f in found]
        by_name: dict[str, set[int]] = {}
        for f, n in zip(found, names):
            by_name.setdefault(n, set()).add(f.unit)
        clashing = {u for units in by_name.values() if len(units) > 1 for u in units}
        grow = [u for u in clashing if depth[u] < max_depth[u]]
        if not grow:
            break
        for u in grow:
            depth[u] += 1
    out, used = [], set()
    for n in names:
        candidate, k = n, 1
        while candidate in used:
            k += 1
            candidate = f"{n} ({k})"
        used.add(candidate)
        out.append(candidate)
    return out


def search_recordings(paths, *, exclude: str | os.PathLike | None = None,
                      extra_patterns: tuple[str, ...] = ()) -> RecordingSearch:
    """Expand files and folders into recordings, each once and by a distinct name.

    Parameters
    ----------
    paths : iterable of path-like
        Files are taken as given (a symbolic link is followed) and shown by their file name.
        Folders are searched recursively for the open formats (:data:`RECORDING_SUFFIXES`:
        NWB, NIX, text) and for files matching any of `extra_patterns`; each is shown by its
        path relative to that folder.
    exclude : path-like, optional
        A folder to skip (the output folder).
    extra_patterns : tuple of str, optional
        Glob patterns (``*.dat``, ``cells/**/*.dat``) matched against the path relative to the
        folder and against the file name, for other formats neo reads.

    Returns
    -------
    RecordingSearch

    Notes
    -----
    - Hidden files and folders, README files and temporary files (:func:`is_temporary`) are
      skipped. Files are sorted by their relative path, so the order is the same on every run.
    - In a folder, a symbolic link is followed only when its target lies inside the folder
      given; any other is a problem ("not followed"), as is a folder that cannot be entered
      or listed (no permission, a path longer than the system allows), a path given that does
      not exist, and a file that is not a regular file (a pipe, a device).
    - The same file reached twice (given twice, given and found in a folder, through a link
      or a second hard link) is measured once, under the first name; a note says so.
    - Names are distinct: when two files would be shown alike (``day1/cell.nwb`` and
      ``day2/cell.nwb`` given, or two folders each holding ``cell.nwb``), the files of each
      of those given paths are shown with as many of the given path's folders as tell them
      apart. Bytes of a name that are not UTF-8 are shown as ``\\xNN``, characters that are
      not printable as backslash escapes (:func:`~spikemeasure.errors.printable_name`); the
      file is still read by its real path.
    """
    from fnmatch import fnmatch

    def wanted(rel: tuple, name: str) -> bool:
        posix = "/".join(rel)
        return Path(name).suffix.lower() in RECORDING_SUFFIXES or any(
            fnmatch(posix, p) or fnmatch(name, p) for p in extra_patterns)

    search = RecordingSearch()
    skip = os.path.realpath(exclude) if exclude is not None else None
    found: list[_Found] = []
    for unit, given in enumerate(paths):
        g = Path(given)
        shown = printable_name(str(given))
        try:
            st = os.stat(g)
        except FileNotFoundError:
            search.problems.append((shown, f"{shown}: no such file or folder"))
            continue
        except OSError as exc:
            search.problems.append((shown, f"{shown}: cannot be looked at ({_os_reason(exc)})"))
            continue
        if stat.S_ISDIR(st.st_mode):
            found.extend(_walk_folder(g, unit, os.path.realpath(g), skip, wanted, search))
        elif stat.S_ISREG(st.st_mode):
            absolute = Path(os.path.abspath(g)).parts[1:]
            found.append(_Found(g, unit, absolute[:-1], absolute[-1:], (st.st_dev, st.st_ino)))
        else:
            search.problems.append((shown, f"{shown}: not a regular file (a pipe, socket or "
                                           "device); not read"))
    # each file once: by the first path given that holds it, and there by its own path
    # rather than through a link
    best: dict[tuple, _Found] = {}
    for f in found:
        other = best.get(f.identity)
        if other is None or (f.unit, f.via_link, f.rel) < (other.unit, other.via_link, other.rel):
            best[f.identity] = f
    kept = [f for f in found if best[f.identity] is f]
    again = [(f, best[f.identity]) for f in found if best[f.identity] is not f]
    names = _distinct_names(kept)
    name_of = {id(f): n for f, n in zip(kept, names)}
    for f, original in again:
        search.notes.append(f"{printable_name(str(f.path))}: the same file as "
                            f"{name_of[id(original)]}; measured once")
    search.files = [(f.path, n) for f, n in zip(kept, names)]
    return search


def find_recordings(paths, *, exclude: str | os.PathLike | None = None,
                    extra_patterns: tuple[str, ...] = ()) -> list[tuple[Path, str]]:
    """Expand files and folders into (path, name to show) pairs, in a stable order.

    The files of :func:`search_recordings`, which takes the same arguments and says more.

    Raises
    ------
    UnreadableInputError
        When a path given or a folder in it cannot be searched, or a link was not followed
        (:attr:`RecordingSearch.problems`; the message names the first of them).
    """
    search = search_recordings(paths, exclude=exclude, extra_patterns=extra_patterns)
    if search.problems:
        more = len(search.problems) - 1
        raise UnreadableInputError(search.problems[0][1] + (f" (and {more} more)" if more
                                                            else ""))
    return search.files
