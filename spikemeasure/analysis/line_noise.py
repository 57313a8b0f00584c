"""Mains hum and slow drift of a recorded voltage, estimated on a quiet stretch of a sweep.

Hum is a sinusoid at the mains frequency (50 or 60 Hz) and its harmonics whose phase holds
across a sweep; drift is a slow, straight-line change of the voltage (the electrode's offset
or the cell's resting potential moving). Neither is the cell's response to the stimulus, so
the passive measurements read a voltage with them removed. Functions take a voltage, its
sampling rate and the quiet stretch, and return a small dataclass or arrays; nothing here
reads files or prints.
"""
from __future__ import annotations

import hashlib
import threading
from collections import OrderedDict
from dataclasses import dataclass, replace

import numpy as np
from scipy.special import chdtri

from ..errors import InvalidSettingError
from .fluctuation import (covariance_from_transforms, noise_density, stretch_bounds,
                          stretches_covariance, weighted_sums_covariance, weights_transforms)

__all__ = ["LineNoise", "estimate_line_noise", "remove_line_noise", "corrected_weights",
           "removal_sd_mv",
           "line_noise_lines",
           "MAINS_FREQUENCIES_HZ", "HUM_HARMONICS", "LINE_NOISE_FALSE_ALARM",
           "MIN_QUIET_PERIODS", "PLATEAU_AGREEMENT", "REST_AFTER_STEP_FRACTION",
           "REST_AFTER_STEP_MS", "REST_AFTER_SPIKE_MS", "DESIGN_CACHE_BYTES",
           "forget_designs"]

#: The mains frequencies tried; the one whose hum stands out more is kept.
MAINS_FREQUENCIES_HZ = (50.0, 60.0)
#: Harmonics of the mains frequency fitted (1 = the fundamental), those below Nyquist.
HUM_HARMONICS = 3
#: A hum harmonic or the drift is removed only when the chance that noise alone gives an
#: estimate as large (a Wald test against its own standard error) is below this: a clean
#: recording keeps its values in all but about this share of its sweeps, and then moves by
#: no more than its noise.
LINE_NOISE_FALSE_ALARM = 1e-3
#: A plateau (:func:`estimate_line_noise`) joins the drift's estimate only when a slope and
#: a bend of its own, apart from the quiet stretch's line, are not significant together at
#: this level: a response still settling there is not drift. Stricter than the false alarm
#: of the terms, so that a plateau that may be settling is left out rather than taken for
#: drift.
PLATEAU_AGREEMENT = 0.01
#: The stretch after a step that the drift's fit may read as rest
#: (:func:`~spikemeasure.analysis.sweep_passive.rest_start`) starts this fraction of the way
#: from the step's end to the sweep's end: the first part is left to the membrane's return
#: from the step.
REST_AFTER_STEP_FRACTION = 0.5
#: ... and at least this long after the step's end (several membrane time constants of a
#: typical cell).
REST_AFTER_STEP_MS = 50.0
#: ... and at least this long after the last spike after the step's end (a rebound spike
#: and its after-hyperpolarization are not rest).
REST_AFTER_SPIKE_MS = 20.0
#: The quiet stretch must hold at least this many periods of the lowest mains frequency.
MIN_QUIET_PERIODS = 2.0
#: Bytes of least-squares designs (terms, pseudo-inverse, its rows' FFTs) kept between fits:
#: a cell's sweeps fit the same windows, and a design depends only on the samples fitted,
#: the rate, the frequency and the terms, not on the voltage. The least recently used go
#: first; a design larger than this is not kept. A 5 s sweep at 50 kHz fitted on its quiet
#: and rest stretches keeps about 35 MiB (six designs: both mains frequencies, with and
#: without the rest stretch's test columns); below that, least-recently-used order
#: drops each design just before it is asked for again.
DESIGN_CACHE_BYTES = 40 * 2 ** 20
#: Samples whose hum and drift :func:`remove_line_noise` forms at a time.
_REMOVAL_BLOCK = 2 ** 16
#: The residual's variance counts as at least this (mV^2), so that rounding on a noise-free
#: trace is not taken for hum.
_VARIANCE_FLOOR_MV2 = 1e-12


