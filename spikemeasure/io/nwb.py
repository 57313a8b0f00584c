"""NWB files (``.nwb``): each electrode's current-clamp series paired with its stimulus series,
by NWB's intracellular tables or, in older files, by sweep number.

The series and tables are read straight from HDF5 (:mod:`~spikemeasure.io.nwb_hdf5`), each
series' samples when its sweep is made. Files that path does not read (long series, series
with an offset, other layouts) are read through pynwb and neo, to the same sweeps; files not
written with the intracellular series types are read as neo segments, each sweep by the units
its channels declare.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from ..errors import UnreadableInputError
from .sweep import LazyTrace, Sweep
from . import limits
from .lazy import LongSignal, is_long, settle_long_sweep
from .messages import library_failure, safe_name
from .nwb_hdf5 import FastPathUnsupported, nwb_layout
from .recording import Recording
from .safety import HDF5_SIGNATURE
from .signals import segments_to_recording, sweep_from_signals, unit_object
from .units import scale_to

__all__ = ["read_nwb"]

_CC_RESPONSE = {"CurrentClampSeries", "IZeroClampSeries"}
_CC_STIMULUS = {"CurrentClampStimulusSeries"}
_VC_TYPES = {"VoltageClampSeries", "VoltageClampStimulusSeries"}


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


@dataclass
class _Series:
    """One current-clamp series of an NWB file: its neo signal (None when refused, with why),
    its electrode's name, its sweep number and name."""

    kind: str  # "response" or "stimulus"
    electrode: str
    number: int | None
    name: str
    signal: object = None
    refused: str = ""
    load: object = None  # reads the signal when it is needed (the h5py path)

    def loaded(self):
        """The series' neo signal, read now when it was left in the file."""
        return self.load() if self.load is not None else self.signal


@dataclass
class _Recorded:
    """One intracellular recording: an electrode's response (and stimulus) in one sweep."""

    electrode: str
    key: tuple
    response: str | None  # object id of the series
    stimulus: str | None
    response_part: tuple[int, int] | None = None  # (first sample, count) of the series
    stimulus_part: tuple[int, int] | None = None


def _electrode_name(series) -> str:
    electrode = getattr(series, "electrode", None)
    return safe_name(getattr(electrode, "name", "") or "", "electrode")


def _reference(ref, series: dict) -> tuple[str | None, tuple[int, int] | None]:
    """An intracellular table's reference to a series: its object id and the part of it
    referred to ((first sample, count), None for all of it); (None, None) when absent."""
    ts = getattr(ref, "timeseries", None)
    if ts is None or int(getattr(ref, "idx_start", -1)) < 0 or ts.object_id not in series:
        return None, None
    start, count = int(ref.idx_start), int(ref.count)
    whole = start == 0 and count in (-1, int(ts.data.shape[0]))
    return ts.object_id, None if whole else (start, count)


def _table_recordings(nwbfile, series: dict) -> list[_Recorded] | None:
    """The rows of the file's intracellular-recordings table, each keyed by the position of
    its simultaneous recording (in the order of the sequential recordings); rows in no
    simultaneous recording come after, keyed by their series' sweep number. None when the
    file has no such table (older NWB files: series with sweep numbers only)."""
    table = getattr(nwbfile, "intracellular_recordings", None)
    if table is None or len(table) == 0:
        return None
    categories = table.category_tables
    electrodes = categories["electrodes"]["electrode"]
    responses = categories["responses"]["response"]
    stimuli = categories["stimuli"]["stimulus"] if "stimuli" in categories else None
    position: dict[int, int] = {}
    simultaneous = getattr(nwbfile, "icephys_simultaneous_recordings", None)
    if simultaneous is not None and len(simultaneous):
        order = list(range(len(simultaneous)))
        sequential = getattr(nwbfile, "icephys_sequential_recordings", None)
        if sequential is not None and len(sequential):
            listed = [int(k) for k in sequential["simultaneous_recordings"].target.data[:]]
            order = list(dict.fromkeys(listed + order))
        rows = simultaneous["recordings"]
        ends = [int(k) for k in rows.data[:]]
        targets = [int(k) for k in rows.target.data[:]]
        for rank, group in enumerate(order):
            for row in targets[(ends[group - 1] if group else 0):ends[group]]:
                position.setdefault(row, rank)
    recorded = []
    for row in range(len(table)):
        response, response_part = _reference(responses[row], series)
        stimulus, stimulus_part = (_reference(stimuli[row], series) if stimuli is not None
                                   else (None, None))
        number = series[response].number if response in series else None
        key = ((0, position[row]) if row in position else
               (1, number if number is not None else row))
        recorded.append(_Recorded(safe_name(electrodes[row].name, "electrode"), key, response,
                                  stimulus, response_part, stimulus_part))
    return recorded


