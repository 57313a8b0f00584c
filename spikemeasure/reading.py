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

from .errors import InvalidSettingError, UnreadableInputError, printable_name
from .sweeps import LazyTrace, Sweep

__all__ = ["Recording", "ChannelInfo", "read_recording", "find_recordings", "is_temporary",
           "search_recordings", "RecordingSearch",
           "TEXT_SUFFIXES", "RECORDING_SUFFIXES", "LONG_SWEEP_SAMPLES"]

#: NWB and NIX sweeps longer than this (about 3.5 min at 20 kHz) stay in the file and are read
#: in pieces through neo's lazy loading, when their command current is constant (gap-free).
LONG_SWEEP_SAMPLES = 1 << 22

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

def _refuse_code_formats(path: Path) -> None:
    if path.suffix.lower() in _PICKLE_SUFFIXES:
        raise UnreadableInputError(
            f"{path}: pickle files can run code when loaded, so spikemeasure does not open "
            "them; export the recording to NWB, NIX or text")
    with open(path, "rb") as fh:
        head = fh.read(2)
    if len(head) == 2 and head[0] == 0x80 and 2 <= head[1] <= 5:
        raise UnreadableInputError(
            f"{path}: the file is a Python pickle, which can run code when loaded; "
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


# --------------------------------------------------------------------------- units

def _unit_text(signal) -> str:
    return signal.units.dimensionality.string


def _scale_to(signal, target: str) -> float | None:
    """Factor turning the signal's declared units into `target` ('mV' or 'pA'), or None."""
    import quantities as pq

    try:
        return float(signal.units.rescale(getattr(pq, target)).magnitude)
    except ValueError:
        return None


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
                    f"{self.shown}: samples {start}-{stop} of {self.name or 'the voltage'} "
                    f"({start / rate:.1f}-{stop / rate:.1f} s) cannot be read "
                    f"({_hdf5_reason(exc)})") from exc

        return LazyTrace(read, self.n_samples)


def _is_long(proxy) -> bool:
    shape = getattr(proxy, "shape", (0,))
    return len(shape) >= 1 and int(shape[0]) > LONG_SWEEP_SAMPLES and (
        len(shape) == 1 or int(shape[1]) == 1)


def _settle_long_sweep(sweep: Sweep) -> Sweep:
    """Keep a long sweep in its file only when it is gap-free (no current step): check its
    command piece by piece; a constant command is dropped (there is no step to find), a
    varying one makes the sweep be read whole, as the step features need it all."""
    if not sweep.is_lazy:
        return sweep
    command = sweep.command_pa
    if isinstance(command, LazyTrace):
        low, high = np.inf, -np.inf
        piece = 1 << 21
        for start in range(0, command.size, piece):
            part = command[start:start + piece]
            low, high = min(low, float(part.min())), max(high, float(part.max()))
            if high - low > 1.0:  # pA: the command steps, so the step features need it all
                return Sweep(np.asarray(sweep.voltage_mv), sweep.sampling_rate_hz,
                             np.asarray(command), sweep.file, sweep.index, sweep.label,
                             sweep.channel_info)
        command = None
    return Sweep(sweep.voltage_mv, sweep.sampling_rate_hz, command, sweep.file, sweep.index,
                 sweep.label, sweep.channel_info)


def _columns(signal):
    """Yield (name, 1-D float64 column, signal) for every channel of a neo AnalogSignal."""
    if isinstance(signal, _LongSignal):
        names = list(signal.array_annotations.get("channel_names", []))
        yield (str(names[0]) if names else signal.name or "signal"), signal.trace(), signal
        return
    data = np.asarray(signal.magnitude, dtype=np.float64)
    if data.ndim == 1:
        data = data[:, None]
    names = list(signal.array_annotations.get("channel_names", [])) if hasattr(
        signal, "array_annotations") else []
    base = signal.name or "signal"
    for c in range(data.shape[1]):
        name = str(names[c]) if c < len(names) else (base if data.shape[1] == 1 else f"{base}[{c}]")
        yield name, data[:, c], signal