@dataclass(frozen=True)
class LineNoise:
    """Hum and drift found on a quiet stretch (see :func:`estimate_line_noise`).

    Attributes
    ----------
    frequency_hz : float
        The mains frequency whose harmonics were tested; NaN when none was kept.
    harmonics : tuple of int
        The harmonics kept (significant), e.g. (1, 3).
    hum_amplitude_mv : ndarray
        Amplitude of each kept harmonic, mV.
    hum_phase_rad : ndarray
        Phase of each kept harmonic: hum = amplitude cos(2 pi h f t + phase), t in s from
        the first sample.
    drift_mv_per_s : float
        The drift's slope; NaN when not kept.
    drift_sd_mv_per_s : float
        The standard error of the slope, whether kept or not.
    first_sample, stop_sample : int
        The quiet stretch fitted, samples [first_sample, stop_sample) (to the end of the
        plateau when one joined the fit).
    reference : tuple of int
        Samples [first, stop) over which the removed hum and drift have zero mean (the
        baseline window), by default the quiet stretch.
    drift_estimate_mv_per_s : float
        The slope as fitted, kept or not (NaN when not fitted).
    untested_drift_sd_mv_per_s : float
        Size of a drift left in the corrected voltage that the noise's share of the
        weights (:func:`corrected_weights`) does not hold, each from the moment estimate
        of its square, sqrt(max(0, b^2 - var b)): a drift fitted but not kept, from its
        slope b; a kept drift that a plateau joined, from the difference b of the
        plateau's slope and the quiet stretch's (its settling), times the plateau's weight
        in the slope; 0 for a kept drift fitted on the quiet stretch alone; NaN when no
        drift was fitted.
    sampling_rate_hz : float
    sensitivity : ndarray, shape (k, stop_sample - first_sample)
        The kept terms' coefficients are ``sensitivity @ voltage[first_sample:stop_sample]``
        (the rows of the least-squares pseudo-inverse; zero between the quiet stretch and a
        plateau, see :func:`estimate_line_noise`).
    """

    frequency_hz: float
    harmonics: tuple[int, ...]
    hum_amplitude_mv: np.ndarray
    hum_phase_rad: np.ndarray
    drift_mv_per_s: float
    drift_sd_mv_per_s: float
    first_sample: int
    stop_sample: int
    sampling_rate_hz: float
    sensitivity: np.ndarray
    coefficients: np.ndarray
    reference: tuple[int, int] = (0, 0)
    drift_estimate_mv_per_s: float = float("nan")
    untested_drift_sd_mv_per_s: float = float("nan")

    @property
    def found(self) -> bool:
        """True when hum or drift was kept (the correction is not zero)."""
        return bool(self.coefficients.size)

    def basis(self, first: int, stop: int) -> np.ndarray:
        """The kept terms at samples [first, stop), shape (stop - first, k): each term minus
        its mean over the quiet stretch, so removing them leaves that stretch's mean as it
        was."""
        return _basis(np.arange(first, stop), self)

    def hum_only(self) -> LineNoise:
        """The same estimate with the drift left in (its hum alone removed)."""
        if not np.isfinite(self.drift_mv_per_s):
            return self
        return replace(self, drift_mv_per_s=float("nan"), sensitivity=self.sensitivity[1:],
                       coefficients=self.coefficients[1:])

    def artefact_mv(self, first: int, stop: int) -> np.ndarray:
        """Hum plus drift at samples [first, stop), mV, zero in the mean over the quiet
        stretch."""
        if not self.found:
            return np.zeros(max(0, stop - first))
        return self.basis(first, stop) @ self.coefficients


def _terms(samples: np.ndarray, rate: float, frequency_hz: float, harmonics: tuple[int, ...],
           drift: bool) -> np.ndarray:
    """Uncentred terms at `samples`: drift (t), then cos and sin of each harmonic."""
    t = samples / rate
    # each column written into the one array as it is formed (a whole sweep's terms are
    # several times its voltage's size)
    out = np.empty((samples.size, int(drift) + 2 * len(harmonics)))
    if drift:
        out[:, 0] = t
    if not harmonics:
        return out
    # the fundamental's cos and sin once; each higher harmonic by the angle-sum rule
    # (cos (h+1)x = cos hx cos x - sin hx sin x, likewise sin), cheaper than its own
    # trigonometric functions
    phase = 2 * np.pi * frequency_hz * t
    c1, s1 = np.cos(phase), np.sin(phase)
    c, s = c1, s1
    for h in range(1, max(harmonics) + 1):
        if h > 1:
            c, s = c * c1 - s * s1, s * c1 + c * s1
        if h in harmonics:
            k = harmonics.index(h)
            out[:, int(drift) + 2 * k] = c
            out[:, int(drift) + 2 * k + 1] = s
    return out


def _basis(samples: np.ndarray, fit: LineNoise) -> np.ndarray:
    drift = np.isfinite(fit.drift_mv_per_s)
    lo, hi = fit.reference if fit.reference[1] > fit.reference[0] else (fit.first_sample,
                                                                          fit.stop_sample)
    quiet = np.arange(lo, hi)
    rate, f = fit.sampling_rate_hz, fit.frequency_hz
    centre = _terms(quiet, rate, f, fit.harmonics, drift).mean(axis=0)
    terms = _terms(samples, rate, f, fit.harmonics, drift)
    terms -= centre
    return terms


def _over_span(rows: np.ndarray, samples: np.ndarray) -> np.ndarray:
    """A new array of `rows` (a column per fitted sample) laid over samples[0] to
    samples[-1], zero where a sample is not fitted."""
    if not samples.size or samples[-1] - samples[0] + 1 == samples.size:
        return rows.copy()
    span = np.zeros((rows.shape[0], int(samples[-1] - samples[0]) + 1))
    span[:, samples - samples[0]] = rows
    return span