def _series_recordings(series: dict) -> list[_Recorded]:
    """Older NWB files: responses and stimuli paired by electrode and sweep number (a series
    refused without a sweep number is a problem of the file, in no sweep)."""
    slots: dict[tuple, _Recorded] = {}
    extra: list[_Recorded] = []
    for order, (oid, s) in enumerate(series.items()):
        if s.refused and s.number is None:
            continue
        key = (1, s.number if s.number is not None else order)
        slot = slots.setdefault((s.electrode, key), _Recorded(s.electrode, key, None, None))
        if getattr(slot, s.kind) is None:
            setattr(slot, s.kind, oid)
        elif s.kind == "response":
            extra.append(_Recorded(s.electrode, key, oid, None))
    return list(slots.values()) + extra


def _nwb_signals(path: Path, shown: str, max_sweep_samples: int
                 ) -> tuple[dict, set, list[_Recorded], object]:
    """The current-clamp series of an NWB file as neo signals: neo's lazy proxies opened on
    the file's acquisition and stimulus series, short ones loaded, long ones left in the file;
    and the intracellular recordings they form.

    Series whose time axis or scale is unusable, or whose declared size is beyond
    `max_sweep_samples` or the memory available, are not loaded.

    Returns ({object id: _Series}, the neurodata types found, the recordings, whether they
    come from the intracellular tables, the open pynwb reader, to be closed when the long
    ones are read).
    """
    import pynwb
    from neo.io.nwbio import AnalogSignalProxy

    reader = pynwb.NWBHDF5IO(str(path), mode="r", load_namespaces=True)
    series: dict[str, _Series] = {}
    types: set[str] = set()
    try:
        nwbfile = reader.read()
        for group_name in ("acquisition", "stimulus"):
            for one in getattr(nwbfile, group_name).values():
                kind = type(one).__name__
                types.add(kind)
                if kind not in _CC_RESPONSE | _CC_STIMULUS:
                    continue
                number = getattr(one, "sweep_number", None)
                number = None if number is None else int(number)
                entry, where = _series_entry(kind, _electrode_name(one), number,
                                             safe_name(one.name), shown)
                series[one.object_id] = entry
                if getattr(one, "rate", None) is None:
                    entry.refused = _timestamps_problem(where)
                    continue
                problem = _nwb_series_problem(one, where)
                if problem is None:
                    shape = tuple(one.data.shape)
                    problem = limits.size_problem(where, shape, max_sweep_samples,
                                                  whole=not limits.is_long_shape(shape))
                if problem is not None:
                    entry.refused = problem
                    continue
                proxy = AnalogSignalProxy(one, group_name)
                entry.signal = LongSignal(proxy, shown) if is_long(proxy) else proxy.load()
        recorded = _table_recordings(nwbfile, series)
        tables = recorded is not None
        if recorded is None:
            recorded = _series_recordings(series)
    except BaseException:
        reader.close()
        raise
    return series, types, recorded, tables, reader


