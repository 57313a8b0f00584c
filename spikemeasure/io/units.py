"""Units: declared units of neo signals and of text column names, converted to mV, pA and s.

Units are converted by the units each channel declares, never assumed.
"""
from __future__ import annotations

import re

import numpy as np

__all__ = ["VOLT_TO_MV", "AMP_TO_PA", "SECOND_TO_S", "unit_text", "scale_to", "split_unit"]

VOLT_TO_MV = {"v": 1e3, "mv": 1.0, "uv": 1e-3, "µv": 1e-3}
AMP_TO_PA = {"a": 1e12, "ma": 1e9, "ua": 1e6, "µa": 1e6, "na": 1e3, "pa": 1.0, "fa": 1e-3}
SECOND_TO_S = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6}


def unit_text(signal) -> str:
    """The units a neo signal declares, as text (``mV``, ``pA``)."""
    return signal.units.dimensionality.string


def scale_to(signal, target: str) -> float | None:
    """Factor turning the signal's declared units into `target` ('mV' or 'pA'), or None.

    The factor of each declared unit is worked out once per process and remembered (every
    sweep of a file declares the same few units)."""
    try:
        units = signal.units
        key = (units.dimensionality.string, float(units.magnitude), target)
    except (ValueError, TypeError, AttributeError, LookupError):
        return _scale(signal, target)
    if key not in _SCALES:
        _SCALES[key] = _scale(signal, target)
    return _SCALES[key]


#: Factors found by :func:`scale_to`, by (unit symbol, magnitude, target).
_SCALES: dict[tuple[str, float, str], float | None] = {}


def _scale(signal, target: str) -> float | None:
    import quantities as pq

    try:
        factor = float(signal.units.rescale(getattr(pq, target)).magnitude)
    except (ValueError, TypeError, AttributeError, LookupError):
        return None
    return factor if np.isfinite(factor) and factor != 0 else None


def split_unit(column_name: str) -> tuple[str, str]:
    """'voltage_mV' -> ('voltage', 'mv'); also accepts 'voltage (mV)' and 'voltage [mV]'."""
    name = column_name.strip().strip('"').strip("'")
    m = re.match(r"^(.*?)[\s_]*[\(\[]\s*([^\)\]]+)\s*[\)\]]$", name)
    if m:
        return m.group(1).strip(), m.group(2).strip().lower()
    if "_" in name:
        base, unit = name.rsplit("_", 1)
        return base, unit.lower()
    return name, ""
