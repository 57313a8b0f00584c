"""NIX files as neo's NixIO writes them, read straight from HDF5 with h5py, one segment at a
time.

The layout read is NIX 1.2 (``/data/<block>/groups/<segment>/data_arrays`` linking the
block's data arrays, each with its ``data``, ``unit``, a sampled time dimension and a metadata
section of properties), walked in creation order as nixio walks it. Each segment's signals are
made as neo's NixIO makes them (a neo AnalogSignal per group of data arrays sharing a base
name, with the name, start time and array annotations of their metadata), so the sweeps are
the same. The samples of floating-point signals wait in the file (:class:`StoredSignal`) and
are read one sweep at a time when that sweep is measured, while the file is open (the
recording's ``release`` closes it); other signals are read when their segment is reached. Anything else raises
:class:`~spikemeasure.io.nwb_hdf5.FastPathUnsupported`, and the file is read through neo.
"""
from __future__ import annotations

from typing import Iterator

import numpy as np

from ..errors import UnreadableInputError
from .messages import library_failure
from .nwb_hdf5 import FastPathUnsupported
from .signals import Segment
from .sweep import StoredTrace

__all__ = ["nix_segments", "nix_array_sizes", "StoredSignal"]

_SIGNAL_TYPES = ("neo.analogsignal", "neo.irregularlysampledsignal", "neo.imagesequence")
_ARRAY_ANNOTATION = "ARRAYANNOTATION"
#: Properties neo writes for every signal, never array annotations.
_PLAIN_PROPERTIES = frozenset({"neo_name", "nix_name", "t_start"})


