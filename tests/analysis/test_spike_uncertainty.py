"""The SDs of spike values that a recording's noise implies, with the biases they hold.

Sources: the acquisition chain of spikemeasure.testing.acquisition (published models through a
4-pole Bessel filter, white noise, hum, drift, sampling), whose noise-free filtered trace at the
simulation rate (noise_mv=0, no hum or drift, same filter), measured by the plain reference
implementation of the definitions (spikemeasure.testing.reference), gives the truth each SD is
judged against; the definition of white noise (autocovariance sigma^2 at lag 0, zero
elsewhere); the autocovariance of a sine of amplitude A, (A^2 / 2) cos(2 pi f k / fs); the
variance of a least-squares slope under white noise, sigma^2 / sum((t - mean)^2); the
Savitzky-Golay derivative's noise gain sqrt(12 / (N (N^2 - 1))) (Savitzky and Golay 1964); an
interpolating spline passes through its samples; closed forms of a parabola's crossing and of
a Gaussian's peak.
"""
import numpy as np
import pytest

from spikemeasure.analysis.detection import DetectionSettings
from spikemeasure.analysis.spike_uncertainty import (
    MIN_QUIET_MS, SD_COLUMNS, NoiseModel, SpikesWithUncertainty, measured_noise, quiet_stretch,
    sd_values, spike_uncertainty, with_uncertainty)
from spikemeasure.analysis.spikes import SpikeMeasurements, measure_trace
from spikemeasure.analysis.spike_features import PEAK_ORDER, peak_windows
from spikemeasure.analysis.spike_rates import noise_before
from spikemeasure.analysis.sweeps import CurrentStep
from spikemeasure.errors import InvalidSettingError
from spikemeasure.io import Recording, Sweep
from spikemeasure.tables.build import measure_recording, spike_table
from spikemeasure.testing.acquisition import record_commands
from spikemeasure.testing.reference import reference_spikes

SIM_RATE = 100_000.0
ONSET_S, LENGTH_S = 0.05, 0.2
# model, step (pA), decimation (output rate = 100 kHz / decimation), Bessel (Hz), noise (mV),
# hum (mV, 50 Hz) and drift (mV/s): rates 10-50 kHz, filters 3-10 kHz, noise 0.1-0.5 mV,
# two cases with hum and drift
CASES = [("hodgkin_huxley_1952", 100.0, 5, 5000.0, 0.2, 0.0),
         ("wang_buzsaki_1996", 60.0, 2, 10000.0, 0.1, 0.0),
         ("cortical_adapting", 400.0, 10, 3000.0, 0.5, 0.0),
         ("hodgkin_huxley_1952", 100.0, 4, 10000.0, 0.3, 0.3),
         ("wang_buzsaki_1996", 60.0, 10, 3000.0, 0.1, 0.3),
         ("cortical_adapting", 400.0, 2, 10000.0, 0.5, 0.0)]
REPEATS = 5  # noisy recordings of each case
DRIFT_PER_HUM = 3.0  # mV/s of drift per mV of hum in a case


def _step_command(size_pa: float, rows: int) -> np.ndarray:
    cmd = np.zeros((rows, int(LENGTH_S * SIM_RATE)))
    cmd[:, int(ONSET_S * SIM_RATE):] = size_pa
    return cmd


@pytest.fixture(scope="module")
def standard_scores():
    """Per SD column, (measured - true value) / SD for every spike matched by peak time
    between a noisy recording and the truth: the reference measurement of the noise-free
    filtered trace at the simulation rate, without hum and drift."""
    scores = {name: [] for name in SD_COLUMNS}
    for model, size, decimation, bessel, noise, hum in CASES:
        truth = record_commands(model, _step_command(size, 1), decimation=1, bessel_hz=bessel)
        true = reference_spikes(truth.voltage_mv[0], SIM_RATE)
        noisy = record_commands(model, _step_command(size, REPEATS), decimation=decimation,
                                bessel_hz=bessel, noise_mv=noise, hum_mv=hum,
                                drift_mv_per_s=DRIFT_PER_HUM * hum, seed=7)
        rate = noisy.sampling_rate_hz
        step = CurrentStep(ONSET_S, LENGTH_S, size, 0.0)
        for v in noisy.voltage_mv:
            spikes = with_uncertainty(measure_trace(v, rate, step=step), v, rate, step)
            match = np.abs(true.peak_s[None, :] - spikes.peak_s[:, None]).argmin(axis=1)
            same = np.abs(true.peak_s[match] - spikes.peak_s) < 5e-4
            for name in SD_COLUMNS:
                value = name.removesuffix("_sd")
                error = getattr(spikes, value)[same] - getattr(true, value)[match[same]]
                known = np.isfinite(error)  # a last spike cut off by the step has no trough
                scores[name].extend(error[known] / getattr(spikes, name)[same][known])
    return {name: np.asarray(z) for name, z in scores.items()}