def _series_entry(kind_name: str, electrode: str, number: int | None, name: str, shown: str,
                  ) -> tuple[_Series, str]:
    """A series' entry and how messages name it."""
    entry = _Series("response" if kind_name in _CC_RESPONSE else "stimulus", electrode,
                    number, name)
    where = (f"{shown}, series {name or 'without a plain name'}"
             + (f" (sweep_number {number})" if number is not None else ""))
    return entry, where


def _timestamps_problem(where: str) -> str:
    return (f"{where}: sampled at listed times (timestamps), not at a constant rate; "
            "spikemeasure needs a constant sampling rate, so the sweep was not read")


def _fast_nwb_signals(fh, shown: str, max_sweep_samples: int
                      ) -> tuple[dict, set, list[_Recorded], bool]:
    """What :func:`_nwb_signals` gives, from the HDF5 layout (:mod:`~spikemeasure.io.
    nwb_hdf5`): each series' samples are read when its sweep is made. Raises
    FastPathUnsupported for what only pynwb and neo read (long series among them)."""
    layouts, rows = nwb_layout(fh)
    series: dict[str, _Series] = {}
    for oid, one in layouts.items():
        entry, where = _series_entry(one.neurodata_type, safe_name(one.electrode, "electrode"),
                                     one.number, safe_name(one.name), shown)
        series[oid] = entry
        if one.rate is None:
            entry.refused = _timestamps_problem(where)
            continue
        problem = _nwb_series_problem(one, where)
        if problem is None:
            if limits.is_long_shape(one.shape):
                raise FastPathUnsupported("a long series: read lazily through neo")
            problem = limits.size_problem(where, one.shape, max_sweep_samples, whole=True)
        if problem is not None:
            entry.refused = problem
            continue
        entry.load = one.loader()
    if rows is None:
        return series, {s.neurodata_type for s in layouts.values()}, \
            _series_recordings(series), False
    recorded = []
    for row, (electrode, response_ref, stimulus_ref, rank) in enumerate(rows):
        response, response_part = _fast_reference(response_ref, series)
        stimulus, stimulus_part = _fast_reference(stimulus_ref, series)
        number = series[response].number if response in series else None
        key = (0, rank) if rank is not None else (1, number if number is not None else row)
        recorded.append(_Recorded(electrode, key, response, stimulus, response_part,
                                  stimulus_part))
    return series, {s.neurodata_type for s in layouts.values()}, recorded, True


def _fast_reference(ref, series: dict) -> tuple[str | None, tuple[int, int] | None]:
    """As :func:`_reference`, for a reference read from HDF5."""
    if ref is None or ref[0] not in series:
        return None, None
    oid, start, count, length = ref
    whole = start == 0 and count in (-1, length)
    return oid, None if whole else (start, count)


def _read_nwb_fast(path: Path, shown: str, max_sweep_samples: int) -> Recording:
    """Read an NWB file through its HDF5 layout; FastPathUnsupported when it must be read
    through pynwb and neo."""
    import h5py

    try:
        fh = h5py.File(path, "r")
    except Exception as exc:  # h5py raises many types on files it cannot open
        raise FastPathUnsupported("not opened by h5py") from exc
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                series, types, recorded, tables = _fast_nwb_signals(fh, shown,
                                                                    max_sweep_samples)
            except FastPathUnsupported:
                raise
            except Exception as exc:  # a layout not read here: pynwb and neo say what it is
                raise FastPathUnsupported("layout not read from HDF5") from exc
            return _nwb_recording(series, types, recorded, path, shown, tables)
    finally:
        fh.close()


