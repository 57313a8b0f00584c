"""Mains hum and slow drift of a recorded voltage, estimated on a quiet stretch of a sweep.

Hum is a sinusoid at the mains frequency (50 or 60 Hz) and its harmonics whose phase holds
across a sweep; drift is a slow, straight-line change of the voltage (the electrode's offset
or the cell's resting potential moving). Neither is the cell's response to the stimulus, so
the passive measurements read a voltage with them removed. Functions take a voltage, its
sampling rate and the quiet stretch, and return a small dataclass or arrays; nothing here
reads files or prints.
"""
from __future__ import annotations

import threading
from collections import OrderedDict
from dataclasses import dataclass, replace

import numpy as np
from scipy.special import chdtri

from ..errors import InvalidSettingError
from .fluctuation import covariance_from_transforms, weights_transforms

__all__ = ["LineNoise", "estimate_line_noise", "remove_line_noise", "corrected_weights",
           "line_noise_lines", "forget_designs", "DESIGN_CACHE_BYTES",
           "MAINS_FREQUENCIES_HZ", "HUM_HARMONICS", "LINE_NOISE_FALSE_ALARM",
           "MIN_QUIET_PERIODS", "PLATEAU_AGREEMENT"]

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
#: The quiet stretch must hold at least this many periods of the lowest mains frequency.
MIN_QUIET_PERIODS = 2.0
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
    for k, h in enumerate(harmonics):
        phase = 2 * np.pi * h * frequency_hz * t
        out[:, int(drift) + 2 * k] = np.cos(phase)
        out[:, int(drift) + 2 * k + 1] = np.sin(phase)
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


#: Bytes the least-squares designs of :func:`_fit` kept for reuse may hold in all (each
#: process keeps its own): a cell's sweeps share their quiet stretch, sampling rate and
#: mains frequencies, so the same design, its pseudo-inverse and the Fourier transforms of
#: its sensitivity rows recur sweep after sweep; a design larger than this is formed anew
#: each time.
DESIGN_CACHE_BYTES = 2 * 2 ** 20


class _Design:
    """One least-squares design of :func:`_fit` and what follows from it alone (read-only
    arrays, shared by every fit with the same samples and terms)."""

    def __init__(self, samples: np.ndarray, rate: float, frequency_hz: float,
                 harmonics: tuple[int, ...], drift: bool, levels: np.ndarray | None,
                 bend: bool):
        terms = _terms(samples, rate, frequency_hz, harmonics, drift)
        if bend:
            terms = np.column_stack([terms, _plateau_terms(samples, rate, levels)])
        constants = (np.ones((samples.size, 1)) if levels is None or not levels.any()
                     else np.column_stack([1.0 - levels, levels]))
        self.k = constants.shape[1]
        self.design = np.column_stack([constants, terms - terms.mean(axis=0)])
        # the normal equations: a few well-scaled columns (centred, the time in s), where an
        # SVD of the tall design would cost far more
        self.pinv = np.linalg.solve(self.design.T @ self.design, self.design.T)
        self.design.flags.writeable = False
        self.pinv.flags.writeable = False
        # where the fitted samples lie in the rows, when they leave a gap (a plateau)
        self.gaps = None
        if samples.size and samples[-1] - samples[0] + 1 != samples.size:
            self.gaps = samples - samples[0]
        self._rows: np.ndarray | None = None
        self._transforms: np.ndarray | None = None
        self._white: np.ndarray | None = None

    @property
    def nbytes(self) -> int:
        """Bytes of the arrays held (views of them not counted twice)."""
        held = [self.design, self.pinv, self.gaps, self._rows, self._transforms, self._white]
        return sum(a.nbytes for a in held if a is not None and a.base is None)

    def rows(self) -> np.ndarray:
        """The pseudo-inverse's rows of the terms over samples[0] to samples[-1], zero where
        a sample is not fitted."""
        rows = self._rows
        if rows is None:
            rows = self.pinv[self.k:]
            if self.gaps is not None:
                rows = np.zeros((rows.shape[0], int(self.gaps[-1]) + 1))
                rows[:, self.gaps] = self.pinv[self.k:]
                rows.flags.writeable = False
            self._rows = rows
        return rows

    def covariance_parts(self) -> tuple[np.ndarray, np.ndarray]:
        """The Fourier transforms of :meth:`rows` and the pseudo-inverse's Gram matrix of
        the terms (the white-noise covariance per unit variance)."""
        transforms, white = self._transforms, self._white
        if transforms is None or white is None:
            transforms = weights_transforms(self.rows())
            white = self.pinv[self.k:] @ self.pinv[self.k:].T
            transforms.flags.writeable = False
            white.flags.writeable = False
            self._transforms, self._white = transforms, white
        return transforms, white

    def shed(self) -> None:
        """Drop what :meth:`rows` and :meth:`covariance_parts` formed (formed again when
        asked for)."""
        self._rows = self._transforms = self._white = None


