"""NWB intracellular series read straight from HDF5 with h5py, without building the file's
object tree.

Finds what :mod:`~spikemeasure.io.nwb` needs (the current-clamp series, their electrodes and
sweep numbers, and the intracellular tables that pair them) from the layout the NWB schema
defines, and loads each series' samples only when its sweep is made. Anything this module does
not understand raises :class:`FastPathUnsupported`, and the file is read through pynwb and
neo instead, so a file gives the same sweeps, or the same error, either way.
"""
from __future__ import annotations

import functools
from pathlib import Path
from typing import Callable

from .messages import safe_name

__all__ = ["FastPathUnsupported", "SeriesLayout", "nwb_layout", "recompose_unit"]

CC_RESPONSE = frozenset({"CurrentClampSeries", "IZeroClampSeries"})
CC_STIMULUS = frozenset({"CurrentClampStimulusSeries"})
#: The unit the NWB schema fixes for each series type.
_SCHEMA_UNIT = {"CurrentClampSeries": "volts", "IZeroClampSeries": "volts",
                "CurrentClampStimulusSeries": "amperes"}
#: SI prefixes of the conversion factors a series may declare (as neo maps them to units).
_PREFIXES = {1e9: "giga", 1e6: "mega", 1e3: "kilo", 1: "", 1e-3: "milli", 1e-6: "micro",
             1e-9: "nano", 1e-12: "pico"}
_ICEPHYS = "general/intracellular_ephys"


class FastPathUnsupported(Exception):
    """The file holds something the h5py readers do not read; it is read through neo."""


def recompose_unit(base_unit: str, conversion: float):
    """The quantities unit of data stored in `base_unit` times `conversion` ("volts", 1e-3
    -> millivolt), matching the conversion to an SI prefix within 1e-6 as neo does.

    Raises FastPathUnsupported when no prefix matches or quantities has no such unit.
    """
    return _recompose_unit(str(base_unit), float(conversion))


@functools.lru_cache(maxsize=64)
def _recompose_unit(base_unit: str, conversion: float):
    import quantities as pq

    name = None
    for factor, prefix in _PREFIXES.items():
        if abs(conversion - factor) / factor < 1e-6:
            name = prefix + base_unit
    if name is None:
        raise FastPathUnsupported("conversion factor without an SI prefix")
    if name.endswith("s"):
        name = name[:-1]
    unit = getattr(pq, name, None)
    if unit is None:
        raise FastPathUnsupported("unit unknown to quantities")
    return unit


class SeriesLayout:
    """One current-clamp series as the file declares it: its type, name, sweep number,
    electrode, object id, time axis, conversion and the dataset of its samples."""

    def __init__(self, group, group_name: str, neurodata_type: str | None = None) -> None:
        attrs = group.attrs
        self.neurodata_type = (_text(attrs.get("neurodata_type")) if neurodata_type is None
                               else neurodata_type)
        self.object_id = _text(attrs.get("object_id"))
        self.group_name = group_name
        self.name = group.name.rsplit("/", 1)[-1]
        number = attrs.get("sweep_number")
        self.number = None if number is None else int(number)
        self.electrode = _link_name(group, "electrode")
        data = group.get("data")
        if data is None or not hasattr(data, "dtype") or data.dtype.kind not in "fiu":
            raise FastPathUnsupported("series without numeric data")
        if data.ndim != 1:
            raise FastPathUnsupported("series data with more than one column")
        self.data = data
        self.shape = (int(data.shape[0]), 1)
        self.unit = _text(data.attrs.get("unit"))
        if self.unit != _SCHEMA_UNIT[self.neurodata_type]:
            raise FastPathUnsupported("series unit other than the schema's")
        self.conversion = data.attrs.get("conversion", 1.0)
        offset = data.attrs.get("offset", 0.0)
        if not _is_number(offset) or float(offset) != 0.0:
            raise FastPathUnsupported("series with an offset")  # neo ignores it: keep neo's
        starting = group.get("starting_time")
        self.rate = None
        self.starting_time = None
        if starting is not None:
            self.starting_time = starting[()]
            self.rate = starting.attrs.get("rate")
            if _text(starting.attrs.get("unit", "seconds")) != "seconds":
                raise FastPathUnsupported("starting time not in seconds")
        elif "timestamps" not in group:
            raise FastPathUnsupported("series without a time axis")

    def loader(self) -> Callable[[], object]:
        """A function that reads the samples into a neo AnalogSignal, as neo's NWB proxy
        would give them (stored dtype, units from the unit and conversion)."""
        data, name = self.data, self.name
        units = recompose_unit(self.unit, float(self.conversion))
        start, rate = float(self.starting_time), float(self.rate)

        def load():
            import quantities as pq
            from neo import AnalogSignal

            try:
                samples = data[()]
            except Exception as exc:  # damaged data: pynwb and neo say what is wrong
                raise FastPathUnsupported("samples not read") from exc
            return AnalogSignal(samples, units=units, t_start=start * pq.s,
                                sampling_rate=rate * pq.Hz, name=name)

        return load