def read_nwb(path: Path, shown: str, max_sweep_samples: int) -> Recording:
    """Read an NWB file: each electrode's current-clamp responses, each paired with its
    stimulus (or, in files without those types, neo's segments).

    The intracellular-recordings table pairs each response with its stimulus and electrode,
    and the simultaneous-recordings table groups the recordings of one sweep (their order in
    the sequential-recordings table, where there is one, orders the sweeps). Files without
    these tables pair responses and stimuli by electrode and ``sweep_number``. Each sweep's
    ``electrode`` is its electrode's name: a file with several electrodes holds several cells.

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

    References
    ----------
    NWB format specification 2.4+: IntracellularRecordingsTable, SimultaneousRecordingsTable,
    SequentialRecordingsTable; PatchClampSeries ``sweep_number`` in older files.
    """
    with open(path, "rb") as fh:
        if fh.read(8) != HDF5_SIGNATURE:
            raise UnreadableInputError(
                f"{shown}: not an NWB file (NWB files are HDF5, and this one does not start "
                "with the HDF5 signature; it may be truncated or of another format)")
    try:
        return _read_nwb_fast(path, shown, max_sweep_samples)
    except FastPathUnsupported:
        pass
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            series, types, recorded, tables, reader = _nwb_signals(path, shown,
                                                                   max_sweep_samples)
    except Exception as exc:  # the NWB stack raises many types; keep the cause
        raise UnreadableInputError(
            f"{shown}: cannot be read as NWB ({library_failure(exc)})") from exc
    try:
        recording = _nwb_recording(series, types, recorded, path, shown, tables)
    except BaseException:
        reader.close()
        raise
    if not any(sw.is_lazy for sw in recording.sweeps):
        reader.close()
        return recording
    return replace(recording, release=reader.close)


def _neo_segments_recording(path: Path, shown: str, types: set) -> Recording:
    """A file without current-clamp series: refused as voltage clamp, or read as neo's
    segments (from the series' notes), each sweep by the units its channels declare."""
    import neo

    if types & _VC_TYPES:
        raise UnreadableInputError(
            f"{shown}: a voltage-clamp recording (it holds VoltageClampSeries and no "
            "CurrentClampSeries); spikemeasure measures current clamp")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            block = neo.io.NWBIO(str(path), mode="r").read_block(lazy=False)
    except Exception as exc:  # the NWB stack raises many types; keep the cause
        raise UnreadableInputError(
            f"{shown}: cannot be read as NWB ({library_failure(exc)})") from exc
    return segments_to_recording(block.segments, shown, "NWB (by channel units)")


def _nwb_recording(series: dict, types: set, recorded: list[_Recorded], path: Path,
                   shown: str, tables: bool) -> Recording:
    if not any(s.kind == "response" for s in series.values()) and not any(
            s.refused for s in series.values()):
        return _neo_segments_recording(path, shown, types)
    cells = len({r.electrode for r in recorded})
    index_of = {key: k for k, key in enumerate(sorted({r.key for r in recorded}))}
    referenced = {r.response for r in recorded} | {r.stimulus for r in recorded}
    unplaced = [(oid, s) for oid, s in series.items() if s.refused and oid not in referenced]
    problems = [s.refused for _, s in unplaced]
    problem_electrodes = [s.electrode for _, s in unplaced]
    sweeps, first_channels = [], []
    channels_of: set[str] = set()  # the electrodes whose first sweep's channels are listed
    shared: dict[tuple, int] = {}
    for r in recorded:
        shared[(r.electrode, r.key)] = shared.get((r.electrode, r.key), 0) + 1
    done: set = set()
    for r in sorted(recorded, key=lambda r: (index_of[r.key],)):
        if (r.electrode, r.key) in done:
            continue
        done.add((r.electrode, r.key))
        sweep, channels, found = _recorded_sweep(r, series, shown, index_of[r.key], cells)
        if r.electrode not in channels_of and channels:
            channels_of.add(r.electrode)
            first_channels = first_channels + list(channels)
        if shared[(r.electrode, r.key)] > 1 and sweep is not None:
            found.append(f"{sweep.where()}: {shared[(r.electrode, r.key)]} responses share "
                         + ("this sweep and electrode" if cells > 1 else "this sweep number")
                         + "; the first was used")
        problems.extend(found)
        problem_electrodes.extend([r.electrode] * len(found))
        if sweep is not None:
            sweeps.append(sweep)
    if not sweeps:
        raise UnreadableInputError(
            f"{shown}: no current-clamp sweeps found" if not problems else problems[0]
            if len(problems) == 1 else f"{problems[0]} (and {len(problems) - 1} more problems)")
    how = ("paired by the intracellular recordings table" if tables
           else "paired by sweep number")
    return Recording(shown, f"NWB (intracellular series {how})", sweeps, first_channels,
                     problems, problem_electrodes=problem_electrodes)