class _DesignCache:
    """Designs by what makes them (:func:`_design_key`), the least recently used dropped
    first once they hold more than `limit` bytes (one lock: a cluster's worker may measure
    in several threads)."""

    def __init__(self, limit: int):
        self.limit = limit
        self._kept: OrderedDict[tuple, _Design] = OrderedDict()
        self._sizes: dict[tuple, int] = {}
        self._lock = threading.Lock()

    @property
    def nbytes(self) -> int:
        return sum(self._sizes.values())

    def __len__(self) -> int:
        return len(self._kept)

    def get(self, key: tuple) -> _Design | None:
        with self._lock:
            found = self._kept.get(key)
            if found is not None:
                self._kept.move_to_end(key)
            return found

    def keep(self, key: tuple, design: _Design) -> None:
        """Keep (or measure again, after it grew) `design`, within the limit: past it
        alone, without what it can form again (:meth:`_Design.shed`), or not at all."""
        with self._lock:
            self._kept.pop(key, None)
            self._sizes.pop(key, None)
            size = design.nbytes
            if size > self.limit:
                design.shed()
                size = design.nbytes
                if size > self.limit:
                    return
            while self._kept and self.nbytes + size > self.limit:
                oldest, _ = self._kept.popitem(last=False)
                del self._sizes[oldest]
            self._kept[key] = design
            self._sizes[key] = size

    def clear(self) -> None:
        with self._lock:
            self._kept.clear()
            self._sizes.clear()


_DESIGNS = _DesignCache(DESIGN_CACHE_BYTES)


def forget_designs() -> None:
    """Drop the designs kept for reuse (:data:`DESIGN_CACHE_BYTES`): a run calls it when a
    file's sweeps are measured, so that they hold no memory while its tables are written."""
    _DESIGNS.clear()


def _runs(x: np.ndarray) -> tuple:
    """Consecutive sample numbers as their runs: the size, the first, and where and to
    what they jump (they rebuild `x` exactly, so equal keys mean equal samples)."""
    if not x.size:
        return ()
    step = np.flatnonzero(np.diff(x) != 1)
    return (x.size, float(x[0]), tuple(step.tolist()), tuple(x[step + 1].tolist()))


def _design_key(samples: np.ndarray, rate: float, frequency_hz: float,
                harmonics: tuple[int, ...], drift: bool, levels: np.ndarray | None,
                bend: bool) -> tuple:
    if levels is None or not levels.any():
        marks = None
    else:
        change = np.flatnonzero(np.diff(levels))
        marks = (levels.size, float(levels[0]), tuple(change.tolist()),
                 tuple(levels[change + 1].tolist()))
    return (_runs(samples), float(rate), float(frequency_hz), tuple(harmonics), bool(drift),
            marks, bool(bend))


def _plateau_terms(samples: np.ndarray, rate: float, levels: np.ndarray) -> np.ndarray:
    """A slope and a bend of the plateau's own (zero off it), for :func:`_plateau_agrees`."""
    t = samples / rate
    x = levels * (t - t[levels > 0].mean())
    bend = levels * (x * x - np.mean(x[levels > 0] ** 2))
    return np.column_stack([x, bend])


