"""Spike measurements against closed forms, scipy, and the round numbers of common practice."""
import numpy as np
import pytest
from scipy.signal import peak_widths

from conftest import GaussianSpike, gaussian_train, sampled, textbook_trace
from spikemeasure.analysis.detection import DetectionSettings, detect_spikes, smoothed_trace
from spikemeasure.errors import InvalidSettingError
from spikemeasure.analysis.spike_features import half_widths, interpolated_peaks
from spikemeasure.analysis.spikes import measure_trace
from spikemeasure.analysis.sweeps import CurrentStep

RATES = [10_000.0, 20_000.0, 50_000.0, 100_000.0]


class TestAnalyticGaussianSpike:
    """Source: closed forms of a Gaussian waveform (derivations in conftest.GaussianSpike)."""

    @pytest.mark.parametrize("rate", RATES)
    def test_threshold_peak_half_width_within_one_percent(self, gaussian_spike, rate):
        t, v = sampled(gaussian_spike, rate)
        m = measure_trace(v, rate)
        assert len(m) == 1
        u = gaussian_spike.u_at_rate(20.0)
        thr_ms = gaussian_spike.time_at_u(u)
        thr_mv = gaussian_spike.voltage_at_u(u)
        dt_ms = 1e3 / rate
        # threshold time: within one sample interval or 1 % of the closed-form rise time,
        # whichever is larger (smoothing and interpolation error); voltage within 1 % of the
        # amplitude
        rise_ms = gaussian_spike.peak_ms - thr_ms
        assert abs(m.threshold_s[0] * 1e3 + t[0] - thr_ms) < max(dt_ms, 0.01 * rise_ms)
        assert abs(m.threshold_mv[0] - thr_mv) < 0.01 * gaussian_spike.amplitude_mv
        peak = gaussian_spike.base_mv + gaussian_spike.amplitude_mv
        assert m.peak_mv[0] == pytest.approx(peak, rel=0.01)
        assert m.peak_s[0] * 1e3 + t[0] == pytest.approx(gaussian_spike.peak_ms, abs=dt_ms / 2)
        expected_width = gaussian_spike.half_width_ms(m.threshold_mv[0])
        assert m.half_width_ms[0] == pytest.approx(expected_width, rel=0.01)
        assert m.amplitude_mv[0] == pytest.approx(m.peak_mv[0] - m.threshold_mv[0])
        assert m.rise_time_ms[0] == pytest.approx((m.peak_s[0] - m.threshold_s[0]) * 1e3)

    @pytest.mark.parametrize("rate", [20_000.0, 50_000.0, 100_000.0])
    def test_max_and_min_rate(self, gaussian_spike, rate):
        t, v = sampled(gaussian_spike, rate)
        m = measure_trace(v, rate)
        # closed form: +-A/sigma*exp(-1/2); Savitzky-Golay bias below 1 % at these rates
        assert m.max_dvdt_v_per_s[0] == pytest.approx(gaussian_spike.max_rate(), rel=0.01)
        assert m.min_dvdt_v_per_s[0] == pytest.approx(-gaussian_spike.max_rate(), rel=0.01)

    def test_peak_between_samples_at_10_khz(self):
        # A 0.15 ms wide spike sampled at 10 kHz: the largest sample misses the peak by up to
        # 5 mV; the interpolated peak must come within 1 % of the amplitude of the closed form.
        spike = GaussianSpike(sigma_ms=0.15)
        t, v = sampled(spike, 10_000.0, offset_fraction=0.5)
        true_peak = spike.base_mv + spike.amplitude_mv
        assert true_peak - v.max() > 1.0
        idx, value, edge = interpolated_peaks(v, np.array([int(np.argmax(v))]))
        assert value[0] == pytest.approx(true_peak, abs=0.01 * spike.amplitude_mv)
        assert not edge[0]

    @pytest.mark.parametrize("rate", [20_000.0, 50_000.0])
    def test_max_rate_fraction_threshold(self, gaussian_spike, rate):
        t, v = sampled(gaussian_spike, rate)
        s = DetectionSettings(threshold_method="max_rate_fraction", threshold_fraction=0.1)
        m = measure_trace(v, rate, s)
        u = gaussian_spike.u_at_fraction_of_max_rate(0.1)
        assert m.threshold_s[0] * 1e3 + t[0] == pytest.approx(gaussian_spike.time_at_u(u),
                                                              abs=1e3 / rate)
        assert m.threshold_mv[0] == pytest.approx(gaussian_spike.voltage_at_u(u), abs=0.5)

    @pytest.mark.parametrize("rate", [20_000.0, 50_000.0])
    def test_second_derivative_peak_threshold(self, gaussian_spike, rate):
        t, v = sampled(gaussian_spike, rate)
        m = measure_trace(v, rate, DetectionSettings(threshold_method="second_derivative_peak"))
        u = np.sqrt(3.0)  # closed form: d2V/dt2 of a Gaussian peaks at u = sqrt(3)
        assert m.threshold_s[0] * 1e3 + t[0] == pytest.approx(gaussian_spike.time_at_u(u),
                                                              abs=1e3 / rate)
        assert m.threshold_mv[0] == pytest.approx(gaussian_spike.voltage_at_u(u), abs=1.0)


