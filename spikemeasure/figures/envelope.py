"""Long traces made drawable: each bin's minimum and maximum, and the band between them.

A sweep of more samples than the axes have pixels is drawn as a min/max envelope of at most
:data:`ENVELOPE_BINS` bins, so drawing time stays bounded while no peak or trough is lost to
the eye; markers are drawn elsewhere at their exact measured values.
"""
from __future__ import annotations

import numpy as np

__all__ = ["ENVELOPE_BINS", "envelope", "band", "band_outline"]

#: A sweep longer than twice this many samples is drawn as a min/max envelope of this many bins.
ENVELOPE_BINS = 700


def _lazy_envelope(y, sampling_rate_hz: float, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`envelope` of a trace left in its file, read a block of whole bins at a time."""
    n = len(y)
    per = -(-n // bins)
    block = per * max(1, (1 << 21) // per)
    index, values = [np.zeros(1, dtype=np.int64)], [y[0:1]]
    for start in range(0, n, block):
        part = y[start:min(n, start + block)]
        count = -(-part.size // per)
        padded = np.concatenate([part, np.full(count * per - part.size, part[-1])]
                                ).reshape(count, per)
        offsets = np.arange(count) * per
        lo = np.minimum(offsets + np.argmin(padded, axis=1), part.size - 1)
        hi = np.minimum(offsets + np.argmax(padded, axis=1), part.size - 1)
        local = np.column_stack([np.minimum(lo, hi), np.maximum(lo, hi)]).ravel()
        index.append(start + local)
        values.append(part[local])
    index.append(np.array([n - 1]))
    values.append(y[n - 1:n])
    return np.concatenate(index) / sampling_rate_hz, np.concatenate(values)


def envelope(y: np.ndarray, sampling_rate_hz: float, bins: int = ENVELOPE_BINS
             ) -> tuple[np.ndarray, np.ndarray]:
    """Times (s) and values to draw a long trace with: each bin's minimum and maximum.

    Parameters
    ----------
    y : ndarray
        1-D samples.
    sampling_rate_hz : float
        Samples per second of `y`.
    bins : int, optional
        A trace of more than ``2 * bins`` samples is cut into at most `bins` bins of
        ``ceil(n / bins)`` samples (the last one shorter), each drawn as its minimum and
        maximum in the order they occur.

    Returns
    -------
    t_s, values : ndarray
        The samples themselves when the trace is short enough. Otherwise the first sample,
        two points per bin and the last sample: the trace's extremes are all kept, so no spike
        peak or trough is lost to the eye, and the line spans the whole sweep.

    Raises
    ------
    ValueError
        When `bins` is not a whole number of at least 1 or `sampling_rate_hz` is not positive.
    """
    if not (isinstance(bins, (int, np.integer)) and bins >= 1):
        raise ValueError(f"`bins` must be a whole number of at least 1 (got {bins!r})")
    if not (np.isfinite(sampling_rate_hz) and sampling_rate_hz > 0):
        raise ValueError(f"`sampling_rate_hz` must be positive (got {sampling_rate_hz!r})")
    if not isinstance(y, np.ndarray) and len(y) > 2 * bins:
        return _lazy_envelope(y, sampling_rate_hz, bins)
    y = np.asarray(y, dtype=float)
    n = y.size
    if n <= 2 * bins:
        return np.arange(n) / sampling_rate_hz, y
    per = -(-n // bins)
    count = -(-n // per)
    padded = np.concatenate([y, np.full(count * per - n, y[-1])]).reshape(count, per)
    starts = np.arange(count) * per
    lo = np.minimum(starts + np.argmin(padded, axis=1), n - 1)
    hi = np.minimum(starts + np.argmax(padded, axis=1), n - 1)
    index = np.concatenate([[0], np.column_stack([np.minimum(lo, hi), np.maximum(lo, hi)])
                            .ravel(), [n - 1]])
    return index / sampling_rate_hz, y[index]


def band(t: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(t_s, low, high) of a trace from :func:`envelope`: each bin's minimum and maximum at
    the mean time of the two, between the first and the last sample; a trace drawn sample by
    sample is its own low and high."""
    if values.size < 4 or values.size % 2:
        return t, values, values
    pairs = values[1:-1].reshape(-1, 2)
    times = np.concatenate([t[:1], t[1:-1].reshape(-1, 2).mean(axis=1), t[-1:]])
    low = np.concatenate([values[:1], pairs.min(axis=1), values[-1:]])
    high = np.concatenate([values[:1], pairs.max(axis=1), values[-1:]])
    return times, low, high


def band_outline(t: np.ndarray, low: np.ndarray, high: np.ndarray,
                 thinnest: float = 0.0) -> np.ndarray:
    """The polygon between `low` and `high`, widened symmetrically where it is thinner than
    `thinnest` (data units).

    A band filled once costs a third of stroking the min/max zigzag it replaces (Agg strokes
    every up and down of the zigzag) and looks the same at a bin per pixel; ENVELOPE_BINS
    bins span the axes' width.
    """
    widen = np.maximum(0.0, (thinnest - (high - low)) / 2.0)
    return np.concatenate([np.column_stack([t, low - widen]),
                           np.column_stack([t[::-1], (high + widen)[::-1]])])