def _text(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8")
    return "" if value is None else str(value)


def _creation_order(group) -> list[str]:
    """The names of a group's members in the order they were made (as nixio lists them)."""
    import h5py

    names: list[bytes] = []
    try:
        group.id.links.iterate(names.append, idx_type=h5py.h5.INDEX_CRT_ORDER,
                               order=h5py.h5.ITER_INC)
    except Exception as exc:  # no creation order kept: not written by nixio
        raise FastPathUnsupported("members without creation order") from exc
    return [n.decode("utf-8") for n in names]


def _members(group, key: str) -> list:
    child = group.get(key)
    if child is None:
        return []
    return [child[name] for name in _creation_order(child)]


def _property_values(dataset) -> list:
    values = dataset[()]
    if dataset.dtype.names is not None or np.ndim(values) != 1:
        raise FastPathUnsupported("property of another layout")
    return [_text(v) if isinstance(v, bytes) else v for v in values.tolist()]


def _metadata(obj) -> dict:
    """The properties of an object's metadata section neo turns into the signal's name,
    start time and array annotations: {"name": str or None, "t_start": quantity or absent,
    "array_annotations": {...} or absent}."""
    from neo.io.nixio import create_quantity, stringify

    section = obj.get("metadata")
    found: dict = {}
    if section is None:
        found["name"] = None
        return found
    if "link" in section.attrs or "link" in section:
        raise FastPathUnsupported("linked metadata section")
    properties = section.get("properties")
    name = None
    # a property's link is named by the property; only the array annotations need their type
    for prop_name in ([] if properties is None else _creation_order(properties)):
        prop = properties[prop_name]
        annotation = prop_name not in _PLAIN_PROPERTIES and _text(
            prop.attrs.get("type")) == _ARRAY_ANNOTATION
        if prop_name not in ("neo_name", "t_start") and not annotation:
            continue
        values = _property_values(prop)
        if not values:
            raise FastPathUnsupported("empty property")
        value = values[0] if len(values) == 1 else values
        unit = _text(prop.attrs.get("unit"))
        if unit:
            value = create_quantity(value, unit)
        if annotation:
            found.setdefault("array_annotations", {})[prop_name] = value
        elif prop_name == "neo_name":
            name = value
        else:
            found["t_start"] = value
    found["name"] = stringify(name)
    return found


def _time_dimension(array):
    for dimension in _members(array, "dimensions"):
        if _text(dimension.attrs.get("label")) == "time":
            if _text(dimension.attrs.get("dimension_type")) != "sample":
                raise FastPathUnsupported("time dimension not sampled")
            return dimension
    raise FastPathUnsupported("no time dimension")


def _signal(arrays: list):
    """A neo AnalogSignal from the data arrays of one signal, as neo's NixIO makes it."""
    from neo import AnalogSignal
    from neo.io.nixio import create_quantity

    first = arrays[0]
    for array in arrays:
        if "polynom_coefficients" in array.attrs or "expansion_origin" in array.attrs:
            raise FastPathUnsupported("data arrays with a calibration")
    unit = first.attrs.get("unit")
    if unit is None:
        raise FastPathUnsupported("data array without a unit")
    attributes = _metadata(first)
    dimension = _time_dimension(first)
    interval, dim_unit = dimension.attrs.get("sampling_interval"), dimension.attrs.get("unit")
    if interval is None or dim_unit is None:
        raise FastPathUnsupported("time dimension without an interval")
    datasets = [array["data"] for array in arrays]
    stored = _storable(datasets)
    # a stored signal's metadata is made from its first sample (the samples wait in the file)
    data = np.array([d[:1] if stored else d[()] for d in datasets]).transpose()
    samples = create_quantity(data, _text(unit))
    period = create_quantity(interval, _text(dim_unit))
    t_start = attributes.pop("t_start", None)
    if t_start is None:
        offset = dimension.attrs.get("offset")
        if offset is None:
            raise FastPathUnsupported("time dimension without an offset")
        t_start = create_quantity(offset, _text(dim_unit))
    signal = AnalogSignal(signal=samples, sampling_period=period, t_start=t_start, **attributes)
    return StoredSignal(signal, datasets) if stored else signal


def _storable(datasets: list) -> bool:
    """Whether a signal's samples can wait in the file: floating-point data arrays of one
    length and type, which give the same float64 samples read one by one as together."""
    first = datasets[0]
    return (first.ndim == 1 and first.dtype.kind == "f"
            and all(d.shape == first.shape and d.dtype == first.dtype for d in datasets))


class StoredSignal:
    """A neo AnalogSignal whose samples wait in the file: its metadata (units, sampling rate,
    start time, name, annotations) are those of the signal made from its first sample, and
    :meth:`stored_columns` gives each channel's samples as a
    :class:`~spikemeasure.io.sweep.StoredTrace`, read when its sweep is measured."""

    def __init__(self, metadata, datasets: list) -> None:
        self._metadata = metadata
        self._datasets = datasets
        self.shape = (int(datasets[0].shape[0]), len(datasets))

    def __getattr__(self, name: str):
        return getattr(self._metadata, name)

    def stored_columns(self) -> list:
        """One StoredTrace per channel, in the signal's order."""
        return [StoredTrace(_slice_reader(d), self.shape[0]) for d in self._datasets]


def _slice_reader(dataset):
    # the dataset is opened for each read and let go after, so that its chunk cache goes too
    # (open datasets of every sweep would each keep one)
    file, name = dataset.file, dataset.name

    def read(start: int, stop: int) -> np.ndarray:
        try:
            return file[name][start:stop]
        except Exception as exc:  # h5py raises many types; keep the cause
            raise UnreadableInputError(
                f"samples {start}-{stop} cannot be read ({library_failure(exc)})") from exc

    return read


def _segment_signals(group) -> list:
    """The analog signals of one segment, in nixio's order."""
    grouped: dict[str, list] = {}
    for array in _members(group, "data_arrays"):
        kind = _text(array.attrs.get("type"))
        if kind not in _SIGNAL_TYPES:
            continue
        if kind != "neo.analogsignal":
            raise FastPathUnsupported("signals other than analog signals")
        base = ".".join(_text(array.attrs.get("name")).split(".")[:-1])
        grouped.setdefault(base, []).append(array)
    return [_signal(arrays) for arrays in grouped.values()]


def _check_format(fh) -> None:
    version = tuple(int(v) for v in np.ravel(fh.attrs.get("version", ())))
    if _text(fh.attrs.get("format")) != "nix" or version[:2] != (1, 2) or "data" not in fh:
        raise FastPathUnsupported("not a NIX 1.2 file")


def nix_array_sizes(fh) -> tuple[int, int]:
    """The most rows and the most values of any data array of the file's blocks, from the
    HDF5 layout alone (nothing is read).

    Raises FastPathUnsupported when the file is not NIX 1.2.
    """
    _check_format(fh)
    longest = largest = 0
    for block in fh["data"].values():
        arrays = block.get("data_arrays")
        for array in ([] if arrays is None else arrays.values()):
            data = array.get("data")
            if data is None or data.ndim < 1:
                continue
            longest = max(longest, int(data.shape[0]))
            largest = max(largest, int(np.prod([int(d) for d in data.shape], dtype=object)))
    return longest, largest


def nix_segments(fh) -> Iterator[Segment]:
    """Yield the segments of an open NIX file written by neo, block by block, each with its
    analog signals read when it is reached.

    Parameters
    ----------
    fh : h5py.File

    Yields
    ------
    Segment

    Raises
    ------
    FastPathUnsupported
        The file is not NIX 1.2 as neo writes it.
    """
    from neo.io.nixio import stringify

    _check_format(fh)
    for block in _members(fh, "data"):
        for group in _members(block, "groups"):
            kind = _text(group.attrs.get("type"))
            if kind in ("neo.group", "neo.subgroup"):
                continue
            if kind != "neo.segment":
                raise FastPathUnsupported("group of another type")
            name = _metadata(group).get("name")
            yield Segment(stringify(name) or "", _segment_signals(group))