class TestHalfWidthCrossings:
    """Source: closed form of a Gaussian waveform: the level L above base is crossed at
    peak -+ sigma sqrt(2 ln(A / L)), half the closed-form half-width either side of the peak
    (conftest.GaussianSpike)."""

    @pytest.mark.parametrize("rate", RATES)
    def test_crossings_at_the_closed_form_times(self, gaussian_spike, rate):
        t, v = sampled(gaussian_spike, rate)
        m = measure_trace(v, rate)
        half_ms = gaussian_spike.half_width_ms(m.threshold_mv[0]) / 2
        start_ms = m.half_width_start_s[0] * 1e3 + t[0]
        end_ms = m.half_width_end_s[0] * 1e3 + t[0]
        # linear interpolation between samples: within 1 % of the half-width
        assert start_ms == pytest.approx(gaussian_spike.peak_ms - half_ms, abs=0.02 * half_ms)
        assert end_ms == pytest.approx(gaussian_spike.peak_ms + half_ms, abs=0.02 * half_ms)
        assert (end_ms - start_ms) == pytest.approx(m.half_width_ms[0], rel=1e-9)

    def test_no_crossings_without_a_width(self):
        spike = GaussianSpike(sigma_ms=0.4, peak_ms=19.0)  # the trace ends before repolarizing
        t, v = sampled(spike, 20_000.0, duration_ms=19.3)
        m = measure_trace(v, 20_000.0)
        assert np.isnan(m.half_width_ms[0])
        assert np.isnan(m.half_width_start_s[0]) and np.isnan(m.half_width_end_s[0])


class TestShifted:
    """Source: the same spike later in a trace (the trace with a flat baseline in front) has
    every time later by the baseline's duration and every other value unchanged."""

    def test_time_fields_are_the_fields_in_seconds(self):
        from spikemeasure.analysis.spikes import TIME_FIELDS

        # the times from the sweep's start, by the unit suffix of the field names
        assert set(TIME_FIELDS) == {"threshold_s", "peak_s", "trough_s", "half_width_start_s",
                                    "half_width_end_s"}

    def test_shift_matches_a_later_spike(self, gaussian_spike):
        from dataclasses import fields

        from spikemeasure.analysis.spikes import TIME_FIELDS, SpikeMeasurements

        rate, pad = 20_000.0, 1000
        t, v = sampled(gaussian_spike, rate)
        early = measure_trace(v, rate)
        late = measure_trace(np.concatenate([np.full(pad, v[0]), v]), rate)
        shifted = early.shifted(pad / rate)
        for f in fields(SpikeMeasurements):
            if f.name == "flags":
                assert shifted.flags == late.flags
                continue
            np.testing.assert_allclose(getattr(shifted, f.name), getattr(late, f.name),
                                       rtol=1e-9, atol=1e-9, err_msg=f.name)
            if f.name not in TIME_FIELDS:
                np.testing.assert_array_equal(getattr(shifted, f.name), getattr(early, f.name))

    def test_offset_must_be_finite(self, gaussian_spike):
        t, v = sampled(gaussian_spike, 20_000.0)
        with pytest.raises(InvalidSettingError, match="`offset_s`"):
            measure_trace(v, 20_000.0).shifted(float("nan"))


