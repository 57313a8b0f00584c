"""Spikes of traces measured in parts: around stretches of missing samples, and long traces
piece by piece, with the same values as a measurement of the whole.

Functions take arrays and a sampling rate and return
:class:`~spikemeasure.analysis.spikes.SpikeMeasurements`; nothing here reads files or prints
(a long trace kept in its file is read through slicing).
"""
from __future__ import annotations

from dataclasses import fields, replace
from typing import Callable

import numpy as np

from ..errors import InvalidSettingError
from .detection import (DetectedSpikes, DetectionSettings, SmoothedTrace, detect_spikes,
                        smoothed_trace, smoothing_window_samples)
from .spike_features import SPLINE_HALF_SAMPLES, peak_windows
from .spike_rates import NOISE_SAMPLES, RATE_SPLINE_HALF_SAMPLES, noise_before
from .spikes import (GAP_FLAG, PIECE_SAMPLES, SpikeMeasurements, measure_spikes,
                     measure_spikes_with_positions, spike_times)
from .sweeps import CurrentStep

__all__ = ["measure_around_gaps", "measure_in_pieces", "measure_in_pieces_with_gaps",
           "piece_margin_samples"]

_HALF_WIDTH_FIELDS = ("half_width_ms", "half_width_start_s", "half_width_end_s")
_SPIKE_FIELDS_BY_WINDOW = {
    "threshold": ("threshold_s", "threshold_mv", "amplitude_mv", *_HALF_WIDTH_FIELDS,
                  "rise_time_ms", "max_dvdt_v_per_s", "ahp_depth_mv"),
    "peak": ("peak_s", "peak_mv", "amplitude_mv", *_HALF_WIDTH_FIELDS, "rise_time_ms",
             "max_dvdt_v_per_s", "min_dvdt_v_per_s"),
    "width": _HALF_WIDTH_FIELDS,
    "trough": ("trough_s", "trough_mv", "ahp_depth_mv", "min_dvdt_v_per_s"),
    "rates": ("max_dvdt_v_per_s", "min_dvdt_v_per_s"),
}