def _sweep_from_signals(signals, path: str, index: int, label: str) -> tuple[Sweep | None, list[ChannelInfo], str | None]:
    """Make one sweep from the analog signals of a segment by their declared units.

    Returns (sweep or None, channels, problem or None).
    """
    voltage = command = None
    channels: list[ChannelInfo] = []
    for signal in signals:
        to_mv, to_pa = _scale_to(signal, "mV"), _scale_to(signal, "pA")
        for name, column, sig in _columns(signal):
            role = "ignored"
            if to_mv is not None and voltage is None:
                voltage, role = (column * to_mv, float(sig.sampling_rate.rescale("Hz"))), "voltage"
            elif to_pa is not None and command is None:
                command, role = (column * to_pa, float(sig.sampling_rate.rescale("Hz"))), "command"
            channels.append(ChannelInfo(name, _unit_text(sig), role))
    where = f"{path}, sweep {index}" + (f" ({label})" if label else "")
    if voltage is None:
        units = ", ".join(f"{c.name} [{c.units}]" for c in channels) or "none"
        return None, channels, (f"{where}: no channel in volts (channels: {units}); "
                                "spikemeasure needs the membrane voltage")
    v, rate = voltage
    if command is not None and _looks_like_command(v) and not _looks_like_command(command[0]):
        return None, channels, (f"{where}: this looks like a voltage-clamp recording (the voltage "
                                "channel is a few flat command levels); spikemeasure measures "
                                "current clamp")
    cmd = None
    problem = None
    if command is not None:
        c, c_rate = command
        if abs(c_rate - rate) > 1e-6 * rate or c.size != v.size:
            problem = (f"{where}: the current channel ({c.size} samples at {c_rate:g} Hz) does "
                       f"not match the voltage ({v.size} samples at {rate:g} Hz); it was not "
                       "used as the command")
        else:
            cmd = c
    sweep = _settle_long_sweep(Sweep(voltage_mv=v, sampling_rate_hz=rate, command_pa=cmd,
                                     file=path, index=index, label=label,
                                     channel_info=tuple(channels)))
    return sweep, channels, problem


def _segments_to_recording(segments, path: str, format_name: str) -> Recording:
    sweeps, problems, first_channels = [], [], []
    for index, segment in enumerate(segments):
        sweep, channels, problem = _sweep_from_signals(segment.analogsignals, path, index,
                                                       segment.name or "")
        if index == 0:
            first_channels = channels
        if problem:
            problems.append(problem)
        if sweep is not None:
            sweeps.append(sweep)
    if not sweeps:
        detail = problems[0] if problems else f"{path}: the file holds no analog signals"
        raise UnreadableInputError(detail if len(problems) <= 1 else
                                   f"{detail} (and {len(problems) - 1} more sweeps alike)")
    return Recording(path, format_name, sweeps, first_channels, problems)


# --------------------------------------------------------------------------- NWB

_CC_RESPONSE = {"CurrentClampSeries", "IZeroClampSeries"}
_CC_STIMULUS = {"CurrentClampStimulusSeries"}
_VC_TYPES = {"VoltageClampSeries", "VoltageClampStimulusSeries"}


def _hdf5_reason(exc: Exception) -> str:
    """A short reason for an HDF5-based read failure; the library's text kept for the rest."""
    text = str(exc)
    m = re.search(r"truncated file: eof = (\d+).*?stored_eof = (\d+)", text)
    if m:
        return (f"the file is truncated: {int(m.group(1)):,} of {int(m.group(2)):,} bytes are "
                "there; copy it again from its source")
    return f"{type(exc).__name__}: {text}; the file may be truncated or damaged"


def _nwb_type(signal) -> str:
    kind = signal.annotations.get("nwb_neurodata_type", ("", ""))
    return kind[-1] if isinstance(kind, (tuple, list)) else str(kind)


def _nwb_signals(path: Path, shown: str) -> tuple[list, object]:
    """The analog series of an NWB file as neo signals: neo's lazy proxies opened on the
    file's acquisition and stimulus series, short ones loaded, long ones left in the file.

    Returns (signals, the open pynwb reader, to be closed when the long ones are read).
    """
    import pynwb
    from neo.io.nwbio import AnalogSignalProxy

    reader = pynwb.NWBHDF5IO(str(path), mode="r", load_namespaces=True)
    try:
        nwbfile = reader.read()
        signals = []
        for group_name in ("acquisition", "stimulus"):
            for series in getattr(nwbfile, group_name).values():
                if isinstance(series, pynwb.misc.AnnotationSeries) or not getattr(
                        series, "rate", None):
                    continue
                proxy = AnalogSignalProxy(series, group_name)
                signals.append(_LongSignal(proxy, shown) if _is_long(proxy) else proxy.load())
    except BaseException:
        reader.close()
        raise
    return signals, reader


