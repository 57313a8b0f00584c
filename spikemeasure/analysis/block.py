"""Depolarization block: firing that stops before the step ends because the membrane, held
depolarized, can no longer fire full spikes, rather than because the cell adapts.

Functions take a voltage trace, its sampling rate, spike times and a step's edges, and return
a small dataclass; nothing here reads files or prints.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InvalidSettingError

__all__ = ["BlockCheck", "depolarization_block", "BLOCK_MAX_ISI_MS", "BLOCK_SILENCE_TO_ISI",
           "BLOCK_MIN_SILENCE_MS", "BLOCK_LAST_INTERVALS", "FULL_SPIKE_PEAK_MV",
           "PEAK_SEARCH_MS"]

#: A full spike overshoots: its peak reaches this voltage (mV). Near block a cell goes on
#: making small oscillations that a derivative detector still counts, but they no longer
#: overshoot.
FULL_SPIKE_PEAK_MV = 0.0
#: A spike's peak is the largest sample within this time (ms) after its time (or up to the
#: next spike, when sooner): shrinking spikes near block rise slowly.
PEAK_SEARCH_MS = 5.0

#: The last intervals before firing stops must average under this (ms): the cell was firing
#: fast (over 40 Hz) when it stopped, not slowing down as an adapting cell does.
BLOCK_MAX_ISI_MS = 25.0
#: The silence from the last spike to the step's end must be at least this many times those
#: intervals ...
BLOCK_SILENCE_TO_ISI = 10.0
#: ... and at least this long (ms).
BLOCK_MIN_SILENCE_MS = 20.0
#: How many of the last intervals are averaged.
BLOCK_LAST_INTERVALS = 3


@dataclass(frozen=True)
class BlockCheck:
    """Whether firing stopped early in a step, with the numbers the rule looked at.

    Attributes
    ----------
    blocked : bool
    full_spikes : int
        Spikes whose peak lies in the step and reaches :data:`FULL_SPIKE_PEAK_MV`.
    last_isi_ms : float
        Mean of the last (up to :data:`BLOCK_LAST_INTERVALS`) intervals between the peaks
        of full spikes; NaN with fewer than 2.
    silence_ms : float
        From the last full spike's peak to the step's end; NaN without one.
    """

    blocked: bool
    full_spikes: int
    last_isi_ms: float
    silence_ms: float


def _full_spike_peaks(voltage_mv: np.ndarray, sampling_rate_hz: float, times_s: np.ndarray
                      ) -> np.ndarray:
    """Peak times (s) of the spikes at sorted `times_s` whose peak (largest sample within
    PEAK_SEARCH_MS, or up to the next time) reaches FULL_SPIKE_PEAK_MV."""
    reach = max(1, int(round(PEAK_SEARCH_MS * 1e-3 * sampling_rate_hz)))
    starts = np.round(times_s * sampling_rate_hz).astype(np.int64)
    stops = np.minimum(starts + reach, np.append(starts[1:], np.iinfo(np.int64).max))
    lo = np.maximum(0, starts)
    hi = np.minimum(np.maximum(starts + 1, stops), voltage_mv.size)
    length = np.maximum(hi - lo, 0)
    peaks = np.full(starts.size, np.nan)
    if starts.size == 0 or length.max() == 0:
        return peaks[:0]
    # every spike's span at once, in blocks of bounded size (NaN samples never the largest)
    width = int(length.max())
    per_block = max(1, _GATHER_ELEMENTS // width)
    for a in range(0, starts.size, per_block):
        b = slice(a, a + per_block)
        index = lo[b, None] + np.arange(width)
        inside = np.arange(width) < length[b, None]
        part = voltage_mv[np.minimum(index, voltage_mv.size - 1)]
        finite = (inside & np.isfinite(part)).any(axis=1)
        part = np.where(inside & ~np.isnan(part), part, -np.inf)
        top = np.argmax(part, axis=1)
        full = finite & (part[np.arange(top.size), top] >= FULL_SPIKE_PEAK_MV)
        peaks[b] = np.where(full, (lo[b] + top) / sampling_rate_hz, np.nan)
    return peaks[np.isfinite(peaks)]


_GATHER_ELEMENTS = 1_000_000  # samples gathered at once, to bound memory


def depolarization_block(voltage_mv: np.ndarray, sampling_rate_hz: float,
                         spike_times_s: np.ndarray, onset_s: float, offset_s: float,
                         max_isi_ms: float = BLOCK_MAX_ISI_MS,
                         silence_to_isi: float = BLOCK_SILENCE_TO_ISI,
                         min_silence_ms: float = BLOCK_MIN_SILENCE_MS) -> BlockCheck:
    """Tell whether fast firing stopped well before the end of a depolarizing step.

    Parameters
    ----------
    voltage_mv : ndarray
        Recorded voltage, mV.
    sampling_rate_hz : float
    spike_times_s : ndarray
        Spike times (threshold, or peak where unknown), s from the first sample; NaN entries
        are ignored.
    onset_s, offset_s : float
        The step: spikes whose peak lies in [onset_s, offset_s) count.
    max_isi_ms : float, optional
        The last intervals must average under this.
    silence_to_isi, min_silence_ms : float, optional
        The silence after the last spike must be at least `silence_to_isi` times those
        intervals and at least `min_silence_ms`.

    Returns
    -------
    BlockCheck

    Notes
    -----
    A rule of our own (common practice in spirit: block is named when a cell firing fast
    stops making full, overshooting spikes under a current it should answer with more
    firing). Only full spikes count: those whose peak, the largest sample within
    :data:`PEAK_SEARCH_MS` after the spike's time (or up to the next spike), reaches
    :data:`FULL_SPIKE_PEAK_MV` (an overshooting action potential [1]_), since near block
    the spikes shrink into oscillations that a derivative detector still counts. With at
    least 2 full spikes in the step, block is found when the mean of their last up to
    :data:`BLOCK_LAST_INTERVALS` intervals is under `max_isi_ms` and no full spike follows
    for the rest of the step, a stretch at least `silence_to_isi` of those intervals and at
    least `min_silence_ms` long. An adapting cell whose intervals lengthen before it falls
    silent is not flagged; a sweep with a single full spike has no interval and is not
    flagged either.

    References
    ----------
    .. [1] A. L. Hodgkin and A. F. Huxley, "A quantitative description of membrane current
       and its application to conduction and excitation in nerve", J Physiol 117:500-544,
       1952 (the overshoot of the action potential above 0 mV).
    """
    if not (max_isi_ms > 0 and silence_to_isi > 0 and min_silence_ms >= 0):
        raise InvalidSettingError("`max_isi_ms` and `silence_to_isi` must be positive and "
                                  "`min_silence_ms` 0 or more")
    if not offset_s > onset_s:
        raise InvalidSettingError("`offset_s` must be after `onset_s`")
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    v = np.asarray(voltage_mv, dtype=float)
    t = np.asarray(spike_times_s, dtype=float).ravel()
    # a spike's time (its threshold) may precede the onset by a sample or two when it
    # fires at once: whether it belongs to the step is judged by its peak
    near = np.sort(t[np.isfinite(t) & (t >= onset_s - PEAK_SEARCH_MS * 1e-3) & (t < offset_s)])
    full = _full_spike_peaks(v, rate, near)
    full = full[(full >= onset_s) & (full < offset_s)]
    nan = float("nan")
    if full.size == 0:
        return BlockCheck(False, 0, nan, nan)
    silence = (offset_s - full[-1]) * 1e3
    if full.size < 2:
        return BlockCheck(False, 1, nan, silence)
    last_isi = float(np.mean(np.diff(full)[-BLOCK_LAST_INTERVALS:]) * 1e3)
    blocked = bool(last_isi < max_isi_ms
                   and silence >= max(silence_to_isi * last_isi, min_silence_ms))
    return BlockCheck(blocked, int(full.size), last_isi, silence)