class _Design:
    """A least-squares design and what follows from it alone, formed when first asked for:
    the centred columns with the constants, the normal matrix, the pseudo-inverse, the
    white-noise covariance of the terms' rows, and the rows' stretches with their FFTs."""

    __slots__ = ("design", "gram", "k", "samples", "_pinv", "_white", "_stretches",
                 "nbytes")

    def __init__(self, samples: np.ndarray, rate: float, frequency_hz: float,
                 harmonics: tuple[int, ...], drift: bool, levels: np.ndarray | None,
                 extra: np.ndarray | None):
        terms = _terms(samples, rate, frequency_hz, harmonics, drift)
        if extra is not None:
            terms = np.column_stack([terms, extra])
        constants = (np.ones((samples.size, 1)) if levels is None or not levels.any()
                     else np.column_stack([1.0 - levels, levels]))
        self.k = constants.shape[1]
        self.design = np.column_stack([constants, terms - terms.mean(axis=0)])
        # the normal equations: a few well-scaled columns (centred, the time in s), where
        # an SVD of the tall design would cost far more
        self.gram = self.design.T @ self.design
        self.samples = samples
        self._pinv = self._white = self._stretches = None
        self.nbytes = self.design.nbytes + self.gram.nbytes + samples.nbytes

    def pinv(self) -> np.ndarray:
        if self._pinv is None:
            self._pinv = np.linalg.solve(self.gram, self.design.T)
            self.nbytes += self._pinv.nbytes
        return self._pinv

    def white(self) -> np.ndarray:
        """The terms' rows' products, pinv[k:] pinv[k:]^T."""
        if self._white is None:
            rows = self.pinv()[self.k:]
            self._white = rows @ rows.T
            self.nbytes += self._white.nbytes
        return self._white

    def stretches(self) -> list[tuple[int, int, int, np.ndarray]] | None:
        """The stretches of the terms' rows that
        :func:`~spikemeasure.analysis.fluctuation.stretches_covariance` sums, each as its
        columns [a, b) in the rows kept compact, FFT length and FFTs; None when all the
        rows are zero (the covariance is then taken over the span, as there)."""
        if self._stretches is None:
            rows = self.pinv()[self.k:]
            offsets = self.samples - self.samples[0]
            bounds = stretch_bounds(rows, offsets)
            if bounds is None:
                if not np.any(rows != 0):
                    return None
                if offsets[-1] + 1 != offsets.size:  # the rows whole over their span
                    span = _over_span(rows, self.samples)
                    self._stretches = [(0, span.shape[1]) + weights_transforms(span)]
                    self.nbytes += self._stretches[0][3].nbytes
                    return self._stretches
                bounds = [(0, int(offsets[-1]) + 1)]
            stretches = []
            for a, b in bounds:
                # a stretch holds no gap of the samples, so it is a run of compact columns
                lo = int(np.searchsorted(offsets, a))
                stretches.append((lo, lo + b - a) + weights_transforms(rows[:, lo:lo + b - a]))
            self._stretches = stretches
            self.nbytes += sum(t.nbytes for *_, t in stretches)
        return self._stretches


_designs: OrderedDict = OrderedDict()
_designs_lock = threading.Lock()  # sweeps may be measured on several threads


def forget_designs() -> None:
    """Drop the kept least-squares designs (:data:`DESIGN_CACHE_BYTES`)."""
    with _designs_lock:
        _designs.clear()


def _digest(array: np.ndarray | None) -> tuple | None:
    """An array's shape and a digest of its float64 bytes (a design key's part)."""
    if array is None:
        return None
    array = np.ascontiguousarray(array, dtype=float)
    return array.shape, hashlib.blake2b(array.tobytes(), digest_size=16).digest()


def _design(samples: np.ndarray, rate: float, frequency_hz: float,
            harmonics: tuple[int, ...], drift: bool, levels: np.ndarray | None,
            extra: np.ndarray | None) -> _Design:
    """The design of :func:`_fit`, kept by its exact key (the samples' runs, the rate, the
    frequency, the terms, and the bytes of the levels and extra columns) within
    :data:`DESIGN_CACHE_BYTES`."""
    samples = np.asarray(samples)
    cuts = np.flatnonzero(np.diff(samples) != 1)
    runs = (tuple(samples[np.concatenate([[0], cuts + 1])].tolist()),
            tuple(samples[np.concatenate([cuts, [samples.size - 1]])].tolist())
            ) if samples.size else ((), ())
    one_level = levels is None or not levels.any()
    key = (runs, float(rate), float(frequency_hz), tuple(harmonics), bool(drift),
           None if one_level else _digest(levels), _digest(extra))
    with _designs_lock:
        found = _designs.get(key)
        if found is not None:
            _designs.move_to_end(key)
            return found
    made = _Design(samples.copy(), rate, frequency_hz, harmonics, drift, levels, extra)
    with _designs_lock:
        _designs[key] = made
    _trim_designs()
    return made


def _trim_designs() -> None:
    """Drop the least recently used designs until the rest fit in the byte limit (a design
    grows as its pseudo-inverse and FFTs are formed)."""
    with _designs_lock:
        total = sum(d.nbytes for d in _designs.values())
        while _designs and total > DESIGN_CACHE_BYTES:
            _, dropped = _designs.popitem(last=False)
            total -= dropped.nbytes