class TestHalfWidthAgainstScipy:
    """Source: scipy.signal.peak_widths, which interpolates crossings linearly as we do."""

    @pytest.mark.parametrize("rate", RATES)
    @pytest.mark.parametrize("sigma", [0.2, 0.5])
    def test_same_level_same_width(self, rate, sigma):
        spike = GaussianSpike(sigma_ms=sigma, base_mv=-60.0, amplitude_mv=90.0)
        t, v = sampled(spike, rate)
        p = int(np.argmax(v))
        threshold_mv = -50.0
        level = threshold_mv + (v[p] - threshold_mv) / 2
        # peak_widths measures at x[peak] - prominence * rel_height: give it our level
        prominence = 2 * (v[p] - level)
        ref = peak_widths(v, [p], rel_height=0.5,
                          prominence_data=(np.array([prominence]), np.array([0]),
                                           np.array([v.size - 1])))
        width, up, down, _ = half_widths(v, rate, np.array([0.0]), np.array([threshold_mv]),
                                         np.array([p]), np.array([v[p]]), np.array([v.size]))
        assert width[0] == pytest.approx(ref[0][0] / rate * 1e3, rel=1e-9)
        assert up[0] == pytest.approx(ref[2][0], rel=1e-9)
        assert down[0] == pytest.approx(ref[3][0], rel=1e-9)


class TestTextbookSpike:
    """Source: the round figures of common practice (rest -70 mV, threshold -55 mV,
    peak +30 mV, AHP to -90 mV), built into a smooth trace (conftest.textbook_trace)."""

    @pytest.mark.parametrize("rate", [20_000.0, 50_000.0])
    def test_threshold_peak_and_ahp(self, rate):
        v, answer = textbook_trace(rate)
        m = measure_trace(v, rate)
        assert len(m) == 1
        assert m.threshold_mv[0] == pytest.approx(answer["threshold_mv"], abs=0.1)
        assert m.peak_mv[0] == pytest.approx(answer["peak_mv"], abs=0.05)
        assert m.trough_mv[0] == pytest.approx(answer["trough_mv"], abs=0.05)
        assert m.ahp_depth_mv[0] == pytest.approx(answer["ahp_depth_mv"], abs=0.15)
        assert m.flags[0] == ()


class TestTrainsAndTroughs:
    """Source: a train of Gaussians with known peak times (closed-form intervals)."""

    def test_isi_and_counts(self):
        rate = 20_000.0
        peaks = [20.0, 45.0, 75.0, 110.0]
        t, v = gaussian_train(rate, peaks, 150.0)
        m = measure_trace(v, rate)
        assert len(m) == 4
        assert np.isnan(m.isi_ms[0])
        # equal shapes: threshold-to-threshold intervals equal peak-to-peak ones
        np.testing.assert_allclose(m.isi_ms[1:], np.diff(peaks), atol=1e3 / rate)
        np.testing.assert_allclose(m.peak_s * 1e3, peaks, atol=0.5e3 / rate)

    def test_last_spike_trough_stops_at_step_end(self):
        rate = 20_000.0
        t, v = gaussian_train(rate, [20.0], 100.0)
        v = v.copy()
        # a smooth 10 mV dip after the step ends must not count as the AHP
        v -= 5.0 * (1 + np.tanh((t - 70.0) / 2.0))
        inside = measure_trace(v, rate, step=CurrentStep(onset_s=0.01, offset_s=0.05))
        assert inside.trough_s[0] <= 0.05  # the search span ends at the step's end
        assert inside.trough_mv[0] > -66.0
        whole = measure_trace(v, rate)
        assert whole.trough_mv[0] == pytest.approx(-75.0, abs=0.01)

    @pytest.mark.parametrize("offset_ms", [40.0, 40.02, 40.05])
    def test_trough_of_a_voltage_still_falling_at_step_end(self, offset_ms):
        # A spike followed by a linear fall of 1 mV/ms from 25 ms on; the step ends on a
        # sample or between two. The lowest voltage of the span is the ramp's value at the
        # step's end (closed form: base - (offset - 25) mV), not its last sample before.
        rate = 10_000.0
        t, v = gaussian_train(rate, [20.0], 60.0)
        v = v - np.clip(t - 25.0, 0.0, None)
        m = measure_trace(v, rate, step=CurrentStep(onset_s=0.01, offset_s=offset_ms / 1e3))
        base = GaussianSpike().base_mv
        assert m.trough_mv[0] == pytest.approx(base - (offset_ms - 25.0), abs=1e-6)
        assert m.trough_s[0] == pytest.approx(offset_ms / 1e3, abs=1e-9)