def _fit(part: np.ndarray, samples: np.ndarray, rate: float, frequency_hz: float,
         harmonics: tuple[int, ...], drift: bool, levels: np.ndarray | None = None,
         bend: bool = False, need: str = "covariance"
         ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """Least squares of `part` on a constant and the terms: (coefficients without the
    constant, their sensitivity rows, their covariance under the residual's spectrum).

    `levels` (0 or 1 per sample) gives the second stretch a constant of its own; with
    `bend`, a slope and a bend of the plateau's own (:func:`_plateau_terms`) follow the
    terms. The rows cover samples[0] to samples[-1], zero where a sample is not fitted.
    `need` says how far to go: ``"coefficients"`` (rows and covariance None), ``"rows"``
    (covariance None) or ``"covariance"``. The design and what follows from it alone are
    kept for the next fit with the same samples and terms (:data:`DESIGN_CACHE_BYTES`)."""
    key = _design_key(samples, rate, frequency_hz, harmonics, drift, levels, bend)
    fixed = _DESIGNS.get(key)
    if fixed is None:
        fixed = _Design(samples, rate, frequency_hz, harmonics, drift, levels, bend)
        _DESIGNS.keep(key, fixed)
    k, design, pinv = fixed.k, fixed.design, fixed.pinv
    coef = pinv @ part
    if need == "coefficients":
        return coef[k:], None, None
    rows = fixed.rows()
    if need == "rows":
        _DESIGNS.keep(key, fixed)  # measured again, with its rows
        return coef[k:], rows, None
    residual = part - design @ coef
    transforms, white_gram = fixed.covariance_parts()
    _DESIGNS.keep(key, fixed)  # measured again, with its transforms
    spectral = covariance_from_transforms(transforms, rows.shape[1], residual, rate)
    if spectral is None:
        return coef[k:], rows, None
    # white noise of the residual's variance, made larger where the residual's spectrum
    # says the noise is correlated: a spectrum estimated on a short stretch scatters, and
    # taken alone would often make the test too lenient
    variance = max(float(np.var(residual)) * samples.size
                   / max(1, samples.size - design.shape[1]), _VARIANCE_FLOOR_MV2)
    white = variance * white_gram
    inflation = max(1.0, float(np.trace(spectral) / np.trace(white))) if white.size else 1.0
    return coef[k:], rows, white * inflation


def estimate_line_noise(voltage_mv: np.ndarray, sampling_rate_hz: float, start_s: float,
                        stop_s: float, *, harmonics: int = HUM_HARMONICS,
                        false_alarm: float = LINE_NOISE_FALSE_ALARM,
                        drift: bool = True,
                        reference_s: tuple[float, float] | None = None,
                        plateau_s: tuple[float, float] | None = None) -> LineNoise:
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
    if drift and plateau_s is not None:
        lo, hi = max(stop, int(round(plateau_s[0] * rate))), min(v.size,
                                                                int(round(plateau_s[1] * rate)))
        if hi - lo >= need and np.isfinite(v[lo:hi]).all():
            both = np.concatenate([samples, np.arange(lo, hi)])
            marks = (both >= lo).astype(float)
            agrees, difference = _plateau_agrees(v[both], both, rate, harmonics, marks)
            if agrees:
                samples, part, levels = both, v[both], marks
    best = None
    for f in MAINS_FREQUENCIES_HZ:
        below = tuple(h for h in range(1, harmonics + 1) if h * f < rate / 2)
        # the covariance only for the frequency kept
        coef, _, _ = _fit(part, samples, rate, f, below, drift, levels, need="coefficients")
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
        samples, part, levels, stop = samples[levels == 0], part[levels == 0], None, quiet_stop
    coef, rows, _ = _fit(part, samples, rate, f, kept, keep_drift, levels, need="rows")
    # a drift not kept stays in the voltage; a kept drift that a plateau joined may hold
    # the plateau's own settling, times the plateau's weight in the slope
    untested = _excess(slope, slope_sd ** 2) if not keep_drift else 0.0
    if keep_drift and levels is not None:
        on_plateau = samples[levels > 0] - first
        t = on_plateau / rate
        untested = abs(float(rows[0, on_plateau] @ (t - t.mean()))) * difference
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
        coef, _, _ = _fit(part, samples, rate, f, below, True, levels, bend=True,
                          need="coefficients")
        explained = float(np.sum(coef[1:-2] ** 2))
        if best is None or explained > best[0]:
            best = (explained, f, below)
    # the covariance only for the frequency kept
    _, f, below = best
    coef, _, cov = _fit(part, samples, rate, f, below, True, levels, bend=True)
    if cov is None:
        return False, float("nan")
    return (_wald(coef[-2:], cov[-2:, -2:]) <= chdtri(2, PLATEAU_AGREEMENT),
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
    artefact = fit.artefact_mv(0, v.size)
    return np.subtract(v, artefact, out=artefact)


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
        "input_resistance_mohm). The spike values read the recorded voltage. The SDs carry "
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
    ]