def _read_nwb(path: Path, shown: str) -> Recording:

    with open(path, "rb") as fh:
        if fh.read(8) != _HDF5_SIGNATURE:
            raise UnreadableInputError(
                f"{shown}: not an NWB file (NWB files are HDF5, and this one does not start "
                "with the HDF5 signature; it may be truncated or of another format)")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            signals, reader = _nwb_signals(path, shown)
    except Exception as exc:  # the NWB stack raises many types; keep the cause
        raise UnreadableInputError(f"{shown}: cannot be read as NWB ({_hdf5_reason(exc)})") from exc
    try:
        recording = _nwb_recording(signals, path, shown)
    except BaseException:
        reader.close()
        raise
    if not any(sw.is_lazy for sw in recording.sweeps):
        reader.close()
        return recording
    return Recording(recording.path, recording.format, recording.sweeps, recording.channels,
                     recording.problems, release=reader.close)


def _nwb_recording(signals: list, path: Path, shown: str) -> Recording:
    import neo

    by_sweep: dict[int, dict[str, list]] = {}
    types = {_nwb_type(s) for s in signals}
    if not types & _CC_RESPONSE:
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
                f"{shown}: cannot be read as NWB ({_hdf5_reason(exc)})") from exc
        return _segments_to_recording(block.segments, shown, "NWB (by channel units)")
    for order, s in enumerate(signals):
        kind = _nwb_type(s)
        if kind not in _CC_RESPONSE | _CC_STIMULUS:
            continue
        number = s.annotations.get("nwb:sweep_number")
        key = int(number) if number is not None else order
        slot = by_sweep.setdefault(key, {"response": [], "stimulus": []})
        slot["response" if kind in _CC_RESPONSE else "stimulus"].append(s)
    sweeps, problems, first_channels = [], [], []
    for index, number in enumerate(sorted(by_sweep)):
        slot = by_sweep[number]
        label = f"sweep_number {number}"
        if not slot["response"]:
            problems.append(f"{shown}, sweep {index} ({label}): a stimulus with no voltage "
                            "response; skipped")
            continue
        response = slot["response"][0]
        stimulus = slot["stimulus"][0] if slot["stimulus"] else None
        label = f"sweep_number {number}, {response.name}"
        parts = [response] + ([stimulus] if stimulus is not None else [])
        sweep, channels, problem = _sweep_from_signals(parts, shown, index, label)
        if (stimulus is not None and sweep is not None and sweep.command_pa is None and problem
                and not isinstance(stimulus, _LongSignal)):
            # align a stimulus that starts later or is longer than the response
            sweep, problem = _align_stimulus(sweep, response, stimulus, problem)
        if not first_channels:
            first_channels = channels
        if problem:
            problems.append(problem)
        if len(slot["response"]) > 1:
            problems.append(f"{shown}, sweep {index} ({label}): {len(slot['response'])} responses "
                            "share this sweep number; the first was used")
        if sweep is not None:
            sweeps.append(sweep)
    if not sweeps:
        raise UnreadableInputError(problems[0] if problems else
                                   f"{shown}: no current-clamp sweeps found")
    return Recording(shown, "NWB (intracellular series paired by sweep number)", sweeps,
                     first_channels, problems)


def _align_stimulus(sweep: Sweep, response, stimulus, problem: str) -> tuple[Sweep, str | None]:
    """Cut a stimulus to the response's time span when both share a sampling rate."""
    rate = sweep.sampling_rate_hz
    s_rate = float(stimulus.sampling_rate.rescale("Hz"))
    if abs(s_rate - rate) > 1e-6 * rate:
        return sweep, problem
    offset = int(round((float(response.t_start.rescale("s")) -
                        float(stimulus.t_start.rescale("s"))) * rate))
    to_pa = _scale_to(stimulus, "pA")
    column = np.asarray(stimulus.magnitude, dtype=np.float64).reshape(-1) * to_pa
    if offset < 0 or offset + sweep.n_samples > column.size:
        return sweep, problem
    aligned = column[offset:offset + sweep.n_samples]
    return Sweep(sweep.voltage_mv, rate, aligned, sweep.file, sweep.index, sweep.label,
                 sweep.channel_info), None