class TestFlags:
    def test_trace_ends_before_repolarization(self):
        rate = 20_000.0
        spike = GaussianSpike(peak_ms=10.0)
        # ends 0.3 ms after the peak, still above half amplitude (closed form: 100 exp(-u^2/2)
        # with u = 0.75 gives +10.5 mV, above the -13.5 mV half level)
        t = np.arange(0.0, 10.3, 1e3 / rate)
        m = measure_trace(spike.voltage(t), rate)
        assert len(m) == 1
        assert "no_repolarization" in m.flags[0]
        assert np.isnan(m.half_width_ms[0]) and np.isnan(m.trough_mv[0])
        assert np.isnan(m.ahp_depth_mv[0]) and np.isnan(m.min_dvdt_v_per_s[0])
        assert np.isfinite(m.peak_mv[0]) and np.isfinite(m.threshold_mv[0])

    def test_too_few_samples_across_spike(self):
        # a 0.1 ms sigma spike at 10 kHz: ~2 samples above half amplitude
        spike = GaussianSpike(sigma_ms=0.1)
        t, v = sampled(spike, 10_000.0, offset_fraction=0.5)
        m = measure_trace(v, 10_000.0)
        assert len(m) == 1
        assert "too_few_samples_across_spike" in m.flags[0]
        assert np.isnan(m.half_width_ms[0])
        relaxed = measure_trace(v, 10_000.0, DetectionSettings(min_samples_across_width=1))
        assert np.isfinite(relaxed.half_width_ms[0])

    def test_no_spikes_gives_empty_arrays(self):
        m = measure_trace(np.full(1000, -70.0), 20_000.0)
        assert len(m) == 0
        assert m.threshold_mv.shape == (0,) and m.flags == ()

    def test_rejects_nan(self):
        v = np.full(1000, -70.0)
        v[10] = np.nan
        with pytest.raises(InvalidSettingError, match="NaN"):
            measure_trace(v, 20_000.0)


def test_smoothing_is_zero_phase():
    """Source: a Savitzky-Golay filter is exact for polynomials up to its order
    (Savitzky & Golay 1964), so the derivative of a quadratic is exact and unshifted."""
    rate = 20_000.0
    t_ms = np.arange(2000) / rate * 1e3
    v = 3.0 * t_ms ** 2 - 2.0 * t_ms - 60.0
    tr = smoothed_trace(v, rate, 0.3, second_derivative=True)
    np.testing.assert_allclose(tr.dvdt_v_per_s, 6.0 * t_ms - 2.0, atol=1e-6)
    np.testing.assert_allclose(tr.d2vdt2_v_per_s2, 6.0e3, rtol=1e-6)
    np.testing.assert_allclose(tr.smooth_mv, v, atol=1e-8)


def test_detected_indices_are_aligned(gaussian_spike):
    t, v = sampled(gaussian_spike, 20_000.0)
    tr = smoothed_trace(v, 20_000.0)
    d = detect_spikes(tr)
    assert d.onset_index.shape == d.peak_sample.shape == (1,)
    assert tr.dvdt_v_per_s[d.onset_index[0]] >= 20.0 > tr.dvdt_v_per_s[d.onset_index[0] - 1]


def test_spike_at_step_end_keeps_its_width():
    """A spike peaking 0.2 ms before the step ends repolarizes after it: the half-width is
    still measured (closed form of conftest.GaussianSpike) and the trough is searched on."""
    rate = 50_000.0
    spike = GaussianSpike(peak_ms=30.0)
    t = np.arange(0.0, 60.0, 1e3 / rate)
    m = measure_trace(spike.voltage(t), rate, step=CurrentStep(onset_s=0.01, offset_s=0.0302))
    assert m.half_width_ms[0] == pytest.approx(spike.half_width_ms(m.threshold_mv[0]), rel=0.01)
    assert "trough_after_step_end" in m.flags[0]
    assert m.trough_mv[0] == pytest.approx(spike.base_mv, abs=0.01)