class TestCalibration:
    def test_truth_within_two_sd_in_85_to_99_5_percent(self, standard_scores):
        # source: the reference measurement (spikemeasure.testing.reference) of the same
        # simulated cell's noise-free filtered trace at the simulation rate, without hum and
        # drift. One test for all columns, so that parallel workers do not each simulate the
        # recordings.
        within = {}
        for name in SD_COLUMNS:
            z = standard_scores[name]
            assert np.isfinite(z).all(), name
            assert z.size >= 200, name
            within[name] = float(np.mean(np.abs(z) <= 2.0))
        assert all(0.85 <= w <= 0.995 for w in within.values()), within


class TestMeasuredNoise:
    RATE = 20_000.0

    def test_white_noise_autocovariance(self):
        # source: white noise has autocovariance sigma^2 at lag 0 and 0 at other lags
        v = np.random.default_rng(1).normal(-65.0, 0.3, int(0.5 * self.RATE))
        noise = measured_noise(v, self.RATE, 0, v.size)
        assert noise.sd_mv == pytest.approx(0.3, rel=0.03)
        assert np.abs(noise.autocovariance_mv2[1:20]).max() < 0.05 * 0.09

    def test_hum_keeps_its_spectrum(self):
        # source: a sine of amplitude A has autocovariance (A^2 / 2) cos(2 pi f k / fs)
        t = np.arange(int(0.4 * self.RATE)) / self.RATE
        v = -65.0 + 0.5 * np.sin(2 * np.pi * 50.0 * t) + 0.2 * t  # hum and a drift
        noise = measured_noise(v, self.RATE, 0, v.size)
        lags = np.array([0, 100, 200])  # 0, a quarter and half a period
        expected = 0.125 * np.cos(2 * np.pi * 50.0 * lags / self.RATE)
        np.testing.assert_allclose(noise.autocovariance_mv2[lags] / (1 - lags / t.size),
                                   expected, atol=0.01)

    def test_drift_fitted_with_the_hum(self):
        # source: a straight line of 2 mV/s under 50 Hz hum and white noise; the least-squares
        # slope's SD under white noise is sigma / sqrt(sum((t - mean)^2)) (a textbook
        # result), which the fit's own SD may only exceed (it grows for correlated noise).
        # Over 0.12 s (six periods) a line alone takes about 0.8 mV/s of this hum for drift.
        t = np.arange(int(0.12 * self.RATE)) / self.RATE
        rng = np.random.default_rng(3)
        v = -65.0 + 2.0 * t + 0.3 * np.sin(2 * np.pi * 50.0 * t) + rng.normal(0, 0.1, t.size)
        noise = measured_noise(v, self.RATE, 0, v.size)
        white_sd = 0.1 / np.sqrt(np.sum((t - t.mean()) ** 2))
        assert noise.drift_sd_mv_per_s >= 0.99 * white_sd
        assert noise.drift_sd_mv_per_s < 2.0 * white_sd
        assert abs(noise.drift_mv_per_s - 2.0) < 4 * noise.drift_sd_mv_per_s
        line_alone = np.polyfit(t, v, 1)[0]
        assert abs(line_alone - 2.0) > 10 * noise.drift_sd_mv_per_s  # control
        # after a test pulse (drift=False) a slope is settling, not drift: none is kept
        settling = measured_noise(v, self.RATE, 0, v.size, drift=False)
        assert settling.drift_since_mv(np.array([1.0]))[0] == 0.0

    def test_drift_continued_from_the_stretch_middle(self):
        # source: a straight line: a drift of 2 mV/s moves the voltage by 2 mV/s times the
        # time from the middle of the stretch it was measured on (samples 0-1999 at 20 kHz:
        # 0.04998 s); its square less the slope's noise variance when that is known
        noise = NoiseModel(np.array([0.01]), self.RATE, 0, 2000, 2.0, 0.0)
        middle = 1999 / 2 / self.RATE
        np.testing.assert_allclose(noise.drift_since_mv(np.array([middle, 0.3, 0.0])),
                                   [0.0, 2.0 * (0.3 - middle), 2.0 * middle])
        unsure = NoiseModel(np.array([0.01]), self.RATE, 0, 2000, 2.0, 1.2)
        assert unsure.drift_since_mv(np.array([0.3]))[0] == pytest.approx(
            1.6 * (0.3 - middle))
        within_noise = NoiseModel(np.array([0.01]), self.RATE, 0, 2000, 0.5, 1.0)
        assert within_noise.drift_since_mv(np.array([0.3]))[0] == 0.0

    @pytest.mark.parametrize("n", [401, 1250, 2048])
    def test_autocovariance_is_the_direct_sum(self, n):
        # source: the definition of the biased autocovariance, sum(x[i] x[i + k]) / n at
        # every lag k, x the stretch less its least-squares line (numpy's polyfit), summed
        # directly with numpy; n odd, 2 n - 1 a product of 2, 3 and 5 (1250), a power of two
        rng = np.random.default_rng(n)
        v = -65.0 + 0.01 * np.arange(n) + np.convolve(rng.normal(0, 0.3, n + 4),
                                                      np.ones(5) / 5, mode="valid")
        t = np.arange(n, dtype=float)
        x = v - np.polyval(np.polyfit(t, v, 1), t)
        direct = np.array([x[:n - k] @ x[k:] for k in range(n)]) / n
        noise = measured_noise(v, self.RATE, 0, n, drift=False)
        assert noise.autocovariance_mv2.shape == (n,)
        np.testing.assert_allclose(noise.autocovariance_mv2, direct, rtol=0,
                                   atol=1e-12 * direct[0])

    def test_too_short_or_missing_stretch_gives_none(self):
        v = np.zeros(int(self.RATE))
        short = int(MIN_QUIET_MS * 1e-3 * self.RATE) - 1
        assert measured_noise(v, self.RATE, 0, short) is None
        v[::short] = np.nan  # no finite run long enough
        assert measured_noise(v, self.RATE, 0, v.size) is None