def _finite_runs(finite: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) of each stretch of True in a boolean array."""
    edges = np.diff(np.concatenate([[False], finite, [False]]).astype(np.int8))
    return list(zip(np.flatnonzero(edges == 1).tolist(), np.flatnonzero(edges == -1).tolist()))


def _blank_near_gaps(spikes: SpikeMeasurements, detected: DetectedSpikes, extra: dict,
                     trace: SmoothedTrace, settings: DetectionSettings, gap_before: bool,
                     gap_after: bool) -> SpikeMeasurements:
    """Empty the values of the spikes of one finite stretch whose windows reach a gap.

    `gap_before` / `gap_after`: whether missing samples lie just before the stretch's first /
    after its last sample (rather than the ends of the sweep). The smoothing filters' values
    differ from those of the unbroken trace within half a window of a gap, and a search that
    would have gone on past a gap was cut short; a value is kept only when neither happened to
    any window it is measured over.
    """
    n_spikes = len(spikes)
    if n_spikes == 0 or not (gap_before or gap_after):
        return spikes
    rate = trace.sampling_rate_hz
    n = trace.voltage_mv.size
    # the rates' smoothing window and quintic spline
    rate_half = smoothing_window_samples(settings.rate_smoothing_ms, rate) // 2
    rate_reach = rate_half + RATE_SPLINE_HALF_SAMPLES + 2
    edge = max(trace.window // 2, SPLINE_HALF_SAMPLES) + 1
    low = edge if gap_before else -np.inf            # first sample not disturbed by a gap
    high = n - 1 - edge if gap_after else np.inf     # last one
    onset, peak = detected.onset_index, detected.peak_sample
    reach = settings.search_window_samples(rate)
    # the peak's local fit spans its window and may move by a quarter of it
    peak_windows_used = peak_windows(trace.voltage_mv, peak, spikes.threshold_mv,
                                     noise_before(trace.voltage_mv, spikes.threshold_s * rate))
    peak_reach = np.maximum(SPLINE_HALF_SAMPLES, 3 * peak_windows_used // 4 + 1)
    if settings.threshold_method == "onset_rate":
        # the crossing is found again (a noise-matched window) around the onset sample, with
        # the noise measured in the NOISE_SAMPLES before onset - window
        thr_lo = onset - trace.window - NOISE_SAMPLES - 1
        thr_hi = onset + trace.window
    else:
        prev_peak = np.concatenate([[-np.iinfo(np.int64).max // 2], peak[:-1] + 1])
        thr_lo, thr_hi = np.maximum(prev_peak, onset - reach), peak
    touched = {
        "threshold": (thr_lo < low) | (thr_hi > high),
        # the rates' window follows the noise measured before threshold; their samples
        # reach rate_reach beyond threshold and trough (the peak, for the rise)
        "rates": (onset - trace.window - NOISE_SAMPLES - rate_reach < low - edge)
                 | (np.maximum(extra["trough_ends"], peak) + rate_reach > high + edge),
        "peak": (peak - peak_reach < low) | (peak + trace.window // 2 + peak_reach > high),
        # a half-width whose downward crossing was found is the first crossing, as without the
        # gap; one not found may have been cut short by it
        "width": ~np.isfinite(extra["down"]) & (extra["width_ends"] > high),
        # the last spike before a gap may not be the sweep's last: its trough search would
        # have run on to the next spike or the search window, past the gap
        "trough": (extra["trough_ends"] > high)
                  | ((np.arange(n_spikes) == n_spikes - 1) & (peak + reach > high)),
    }
    values = {name: np.array(getattr(spikes, name), dtype=float)
              for names in _SPIKE_FIELDS_BY_WINDOW.values() for name in names}
    any_touch = np.zeros(n_spikes, dtype=bool)
    for window, names in _SPIKE_FIELDS_BY_WINDOW.items():
        hit = np.asarray(touched[window], dtype=bool)
        any_touch |= hit
        for name in names:
            values[name][hit] = np.nan
    flags = []
    for k, f in enumerate(spikes.flags):
        if touched["width"][k]:
            f = tuple(x for x in f if x != "no_repolarization")  # the gap, not the cell
        flags.append(f + (GAP_FLAG,) if any_touch[k] else f)
    return replace(spikes, flags=tuple(flags), **values)


def _measure_stretches(voltage_mv: np.ndarray, sampling_rate_hz: float,
                       settings: DetectionSettings, step: CurrentStep | None
                       ) -> tuple[SpikeMeasurements, np.ndarray]:
    """Measure each stretch of finite samples on its own (times from the trace's first
    sample); returns the spikes and their onset indices in the trace. ISIs are not fixed."""
    v = voltage_mv
    rate = float(sampling_rate_hz)
    window = smoothing_window_samples(settings.smoothing_ms, rate)
    parts: list[SpikeMeasurements] = []
    onsets: list[np.ndarray] = []
    for a, b in _finite_runs(np.isfinite(v)):
        if b - a < window:
            continue  # too short to smooth: nothing to detect in it
        trace = smoothed_trace(v[a:b], rate, settings.smoothing_ms,
                               second_derivative=settings.needs_second_derivative)
        detected = detect_spikes(trace, settings)
        if len(detected) == 0:
            continue
        local = None if step is None else CurrentStep(step.onset_s - a / rate,
                                                      step.offset_s - a / rate,
                                                      step.size_pa, step.holding_pa)
        spikes, extra = measure_spikes_with_positions(trace, detected, settings, local)
        spikes = _blank_near_gaps(spikes, detected, extra, trace, settings, a > 0, b < v.size)
        parts.append(spikes.shifted(a / rate))
        onsets.append(detected.onset_index + a)
    return _concatenate(parts), (np.concatenate(onsets) if onsets
                                 else np.zeros(0, dtype=np.int64))


def _intervals_across_gaps(spikes: SpikeMeasurements, gaps_s: np.ndarray
                           ) -> SpikeMeasurements:
    """Interspike intervals of the whole sweep, empty (and flagged) where a gap lies between a
    spike and the previous one, since the gap may hide a spike."""
    n = len(spikes)
    isi = np.full(n, np.nan)
    if n < 2:
        return replace(spikes, isi_ms=isi)
    times = spike_times(spikes)
    isi[1:] = np.diff(spikes.threshold_s) * 1e3
    flags = list(spikes.flags)
    for k in range(1, n):
        between = (gaps_s[:, 0] < times[k]) & (gaps_s[:, 1] > times[k - 1]) \
            if gaps_s.size else np.zeros(0, dtype=bool)
        if between.any():
            isi[k] = np.nan
            if GAP_FLAG not in flags[k]:
                flags[k] = flags[k] + (GAP_FLAG,)
    return replace(spikes, isi_ms=isi, flags=tuple(flags))


def measure_around_gaps(voltage_mv: np.ndarray, sampling_rate_hz: float,
                        settings: DetectionSettings = DetectionSettings(),
                        step: CurrentStep | None = None) -> SpikeMeasurements:
    """Detect and measure the spikes of a trace that may hold missing (NaN or infinite)
    stretches.

    Parameters
    ----------
    voltage_mv : ndarray
        Membrane voltage in mV, 1-D; NaN or infinite where samples are missing.
    sampling_rate_hz : float
    settings : DetectionSettings, optional
    step : CurrentStep, optional

    Returns
    -------
    SpikeMeasurements
        With every sample finite, the same as :func:`measure_trace`.

    Notes
    -----
    Each stretch of finite samples at least one smoothing window long is smoothed, detected
    and measured on its own, and no search crosses a gap. A spike keeps every value whose
    windows stay clear of the gaps: those values come from the same samples through the same
    filters as in the unbroken trace (the Savitzky-Golay filters differ only within half a
    window of a stretch's end), so they equal the values the unbroken trace would give. A value
    whose window comes within that distance of a gap, or whose search was cut short by one, is
    NaN, and the spike is flagged :data:`GAP_FLAG`: threshold (the threshold search, and for
    ``onset_rate`` the onset crossing); peak (the spline's samples and the end of the rise);
    half-width (only when the downward crossing was not found before the gap); trough, AHP
    depth and fall rate (the trough search); and the interspike interval when a gap lies between
    the spike and the previous one, as it may hide a spike. A spike within a gap is not seen.
    """
    v = np.array(voltage_mv, dtype=float)
    if v.ndim != 1:
        raise InvalidSettingError("`voltage_mv` must be a 1-D array")
    if not sampling_rate_hz > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    finite = np.isfinite(v)
    if finite.all():
        trace = smoothed_trace(v, sampling_rate_hz, settings.smoothing_ms,
                               second_derivative=settings.needs_second_derivative)
        return measure_spikes(trace, detect_spikes(trace, settings), settings, step)
    v[~finite] = np.nan
    spikes, _ = _measure_stretches(v, sampling_rate_hz, settings, step)
    runs = _finite_runs(~finite)
    gaps_s = np.array(runs, dtype=float).reshape(-1, 2) / sampling_rate_hz
    return _intervals_across_gaps(spikes, gaps_s)


def piece_margin_samples(settings: DetectionSettings, sampling_rate_hz: float) -> int:
    """Samples read on either side of a piece so that every spike whose onset lies in the
    piece is measured from the same samples as in the whole trace.

    A spike's measurements reach at most ``search_window_ms`` back from its onset crossing
    and forward from its peak, which comes within ``peak_window_ms`` of the onset; add the
    next spike's own detection span, the 1 ms of the second-derivative threshold and a few
    smoothing windows for the filters' edges.
    """
    rate = sampling_rate_hz
    window = smoothing_window_samples(settings.smoothing_ms, rate)
    rate_window = smoothing_window_samples(settings.rate_smoothing_ms, rate)
    peak = int(np.ceil(settings.peak_window_ms * 1e-3 * rate))
    one_ms = int(np.ceil(1e-3 * rate))
    return (settings.search_window_samples(rate) + 2 * peak + one_ms + 4 * window
            + 2 * rate_window + 2 * RATE_SPLINE_HALF_SAMPLES + NOISE_SAMPLES + 16)


def _concatenate(parts: list[SpikeMeasurements]) -> SpikeMeasurements:
    if not parts:
        return SpikeMeasurements.empty()
    names = [f.name for f in fields(SpikeMeasurements) if f.name != "flags"]
    values = {name: np.concatenate([getattr(p, name) for p in parts]) for name in names}
    flags = tuple(fl for p in parts for fl in p.flags)
    return SpikeMeasurements(flags=flags, **values)


def measure_in_pieces(voltage_mv, sampling_rate_hz: float,
                      settings: DetectionSettings = DetectionSettings(), *,
                      piece_samples: int | None = None,
                      cancel: Callable[[], None] | None = None) -> SpikeMeasurements:
    """Detect and measure the spikes of a long gap-free trace, one piece at a time.

    Parameters
    ----------
    voltage_mv : ndarray or LazyTrace
        Membrane voltage in mV, 1-D; anything that returns float arrays for slices
        ``voltage_mv[a:b]`` and has a length, so a trace kept in its file
        (:class:`~spikemeasure.io.sweep.LazyTrace`) is read piece by piece.
    sampling_rate_hz : float
    settings : DetectionSettings, optional
    piece_samples : int, optional
        Samples per piece (default :data:`PIECE_SAMPLES`); memory use is a small multiple of
        it and of the margins, whatever the length of the trace.
    cancel : callable, optional
        Called with no arguments before each piece is read; it stops the work by raising
        (a run being stopped raises ``KeyboardInterrupt`` from it). Its exception propagates.

    Returns
    -------
    SpikeMeasurements
        The same spikes as :func:`measure_around_gaps` on the whole trace with no current step
        (:func:`measure_trace` when every sample is finite).

    Notes
    -----
    Each piece is read with a margin of :func:`piece_margin_samples` on both sides, detected
    and measured whole, and keeps the spikes whose onset crossing lies in the piece itself, so
    a spike on the border between pieces is measured exactly once, in the piece holding its
    onset. Every search of a spike's measurements stays within the margin (bounded by
    ``search_window_ms``), and the Savitzky-Golay filters give the same values away from the
    ends of what they are given, so each spike is measured from the same numbers as in one
    pass over the whole trace; only times differ, by rounding, as they are shifted by the
    piece's start. Interspike intervals are taken across pieces. Missing (NaN or infinite)
    samples are handled as by :func:`measure_around_gaps`: the stretches between them are
    measured on their own, and values whose windows reach a gap are empty and flagged
    (:func:`measure_in_pieces_with_gaps` also returns where the gaps are).
    """
    return measure_in_pieces_with_gaps(voltage_mv, sampling_rate_hz, settings,
                                       piece_samples=piece_samples, cancel=cancel)[0]


def measure_in_pieces_with_gaps(voltage_mv, sampling_rate_hz: float,
                                settings: DetectionSettings = DetectionSettings(), *,
                                piece_samples: int | None = None,
                                cancel: Callable[[], None] | None = None
                                ) -> tuple[SpikeMeasurements, np.ndarray]:
    """:func:`measure_in_pieces`, and the missing stretches found while reading.

    Takes the arguments of :func:`measure_in_pieces`.

    Returns
    -------
    spikes : SpikeMeasurements
    gaps : ndarray of int, shape (k, 2)
        (start, stop) sample indices of each stretch of NaN or infinite samples, in order.
    """
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    piece_samples = int(PIECE_SAMPLES if piece_samples is None else piece_samples)
    if piece_samples < 1:
        raise InvalidSettingError("`piece_samples` must be at least 1")
    if cancel is not None and not callable(cancel):
        raise InvalidSettingError("`cancel` must be callable or None")
    n = len(voltage_mv)
    margin = piece_margin_samples(settings, rate)
    parts: list[SpikeMeasurements] = []
    gaps: list[list[int]] = []
    for start in range(0, n, piece_samples):
        if cancel is not None:
            cancel()
        stop = min(n, start + piece_samples)
        lo, hi = max(0, start - margin), min(n, stop + margin)
        v = np.asarray(voltage_mv[lo:hi], dtype=float)
        finite = np.isfinite(v)
        if finite.all():
            trace = smoothed_trace(v, rate, settings.smoothing_ms,
                                   second_derivative=settings.needs_second_derivative)
            detected = detect_spikes(trace, settings)
            measured, onset = measure_spikes(trace, detected, settings, None), detected.onset_index
        else:
            for a, b in _finite_runs(~finite[start - lo:stop - lo]):
                if gaps and gaps[-1][1] == start + a:
                    gaps[-1][1] = start + b      # a gap running on from the previous piece
                else:
                    gaps.append([start + a, start + b])
            v = np.where(finite, v, np.nan)
            measured, onset = _measure_stretches(v, rate, settings, None)
        onset = onset + lo
        keep = (onset >= start) & (onset < stop)
        if keep.any():
            parts.append(measured.subset(keep).shifted(lo / rate))
    whole = _concatenate(parts)
    stretches = np.array(gaps, dtype=np.int64).reshape(-1, 2)
    return _intervals_across_gaps(whole, stretches / rate), stretches
