"""The hum and drift estimator against analytic signals: a sinusoid of known amplitude,
frequency and phase plus a line of known slope, in white noise of known SD. The standard
errors are checked against the least-squares formula for white noise, sigma^2 (X^T X)^-1
(Kay 1993, Fundamentals of Statistical Signal Processing: Estimation Theory, chapter 4,
from memory)."""
import numpy as np
import pytest

from spikemeasure.analysis.line_noise import (corrected_weights, estimate_line_noise,
                                              remove_line_noise)
from spikemeasure.errors import InvalidSettingError

RATE = 20_000.0
QUIET_S = 0.2


def trace(hum_mv=0.3, hum_hz=50.0, phase=0.7, slope=1.0, noise_mv=0.2, seconds=0.5, seed=0,
          third_mv=0.0):
    t = np.arange(int(seconds * RATE)) / RATE
    rng = np.random.default_rng(seed)
    return (-65.0 + hum_mv * np.cos(2 * np.pi * hum_hz * t + phase)
            + third_mv * np.cos(2 * np.pi * 3 * hum_hz * t) + slope * t
            + rng.normal(0.0, noise_mv, t.size))


class TestEstimateLineNoise:

    @pytest.mark.parametrize("hum_hz", [50.0, 60.0])
    def test_amplitude_phase_and_slope(self, hum_hz):
        fit = estimate_line_noise(trace(hum_hz=hum_hz), RATE, 0.0, QUIET_S)
        assert fit.frequency_hz == hum_hz
        assert fit.harmonics == (1,)
        # white noise of 0.2 mV over 4000 samples: amplitude SE 0.2 sqrt(2 / 4000) = 0.0045
        assert fit.hum_amplitude_mv[0] == pytest.approx(0.3, abs=0.02)
        assert fit.hum_phase_rad[0] == pytest.approx(0.7, abs=0.07)
        # slope SE: 0.2 / sqrt(4000 x 0.2^2 / 12) = 0.055 mV/s
        assert fit.drift_mv_per_s == pytest.approx(1.0, abs=0.25)
        assert fit.drift_sd_mv_per_s == pytest.approx(0.2 / np.sqrt(4000 * 0.2 ** 2 / 12),
                                                      rel=0.3)

    def test_a_third_harmonic_is_found(self):
        fit = estimate_line_noise(trace(third_mv=0.2), RATE, 0.0, QUIET_S)
        assert fit.harmonics == (1, 3)
        assert fit.hum_amplitude_mv[1] == pytest.approx(0.2, abs=0.02)

    def test_noise_alone_keeps_nothing(self):
        # the false-alarm chance per term is 1e-3: of 40 traces (160 terms) about none
        found = [estimate_line_noise(trace(hum_mv=0.0, slope=0.0, seed=k), RATE, 0.0,
                                     QUIET_S).found for k in range(40)]
        assert sum(found) <= 2

    def test_removal_leaves_the_noise(self):
        v = trace()
        clean = trace(hum_mv=0.0, slope=0.0)
        fit = estimate_line_noise(v, RATE, 0.0, QUIET_S)
        out = remove_line_noise(v, fit)
        # over the whole sweep, extrapolated 0.3 s past the stretch: what is left is the
        # noise and a constant
        left = out - clean
        assert np.std(left) < 0.05

    def test_mean_over_the_reference_is_kept(self):
        v = trace()
        fit = estimate_line_noise(v, RATE, 0.0, QUIET_S, reference_s=(0.1, 0.2))
        out = remove_line_noise(v, fit)
        assert np.mean(out[2000:4000]) == pytest.approx(np.mean(v[2000:4000]), abs=1e-9)

    def test_too_short_or_missing_samples_keep_nothing(self):
        v = trace()
        assert not estimate_line_noise(v, RATE, 0.0, 0.02).found  # one period of 50 Hz
        v[100] = np.nan
        assert not estimate_line_noise(v, RATE, 0.0, QUIET_S).found

    def test_noise_free_constant_keeps_nothing(self):
        assert not estimate_line_noise(np.full(10000, -70.0), RATE, 0.0, QUIET_S).found

    @pytest.mark.parametrize("kwargs, name", [
        (dict(sampling_rate_hz=0.0), "sampling_rate_hz"),
        (dict(harmonics=0), "harmonics"),
        (dict(false_alarm=1.5), "false_alarm"),
        (dict(start_s=0.3, stop_s=0.1), "stop_s"),
    ])
    def test_bad_arguments_name_the_argument(self, kwargs, name):
        args = dict(sampling_rate_hz=RATE, start_s=0.0, stop_s=QUIET_S) | kwargs
        with pytest.raises(InvalidSettingError, match=name):
            estimate_line_noise(trace(), **args)


class TestCorrectedWeights:

    def test_matches_the_corrected_mean(self):
        v = trace()
        fit = estimate_line_noise(v, RATE, 0.0, QUIET_S)
        window = np.full((1, 2000), 1 / 2000)  # the mean of samples 8000-10000
        rows, first = corrected_weights(window, 8000, fit)
        direct = np.mean(remove_line_noise(v, fit)[8000:10000])
        assert rows[0] @ v[first:first + rows.shape[1]] == pytest.approx(direct, abs=1e-9)

    def test_nothing_found_leaves_the_weights(self):
        fit = estimate_line_noise(trace(hum_mv=0.0, slope=0.0, seed=3), RATE, 0.0, QUIET_S)
        rows, first = corrected_weights(np.ones((1, 5)), 7, fit)
        assert first == 7 and np.array_equal(rows, np.ones((1, 5)))