# --------------------------------------------------------------------------- NIX and others

def _nix_longest_array(path: Path | str) -> int:
    """The length of the longest data array in a NIX file, from the HDF5 layout alone."""
    import h5py

    longest = 0

    def visit(name, obj):
        nonlocal longest
        if isinstance(obj, h5py.Dataset) and name.endswith("/data") and obj.ndim >= 1:
            longest = max(longest, int(obj.shape[0]))

    with h5py.File(path, "r") as fh:
        fh.visititems(visit)
    return longest


def _read_nix_lazily(path: Path | str, shown: str) -> Recording:
    """A NIX file with long signals: neo's lazy NIX reader, long signals left in the file."""
    import neo

    io = neo.io.NixIOFr(str(path))
    try:
        blocks = io.read(lazy=True)
        segments = []
        for block in blocks:
            for segment in block.segments:
                signals = [_LongSignal(p, shown) if _is_long(p) else p.load()
                           for p in segment.analogsignals]
                segments.append(_Segment(segment.name or "", signals))
    except BaseException:
        _close_rawio(io)
        raise
    recording = _segments_to_recording(segments, shown, "NIX (one sweep per segment)")
    if not any(sw.is_lazy for sw in recording.sweeps):
        _close_rawio(io)
        return recording
    return Recording(recording.path, recording.format, recording.sweeps, recording.channels,
                     recording.problems, release=lambda: _close_rawio(io))


@dataclass
class _Segment:
    name: str
    analogsignals: list


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


def _read_nix(path: Path, shown: str) -> Recording:
    try:
        path_text, done = _openable_text_path(path)
    except OSError as exc:
        raise UnreadableInputError(f"{shown}: cannot be opened ({_os_reason(exc)})") from None
    try:
        recording = _read_nix_from(path, path_text, shown)
    except BaseException:
        done()
        raise
    if recording.release is None:
        done()
        return recording
    release = recording.release
    return Recording(recording.path, recording.format, recording.sweeps, recording.channels,
                     recording.problems, release=lambda: (release(), done()))


def _read_nix_from(path: Path, path_text: str, shown: str) -> Recording:
    import neo

    with open(path, "rb") as fh:
        if fh.read(8) != _HDF5_SIGNATURE:
            raise UnreadableInputError(
                f"{shown}: not a NIX file (NIX files are HDF5, and this one does not start with "
                "the HDF5 signature; it may be truncated or of another format)")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if _nix_longest_array(path_text) > LONG_SWEEP_SAMPLES:
                return _read_nix_lazily(path_text, shown)
            with neo.io.NixIO(path_text, mode="ro") as io:
                blocks = io.read_all_blocks(lazy=False)
    except UnreadableInputError:
        raise
    except Exception as exc:  # nixio and h5py raise many types; keep the cause
        raise UnreadableInputError(f"{shown}: cannot be read as NIX ({_hdf5_reason(exc)})") from exc
    segments = [seg for blk in blocks for seg in blk.segments]
    return _segments_to_recording(segments, shown, "NIX (one sweep per segment)")


def _read_other(path: Path, shown: str) -> Recording:
    import neo.io

    try:
        candidates = neo.io.list_candidate_ios(str(path))
    except ValueError:
        candidates = []
    if not candidates:
        raise UnreadableInputError(
            f"{shown}: no reader for '{path.suffix or 'no suffix'}' files; spikemeasure reads "
            "NWB, NIX, text (.txt/.csv/.tsv) and the formats neo recognizes by suffix")
    reasons = []
    for cls in candidates:
        if _reader_runs_file_content(cls):
            reasons.append(f"{cls.__name__}: refused, it unpickles or evaluates file content")
            continue
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                io = cls(str(path))
                blocks = io.read(lazy=False)
        except Exception as exc:  # each neo reader raises its own types; keep every cause
            reasons.append(f"{cls.__name__}: {type(exc).__name__}: {exc}")
            continue
        segments = [seg for blk in blocks for seg in blk.segments]
        return _segments_to_recording(segments, shown, f"neo {cls.__name__}")
    raise UnreadableInputError(f"{shown}: no reader could open it ({'; '.join(reasons)})")


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


