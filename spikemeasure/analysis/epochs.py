"""A command current cut into epochs (constant levels and linear ramps), and the main stimulus
among them.

:func:`find_epochs` segments a command trace; :func:`main_stimulus` picks the stimulus a sweep
is measured over, the holding current, a test pulse before it and the quiet stretch before it
that the baseline is measured over. Both take arrays and a sampling rate and return small
frozen dataclasses; nothing here reads files or prints.
"""
from __future__ import annotations

import threading
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter, uniform_filter1d

from ..errors import InvalidSettingError

__all__ = ["Epoch", "CommandEpochs", "Stimulus", "find_epochs", "main_stimulus",
           "EPOCH_MEDIAN_SAMPLES", "NOISE_MULTIPLE", "MIN_LEVEL_CHANGE_PA",
           "RESIDUAL_WINDOW_MS", "MAX_EDGE_MS", "MAX_EPOCHS", "STIMULUS_SHAPES", "running_median",
           "sharing_index_sums"]

#: Width of the running median that removes isolated noise samples before segmenting.
EPOCH_MEDIAN_SAMPLES = 5
#: The tolerance is this many times the command's noise SD (estimated from the median
#: absolute deviation of its sample-to-sample differences) ...
NOISE_MULTIPLE = 5.0
#: ... and at least this (pA): smaller departures from a level or a line are not epochs.
MIN_LEVEL_CHANGE_PA = 1.0
#: A stretch fits one level or line when its residual, averaged over this window, stays
#: within half the tolerance (the average keeps noise from splitting a level).
RESIDUAL_WINDOW_MS = 1.0
#: A piece shorter than this between two epochs is the edge between them (a filtered or
#: slewed step), not an epoch: it is shared out at the half-way level.
MAX_EDGE_MS = 0.5
#: Segmentation stops splitting after this many epochs (a noisy or oscillating command).
MAX_EPOCHS = 200
#: What a sweep's main stimulus can be (``none``: the command never leaves holding).
STIMULUS_SHAPES = ("step", "ramp", "other", "none")


@dataclass(frozen=True)
class Epoch:
    """One stretch of a command: a constant level or a linear ramp.

    Attributes
    ----------
    start, stop : int
        First sample and the sample after the last (a gap of missing samples at the border
        between two epochs belongs to neither).
    shape : str
        ``"level"`` or ``"ramp"``.
    start_pa, end_pa : float
        The fitted command at the first sample and extrapolated to `stop` (equal for a level).
    mean_pa : float
        Mean of the command's finite samples in the epoch.
    rate_pa_per_s : float
        Slope of the fitted line (0 for a level).
    sampling_rate_hz : float
    """

    start: int
    stop: int
    shape: str
    start_pa: float
    end_pa: float
    mean_pa: float
    rate_pa_per_s: float
    sampling_rate_hz: float

    @property
    def start_s(self) -> float:
        return self.start / self.sampling_rate_hz

    @property
    def end_s(self) -> float:
        return self.stop / self.sampling_rate_hz

    @property
    def duration_s(self) -> float:
        return (self.stop - self.start) / self.sampling_rate_hz


@dataclass(frozen=True)
class CommandEpochs:
    """A command cut into epochs (:func:`find_epochs`).

    Attributes
    ----------
    epochs : tuple of Epoch
        In time order; empty for a command with fewer than 3 finite samples.
    tolerance_pa : float
        Departures from a level or line up to this are command noise.
    n_samples : int
    sampling_rate_hz : float
    """

    epochs: tuple[Epoch, ...]
    tolerance_pa: float
    n_samples: int
    sampling_rate_hz: float


