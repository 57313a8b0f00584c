"""Maximum and minimum dV/dt at the limit of the data.

Truth is outside the tool: the closed-form derivative of a Gaussian spike, and for the
published models (Hodgkin & Huxley 1952, Wang & Buzsaki 1996, the adapting cortical cell of
spikemeasure.testing) the noise-free recording filtered by the same 4-pole Bessel filter,
differentiated with numpy.gradient at the 100 kHz simulation rate.
"""
from __future__ import annotations

import numpy as np
import pytest

from conftest import GaussianSpike, sampled
from spikemeasure.analysis.spike_rates import noise_before
from spikemeasure.analysis.spikes import measure_trace
from spikemeasure.testing.acquisition import record_commands
from spikemeasure.testing.reference import reference_spikes

SIM_RATE = 100_000.0
#: (model, step pA): steps that fire a few spikes within 40 ms.
MODELS = {"hodgkin_huxley_1952": 40.0, "wang_buzsaki_1996": 120.0, "cortical_adapting": 250.0}


def _recorded(model: str, rate_hz: float, bessel_hz: float, noise_mv: float, seed: int = 0):
    cmd = np.zeros(int(0.045 * SIM_RATE))
    cmd[int(0.005 * SIM_RATE):int(0.04 * SIM_RATE)] = MODELS[model]
    common = dict(simulation_rate_hz=SIM_RATE, bessel_hz=bessel_hz)
    rec = record_commands(model, cmd, decimation=int(SIM_RATE // rate_hz), noise_mv=noise_mv,
                          seed=seed, **common)
    truth = record_commands(model, cmd, decimation=1, **common).voltage_mv[0]
    return rec.voltage_mv[0], rec.sampling_rate_hz, truth


def _true_rates(truth: np.ndarray, peak_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Largest dV/dt in the 1 ms before each true peak and most negative in the 3 ms after,
    by numpy.gradient of the noise-free filtered voltage at the simulation rate."""
    rate = np.gradient(truth, 1e3 / SIM_RATE)
    ms = int(1e-3 * SIM_RATE)
    largest, smallest = [], []
    for p in np.round(peak_s * SIM_RATE).astype(int):
        top = p - ms // 2 + int(np.argmax(truth[p - ms // 2:p + ms // 2]))
        largest.append(rate[top - ms:top + 1].max())
        smallest.append(rate[top:top + 3 * ms].min())
    return np.array(largest), np.array(smallest)


class TestRateExtremesOnModels:
    # the sampling rates and Bessel corners of the capability's range; 10 kHz behind 3 kHz is
    # the coarsest (the adapting cell's sharper rising phase loses up to 8 % there between samples
    # even noise-free, so it is held to the 10 % tolerance below, with noise)
    @pytest.mark.parametrize("model,rate_hz,bessel_hz", [
        ("hodgkin_huxley_1952", 10_000.0, 3_000.0), ("wang_buzsaki_1996", 10_000.0, 3_000.0),
        ("wang_buzsaki_1996", 20_000.0, 5_000.0), ("cortical_adapting", 20_000.0, 5_000.0),
        ("cortical_adapting", 50_000.0, 10_000.0), ("hodgkin_huxley_1952", 50_000.0, 10_000.0)])
    def test_noise_free_within_5_percent_of_the_filtered_truth(self, model, rate_hz, bessel_hz):
        voltage, rate, truth = _recorded(model, rate_hz, bessel_hz, 0.0)
        spikes = measure_trace(voltage, rate)
        assert len(spikes) >= 1
        largest, smallest = _true_rates(truth, spikes.peak_s)
        np.testing.assert_allclose(spikes.max_dvdt_v_per_s, largest, rtol=0.05)
        np.testing.assert_allclose(spikes.min_dvdt_v_per_s, smallest, rtol=0.05)

    @pytest.mark.parametrize("model,rate_hz,bessel_hz,noise_mv", [
        ("wang_buzsaki_1996", 50_000.0, 10_000.0, 0.3), ("cortical_adapting", 20_000.0,
                                                         5_000.0, 0.3),
        ("cortical_adapting", 10_000.0, 3_000.0, 0.1)])
    def test_with_noise_within_the_10_percent_target(self, model, rate_hz, bessel_hz,
                                                     noise_mv):
        voltage, rate, truth = _recorded(model, rate_hz, bessel_hz, noise_mv, seed=4)
        spikes = measure_trace(voltage, rate)
        largest, smallest = _true_rates(truth, spikes.peak_s)
        # tolerance: the capability's target for max and min dV/dt, 10 %
        np.testing.assert_allclose(spikes.max_dvdt_v_per_s, largest, rtol=0.10)
        np.testing.assert_allclose(spikes.min_dvdt_v_per_s, smallest, rtol=0.10)


class TestRateExtremesClosedForm:
    def test_gaussian_spike_at_10_khz_between_samples(self):
        # V = A exp(-t^2 / (2 s^2)): the largest slope is A / s * exp(-1/2) at t = -s
        amplitude, sd_ms, rate = 100.0, 0.3, 10_000.0
        for offset in (0.0, 0.25, 0.5):  # the peak at, a quarter and half between samples
            t_ms = (np.arange(400) - 200 + offset) * 1e3 / rate
            v = -70.0 + amplitude * np.exp(-t_ms ** 2 / (2 * sd_ms ** 2))
            spikes = measure_trace(v, rate)
            expected = amplitude / sd_ms * np.exp(-0.5)
            assert spikes.max_dvdt_v_per_s[0] == pytest.approx(expected, rel=0.01)
            assert spikes.min_dvdt_v_per_s[0] == pytest.approx(-expected, rel=0.01)


class TestNoiseBefore:
    def test_white_noise_sd_on_a_slow_ramp(self):
        # SD of white noise (numpy's normal generator) survives a slow ramp beneath it
        rng = np.random.default_rng(1)
        v = np.linspace(-70, -60, 20_000) + rng.standard_normal(20_000) * 0.4
        positions = np.arange(200, 20_000, 200).astype(float)
        found = noise_before(v, positions)
        assert np.median(found) == pytest.approx(0.4, rel=0.05)

    def test_span_before_the_trace_start_is_nan(self):
        assert np.isnan(noise_before(np.zeros(100), np.array([10.0]))[0])
        assert np.isnan(noise_before(np.zeros(100), np.array([np.nan]))[0])


def _true_onsets(truth: np.ndarray, peak_s: np.ndarray, onset_rate: float = 20.0):
    """Per spike: the time (s) and voltage of the last upward crossing of `onset_rate` V/s
    before the largest dV/dt, and the time of the peak (a parabola through the three largest
    samples), from numpy.gradient of the noise-free filtered voltage at the simulation rate."""
    rate = np.gradient(truth, 1e3 / SIM_RATE)
    ms = int(1e-3 * SIM_RATE)
    onset_s, onset_mv, top_s = [], [], []
    for p in np.round(peak_s * SIM_RATE).astype(int):
        top = p - ms // 2 + int(np.argmax(truth[p - ms // 2:p + ms // 2]))
        steepest = top - ms + int(np.argmax(rate[top - ms:top + 1]))
        j = steepest - 3 * ms + int(np.flatnonzero(rate[steepest - 3 * ms:steepest]
                                                   < onset_rate)[-1])
        frac = j + (onset_rate - rate[j]) / (rate[j + 1] - rate[j])
        onset_s.append(frac / SIM_RATE)
        onset_mv.append(np.interp(frac, np.arange(truth.size), truth))
        a, b, c = truth[top - 1:top + 2]
        top_s.append((top + 0.5 * (a - c) / (a - 2 * b + c)) / SIM_RATE)
    return np.array(onset_s), np.array(onset_mv), np.array(top_s)


class TestThresholdAndRiseTime:
    @pytest.mark.parametrize("model,rate_hz,bessel_hz", [
        ("hodgkin_huxley_1952", 20_000.0, 5_000.0), ("wang_buzsaki_1996", 50_000.0, 10_000.0),
        ("cortical_adapting", 20_000.0, 5_000.0), ("cortical_adapting", 50_000.0, 10_000.0),
        ("wang_buzsaki_1996", 10_000.0, 3_000.0), ("cortical_adapting", 10_000.0, 3_000.0)])
    def test_noise_free_rise_time_and_threshold(self, model, rate_hz, bessel_hz):
        voltage, rate, truth = _recorded(model, rate_hz, bessel_hz, 0.0)
        spikes = measure_trace(voltage, rate)
        onset_s, onset_mv, top_s = _true_onsets(truth, spikes.peak_s)
        # rise time: the capability's tolerance, 0.03 ms (the 0.3 ms window alone read up to
        # 0.03 ms long here); threshold: 0.2 mV (0.3 mV at 10 kHz, where a sample spans 2 mV
        # of the onset), inside the 1.5 mV target
        np.testing.assert_allclose(spikes.rise_time_ms, (top_s - onset_s) * 1e3, atol=0.03)
        np.testing.assert_allclose(spikes.threshold_mv, onset_mv,
                                   atol=0.3 if rate_hz < 20_000.0 else 0.2)

    @pytest.mark.parametrize("sigma_ms", [0.15, 0.25, 0.4])
    @pytest.mark.parametrize("rate_hz", [10_000.0, 20_000.0, 50_000.0])
    def test_gaussian_onset_crossing_without_smoothing_bias(self, sigma_ms, rate_hz):
        # The 20 V/s crossing of a Gaussian spike by the Lambert W closed form
        # (conftest.GaussianSpike), the spike at seven places between samples. The fitted
        # rate of an accelerating rise reads high, so its crossing came early: by up to
        # 0.041 ms at 10 kHz and 0.011 ms at 20 kHz for sigma 0.15 ms, the voltage 0.37 mV low,
        # before the crossing was moved by the smoothing bias of an exponentially growing rate
        # and placed between samples on such a rate.
        spike = GaussianSpike(sigma_ms=sigma_ms)
        u = spike.u_at_rate(20.0)
        for offset in np.linspace(0.0, 0.9, 7):
            t, v = sampled(spike, rate_hz, offset_fraction=offset)
            m = measure_trace(v, rate_hz)
            assert m.threshold_s[0] * 1e3 + t[0] == pytest.approx(spike.time_at_u(u),
                                                                 abs=0.006)
            assert m.threshold_mv[0] == pytest.approx(spike.voltage_at_u(u), abs=0.15)

    def test_with_noise_within_the_targets(self):
        voltage, rate, truth = _recorded("wang_buzsaki_1996", 20_000.0, 5_000.0, 0.3, seed=2)
        spikes = measure_trace(voltage, rate)
        onset_s, onset_mv, top_s = _true_onsets(truth, spikes.peak_s)
        # the capability's targets: threshold 1.5 mV, rise time max(0.03 ms, 10 %)
        np.testing.assert_allclose(spikes.threshold_mv, onset_mv, atol=1.5)
        true_rise = (top_s - onset_s) * 1e3
        assert np.all(np.abs(spikes.rise_time_ms - true_rise)
                      <= np.maximum(0.03, 0.1 * true_rise))


def _copies(model: str, rate_hz: float, bessel_hz: float, noise_mv: float, copies: int,
            seed: int = 5):
    """One step (the published model behind a 4-pole Bessel filter), noise-free at the
    simulation rate, and `copies` recordings of it: decimated, with independent white noise
    from numpy's normal generator (the last two steps of record_commands)."""
    cmd = np.zeros(int(0.045 * SIM_RATE))
    cmd[int(0.005 * SIM_RATE):int(0.04 * SIM_RATE)] = MODELS[model]
    truth = record_commands(model, cmd, simulation_rate_hz=SIM_RATE, decimation=1,
                            bessel_hz=bessel_hz).voltage_mv[0]
    rng = np.random.default_rng(seed)
    clean = truth[::int(SIM_RATE // rate_hz)]
    return truth, [clean + noise_mv * rng.standard_normal(clean.size) for _ in range(copies)]


def _matched(truth: np.ndarray, recordings: list[np.ndarray], rate_hz: float, field: str):
    """Each measured spike's `field` beside the reference value of the true spike whose peak
    lies within 1 ms (spikemeasure.testing.reference on the noise-free trace at the
    simulation rate: a plain implementation of the definitions, sharing no code)."""
    true = reference_spikes(truth, SIM_RATE)
    measured, expected = [], []
    for v in recordings:
        spikes = measure_trace(v, rate_hz)
        for k, peak_s in enumerate(spikes.peak_s):
            j = int(np.argmin(np.abs(true.peak_s - peak_s)))
            assert abs(true.peak_s[j] - peak_s) < 1e-3  # no spike extra
            measured.append(getattr(spikes, field)[k])
            expected.append(getattr(true, field)[j])
        assert len(spikes) == true.peak_s.size  # no spike missed
    return np.array(measured), np.array(expected)


class TestExtremesAgainstTheNoiseFreeTruth:
    def test_min_rate_with_the_most_noise_at_10_khz(self):
        # the slow fall of the Hodgkin-Huxley cell at 10 kHz behind 3 kHz with 0.5 mV of
        # noise: every spike within the 10 % target, and no outward bias (the minimum of a
        # noisy spline derivative read 11 % too steep in median here, up to 31 %); what is
        # left is the fit window's flattening, a few % at most
        truth, recordings = _copies("hodgkin_huxley_1952", 10_000.0, 3_000.0, 0.5, 24)
        measured, expected = _matched(truth, recordings, 10_000.0, "min_dvdt_v_per_s")
        assert measured.size >= 20
        relative = measured / expected - 1.0
        assert np.all(np.abs(relative) <= 0.10)
        assert -0.05 <= np.median(relative) <= 0.02

    def test_peak_with_the_most_noise_at_50_khz(self):
        # 50 kHz behind 10 kHz with 0.5 mV of noise: every peak within the 1 mV target, and
        # the median error within 0.15 mV (the largest value of a spline through the noisy
        # samples read 0.27 mV high in median here)
        truth, recordings = _copies("wang_buzsaki_1996", 50_000.0, 10_000.0, 0.5, 12)
        measured, expected = _matched(truth, recordings, 50_000.0, "peak_mv")
        assert measured.size >= 20
        assert np.all(np.abs(measured - expected) <= 1.0)
        assert abs(np.median(measured - expected)) <= 0.15

    def test_trough_with_the_most_noise_at_50_khz(self):
        # the trough, a local quartic fit's minimum: within the 1 mV target on every spike,
        # and within 0.2 mV in median (the smoothed trace's minimum read up to 0.4 mV low)
        truth, recordings = _copies("wang_buzsaki_1996", 50_000.0, 10_000.0, 0.5, 12)
        measured, expected = _matched(truth, recordings, 50_000.0, "trough_mv")
        assert np.all(np.abs(measured - expected) <= 1.0)
        assert abs(np.median(measured - expected)) <= 0.2

    @pytest.mark.parametrize("model", ["wang_buzsaki_1996", "cortical_adapting"])
    def test_trough_with_the_most_noise_at_10_khz(self, model):
        # 10 kHz behind 3 kHz with 0.5 mV of noise, where the 0.3 ms smoothing window is 3
        # samples and smooths nothing: every trough within the 1 mV target and the median
        # within 0.4 mV (the lowest sample, refined by a parabola, read 0.72-0.83 mV low in
        # median here; what is left is the fit's minimum, still chosen among noisy values
        # over a broad trough)
        truth, recordings = _copies(model, 10_000.0, 3_000.0, 0.5, 12)
        measured, expected = _matched(truth, recordings, 10_000.0, "trough_mv")
        assert measured.size >= 12
        assert np.all(np.abs(measured - expected) <= 1.0)
        assert abs(np.median(measured - expected)) <= 0.4

    def test_threshold_with_the_most_noise_at_10_khz(self):
        # 10 kHz behind 3 kHz with 0.5 mV of noise: every threshold within the 1.5 mV
        # target, scattered by at most 0.42 mV (SD) over twelve noise draws; the onset
        # window no longer than the 0.3 ms smoothing window (3 samples here) scattered by
        # 0.46 mV
        truth, recordings = _copies("cortical_adapting", 10_000.0, 3_000.0, 0.5, 12)
        measured, expected = _matched(truth, recordings, 10_000.0, "threshold_mv")
        assert measured.size >= 12
        assert np.all(np.abs(measured - expected) <= 1.5)
        assert np.std(measured - expected) <= 0.42