def _read_text(path: Path, shown: str, sampling_rate_hz: float | None) -> Recording:
    with open(path, "r", encoding="utf-8", errors="replace") as fh:
        header = fh.readline()
        second = fh.readline()
    if not header.strip():
        raise UnreadableInputError(f"{shown}: the file is empty")
    delimiter = "\t" if "\t" in header else ("," if "," in header else None)
    names = [n.strip() for n in (header.split(delimiter) if delimiter else header.split())]
    if all(re.fullmatch(r"[-+0-9.eE]+", n or "x") for n in names):
        raise UnreadableInputError(
            f"{shown}: no header row; the first line must name each column with its unit, "
            "e.g. time_s, voltage_mV, current_pA")
    if not second.strip():
        raise UnreadableInputError(f"{shown}: a header row but no data rows")
    roles: dict[str, tuple[int, float]] = {}
    channels = []
    for col, raw in enumerate(names):
        _, unit = _split_unit(raw)
        role = "ignored"
        for kind, table in (("time", _SECOND_TO_S), ("voltage", _VOLT_TO_MV),
                            ("command", _AMP_TO_PA)):
            if unit in table and kind not in roles:
                roles[kind] = (col, table[unit])
                role = kind
                break
        channels.append(ChannelInfo(raw, unit or "?", role))
    if "voltage" not in roles:
        raise UnreadableInputError(
            f"{shown}: no voltage column; the header ({', '.join(names)}) must name one with a "
            "unit suffix such as voltage_mV or voltage_V")
    try:
        data = np.loadtxt(path, delimiter=delimiter, skiprows=1, dtype=np.float64, ndmin=2,
                          comments="#")
    except ValueError as exc:
        raise UnreadableInputError(
            f"{shown}: cannot parse the data rows ({exc}); the file may be truncated or have "
            "text where numbers belong") from exc
    if data.shape[1] != len(names):
        raise UnreadableInputError(
            f"{shown}: the header names {len(names)} columns but rows have {data.shape[1]}")
    if data.shape[0] < 3:
        raise UnreadableInputError(
            f"{shown}: only {data.shape[0]} data row{'s' if data.shape[0] != 1 else ''}; a "
            "sweep needs at least 3")
    if "time" in roles:
        col, scale = roles["time"]
        t = data[:, col] * scale
        steps = np.diff(t)
        dt = float(np.median(steps))
        if not dt > 0 or np.max(np.abs(steps - dt)) > 0.01 * dt:
            bad = int(np.argmax(np.abs(steps - dt))) + 3  # +1 header, +1 diff, 1-based lines
            raise UnreadableInputError(
                f"{shown}: the time column is not evenly spaced (around line {bad}); "
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
    if command is not None and _looks_like_command(voltage) and not _looks_like_command(command):
        raise UnreadableInputError(
            f"{shown}: this looks like a voltage-clamp recording (the voltage column is a few "
            "flat command levels); spikemeasure measures current clamp")
    return Recording(shown, "plain text (numpy, float64)", [sweep], channels, problems)


# --------------------------------------------------------------------------- entry points

def read_recording(path: str | os.PathLike, *, shown_as: str | None = None,
                   sampling_rate_hz: float | None = None) -> Recording:
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

    Returns
    -------
    Recording

    Raises
    ------
    UnreadableInputError
        The file does not exist, is empty, truncated, of an unknown or unsafe format, or holds
        no current-clamp voltage. The message names the file and, where it applies, the sweep.
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
    if st.st_size == 0:
        raise UnreadableInputError(f"{shown}: the file is empty")
    if sampling_rate_hz is not None and not sampling_rate_hz > 0:
        raise UnreadableInputError(f"{shown}: the sampling rate must be positive")
    _refuse_code_formats(p)
    suffix = p.suffix.lower()
    if suffix == ".nwb":
        return _read_nwb(p, shown)
    if suffix == ".nix":
        return _read_nix(p, shown)
    if suffix in TEXT_SUFFIXES:
        return _read_text(p, shown, sampling_rate_hz)
    return _read_other(p, shown)


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