class TestClippedPeaks:
    """Source: the closed form of a Gaussian spike: a spike clipped at level c holds c for
    every sample with |t - tp| < sigma sqrt(2 ln(A / (c - base))), so the length of the
    plateau is known before measuring."""

    @pytest.mark.parametrize("clip_mv", [0.0, 20.0])
    def test_clipped_gaussian_is_flagged_with_its_plateau(self, clip_mv):
        from spikemeasure.analysis.spike_features import flat_peak_runs

        spike = GaussianSpike()
        rate = 20_000.0
        t, v = sampled(spike, rate, duration_ms=20.0)
        half = spike.sigma_ms * np.sqrt(2 * np.log(spike.amplitude_mv / (clip_mv - spike.base_mv)))
        expected_run = int(np.sum(np.abs(t - spike.peak_ms) < half))
        assert expected_run >= 3
        clipped = np.minimum(v, clip_mv)
        m = measure_trace(clipped, rate)
        assert len(m) == 1 and "clipped_peak" in m.flags[0]
        peak_sample = np.array([int(np.argmax(clipped))])
        assert flat_peak_runs(clipped, peak_sample)[0] == expected_run

    @pytest.mark.parametrize("rate", RATES)
    def test_unclipped_gaussian_is_not_flagged(self, gaussian_spike, rate):
        _, v = sampled(gaussian_spike, rate)
        m = measure_trace(v, rate)
        assert len(m) == 1 and "clipped_peak" not in m.flags[0]

    def test_two_equal_samples_straddling_a_peak_are_not_clipping(self, gaussian_spike):
        """A grid placed symmetrically about the peak gives two equal largest samples: a run
        of 2, below the CLIPPED_RUN_SAMPLES of 3."""
        from spikemeasure.analysis.spikes import CLIPPED_RUN_SAMPLES

        rate = 20_000.0
        dt_ms = 1e3 / rate
        offsets_ms = (np.arange(-200, 200) + 0.5) * dt_ms   # exact negatives of each other
        s = gaussian_spike
        v = s.base_mv + s.amplitude_mv * np.exp(-offsets_ms ** 2 / (2 * s.sigma_ms ** 2))
        assert np.sum(v == v.max()) == 2
        m = measure_trace(v, rate)
        assert CLIPPED_RUN_SAMPLES == 3 and "clipped_peak" not in m.flags[0]