@dataclass(frozen=True)
class Stimulus:
    """The main stimulus of a sweep and what surrounds it (:func:`main_stimulus`).

    Attributes
    ----------
    shape : str
        One of :data:`STIMULUS_SHAPES`.
    onset_s, offset_s : float
        First sample of the main stimulus and the first sample after it; NaN for ``none``.
    size_pa : float
        Step: mean command over the step minus holding. Ramp: the fitted line at its end
        (`offset_s`) minus holding. Other: mean command over the stimulus minus holding.
    holding_pa : float
        Mean command over the epochs at holding before the main stimulus (after it when none
        lies before); a test pulse is never part of it.
    ramp_rate_pa_per_s : float
        Slope of a ramp; NaN for other shapes.
    ramp_start_pa : float
        Fitted line of a ramp at `onset_s`, holding included; NaN for other shapes.
    test_pulse_pa : float
        Mean command over the test pulse minus holding; NaN without one.
    test_pulse_s : tuple of float
        (start, end) of the test pulse; NaN without one.
    baseline_start_s : float
        Start of the quiet stretch before the main stimulus: the epoch at holding that ends at
        its onset. Equal to `onset_s` when the stimulus follows another epoch directly.
    main : tuple of int
        Positions (first, last) of the main stimulus's epochs in `epochs`; (-1, -1) for none.
    epochs : CommandEpochs
    """

    shape: str
    onset_s: float
    offset_s: float
    size_pa: float
    holding_pa: float
    ramp_rate_pa_per_s: float
    ramp_start_pa: float
    test_pulse_pa: float
    test_pulse_s: tuple[float, float]
    baseline_start_s: float
    main: tuple[int, int]
    epochs: CommandEpochs


def running_median(values: np.ndarray) -> np.ndarray:
    """The :data:`EPOCH_MEDIAN_SAMPLES`-sample running median of a finite 1-D array, its ends
    padded with the end values: equal to ``scipy.ndimage.median_filter(values,
    EPOCH_MEDIAN_SAMPLES, mode="nearest")``, computed on the run-length view of the values.

    A command held at a few levels changes value at a few samples; a median over a window
    inside one run of equal values is that value, so only the windows that span a change are
    sorted. A command that changes at most samples (recorded noise) is filtered whole.
    """
    half = EPOCH_MEDIAN_SAMPLES // 2
    starts = np.flatnonzero(values[1:] != values[:-1]) + 1  # first sample of each later run
    if starts.size * EPOCH_MEDIAN_SAMPLES > values.size // 4:
        return median_filter(values, size=EPOCH_MEDIAN_SAMPLES, mode="nearest")
    out = values.copy()
    if starts.size:
        # the windows of samples start - half .. start + half - 1 hold both sides of a change
        spanning = np.unique((starts[:, None] + np.arange(-half, half)).ravel())
        spanning = spanning[(spanning >= 0) & (spanning < values.size)]
        window = np.clip(spanning[:, None] + np.arange(-half, half + 1), 0, values.size - 1)
        out[spanning] = np.sort(values[window], axis=1)[:, half]
    return out


class _IndexSums:
    """The sums over sample positions x = 0 .. k - 1 that every line fit of a prefix shares
    (k = 1 .. size): formed once per command (or once for the longest of a recording's
    commands, :func:`sharing_index_sums`), each prefix fit reads their first entries."""

    def __init__(self, size: int):
        self.x = np.arange(size, dtype=float)
        self.n = np.arange(1, size + 1, dtype=float)
        self.sx = np.cumsum(self.x)
        vx = np.cumsum(self.x * self.x) - self.sx * self.sx / self.n
        self.vx_positive = vx > 0
        self.vx_divisor = np.where(self.vx_positive, vx, 1.0)


_shared = threading.local()


@contextmanager
def sharing_index_sums():
    """Within this context (in this thread), :func:`find_epochs` forms the index sums of its
    split search once, for the longest command it meets, and every command of that length
    or shorter reads their first entries, the same numbers as its own (cumulative sums run
    in order); they are dropped when the context ends. For the commands of one recording,
    whose sweeps mostly share their length."""
    outer = getattr(_shared, "sums", None)
    _shared.sums = outer or _NO_SUMS
    try:
        yield
    finally:
        _shared.sums = outer


