"""Searches over many spans of one trace at once: the largest (or smallest) sample of each
span, the first or last sample below a level, the last upward crossing of a level, and the
parabola's vertex at a sample; the spike measurements of
:mod:`~spikemeasure.analysis.spike_features` are built on them.

Each function takes one trace and arrays of span ends (sample indices, one span per spike) and
returns arrays aligned with the spans; short spans are gathered into one array and searched
together, long ones one by one, so memory stays bounded.
"""
from __future__ import annotations

import numpy as np

__all__ = ["interp_many", "vertices", "span_argmax", "first_below", "last_below",
           "upward_crossings_before", "FIRST_BELOW_HEAD"]

_GATHER_CAP = 256           # spans longer than this are searched one by one
_GATHER_ELEMENTS = 2_000_000  # samples gathered at once, to bound memory
#: A spike falls through half its amplitude within this many samples of its peak: the head
#: of a span searched first.
FIRST_BELOW_HEAD = 128


def interp_many(x: np.ndarray, frac_index: np.ndarray) -> np.ndarray:
    """Linear interpolation of x at fractional indices (NaN stays NaN)."""
    frac_index = np.asarray(frac_index, dtype=float)
    out = np.full(frac_index.shape, np.nan)
    ok = np.isfinite(frac_index)
    if ok.any():
        f = np.clip(frac_index[ok], 0, x.size - 1)
        i = np.minimum(np.floor(f).astype(np.int64), x.size - 2) if x.size > 1 else np.zeros(
            f.size, dtype=np.int64)
        nxt = np.minimum(i + 1, x.size - 1)
        out[ok] = x[i] + (f - i) * (x[nxt] - x[i])
    return out


def vertices(x: np.ndarray, index: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sub-sample extrema near integer indices: the vertex of the parabola through i-1, i, i+1.

    Returns (fractional indices, values), the vertex kept within half a sample of i; the
    sample itself at the ends of x or where the three points are collinear.
    """
    index = np.asarray(index, dtype=np.int64)
    frac = index.astype(float)
    value = x[index].astype(float) if index.size else np.zeros(0)
    inner = (index > 0) & (index < x.size - 1)
    if inner.any():
        i = index[inner]
        a, b, c = x[i - 1], x[i], x[i + 1]
        curvature = a - 2.0 * b + c
        with np.errstate(divide="ignore", invalid="ignore"):
            delta = np.where(curvature != 0.0, 0.5 * (a - c) / curvature, 0.0)
        delta = np.clip(delta, -0.5, 0.5)
        frac[inner] = i + delta
        value[inner] = b - 0.25 * (a - c) * delta
    return frac, value


def _span_blocks(lo: np.ndarray, length: np.ndarray):
    """Yield (rows, offsets-matrix validity, index matrix) for spans lo .. lo+length-1 that are
    at most _GATHER_CAP long, in blocks of bounded size."""
    rows = np.flatnonzero((length > 0) & (length <= _GATHER_CAP))
    if rows.size == 0:
        return
    width = int(length[rows].max())
    offsets = np.arange(width)
    per_block = max(1, _GATHER_ELEMENTS // width)
    for start in range(0, rows.size, per_block):
        r = rows[start:start + per_block]
        yield r, offsets[None, :] < length[r, None], lo[r, None] + offsets[None, :]


def span_argmax(x: np.ndarray, lo: np.ndarray, hi: np.ndarray, largest: bool = True
                 ) -> np.ndarray:
    """Index of the largest (or smallest) x in each inclusive span [lo, hi]; -1 if empty.

    Short spans are gathered into one array; long ones (where gathering would move more memory
    than a loop costs in calls) are searched one by one.
    """
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.minimum(np.asarray(hi, dtype=np.int64), x.size - 1)
    length = hi - lo + 1
    out = np.full(lo.size, -1, dtype=np.int64)
    for r, valid, idx in _span_blocks(lo, length):
        vals = x[np.minimum(idx, x.size - 1)]
        if largest:
            out[r] = lo[r] + np.argmax(np.where(valid, vals, -np.inf), axis=1)
        else:
            out[r] = lo[r] + np.argmin(np.where(valid, vals, np.inf), axis=1)
    pick = np.argmax if largest else np.argmin
    for k in np.flatnonzero(length > _GATHER_CAP):
        out[k] = lo[k] + int(pick(x[lo[k]:hi[k] + 1]))
    return out


def first_below(x: np.ndarray, level: np.ndarray, lo: np.ndarray, hi: np.ndarray
                 ) -> np.ndarray:
    """First index j in [lo, hi) with x[j] < level, per span; -1 where there is none.

    Searches the first FIRST_BELOW_HEAD samples of every span at once, then the rest of the few
    spans not settled there one by one.
    """
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.minimum(np.asarray(hi, dtype=np.int64), x.size)
    length = np.clip(hi - lo, 0, None)
    out = np.full(lo.size, -1, dtype=np.int64)
    head = np.minimum(length, FIRST_BELOW_HEAD)
    for r, valid, idx in _span_blocks(lo, head):
        below = valid & (x[np.minimum(idx, x.size - 1)] < level[r, None])
        hit = below.any(axis=1)
        out[r[hit]] = lo[r[hit]] + np.argmax(below[hit], axis=1)
    for k in np.flatnonzero((out < 0) & (length > FIRST_BELOW_HEAD)):
        rest = np.flatnonzero(x[lo[k] + FIRST_BELOW_HEAD:hi[k]] < level[k])
        if rest.size:
            out[k] = lo[k] + FIRST_BELOW_HEAD + int(rest[0])
    return out


def last_below(x: np.ndarray, level: np.ndarray, lo: np.ndarray, hi: np.ndarray
                ) -> np.ndarray:
    """Last index j in [lo, hi) with x[j] < level, per span (spans <= _GATHER_CAP long are
    vectorized, longer ones searched one by one); -1 where there is none."""
    lo = np.asarray(lo, dtype=np.int64)
    hi = np.minimum(np.asarray(hi, dtype=np.int64), x.size)
    length = np.clip(hi - lo, 0, None)
    out = np.full(lo.size, -1, dtype=np.int64)
    for r, valid, idx in _span_blocks(lo, length):
        below = valid & (x[np.minimum(idx, x.size - 1)] < level[r, None])
        hit = below.any(axis=1)
        last = below.shape[1] - 1 - np.argmax(below[:, ::-1], axis=1)
        out[r[hit]] = lo[r[hit]] + last[hit]
    for k in np.flatnonzero(length > _GATHER_CAP):
        found = np.flatnonzero(x[lo[k]:hi[k]] < level[k])
        if found.size:
            out[k] = lo[k] + int(found[-1])
    return out


def upward_crossings_before(x: np.ndarray, level: np.ndarray, lo: np.ndarray, hi: np.ndarray
                             ) -> np.ndarray:
    """Fractional index of the last upward crossing of `level` by x within [lo, hi], NaN where
    there is none: j = the last sample below the level, then linear interpolation to j + 1."""
    j = last_below(x, level, lo, hi)
    out = np.full(lo.size, np.nan)
    ok = (j >= 0) & (j + 1 <= np.asarray(hi)) & (j + 1 < x.size)
    if ok.any():
        jj = j[ok]
        nxt = x[jj + 1]
        ok_rise = nxt >= level[ok]
        frac = jj + (level[ok] - x[jj]) / np.where(nxt != x[jj], nxt - x[jj], 1.0)
        out[np.flatnonzero(ok)[ok_rise]] = frac[ok_rise]
    return out