class TestQuietStretch:
    def test_baseline_before_the_stimulus(self):
        step = CurrentStep(0.1, 0.6, 50.0, 0.0, baseline_start_s=0.02)
        assert quiet_stretch(20_000, 20_000.0, step, 0.2) == (400, 2000)

    def test_ends_before_a_spike_in_the_baseline(self):
        step = CurrentStep(0.1, 0.6, 50.0, 0.0)
        assert quiet_stretch(20_000, 20_000.0, step, 0.05) == (0, 900)

    def test_none_without_a_stimulus_or_too_short(self):
        assert quiet_stretch(20_000, 20_000.0, None, 0.5) is None
        step = CurrentStep(0.1, 0.6, 50.0, 0.0)
        assert quiet_stretch(20_000, 20_000.0, step, 0.02) is None

    def test_rate_must_be_positive(self):
        with pytest.raises(InvalidSettingError, match="sampling_rate_hz"):
            quiet_stretch(100, 0.0, None, 0.1)


def _white(sd: float, rate: float) -> NoiseModel:
    acov = np.zeros(200)
    acov[0] = sd * sd
    return NoiseModel(acov, rate, 0, 10_000)


class TestKnownAnswers:
    RATE = 50_000.0

    @pytest.fixture(scope="class")
    def spikes(self):
        sim = record_commands("wang_buzsaki_1996", _step_command(60.0, 1), decimation=2)
        v = sim.voltage_mv[0]
        return v, measure_trace(v, self.RATE, step=CurrentStep(ONSET_S, LENGTH_S, 60.0, 0.0))

    def test_peak_on_a_sample_has_the_fit_noise(self, spikes):
        # source: a least-squares polynomial's value is a linear functional of the samples;
        # its weights at the window centre are numpy.polynomial.polynomial.polyfit of the unit
        # vectors evaluated at 0, and under white noise of SD sigma the value's SD is sigma
        # times their norm. Where the spike is too narrow for a fit (window 0), the
        # interpolating spline passes through its samples, so the SD is the sample's.
        from numpy.polynomial import polynomial

        v, s = spikes
        on_sample = SpikeMeasurements(**{**{f: getattr(s, f) for f in s.__dataclass_fields__},
                                         "peak_s": np.round(s.peak_s * self.RATE) / self.RATE})
        sds = spike_uncertainty(v, self.RATE, on_sample, _white(0.3, self.RATE))
        windows = peak_windows(v, np.round(s.peak_s * self.RATE).astype(int), s.threshold_mv,
                               noise_before(v, s.threshold_s * self.RATE))
        for sd, window in zip(sds.peak_mv_sd, windows):
            if window == 0:
                assert sd == pytest.approx(0.3, rel=1e-9)
                continue
            x = np.arange(window) - window // 2
            centre = [polynomial.polyfit(x, unit, PEAK_ORDER)[0] for unit in np.eye(window)]
            assert sd == pytest.approx(0.3 * np.linalg.norm(centre), rel=1e-9)

    def test_max_rate_has_the_spline_derivative_noise(self, spikes):
        # source: the derivative of the not-a-knot quintic spline through 13 samples (built
        # here with scipy.interpolate.make_interp_spline on unit vectors) is a linear
        # functional of the samples; under white noise of SD sigma its SD is sigma times the
        # norm of its weights (times fs for V/s). On this noise-free trace no smoothing is
        # needed, so the SD lies between the smallest and largest norm within one sample.
        from scipy.interpolate import make_interp_spline

        v, s = spikes
        sds = spike_uncertainty(v, self.RATE, s, _white(0.3, self.RATE))
        nodes = np.arange(-6.0, 7.0)
        grid = np.linspace(-1.0, 1.0, 201)
        weights = np.stack([make_interp_spline(nodes, row, k=5)(grid, 1)
                            for row in np.eye(nodes.size)], axis=1)
        norms = 0.3 * self.RATE / 1e3 * np.sqrt(np.sum(weights ** 2, axis=1))
        assert np.all(sds.max_dvdt_v_per_s_sd <= norms.max() * (1 + 1e-6))
        assert np.all(sds.max_dvdt_v_per_s_sd >= norms.min() * (1 - 1e-6))

    def test_sds_scale_with_the_noise(self, spikes):
        # source: first-order propagation is linear in the noise amplitude
        v, s = spikes
        small = spike_uncertainty(v, self.RATE, s, _white(0.1, self.RATE))
        large = spike_uncertainty(v, self.RATE, s, _white(0.4, self.RATE))
        # what the threshold's smoothing correction may have left (the same at any noise)
        # adds in quadrature to threshold, AHP depth and half-width
        for name in ("peak_mv_sd", "max_dvdt_v_per_s_sd"):
            np.testing.assert_allclose(getattr(large, name), 4 * getattr(small, name))
        # threshold, AHP depth and half-width: their squares are 4**2 (or 2**2) x the noise
        # part plus a part the noise does not change, the same from either pair of levels
        middle = spike_uncertainty(v, self.RATE, s, _white(0.2, self.RATE))
        for name in ("threshold_mv_sd", "ahp_depth_mv_sd", "half_width_ms_sd"):
            little = getattr(small, name) ** 2
            fixed_4 = (16 * little - getattr(large, name) ** 2) / 15
            fixed_2 = (4 * little - getattr(middle, name) ** 2) / 3
            np.testing.assert_allclose(fixed_4, fixed_2, rtol=1e-6, atol=1e-12 * little.max())
            assert np.all(fixed_4 >= 0) and np.all(fixed_4 < 0.01 * little)

    def test_empty_value_empty_sd_and_unknown_noise(self, spikes):
        v, s = spikes
        fields = {f: getattr(s, f) for f in s.__dataclass_fields__}
        fields["half_width_ms"] = np.where(np.arange(len(s)) == 0, np.nan, s.half_width_ms)
        sds = spike_uncertainty(v, self.RATE, SpikeMeasurements(**fields),
                                _white(0.2, self.RATE))
        assert np.isnan(sds.half_width_ms_sd[0]) and np.isfinite(sds.half_width_ms_sd[1:]).all()
        unknown = spike_uncertainty(v, self.RATE, s, None)
        assert all(np.isnan(getattr(unknown, n)).all() for n in SD_COLUMNS)

    def test_second_derivative_threshold_has_no_sd(self, spikes):
        v, s = spikes
        settings = DetectionSettings(threshold_method="second_derivative_peak")
        sds = spike_uncertainty(v, self.RATE, s, _white(0.2, self.RATE), settings)
        assert np.isnan(sds.threshold_mv_sd).all() and np.isfinite(sds.peak_mv_sd).all()

    def test_arguments_checked(self, spikes):
        v, s = spikes
        with pytest.raises(InvalidSettingError, match="voltage_mv"):
            spike_uncertainty(v[None, :], self.RATE, s, None)
        with pytest.raises(InvalidSettingError, match="sampling_rate_hz"):
            spike_uncertainty(v, -1.0, s, None)
        with pytest.raises(InvalidSettingError, match="name"):
            sd_values(s, "trough_mv_sd")