_NO_SUMS = object()


def _index_sums(size: int) -> _IndexSums:
    """Index sums for a command of `size` samples: kept ones when they are long enough
    (within :func:`sharing_index_sums`), else formed (and kept there)."""
    kept = getattr(_shared, "sums", None)
    if isinstance(kept, _IndexSums) and kept.x.size >= size:
        return kept
    sums = _IndexSums(size)
    if kept is not None:
        _shared.sums = sums
    return sums


def _line_sse(y: np.ndarray, sums: _IndexSums) -> np.ndarray:
    """SSE of the least-squares line through y[:k] for every k = 1 .. n (index k - 1)."""
    m = y.size
    x, n, sx = sums.x[:m], sums.n[:m], sums.sx[:m]
    # vy = syy - sy * sy / n, cxy = sxy - sx * sy / n and the SSE vy - cxy * cxy / vx (vy
    # where vx is 0), each operation as written, done in place to spare temporaries (three
    # arrays of y's size at most; a cumulative sum in place adds in the same order)
    sy = np.cumsum(y)
    vy = np.multiply(y, y)
    np.cumsum(vy, out=vy)
    term = sy * sy
    term /= n
    vy -= term
    cxy = np.multiply(x, y, out=term)
    np.cumsum(cxy, out=cxy)
    np.multiply(sx, sy, out=sy)
    sy /= n
    cxy -= sy
    sse = np.multiply(cxy, cxy, out=cxy)
    sse /= sums.vx_divisor[:m]
    np.subtract(vy, sse, out=sse)
    np.copyto(sse, vy, where=~sums.vx_positive[:m])
    return np.maximum(sse, 0.0, out=sse)


def _best_split(left: np.ndarray, right: np.ndarray, min_piece: int) -> int:
    """The split k (min_piece <= k <= n - min_piece, min_piece >= 1) minimizing the SSE of two
    separate lines through y[:k] and y[k:], from the SSEs of the lines through every prefix
    (``left[k - 1]``: through y[:k]) and every suffix (``right[k]``: through y[k:])."""
    n = left.size
    total = left[min_piece - 1:n - min_piece] + right[min_piece:n - min_piece + 1]
    return min_piece + int(np.argmin(total))


def _is_flat(y: np.ndarray, tolerance_pa: float) -> bool:
    """Whether y is one run of equal values, so that its least-squares line is flat: the
    line's slope and residuals are then rounding errors (about 1e-15 of the value, see the
    tests), far inside half the tolerance, and no line needs fitting."""
    return bool(y.size and y.min() == y.max()
                and 0.5 * tolerance_pa > 1e-9 * max(1.0, abs(float(y[0]))))