def _part(signal, part: tuple[int, int] | None, where: str):
    """The part of a series an intracellular table refers to; (signal, problem)."""
    if part is None or signal is None:
        return signal, None
    start, count = part
    if isinstance(signal, LongSignal):
        return None, (f"{where}: the intracellular table refers to part of a long series "
                      f"(samples {start} to {start + count}); only whole long series are read")
    stop = signal.shape[0] if count < 0 else start + count
    return signal[start:stop], None


def _recorded_sweep(r: _Recorded, series: dict, shown: str, index: int, cells: int
                    ) -> tuple[Sweep | None, list, list[str]]:
    """The sweep of one intracellular recording: its response with its stimulus as the
    command, of its electrode, in a file of `cells` electrodes (messages name the electrode
    when there are several); (sweep or None, channels, problems)."""
    cell = f", electrode {r.electrode}" if cells > 1 else ""
    response = series.get(r.response) if r.response else None
    stimulus = series.get(r.stimulus) if r.stimulus else None
    for refused in (response, stimulus):
        if refused is not None and refused.refused:
            return None, [], [refused.refused.replace(
                f"{shown}, ", f"{shown}{cell}, sweep {index}, ", 1)]
    number = next((s.number for s in (response, stimulus) if s is not None
                   and s.number is not None), None)
    label = f"sweep_number {number}" if number is not None else ""
    if response is None:
        return None, [], [f"{shown}{cell}, sweep {index}"
                          + (f" ({label})" if label else "")
                          + ": a stimulus with no voltage response; skipped"]
    label = ", ".join(x for x in (label, response.name) if x)
    where = f"{shown}{cell}, sweep {index}" + (f" ({label})" if label else "")
    voltage, problem = _part(response.loaded(), r.response_part, where)
    command, problem_s = (_part(stimulus.loaded(), r.stimulus_part, where) if stimulus
                          else (None, None))
    if problem or problem_s:
        return None, [], [problem or problem_s]
    parts = [voltage] + ([command] if command is not None else [])
    sweep, channels, found = sweep_from_signals(parts, shown, index, label)
    if sweep is not None:
        sweep = replace(sweep, electrode=r.electrode, cells_in_file=cells)
    if cell:
        found = [m.replace(f"{shown}, sweep {index}", f"{shown}{cell}, sweep {index}", 1)
                 for m in found]
    if (command is not None and sweep is not None and sweep.command_pa is None
            and found and found[-1].endswith("it was not used as the command")):
        # align a stimulus that starts later or is longer than the response
        sweep, aligned = _align_stimulus(sweep, voltage, command)
        if aligned:
            found = found[:-1]
    return sweep, channels, found


def _align_stimulus(sweep: Sweep, response, stimulus) -> tuple[Sweep, bool]:
    """Cut a stimulus to the response's time span when both share a sampling rate.

    Either may be long and left in the file (:class:`LongSignal`); a long stimulus is cut
    lazily. Returns (the sweep, with the command when it could be aligned; whether it was).
    """
    rate = sweep.sampling_rate_hz
    s_rate = float(stimulus.sampling_rate.rescale(unit_object("Hz")))
    if abs(s_rate - rate) > 1e-6 * rate:
        return sweep, False
    offset = int(round((float(response.t_start.rescale(unit_object("s"))) -
                        float(stimulus.t_start.rescale(unit_object("s")))) * rate))
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
        settled = settle_long_sweep(replace(sweep, command_pa=aligned))
    except UnreadableInputError:
        return sweep, False
    return settled, True