class TestMissingSamples:
    """Source: the noise-free Hodgkin-Huxley (1952) simulation of a 100 pA step, measured
    without the gap. The same samples with a stretch set to NaN or infinity must give, spike by
    spike, the same values wherever a value's windows stay clear of the gap, and NaN with the
    flag ``touches_gap`` where they do not; spikes inside the gap are not seen."""

    RATE = 20_000.0
    FIELDS = ("threshold_s", "threshold_mv", "peak_s", "peak_mv", "amplitude_mv",
              "half_width_ms", "rise_time_ms", "max_dvdt_v_per_s", "min_dvdt_v_per_s",
              "trough_s", "trough_mv", "ahp_depth_mv", "isi_ms")

    @pytest.fixture(scope="class")
    def clean(self):
        from spikemeasure.testing import simulate_current_steps

        sim = simulate_current_steps("hodgkin_huxley_1952", [100.0], sampling_rate_hz=self.RATE,
                                     duration_s=0.5, step_start_s=0.05, step_end_s=0.45)
        v = sim.voltage_mv[0]
        return v, measure_trace(v, self.RATE)

    @pytest.mark.parametrize("start, stop, value", [
        (3000, 3100, np.nan),      # 5 ms in the middle, over a spike
        (3000, 3001, np.nan),      # one sample
        (0, 500, np.nan),          # the very start
        (9500, 10000, np.nan),     # the very end
        (1930, 1931, np.nan),      # one sample at a spike's peak
        (2210, 2250, np.inf),      # infinite samples, between spikes
        (4400, 4420, -np.inf),
    ])
    def test_values_clear_of_the_gap_are_unchanged(self, clean, start, stop, value):
        from spikemeasure.analysis.spikes_in_parts import GAP_FLAG, measure_around_gaps

        v, ref = clean
        assert len(ref) > 20 and not any(ref.flags)
        broken = v.copy()
        broken[start:stop] = value
        got = measure_around_gaps(broken, self.RATE)
        gap_s = (start / self.RATE, stop / self.RATE)
        hidden = (ref.peak_s >= gap_s[0]) & (ref.peak_s < gap_s[1])
        assert len(got) == len(ref) - hidden.sum()
        for k in range(len(got)):
            t = got.threshold_s[k] if np.isfinite(got.threshold_s[k]) else got.peak_s[k]
            j = int(np.argmin(np.abs(np.where(np.isfinite(got.threshold_s[k]), ref.threshold_s,
                                              ref.peak_s) - t)))
            lost = []
            for name in self.FIELDS:
                a, b = getattr(got, name)[k], getattr(ref, name)[j]
                if np.isnan(a):
                    if not np.isnan(b):
                        lost.append(name)
                else:
                    assert a == pytest.approx(b, rel=1e-9, abs=1e-9), (k, name)
            assert (GAP_FLAG in got.flags[k]) == bool(lost), (k, lost)
            # a spike whose peak is 30 ms (two intervals) or more from the gap loses nothing
            if min(abs(ref.peak_s[j] - gap_s[0]), abs(ref.peak_s[j] - gap_s[1])) > 0.030:
                assert not lost and got.flags[k] == (), k

    def test_a_one_sample_gap_beside_the_peak_costs_the_peak_not_the_threshold(self, clean):
        from spikemeasure.analysis.spikes_in_parts import GAP_FLAG, measure_around_gaps

        v, ref = clean
        k = 3
        p = int(round(ref.peak_s[k] * self.RATE))
        broken = v.copy()
        broken[p + 3] = np.nan           # within the peak spline's 3 samples either side
        got = measure_around_gaps(broken, self.RATE)
        assert len(got) == len(ref)
        assert got.threshold_mv[k] == pytest.approx(ref.threshold_mv[k], abs=1e-9)
        assert np.isnan(got.peak_mv[k]) and np.isnan(got.half_width_ms[k])
        assert GAP_FLAG in got.flags[k]
        assert np.isnan(got.isi_ms[k + 1]) and GAP_FLAG in got.flags[k + 1]
        # at the peak sample itself the spike has no peak left: it is not seen at all
        broken = v.copy()
        broken[p] = np.nan
        assert len(measure_around_gaps(broken, self.RATE)) == len(ref) - 1

    def test_without_gaps_the_same_as_measure_trace(self, clean):
        from spikemeasure.analysis.spikes_in_parts import measure_around_gaps

        v, ref = clean
        got = measure_around_gaps(v, self.RATE)
        for name in self.FIELDS:
            np.testing.assert_array_equal(getattr(got, name), getattr(ref, name))


@pytest.mark.parametrize("method", ["max_rate_fraction", "second_derivative_peak"])
def test_gap_rules_hold_for_every_threshold_method(method):
    """Source: the noise-free Hodgkin-Huxley (1952) train measured without the gap, as in
    TestMissingSamples, with the threshold searches that reach back from the onset: a gap
    shortly before a spike's onset cuts that search, so its threshold is empty, never
    different."""
    from spikemeasure.analysis.spikes_in_parts import GAP_FLAG, measure_around_gaps
    from spikemeasure.testing import simulate_current_steps

    rate = 20_000.0
    settings = DetectionSettings(threshold_method=method)
    v = simulate_current_steps("hodgkin_huxley_1952", [100.0], sampling_rate_hz=rate,
                               duration_s=0.3, step_start_s=0.05, step_end_s=0.25).voltage_mv[0]
    ref = measure_trace(v, rate, settings)
    k = 4
    onset = int(np.floor(ref.threshold_s[k] * rate))
    broken = v.copy()
    broken[onset - 40:onset - 35] = np.nan        # 2 ms before the threshold
    got = measure_around_gaps(broken, rate, settings)
    assert len(got) == len(ref)
    for j in range(len(got)):
        for name in ("threshold_mv", "peak_mv", "half_width_ms", "trough_mv"):
            a, b = getattr(got, name)[j], getattr(ref, name)[j]
            assert np.isnan(a) or a == pytest.approx(b, abs=1e-9), (j, name)
    assert np.isnan(got.threshold_mv[k]) and GAP_FLAG in got.flags[k]
    assert got.peak_mv[k] == pytest.approx(ref.peak_mv[k], abs=1e-9)