def _gaussian_train(rate: float, sigma_ms: float):
    """Twenty Gaussian spikes (conftest.GaussianSpike's shape, 100 mV on -65 mV) whose peaks
    fall a twentieth of a sample further from the sampling grid each, 8 ms apart."""
    from conftest import GaussianSpike

    spike = GaussianSpike(sigma_ms=sigma_ms)
    dt = 1e3 / rate
    peaks = 10.0 + 8.0 * np.arange(20) + dt * np.arange(20) / 20
    t = np.arange(0.0, 180.0, dt)
    v = np.full(t.size, spike.base_mv)
    for p in peaks:
        v += spike.amplitude_mv * np.exp(-(t - p) ** 2 / (2 * sigma_ms ** 2))
    return spike, v


class TestBiasesBetweenSamples:
    """Without noise (a white-noise model of 1e-6 mV), the SDs hold what sampling leaves
    uncertain; the truth is the Gaussian's closed form (conftest.GaussianSpike: peak base + A,
    largest rate A / sigma exp(-1/2), half-width at the measured threshold's level)."""

    @pytest.mark.parametrize("rate, sigma_ms", [(10_000.0, 0.15), (10_000.0, 0.25),
                                                (20_000.0, 0.1)])
    def test_spline_errors_within_their_sds(self, rate, sigma_ms):
        # source: the closed forms above; the bound of a cubic spline's error (Hall and
        # Meyer 1976, from memory) holds the peak's error whole (within sqrt(3) SD, the
        # bound); the largest rate's and (on spikes at least 5 samples wide at half
        # amplitude) the half-width's within 2 SD
        spike, v = _gaussian_train(rate, sigma_ms)
        s = measure_trace(v, rate)
        assert len(s) == 20
        sds = spike_uncertainty(v, rate, s, _white(1e-6, rate))
        peak_error = s.peak_mv - (spike.base_mv + spike.amplitude_mv)
        rate_error = s.max_dvdt_v_per_s - spike.max_rate()
        assert np.all(np.abs(peak_error) <= np.sqrt(3) * sds.peak_mv_sd)
        assert np.all(np.abs(rate_error) <= 2 * sds.max_dvdt_v_per_s_sd)
        if sigma_ms * 2.355 * rate / 1e3 >= 5:
            width_error = s.half_width_ms - np.array([spike.half_width_ms(x)
                                                      for x in s.threshold_mv])
            assert np.all(np.abs(width_error) <= 2 * sds.half_width_ms_sd)
        # control: the noise alone would give SDs far below the errors
        assert np.abs(peak_error).max() > 1e-3


    @pytest.mark.parametrize("window, growth", [(3, 0.3), (7, 0.3), (11, 0.15)])
    def test_exponential_shift_of_the_onset_fit(self, window, growth):
        # source: an exponential V = exp(k x) / k (rate exp(k x) per sample) and numpy's
        # least-squares quadratic (np.polyfit) over the window at each centre: its slope is
        # the rate times a constant, so the crossing of a level by the fitted rates,
        # interpolated as an exponential, lies exactly log(R) / k samples early; and the
        # leading term of the fit's series (Savitzky and Golay 1964) agrees with it to first
        # order in k (the series reads a linear step and a second difference of the rate)
        from spikemeasure.analysis.detection import savgol_coeffs
        from spikemeasure.analysis.spike_uncertainty import _exponential_shift, _series_shift

        half = window // 2
        x = np.arange(-half, half + 1, dtype=float)
        voltage = np.exp(growth * np.arange(60.0)) / growth
        fitted = np.array([np.polyfit(x, voltage[c - half:c + half + 1], 2)[1]
                           for c in (30, 31)])
        level = np.exp(growth * 30.4)                        # the true rate crosses at 30.4
        crossing = 30 + np.log(level / fitted[0]) / np.log(fitted[1] / fitted[0])
        weights = savgol_coeffs(window, 2, deriv=1, use="dot")
        shift = _exponential_shift(weights[None, :], fitted[:1], fitted[1:])
        assert crossing + shift[0] == pytest.approx(30.4, abs=1e-9)
        assert shift[0] > 0 if window > 3 else shift[0] >= 0
        series = _series_shift(voltage, weights[None, :], np.array([window]),
                               np.array([30.4]), np.array([fitted[1] - fitted[0]]))
        assert series[0] == pytest.approx(shift[0], rel=growth)
        assert series[0] != pytest.approx(shift[0], rel=1e-3)  # two models, not one