def _text(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    return "" if value is None else str(value)


def _is_number(value) -> bool:
    try:
        float(value)
    except (TypeError, ValueError):
        return False
    return True


def _link_name(group, key: str) -> str:
    """The name of the group a series links to (its electrode): the last part of the soft
    link's path (h5py names a linked object by the path it was reached by); "" when absent."""
    import h5py

    link = group.get(key, getlink=True)
    if link is None:
        return ""
    if not isinstance(link, h5py.SoftLink):
        raise FastPathUnsupported("electrode stored other than as a link")
    return link.path.rstrip("/").rsplit("/", 1)[-1]


def nwb_layout(fh) -> tuple[dict, list | None]:
    """The current-clamp series of an open NWB file and its intracellular-recordings rows.

    Parameters
    ----------
    fh : h5py.File
        The open file.

    Returns
    -------
    (series, table)
        ``{object id: SeriesLayout}`` in the order pynwb gives them (acquisition, then
        stimulus, each by name), and the rows of the intracellular-recordings table as
        ``(electrode name, response ref, stimulus ref, simultaneous group rank or None)``,
        or None when the file has no such table. A ref is ``(object id, idx_start, count,
        series length)`` or None.

    Raises
    ------
    FastPathUnsupported
        The file holds no current-clamp response, series of other namespaces or of a layout
        not read here.
    """
    if "acquisition" not in fh:
        raise FastPathUnsupported("no acquisition group")
    series: dict[str, SeriesLayout] = {}
    by_path: dict[bytes, SeriesLayout] = {}  # the series read, by their path in the file
    for group_name, where in (("acquisition", "acquisition"),
                              ("stimulus", "stimulus/presentation")):
        parent = fh.get(where)
        if parent is None:
            continue
        for key in parent:  # h5py gives names in ascending order, as pynwb reads them
            group = parent[key]
            kind = _text(group.attrs.get("neurodata_type"))
            if kind in CC_RESPONSE | CC_STIMULUS:
                if _text(group.attrs.get("namespace")) != "core":
                    raise FastPathUnsupported("series of another namespace")
                one = SeriesLayout(group, group_name, kind)
                if not one.object_id or one.object_id in series:
                    raise FastPathUnsupported("series without a distinct object id")
                series[one.object_id] = one
                by_path[group.name.encode()] = one
    if not any(s.neurodata_type in CC_RESPONSE for s in series.values()):
        raise FastPathUnsupported("no current-clamp response")
    return series, _table_rows(fh, by_path)


def _table_rows(fh, by_path: dict | None = None) -> list | None:
    table = fh.get(f"{_ICEPHYS}/intracellular_recordings")
    if table is None:
        return None
    ids = table.get("id")
    if ids is None:
        raise FastPathUnsupported("intracellular table without ids")
    n_rows = int(ids.shape[0])
    if n_rows == 0:
        return None
    try:
        electrodes = table["electrodes/electrode"][()]
        responses = table["responses/response"][()]
        stimuli = table["stimuli/stimulus"][()] if "stimuli" in table else None
    except KeyError:
        raise FastPathUnsupported("intracellular table of another layout") from None
    if len(electrodes) != n_rows or len(responses) != n_rows or (
            stimuli is not None and len(stimuli) != n_rows):
        raise FastPathUnsupported("intracellular table columns of unequal length")
    rank = _simultaneous_ranks(fh)
    rows = []
    for row in range(n_rows):
        electrode = fh[electrodes[row]]
        rows.append((safe_name(electrode.name.rsplit("/", 1)[-1], "electrode"),
                     _reference(fh, responses[row], by_path),
                     _reference(fh, stimuli[row], by_path) if stimuli is not None else None,
                     rank.get(row)))
    return rows


def _reference(fh, ref, by_path: dict | None = None) -> tuple | None:
    """A TimeSeriesReference row: (object id, idx_start, count, series length), or None
    when it refers to nothing (idx_start < 0). A series already read (`by_path`, by its
    path in the file) gives its object id and length without opening it again."""
    import h5py

    start, count, target = int(ref["idx_start"]), int(ref["count"]), ref["timeseries"]
    if start < 0 or not target:
        return None
    known = (by_path or {}).get(h5py.h5r.get_name(target, fh.id))
    if known is not None:
        return known.object_id, start, count, known.shape[0]
    group = fh[target]
    data = group.get("data")
    length = int(data.shape[0]) if data is not None and data.ndim >= 1 else -2
    return _text(group.attrs.get("object_id")), start, count, length


def _ragged(table, column: str) -> tuple[list[int], list[int]]:
    """A ragged column's index (ends) and values."""
    index = table.get(f"{column}_index")
    values = table.get(column)
    if index is None or values is None:
        raise FastPathUnsupported("grouping table of another layout")
    return [int(k) for k in index[()]], [int(k) for k in values[()]]


def _simultaneous_ranks(fh) -> dict[int, int]:
    """Each intracellular row's place: the rank of its simultaneous recording, in the order
    of the sequential recordings where there are any."""
    simultaneous = fh.get(f"{_ICEPHYS}/simultaneous_recordings")
    if simultaneous is None or int(simultaneous["id"].shape[0]) == 0:
        return {}
    order = list(range(int(simultaneous["id"].shape[0])))
    sequential = fh.get(f"{_ICEPHYS}/sequential_recordings")
    if sequential is not None and int(sequential["id"].shape[0]):
        _, listed = _ragged(sequential, "simultaneous_recordings")
        order = list(dict.fromkeys(listed + order))
    ends, targets = _ragged(simultaneous, "recordings")
    position: dict[int, int] = {}
    for rank, group in enumerate(order):
        for row in targets[(ends[group - 1] if group else 0):ends[group]]:
            position.setdefault(row, rank)
    return position