def _line_residual(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Residual of the least-squares line through (x, y), in closed form about the means:
    the line np.polyfit(x, y, 1) fits, without its Vandermonde matrix and SVD (which cost
    most of the epoch search on long sweeps)."""
    dx = x - x.mean()
    y_mean = y.mean()
    # elementwise products and numpy's pairwise sums: quicker here than a BLAS dot product;
    # the same operations in place, two arrays of y's size (products commute exactly)
    product = y - y_mean
    product *= dx
    slope = np.sum(product) / np.sum(np.multiply(dx, dx, out=product))
    dx *= slope
    dx += y_mean
    return np.subtract(y, dx, out=dx)


def _fits_one_line(y: np.ndarray, tolerance_pa: float, window: int) -> bool:
    if _is_flat(y, tolerance_pa):
        return True
    residual = (_line_residual(np.arange(y.size, dtype=float), y) if y.size >= 2
                else y - float(y[0]))
    smooth = uniform_filter1d(residual, size=min(window, y.size), mode="nearest")
    del residual
    return bool(np.max(np.abs(smooth, out=smooth)) <= 0.5 * tolerance_pa)


def _split_points(y: np.ndarray, tolerance_pa: float, window: int, min_piece: int
                  ) -> list[int]:
    """Borders of the pieces of y that each fit one line (top-down: split where two lines fit
    best, until every piece fits within tolerance).

    The SSEs of the lines through the prefixes of a piece split are those of its first part's
    prefixes, and the SSEs through its suffixes those of its second part's suffixes (the
    cumulative sums of a prefix are the first entries of the whole's): each part reads them
    from its parent (``lefts`` by first sample, ``rights``, formed backwards, by end) and
    forms only the other two, and they are dropped when the part is done.
    """
    borders = [0, y.size]
    todo = [(0, y.size)]
    sums = None
    lefts: dict[int, np.ndarray] = {}
    rights: dict[int, np.ndarray] = {}
    while todo and len(borders) - 1 < MAX_EPOCHS:
        a, b = todo.pop()
        left, right = lefts.pop(a, None), rights.pop(b, None)
        if b - a < 2 * min_piece or _fits_one_line(y[a:b], tolerance_pa, window):
            continue
        sums = sums or _index_sums(y.size)
        if left is None:
            left = _line_sse(y[a:b], sums)  # left[i]: SSE of the line through y[a:a + i + 1]
        if right is None:
            right = _line_sse(y[a:b][::-1], sums)  # right[i]: through y[b - i - 1:b]
        k = a + _best_split(left[:b - a], right[:b - a][::-1], min_piece)
        borders.append(k)
        lefts[a], rights[b] = left, right
        todo += [(a, k), (k, b)]
    return sorted(borders)


def _merge_edges(borders: list[int], y: np.ndarray, max_edge: int) -> list[int]:
    """Drop pieces shorter than `max_edge` samples: one between two pieces is the edge between
    them, cut at its first sample past half-way between their neighbouring values; one at
    either end of the trace joins its neighbour."""
    out = list(borders)
    k = 0
    while k < len(out) - 1 and len(out) > 2:
        a, b = out[k], out[k + 1]
        if b - a >= max_edge:
            k += 1
        elif k == 0:
            del out[1]  # a short first piece joins the next
        elif k + 1 == len(out) - 1:
            del out[k]  # a short last piece joins the one before
        else:
            before, after = y[a - 1], y[b]
            crossed = (y[a:b] - 0.5 * (before + after)) * np.sign(after - before) > 0
            out[k:k + 2] = [a + int(np.argmax(crossed)) if crossed.any() else b]
    return out


def find_epochs(command_pa, sampling_rate_hz: float, *, tolerance_pa: float | None = None,
                min_level_change_pa: float = MIN_LEVEL_CHANGE_PA) -> CommandEpochs:
    """Cut a command current into constant levels and linear ramps.

    Parameters
    ----------
    command_pa : array_like
        Command current in pA, 1-D; NaN or infinite where samples are missing.
    sampling_rate_hz : float
        Samples per second.
    tolerance_pa : float, optional
        Departures from a level or line up to this (pA) are noise. By default
        :data:`NOISE_MULTIPLE` times the command's noise SD, at least `min_level_change_pa`.
    min_level_change_pa : float, optional
        The smallest tolerance (pA), default :data:`MIN_LEVEL_CHANGE_PA`.

    Returns
    -------
    CommandEpochs

    Notes
    -----
    1. Missing samples are left out; the finite samples are segmented as one trace and each
       epoch placed back at their positions.
    2. A :data:`EPOCH_MEDIAN_SAMPLES`-sample running median removes isolated noise samples
       (:func:`running_median`: only the windows that span a change of value are sorted).
    3. The noise SD is 1.4826 x the median absolute deviation of the sample-to-sample
       differences, over sqrt(2) (a robust estimate: steps and ramps move few differences).
    4. Top-down segmentation: a stretch is one epoch when its residual from the least-squares
       line, averaged over :data:`RESIDUAL_WINDOW_MS`, stays within half the tolerance;
       otherwise it is split where two separate least-squares lines leave the smallest sum of
       squares (for a step, exactly at its first sample), and each part tested again.
    5. A piece shorter than :data:`MAX_EDGE_MS` between two others is their edge: the border
       is its first sample past half-way between them.
    6. An epoch whose fitted line changes by no more than the tolerance over its length is a
       ``level``, otherwise a ``ramp``.
    """
    cmd = np.asarray(command_pa, dtype=float)
    if cmd.ndim != 1:
        raise InvalidSettingError("`command_pa` must be a 1-D array")
    rate = float(sampling_rate_hz)
    if not (np.isfinite(rate) and rate > 0):
        raise InvalidSettingError(
            f"`sampling_rate_hz` must be a positive, finite number (got {sampling_rate_hz})")
    if not (np.isfinite(min_level_change_pa) and min_level_change_pa > 0):
        raise InvalidSettingError("`min_level_change_pa` must be a positive number")
    if tolerance_pa is not None and not (np.isfinite(tolerance_pa) and tolerance_pa > 0):
        raise InvalidSettingError("`tolerance_pa` must be a positive number or None")
    kept = np.flatnonzero(np.isfinite(cmd))
    if kept.size < 3:
        return CommandEpochs((), float(tolerance_pa or min_level_change_pa), cmd.size, rate)
    raw = cmd[kept] if kept.size < cmd.size else cmd  # read only: no copy when all are finite
    y = running_median(raw) if raw.size >= EPOCH_MEDIAN_SAMPLES else raw
    if tolerance_pa is None:
        tolerance_pa = max(float(min_level_change_pa), NOISE_MULTIPLE * _command_noise(raw))
    window = max(1, int(round(RESIDUAL_WINDOW_MS * 1e-3 * rate)))
    max_edge = max(2, int(round(MAX_EDGE_MS * 1e-3 * rate)))
    borders = _merge_edges(_split_points(y, tolerance_pa, window, 2), y, max_edge)
    epochs = []
    for a, b in zip(borders[:-1], borders[1:]):
        epochs.append(_epoch(raw[a:b], y[a:b], kept, a, b, tolerance_pa, rate))
    epochs = _join_equal_levels(epochs, tolerance_pa)
    epochs = _refine_kinks(epochs, raw, y, kept, tolerance_pa, rate)
    return CommandEpochs(tuple(epochs), float(tolerance_pa), cmd.size, rate)


def _command_noise(raw: np.ndarray) -> float:
    """1.4826 x the median absolute deviation of the sample-to-sample differences, over
    sqrt(2) (:func:`find_epochs`, step 3). When more than half the differences are exactly 0
    (a command held at levels), both medians are 0 and so is the noise: counted, not
    sorted."""
    d = np.diff(raw)
    zeros = d.size - np.count_nonzero(d)
    below = np.count_nonzero(d < 0)
    lo, hi = (d.size - 1) // 2, d.size // 2  # the middle positions of the sorted values
    if below <= lo and hi < below + zeros and hi < zeros:
        return 0.0  # median(d) is 0, so is the median of |d - 0|
    return 1.4826 * float(np.median(np.abs(d - np.median(d)))) / np.sqrt(2.0)


def _epoch(raw: np.ndarray, smooth: np.ndarray, kept: np.ndarray, a: int, b: int,
           tolerance_pa: float, rate: float) -> Epoch:
    """One epoch from finite samples a to b - 1 (positions in `kept`)."""
    start, stop = int(kept[a]), int(kept[b - 1]) + 1
    t = (kept[a:b] - start).astype(float)
    # the running median bends the last samples before a jump: fit without them
    trim = EPOCH_MEDIAN_SAMPLES // 2 if t.size > 4 * EPOCH_MEDIAN_SAMPLES else 0
    t_fit, y_fit = t[trim:t.size - trim], smooth[trim:t.size - trim]
    mean = float(np.mean(raw))
    if _is_flat(y_fit, tolerance_pa):
        # the fitted slope is a rounding error: a level, whose values are the mean alone
        return Epoch(start, stop, "level", mean, mean, mean, 0.0, rate)
    slope, intercept = (np.polyfit(t_fit, y_fit, 1) if t_fit.size >= 2
                        else (0.0, float(smooth[0])))
    if abs(slope) * (stop - start) <= tolerance_pa:
        return Epoch(start, stop, "level", mean, mean, mean, 0.0, rate)
    return Epoch(start, stop, "ramp", float(intercept), float(intercept + slope * (stop - start)),
                 mean, float(slope * rate), rate)


def _refine_kinks(epochs: list[Epoch], raw: np.ndarray, smooth: np.ndarray, kept: np.ndarray,
                  tolerance_pa: float, rate: float) -> list[Epoch]:
    """Move the border between a level and a ramp that joins it without a jump to where the
    ramp's fitted line meets the level (two separate lines place a slow ramp's start
    loosely in noise; the long line fit places it well)."""
    out = list(epochs)
    for k in range(len(out) - 1):
        a, b = out[k], out[k + 1]
        if {a.shape, b.shape} != {"level", "ramp"}:
            continue
        level, ramp = (a, b) if a.shape == "level" else (b, a)
        joint_pa = ramp.start_pa if ramp is b else ramp.end_pa
        if abs(joint_pa - level.mean_pa) > tolerance_pa:
            continue  # a jump between them: the border is the jump
        meet = ramp.start + (level.mean_pa - ramp.start_pa) * rate / ramp.rate_pa_per_s
        border = min(max(int(np.ceil(meet - 1e-6)), a.start + 1), b.stop - 1)
        lo, mid, hi = np.searchsorted(kept, [a.start, border, b.stop])
        if not lo < mid < hi:
            continue
        out[k] = _epoch(raw[lo:mid], smooth[lo:mid], kept, lo, mid, tolerance_pa, rate)
        out[k + 1] = _epoch(raw[mid:hi], smooth[mid:hi], kept, mid, hi, tolerance_pa, rate)
    return out


def _join_equal_levels(epochs: list[Epoch], tolerance_pa: float) -> list[Epoch]:
    """Adjacent levels within the tolerance of each other are one level (a split by noise)."""
    out: list[Epoch] = []
    for e in epochs:
        last = out[-1] if out else None
        if (last is not None and last.shape == e.shape == "level"
                and abs(last.mean_pa - e.mean_pa) <= 0.5 * tolerance_pa):
            n1, n2 = last.stop - last.start, e.stop - e.start
            mean = (last.mean_pa * n1 + e.mean_pa * n2) / (n1 + n2)
            out[-1] = Epoch(last.start, e.stop, "level", mean, mean, mean, 0.0,
                            e.sampling_rate_hz)
        else:
            out.append(e)
    return out


def _finite_mean(cmd: np.ndarray, spans: list[tuple[int, int]]) -> float:
    """Mean of the finite command samples over the spans (NaN when there are none)."""
    parts = [cmd[a:b] for a, b in spans]
    values = np.concatenate(parts) if parts else np.zeros(0)
    values = values[np.isfinite(values)]
    return float(np.mean(values)) if values.size else float("nan")


def _blocks(epochs: tuple[Epoch, ...], at_holding: list[bool]) -> list[tuple[int, int]]:
    """Runs (first, last) of consecutive epochs away from holding."""
    runs: list[tuple[int, int]] = []
    for k, held in enumerate(at_holding):
        if held:
            continue
        if runs and runs[-1][1] == k - 1:
            runs[-1] = (runs[-1][0], k)
        else:
            runs.append((k, k))
    return runs


def main_stimulus(command_pa, sampling_rate_hz: float, *,
                  epochs: CommandEpochs | None = None,
                  tolerance_pa: float | None = None) -> Stimulus:
    """The main stimulus of a sweep, its holding current, test pulse and quiet stretch.

    Parameters
    ----------
    command_pa : array_like
        Command current in pA, 1-D (NaN or infinite where samples are missing).
    sampling_rate_hz : float
        Samples per second.
    epochs : CommandEpochs, optional
        The command's epochs; by default :func:`find_epochs` of `command_pa`.
    tolerance_pa : float, optional
        Passed to :func:`find_epochs` when `epochs` is not given.

    Returns
    -------
    Stimulus
        Shape ``none`` (times NaN) when the command never leaves holding.

    Notes
    -----
    1. The holding level is the level the sweep starts at (the first epoch's; the start of a
       first epoch that is a ramp). An epoch is at holding when it is a level within the
       tolerance of it.
    2. A stimulus is a run of consecutive epochs away from holding. The main stimulus is the
       longest one (of equally long ones, the later): a short pulse followed later by a
       longer epoch is a test pulse, whatever the sizes of the two. A run of one level is a
       ``step``, of one ramp a ``ramp``, of anything else ``other``.
    3. The holding current is the mean command over the epochs at holding before the main
       stimulus (after it when none lies before), so never across a pulse.
    4. The test pulse is the last stimulus before the main one that is a single level.
    5. The quiet stretch is the epoch at holding that ends where the main stimulus starts;
       the baseline is measured in its last part (see
       :func:`~spikemeasure.analysis.sweep_features.baseline`). None when the main stimulus
       follows another epoch directly, or starts the sweep.
    """
    cmd = np.asarray(command_pa, dtype=float)
    if epochs is None:
        epochs = find_epochs(cmd, sampling_rate_hz, tolerance_pa=tolerance_pa)
    elif not isinstance(epochs, CommandEpochs):
        raise InvalidSettingError("`epochs` must be a CommandEpochs (from find_epochs) or None")
    if cmd.ndim != 1 or cmd.size != epochs.n_samples:
        raise InvalidSettingError("`command_pa` must be the 1-D command `epochs` was found in")
    nan = float("nan")
    found = epochs.epochs
    if not found:
        return Stimulus("none", nan, nan, nan, nan, nan, nan, nan, (nan, nan), nan, (-1, -1),
                        epochs)
    first = found[0]
    level = first.mean_pa if first.shape == "level" else first.start_pa
    held = [e.shape == "level" and abs(e.mean_pa - level) <= epochs.tolerance_pa
            for e in found]
    runs = _blocks(found, held)
    if not runs:
        return Stimulus("none", nan, nan, nan, _finite_mean(cmd, [(0, cmd.size)]), nan, nan,
                        nan, (nan, nan), nan, (-1, -1), epochs)
    main = runs[0]
    for run in runs[1:]:
        if found[run[1]].stop - found[run[0]].start >= found[main[1]].stop - found[main[0]].start:
            main = run
    i, j = main
    before = [(e.start, e.stop) for e, h in zip(found[:i], held[:i]) if h]
    after = [(e.start, e.stop) for e, h in zip(found[j + 1:], held[j + 1:]) if h]
    holding = _finite_mean(cmd, before or after)
    if not np.isfinite(holding):
        holding = level
    onset, offset = found[i].start_s, found[j].end_s
    ramp_rate = ramp_start = nan
    if i == j and found[i].shape == "ramp":
        shape, size = "ramp", found[i].end_pa - holding
        ramp_rate, ramp_start = found[i].rate_pa_per_s, found[i].start_pa
    else:
        shape = "step" if i == j else "other"
        size = _finite_mean(cmd, [(found[i].start, found[j].stop)]) - holding
    pulse_pa, pulse_s = nan, (nan, nan)
    for a, b in runs:
        if b < i and a == b and found[a].shape == "level":
            pulse_pa = _finite_mean(cmd, [(found[a].start, found[a].stop)]) - holding
            pulse_s = (found[a].start_s, found[a].end_s)
    quiet = found[i - 1].start_s if i > 0 and held[i - 1] else onset
    return Stimulus(shape, onset, offset, size, holding, ramp_rate, ramp_start, pulse_pa,
                    pulse_s, quiet, main, epochs)