class TestQuadraticForms:
    """The SDs' quadratic forms against the direct formula: sqrt(w' C w) with C the full
    covariance matrix C[i, j] = acov[|p_i - p_j|] (0 beyond the autocovariance's length)
    built with numpy, summed with numpy's matrix products (the definition of the variance of
    a weighted sum of a stationary process, Priestley 1981, sec. 5.3)."""

    @staticmethod
    def _direct(pos, w, valid, acov):
        out = np.full(pos.shape[0], np.nan)
        for r in np.flatnonzero(valid):
            lag = np.abs(pos[r][:, None] - pos[r][None, :])
            cov = np.where(lag < acov.size, acov[np.minimum(lag, acov.size - 1)], 0.0)
            out[r] = np.sqrt(max(w[r] @ cov @ w[r], 0.0))
        return out

    def test_toeplitz_blocks_and_pairs_agree_with_the_full_matrix(self):
        from spikemeasure.analysis.spike_uncertainty import _TOEPLITZ_SPAN, _combined_sd

        rng = np.random.default_rng(5)
        x = rng.normal(size=400)
        x = np.convolve(x, np.ones(5) / 5, mode="same")    # correlated noise
        acov = np.correlate(x, x, "full")[x.size - 1:] / x.size
        acov = acov[:300]        # lags from 300 on count as uncorrelated
        n, width = 60, 24
        centre = rng.integers(1_000, 5_000, size=n)
        offsets = rng.integers(-8, 9, size=(n, width))
        # rows 0-19: compact (repeated positions, spans of 17 samples); 20-39: a second
        # group of samples far away (wider than a Toeplitz block, and beyond the
        # autocovariance's length for rows 30-39); 40-44: spans of 30-200 samples; 45-49:
        # three groups far apart
        offsets[20:30, 12:] += _TOEPLITZ_SPAN + 40
        offsets[30:40, 12:] += 2_000
        offsets[40:45] *= rng.integers(2, 12, size=(5, 1))
        offsets[45:50, 8:16] += _TOEPLITZ_SPAN + 50
        offsets[45:50, 16:] += 3 * _TOEPLITZ_SPAN
        pos = centre[:, None] + offsets
        w = rng.normal(size=(n, width))
        w[rng.random(size=w.shape) < 0.2] = 0.0            # padding and zeroed terms
        w[50] = 0.0                                        # nothing weighted
        valid = np.ones(n, dtype=bool)
        valid[55:] = False                                 # rows not measured: zero weights
        w[55:] = 0.0
        noise = NoiseModel(acov, 10_000.0, 0, x.size)
        found = _combined_sd(pos, w, valid, noise)
        expected = self._direct(pos, w, valid, acov)
        np.testing.assert_array_equal(np.isnan(found), np.isnan(expected))
        np.testing.assert_allclose(found, expected, rtol=1e-12, atol=0.0)
        assert found[50] == 0.0
        # control: the far samples count (the pairs between groups move the SD)
        near = self._direct(pos[20:30, :12], w[20:30, :12], valid[20:30], acov)
        assert not np.allclose(found[20:30], near, rtol=1e-3)


class TestInTables:
    def test_spike_table_carries_the_sds(self):
        sim = record_commands("hodgkin_huxley_1952", _step_command(100.0, 1), noise_mv=0.2)
        sweep = Sweep(sim.voltage_mv[0], sim.sampling_rate_hz, sim.command_pa[0],
                      file="cell.nwb", index=0)
        results = measure_recording(Recording("cell.nwb", "simulated", [sweep]))
        assert isinstance(results[0].spikes, SpikesWithUncertainty)
        table = spike_table(results)
        for name in SD_COLUMNS:
            values = np.asarray(table[name], dtype=float)
            assert values.size > 5 and np.isfinite(values).sum() >= values.size - 1
            assert np.nanmin(values) > 0

    def test_plain_spikes_give_empty_sds(self):
        assert np.isnan(sd_values(SpikeMeasurements.empty(), "peak_mv_sd")).size == 0