def _fit(part: np.ndarray, samples: np.ndarray, rate: float, frequency_hz: float,
         harmonics: tuple[int, ...], drift: bool, levels: np.ndarray | None = None,
         extra: np.ndarray | None = None, covariance: bool | str = True
         ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Least squares of `part` on a constant and the terms: (coefficients without the
    constant, their sensitivity rows, their covariance under the residual's spectrum).

    `levels` (0 or 1 per sample) gives the second stretch a constant of its own; `extra`
    columns follow the terms. The rows cover samples[0] to samples[-1], zero where a
    sample is not fitted. Without `covariance` (only the coefficients wanted) the rows and
    the covariance are not formed (None); with ``covariance="rows"``, the rows alone; with
    the covariance, the rows are not returned (None). The design is kept between calls
    (:func:`_design`)."""
    made = _design(samples, rate, frequency_hz, harmonics, drift, levels, extra)
    design, k = made.design, made.k
    if not covariance:
        return np.linalg.solve(made.gram, design.T @ part)[k:], None, None
    pinv = made.pinv()
    coef = pinv @ part
    if covariance == "rows":
        rows = _over_span(pinv[k:], samples)
        _trim_designs()
        return coef[k:], rows, None
    residual = part - design @ coef
    spectral = _stretches_covariance(made, residual, rate)
    _trim_designs()
    if spectral is None:
        return coef[k:], None, None
    # white noise of the residual's variance, made larger where the residual's spectrum
    # says the noise is correlated: a spectrum estimated on a short stretch scatters, and
    # taken alone would often make the test too lenient
    variance = max(float(np.var(residual)) * samples.size
                   / max(1, samples.size - design.shape[1]), _VARIANCE_FLOOR_MV2)
    white = variance * made.white()
    inflation = max(1.0, float(np.trace(spectral) / np.trace(white))) if white.size else 1.0
    return coef[k:], None, white * inflation


def _stretches_covariance(made: _Design, residual: np.ndarray, rate: float
                          ) -> np.ndarray | None:
    """:func:`~spikemeasure.analysis.fluctuation.stretches_covariance` of the design's
    terms' rows (spread over their span) under `residual`'s noise, from the FFTs the design
    keeps."""
    stretches = made.stretches()
    if stretches is None:  # rows all zero: as stretches_covariance, over the span
        return weighted_sums_covariance(_over_span(made.pinv()[made.k:], made.samples),
                                        residual, rate)
    density = noise_density(residual, rate)
    if density is None:
        return None
    covariances = [covariance_from_transforms(n_fft, transforms, density, residual.size, rate)
                   for _, _, n_fft, transforms in stretches]
    return covariances[0] if len(covariances) == 1 else sum(covariances)


def estimate_line_noise(voltage_mv: np.ndarray, sampling_rate_hz: float, start_s: float,
                        stop_s: float, *, harmonics: int = HUM_HARMONICS,
                        false_alarm: float = LINE_NOISE_FALSE_ALARM,
                        drift: bool = True,
                        reference_s: tuple[float, float] | None = None,
                        plateau_s: tuple[float, float] | None = None,
                        rest_s: tuple[float, float] | None = None) -> LineNoise:
    """Fit mains hum and a drift line to a quiet stretch and keep what is significant.

    Parameters
    ----------
    voltage_mv : ndarray
        The sweep's voltage, mV (time 0 at its first sample).
    sampling_rate_hz : float
    start_s, stop_s : float
        The quiet stretch (no stimulus, no response under way), s from the first sample.
    harmonics : int, optional
        How many harmonics of the mains frequency to try (default :data:`HUM_HARMONICS`).
    false_alarm : float, optional
        Chance, per term, of keeping a term that is not there (default
        :data:`LINE_NOISE_FALSE_ALARM`).
    drift : bool, optional
        Whether to fit the drift line (default True); without it, the hum alone.
    reference_s : (float, float), optional
        The window (s) over which the hum and drift removed keep a zero mean (the baseline
        window, so the baseline is unchanged); by default the quiet stretch.
    plateau_s : (float, float), optional
        A later stretch (s) where the response to a stimulus has settled (the steady-state
        window of a step): with a level of its own, its slope joins the drift's estimate,
        a lever the short quiet stretch lacks (see Notes).
    rest_s : (float, float), optional
        A stretch (s) after the stimulus, and after any plateau, where the membrane is back
        at rest (after the step and any spike it evoked): it shares the quiet stretch's
        level, so the drift's slope is read across the sweep (see Notes).

    Returns
    -------
    LineNoise
        With nothing kept (``found`` false) when the stretch is too short (under
        :data:`MIN_QUIET_PERIODS` periods of 50 Hz or 16 samples) or holds a missing
        sample.

    Notes
    -----
    1. For each mains frequency f in :data:`MAINS_FREQUENCIES_HZ`, least squares fits the
       stretch with a constant, a line in time and cos and sin of 2 pi h f t for the
       harmonics h below Nyquist; the frequency whose harmonics explain more of the
       variance is kept (50 and 60 Hz are both tried, as either may be the mains).
    2. The covariance C of the coefficients is the white-noise value sigma^2 (X^T X)^-1
       (sigma^2 the residual's variance), scaled up by the ratio of the traces of the
       covariance that noise with the residual's own spectrum gives them
       (:func:`~spikemeasure.analysis.fluctuation.weighted_sums_covariance` of the
       pseudo-inverse's rows) to it when that ratio is over 1: correlated noise (filtered,
       synaptic) makes the terms less certain, while the spectrum of a short stretch,
       taken alone, scatters enough to make the test too lenient now and then.
    3. Each harmonic (its cos and sin pair) and the slope is kept when its Wald statistic
       b^T C^-1 b exceeds the chi-square quantile for `false_alarm` (2 and 1 degrees of
       freedom); the kept terms are fitted again alone.
    4. With a plateau, the fit runs over both stretches with a constant for each (the
       plateau's level is the response's), so the slope is estimated from the voltage's
       change within each; its standard error falls by about the square root of the
       stretches' combined N T^2 over the quiet stretch's (N samples over T seconds). The
       plateau joins only when a second slope and a bend (a centred square of the time)
       for it, fitted beside the first, are not significant together at
       :data:`PLATEAU_AGREEMENT` (a response still settling bends and is not drift), and
       only for the drift: a hum kept without the drift is fitted on the quiet stretch
       alone, as without a plateau. The plateau's settling that the test let through, the
       plateau's weight in the slope times the slopes' difference beyond its noise, is kept
       as ``untested_drift_sd_mv_per_s`` for the SDs.
    5. With a rest stretch, the voltage there is taken to be the resting level the quiet
       stretch holds, moved by the drift alone (what ``baseline_drift_mv`` reads): the two
       share one constant, so the slope is read from the change of level between them,
       over a lever of the time between the stretches (its standard error about noise /
       sqrt(N) over that time, several times below the quiet stretch's own). It joins only
       when a slope of its own for each stretch and a bend for the rest stretch, fitted
       beside the shared line, are not significant together at :data:`PLATEAU_AGREEMENT`:
       a membrane still settling from the step there (an after-hyperpolarization, a
       rebound) has a slope or bend of its own that the line through both levels does not
       follow. A resting level that moved without any slope in either stretch cannot be
       told from drift; the rest stretch's share of the slope beyond its noise is kept in
       ``untested_drift_sd_mv_per_s``, as for a plateau.
    The hum's phase is taken to hold across the sweep, so the hum found on the stretch is
    the hum of the whole sweep; the drift is a straight line through it.

    References
    ----------
    .. [1] A. Wald, "Tests of statistical hypotheses concerning several parameters when the
       number of observations is large", Trans. Amer. Math. Soc. 54:426-482, 1943 (from
       memory).
    .. [2] S. M. Kay, *Fundamentals of Statistical Signal Processing: Estimation Theory*,
       Prentice Hall, 1993, chapter 4 (linear models; sinusoids of known frequency).
    """
    rate = float(sampling_rate_hz)
    if not rate > 0:
        raise InvalidSettingError("`sampling_rate_hz` must be positive")
    if not (isinstance(harmonics, (int, np.integer)) and harmonics >= 1):
        raise InvalidSettingError("`harmonics` must be a whole number of at least 1")
    if not 0 < false_alarm < 1:
        raise InvalidSettingError("`false_alarm` must lie between 0 and 1")
    if not stop_s >= start_s:
        raise InvalidSettingError("`stop_s` must not come before `start_s`")
    if plateau_s is not None and not plateau_s[1] >= plateau_s[0] >= stop_s:
        raise InvalidSettingError("`plateau_s` must be a stretch after `stop_s`")
    v = np.asarray(voltage_mv, dtype=float)
    first = max(0, int(round(start_s * rate)))
    stop = min(v.size, int(round(stop_s * rate)))
    reference = ((int(round(reference_s[0] * rate)), int(round(reference_s[1] * rate)))
                 if reference_s is not None else (first, max(first, stop)))
    none = LineNoise(float("nan"), (), np.zeros(0), np.zeros(0), float("nan"), float("nan"),
                     first, max(first, stop), rate, np.zeros((0, max(0, stop - first))),
                     np.zeros(0), reference)
    need = max(16, MIN_QUIET_PERIODS * rate / min(MAINS_FREQUENCIES_HZ))
    part = v[first:stop]
    if part.size < need or not np.isfinite(part).all():
        return none
    samples = np.arange(first, stop)
    levels, difference = None, float("nan")
    plateau, rest = np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    if drift and plateau_s is not None:
        lo, hi = max(stop, int(round(plateau_s[0] * rate))), min(v.size,
                                                                int(round(plateau_s[1] * rate)))
        if hi - lo >= need and np.isfinite(v[lo:hi]).all():
            both = np.concatenate([samples, np.arange(lo, hi)])
            marks = (both >= lo).astype(float)
            agrees, difference = _plateau_agrees(v[both], both, rate, harmonics, marks)
            if agrees:
                plateau = np.arange(lo, hi)
    rest_difference = float("nan")
    if drift and rest_s is not None:
        after = plateau[-1] + 1 if plateau.size else stop
        lo, hi = max(after, int(round(rest_s[0] * rate))), min(v.size,
                                                              int(round(rest_s[1] * rate)))
        if hi - lo >= need and np.isfinite(v[lo:hi]).all():
            both = np.concatenate([samples, np.arange(lo, hi)])
            marks = (both >= lo).astype(float)
            agrees, rest_difference = _rest_agrees(v[both], both, rate, harmonics, marks,
                                                   _stronger_mains(part, np.arange(first, stop),
                                                                   rate, harmonics))
            if agrees:
                rest = np.arange(lo, hi)
    if plateau.size or rest.size:
        both = np.concatenate([samples, plateau, rest])
        marks = np.zeros(both.size)
        marks[samples.size:samples.size + plateau.size] = 1.0
        samples, part, levels = both, v[both], marks
    quiet = (np.arange(samples.size) < stop - first)
    best = None
    for f in MAINS_FREQUENCIES_HZ:
        below = tuple(h for h in range(1, harmonics + 1) if h * f < rate / 2)
        # the covariance only for the frequency kept
        coef, _, _ = _fit(part, samples, rate, f, below, drift, levels, covariance=False)
        explained = float(np.sum(coef[int(drift):] ** 2))
        if best is None or explained > best[0]:
            best = (explained, f, below)
    _, f, below = best
    coef, _, cov = _fit(part, samples, rate, f, below, drift, levels)
    if cov is None:
        return none
    keep_drift = drift and _wald(coef[:1], cov[:1, :1]) > chdtri(1, false_alarm)
    d = int(drift)
    kept = tuple(h for k, h in enumerate(below)
                 if _wald(coef[d + 2 * k:d + 2 + 2 * k],
                          cov[d + 2 * k:d + 2 + 2 * k, d + 2 * k:d + 2 + 2 * k])
                 > chdtri(2, false_alarm))
    slope_sd = float(np.sqrt(max(0.0, cov[0, 0]))) if drift else float("nan")
    slope = float(coef[0]) if drift else float("nan")
    quiet_stop, stop = stop, int(samples[-1]) + 1
    if not (keep_drift or kept):
        return LineNoise(float("nan"), (), np.zeros(0), np.zeros(0), float("nan"), slope_sd,
                         first, stop, rate, np.zeros((0, stop - first)), np.zeros(0),
                         reference, slope, _excess(slope, slope_sd ** 2))
    if not keep_drift and levels is not None:
        # the hum alone is fitted on the quiet stretch alone, as without a plateau
        samples, part, levels, stop = samples[quiet], part[quiet], None, quiet_stop
    coef, rows, _ = _fit(part, samples, rate, f, kept, keep_drift, levels, covariance="rows")
    # a drift not kept stays in the voltage; a kept drift that a plateau or a rest
    # stretch joined may hold that stretch's own settling, times its weight in the slope
    untested = _excess(slope, slope_sd ** 2) if not keep_drift else 0.0
    if keep_drift and levels is not None:
        parts = []
        for stretch, size in ((plateau, difference), (rest, rest_difference)):
            if stretch.size:
                t = stretch / rate
                parts.append(abs(float(rows[0, stretch - first] @ (t - t.mean()))) * size)
        untested = float(np.hypot.reduce(parts)) if parts else 0.0
    hum = coef[1:] if keep_drift else coef
    cos, sin = hum[0::2], hum[1::2]
    return LineNoise(f if kept else float("nan"), kept, np.hypot(cos, sin),
                     np.arctan2(-sin, cos), float(coef[0]) if keep_drift else float("nan"),
                     slope_sd, first, stop, rate, rows, coef, reference, slope, untested)


def _plateau_agrees(part: np.ndarray, samples: np.ndarray, rate: float, harmonics: int,
                    levels: np.ndarray) -> tuple[bool, float]:
    """Whether the plateau follows the quiet stretch's line (:data:`PLATEAU_AGREEMENT`), and
    the size of the slopes' difference beyond its noise (:func:`_excess`): the test of an
    extra slope and bend on the plateau, with the hum of the stronger mains frequency fitted
    beside them."""
    best = None
    for f in MAINS_FREQUENCIES_HZ:
        below = tuple(h for h in range(1, harmonics + 1) if h * f < rate / 2)
        t = samples / rate
        x = levels * (t - t[levels > 0].mean())
        bend = levels * (x * x - np.mean(x[levels > 0] ** 2))
        extra = np.column_stack([x, bend])
        coef, _, _ = _fit(part, samples, rate, f, below, True, levels, extra, covariance=False)
        explained = float(np.sum(coef[1:-2] ** 2))
        if best is None or explained > best[0]:
            best = (explained, f, below, extra)
    # the covariance only for the frequency kept
    _, f, below, extra = best
    coef, _, cov = _fit(part, samples, rate, f, below, True, levels, extra)
    if cov is None:
        return False, float("nan")
    return (_wald(coef[-2:], cov[-2:, -2:]) <= chdtri(2, PLATEAU_AGREEMENT),
            _excess(float(coef[-2]), float(cov[-2, -2])))


def _stronger_mains(part: np.ndarray, samples: np.ndarray, rate: float, harmonics: int
                    ) -> float:
    """The mains frequency whose harmonics (with a line) explain more of `part`."""
    best = None
    for f in MAINS_FREQUENCIES_HZ:
        below = tuple(h for h in range(1, harmonics + 1) if h * f < rate / 2)
        coef, _, _ = _fit(part, samples, rate, f, below, True, covariance=False)
        explained = float(np.sum(coef[1:] ** 2))
        if best is None or explained > best[0]:
            best = (explained, f)
    return best[1]


def _rest_agrees(part: np.ndarray, samples: np.ndarray, rate: float, harmonics: int,
                 marks: np.ndarray, frequency_hz: float) -> tuple[bool, float]:
    """Whether a rest stretch (`marks` 1) follows the line through its level and the quiet
    stretch's (:data:`PLATEAU_AGREEMENT`), and the size of its own slope's difference from
    that line beyond its noise (:func:`_excess`): the test of a slope of its own for each
    stretch and a bend for the rest stretch, beside one constant, the line and the hum of
    `frequency_hz` (the stronger mains frequency on the quiet stretch)."""
    t = samples / rate
    columns = []
    for mark in (1.0 - marks, marks):
        x = mark * (t - t[mark > 0].mean())
        columns.append(x)
    x = columns[1]
    columns.append(marks * (x * x - np.mean(x[marks > 0] ** 2)))
    extra = np.column_stack(columns)
    f = frequency_hz
    below = tuple(h for h in range(1, harmonics + 1) if h * f < rate / 2)
    coef, _, cov = _fit(part, samples, rate, f, below, True, None, extra)
    if cov is None:
        return False, float("nan")
    return (_wald(coef[-3:], cov[-3:, -3:]) <= chdtri(3, PLATEAU_AGREEMENT),
            _excess(float(coef[-2]), float(cov[-2, -2])))


def _excess(estimate: float, variance: float) -> float:
    """sqrt(max(0, estimate^2 - variance)): the size of a quantity beyond the noise of its
    estimate (the moment estimate of its square: E[b^2] = beta^2 + var b)."""
    return float(np.sqrt(max(0.0, estimate * estimate - variance)))


def _wald(b: np.ndarray, cov: np.ndarray) -> float:
    """b^T cov^-1 b; infinite when cov is singular and b is not zero."""
    try:
        return float(b @ np.linalg.solve(cov, b))
    except np.linalg.LinAlgError:
        return float("inf") if np.any(b) else 0.0


def remove_line_noise(voltage_mv: np.ndarray, fit: LineNoise) -> np.ndarray:
    """The voltage less the hum and drift of `fit` (a copy; the voltage itself when nothing
    was found)."""
    v = np.asarray(voltage_mv, dtype=float)
    if not fit.found:
        return v
    # a block of samples at a time: the kept terms over a whole sweep would take several
    # times its voltage's size (each block's values are those of the whole, sample by
    # sample)
    out = np.empty(v.shape)
    for lo in range(0, v.size, _REMOVAL_BLOCK):
        hi = min(v.size, lo + _REMOVAL_BLOCK)
        np.subtract(v[lo:hi], fit.artefact_mv(lo, hi), out=out[lo:hi])
    return out


def corrected_weights(weights: np.ndarray, first_sample: int, fit: LineNoise
                      ) -> tuple[np.ndarray, int]:
    """Weights on the raw voltage of measurements that are weighted sums of the corrected one.

    Parameters
    ----------
    weights : ndarray, shape (k, n)
        Each row weighs the corrected voltage's samples [first_sample, first_sample + n).
    first_sample : int
    fit : LineNoise

    Returns
    -------
    (ndarray, int)
        Rows over a span that holds both those samples and the quiet stretch, and the
        span's first sample.

    Notes
    -----
    The corrected voltage is v - B S v_q (B the kept terms, S the sensitivity rows, v_q the
    quiet stretch), so a weighted sum w . (v - B S v_q) = w . v - (w B) S v_q: the
    correction's own uncertainty enters through the second term, and the covariance of the
    rows under the recording's noise
    (:func:`~spikemeasure.analysis.fluctuation.weighted_sums_covariance`) holds it.
    """
    rows = np.atleast_2d(np.asarray(weights, dtype=float))
    if not fit.found:
        return rows, int(first_sample)
    n = rows.shape[1]
    lo = min(int(first_sample), fit.first_sample)
    hi = max(int(first_sample) + n, fit.stop_sample)
    out = np.zeros((rows.shape[0], hi - lo))
    out[:, first_sample - lo:first_sample - lo + n] = rows
    through = rows @ fit.basis(int(first_sample), int(first_sample) + n)  # (k, terms)
    out[:, fit.first_sample - lo:fit.stop_sample - lo] -= through @ fit.sensitivity
    return out, lo


def removal_sd_mv(fit: LineNoise, time_s: np.ndarray, noise_mv: np.ndarray) -> np.ndarray:
    """SD of the hum and drift removed (:func:`remove_line_noise`) at each time, from the
    uncertainty of the fit's kept terms.

    Parameters
    ----------
    fit : LineNoise
    time_s : ndarray
        Times, s from the sweep's first sample (NaN gives NaN).
    noise_mv : ndarray
        A stretch of the recording's noise (the baseline less the removal), whose spectrum
        the coefficients' covariance follows
        (:func:`~spikemeasure.analysis.fluctuation.weighted_sums_covariance`).

    Returns
    -------
    ndarray
        mV; 0 where nothing was removed, NaN where the noise is unknown.

    Notes
    -----
    The removed artefact at sample i is b(i) . c, b(i) the kept terms there (less their mean
    over the reference window) and c = S v the coefficients, S the fit's sensitivity rows;
    its variance is b(i) (S C_v S^T) b(i)^T, C_v the noise's covariance over the fitted
    samples. A value read far from the fitted stretches (a spike during the step) has noise
    of its own independent of theirs, so the two add in quadrature.
    """
    t = np.asarray(time_s, dtype=float)
    out = np.zeros(t.shape)
    if not fit.found:
        return out
    cov = stretches_covariance(fit.sensitivity, np.asarray(noise_mv, dtype=float),
                               fit.sampling_rate_hz)
    known = np.isfinite(t)
    if cov is None:
        return np.full(t.shape, np.nan)
    terms = _basis(np.round(t[known] * fit.sampling_rate_hz), fit)
    out[known] = np.sqrt(np.maximum(0.0, np.einsum("ij,jk,ik->i", terms, cov, terms)))
    out[~known] = np.nan
    return out


def line_noise_lines() -> list[str]:
    """The section of ``docs/measurements.md`` on hum and drift."""
    mains = " and ".join(f"{f:g}" for f in MAINS_FREQUENCIES_HZ)
    return [
        "",
        "## Hum and drift",
        "",
        "Mains hum (a sinusoid at the mains frequency and its harmonics, whose phase holds "
        "across a sweep) and drift (a slow straight-line change of the recorded voltage) are "
        "not the cell's response. For each sweep with a stimulus they are fitted by least "
        "squares on the quiet stretch before the stimulus (from the end of any test pulse to "
        f"the onset): a constant, a line in time, and cos and sin of the first {HUM_HARMONICS} "
        f"harmonics below Nyquist of {mains} Hz, the mains frequency being the one whose "
        "harmonics explain more of the stretch (no setting: both are tried). A harmonic or "
        "the line is kept only when its Wald statistic against its own covariance (the "
        "white-noise least-squares covariance of the residual, made larger when the "
        "residual's spectrum shows correlated noise) passes the chi-square quantile for a "
        f"false-alarm chance of {LINE_NOISE_FALSE_ALARM:g} (Wald 1943; Kay 1993, chapter 4), "
        "so a clean recording keeps its values. After a test pulse only the hum is fitted: "
        "the membrane may still be settling from the pulse, which a line would take for "
        "drift. The kept terms are removed from the whole sweep with their mean over the "
        "baseline window kept, so baseline_mv is unchanged.",
        "",
        "steady_state_mv, min_mv, sag_fraction and the time constant read the voltage so "
        "corrected; the input resistance reads the deflections with the drift left in (see "
        "input_resistance_mohm). The spikes are detected and measured on the corrected "
        "voltage too, the sweep's fit made with the spikes' times as a first detection on "
        "the recorded voltage gives them (a sweep with missing samples: the baseline's fit "
        "alone), so that their voltages (threshold, peak, trough) hold no drift since the "
        "baseline and no hum; threshold_mv_sd and peak_mv_sd then hold the removal's own "
        "uncertainty at their times. The SDs carry "
        "the removal through: a window mean of the corrected voltage is a weighted sum of "
        "the recorded one, the quiet stretch weighted by minus the removal's sensitivity, "
        "and the covariance of those weights follows from the noise spectrum as for the "
        "other SDs.",
        "",
        "On a hyperpolarizing or subthreshold step without spikes the drift's slope is also "
        "fitted on the steady-state window (where the response has settled, as "
        "steady_state_mv takes it), with a level of its own: the baseline alone tells a "
        "slope only to about noise / sqrt(N T^2 / 12) (N samples over T s; 0.4 mV/s at "
        "0.5 mV of white noise, 20 kHz and 100 ms), and the second window lowers that by "
        "about sqrt(2). It joins only when a slope and a bend of its own beside the "
        "baseline's line are not significant together at "
        f"{PLATEAU_AGREEMENT:g} (a response still settling bends and is not drift). A "
        "drift too small to pass its test stays in the values; sag_fraction_sd then holds "
        "its size (sqrt(max(0, b^2 - var b)) for the fitted slope b, the moment estimate of "
        "its square) times each window's lever, and, where the steady-state window joined, "
        "likewise the size of its own slope beyond the baseline's, times its weight in "
        "the drift.",
        "",
        "Where the spikes are known, the stretch after the step where the membrane is back "
        "at rest also joins the drift's fit: from half-way between the step's end and the "
        f"sweep's end, at least {REST_AFTER_STEP_MS:g} ms after the step's end and "
        f"{REST_AFTER_SPIKE_MS:g} ms after the last spike after "
        "the step (a rebound spike and its after-hyperpolarization are not rest), to the "
        "sweep's end, when that leaves at least two periods of 50 Hz. It shares the baseline's level (the resting level, moved by the drift "
        "alone, as baseline_drift_mv reads it), so the slope is read from the change of "
        "level across the sweep, a lever of several hundred ms that sets its standard "
        "error several times below the baseline's own. It joins only when a slope of its "
        "own for each stretch and a bend for the rest stretch, beside the shared line, are "
        f"not significant together at {PLATEAU_AGREEMENT:g}: a membrane still settling "
        "from the step has a slope or bend the line does not follow. A resting level that "
        "moved without a slope in either stretch cannot be told from drift. The covariance "
        "of the fitted terms sums each stretch's own (noise samples a hundred ms and more "
        "apart are taken as uncorrelated; the hum is fitted).",
    ]
