"""Sweep features against closed forms and hand computations on noise-free traces."""
import numpy as np
import pytest

from spikemeasure.errors import InvalidSettingError
from spikemeasure.analysis.sweep_features import adaptation_index, firing, passive_response, sweep_features
from spikemeasure.analysis.sweeps import CurrentStep

RATE = 20_000.0


def sag_trace(rate=RATE, base=-70.0, drop=12.0, recover=4.0, tau_fast_ms=15.0,
              tau_slow_ms=80.0):
    """A hyperpolarizing response with an Ih-like sag: during the step (0.1-0.6 s)
    V = base - drop (1 - exp(-t/tau_fast)) + recover (1 - exp(-t/tau_slow))."""
    t = np.arange(int(0.8 * rate)) / rate
    v = np.full(t.size, base)
    inside = (t >= 0.1) & (t < 0.6)
    s_ms = (t[inside] - 0.1) * 1e3
    v[inside] += -drop * (1 - np.exp(-s_ms / tau_fast_ms)) + recover * (1 - np.exp(-s_ms / tau_slow_ms))
    return v


class TestPassiveResponse:
    def test_sag_against_hand_computation(self):
        """Source: the noise-free trace itself: steady state = mean of the last 100 ms, minimum
        = its smallest sample, sag = (steady - min) / (baseline - min), computed with numpy."""
        v = sag_trace()
        step = CurrentStep(0.1, 0.6, -100.0, 0.0)
        got = passive_response(v, RATE, step, baseline_mv=-70.0)
        steady, lowest, sag = got.steady_state_mv, got.min_mv, got.sag_fraction
        inside = v[int(0.1 * RATE):int(0.6 * RATE)]
        hand_steady = inside[-int(0.1 * RATE):].mean()
        hand_min = inside.min()
        hand_sag = (hand_steady - hand_min) / (-70.0 - hand_min)
        assert steady == pytest.approx(hand_steady, abs=1e-9)
        assert lowest == pytest.approx(hand_min, abs=0.01)
        assert sag == pytest.approx(hand_sag, rel=0.01)
        assert 0.1 < sag < 0.5

    def test_noise_does_not_pull_the_minimum_down(self):
        v = sag_trace() + np.random.default_rng(2).normal(0, 0.3, int(0.8 * RATE))
        clean = passive_response(sag_trace(), RATE, CurrentStep(0.1, 0.6, -100.0), -70.0)
        noisy = passive_response(v, RATE, CurrentStep(0.1, 0.6, -100.0), -70.0)
        assert noisy.min_mv == pytest.approx(clean.min_mv, abs=0.15)
        assert noisy.sag_fraction == pytest.approx(clean.sag_fraction, abs=0.02)

    def test_minimum_is_that_of_the_one_ms_average(self):
        """Source: the noise-free trace's 1 ms moving average (numpy convolution), whose
        minimum min_mv is; the trough smoothing's wider average alone would lie c w^2 / 12
        above it (c the trough's curvature)."""
        v = sag_trace()
        got = passive_response(v, RATE, CurrentStep(0.1, 0.6, -100.0), -70.0)
        inside = v[int(0.1 * RATE):int(0.6 * RATE)]
        width = int(round(1e-3 * RATE))
        one_ms = np.convolve(inside, np.ones(width) / width, mode="valid").min()
        assert got.min_mv == pytest.approx(one_ms, abs=0.003)

    def test_noise_leaves_the_minimum_unbiased(self):
        """Source: the noise-free trace's own value; 40 noise draws of 0.3 mV, whose mean
        min_mv must lie within 3 standard errors of the mean (and 0.02 mV) of it."""
        clean = passive_response(sag_trace(), RATE, CurrentStep(0.1, 0.6, -100.0), -70.0)
        rng = np.random.default_rng(7)
        lows = [passive_response(sag_trace() + rng.normal(0, 0.3, int(0.8 * RATE)), RATE,
                                 CurrentStep(0.1, 0.6, -100.0), -70.0).min_mv
                for _ in range(40)]
        error = np.mean(lows) - clean.min_mv
        assert abs(error) <= max(3 * np.std(lows) / np.sqrt(40), 0.02)

    def test_no_sag_on_depolarizing_step(self):
        v = -sag_trace() - 140.0
        assert np.isnan(passive_response(v, RATE, CurrentStep(0.1, 0.6, 100.0),
                                         -70.0).sag_fraction)


class TestFiring:
    """Source: spike times placed by hand; counts, rates and intervals by arithmetic."""

    def test_counts_inside_the_step_only(self):
        times = np.array([0.05, 0.12, 0.17, 0.27, 0.42, 0.65])
        f = firing(times, CurrentStep(0.1, 0.6))
        assert f["spike_count"] == 4
        assert f["firing_rate_hz"] == pytest.approx(8.0)
        assert f["first_spike_latency_ms"] == pytest.approx(20.0)
        isi = np.array([50.0, 100.0, 150.0])
        assert f["mean_isi_ms"] == pytest.approx(isi.mean())
        assert f["isi_cv"] == pytest.approx(isi.std(ddof=1) / isi.mean())
        assert f["adaptation_index"] == pytest.approx(np.mean([50 / 150, 50 / 250]))

    def test_too_few_intervals(self):
        f = firing(np.array([0.2, 0.3]), CurrentStep(0.1, 0.6))
        assert f["mean_isi_ms"] == pytest.approx(100.0)
        assert np.isnan(f["isi_cv"]) and np.isnan(f["adaptation_index"])
        f = firing(np.array([]), CurrentStep(0.1, 0.6))
        assert f["spike_count"] == 0 and np.isnan(f["first_spike_latency_ms"])


def test_adaptation_index_closed_forms():
    """Source: the definition (Druckmann et al. 2007): 0 for equal intervals; for intervals
    growing by a factor r it is (r - 1) / (r + 1) exactly."""
    assert adaptation_index(np.full(6, 25.0)) == pytest.approx(0.0)
    r = 1.2
    assert adaptation_index(10.0 * r ** np.arange(6)) == pytest.approx((r - 1) / (r + 1))
    assert adaptation_index(np.array([10.0])) != adaptation_index(np.array([10.0]))  # NaN


def test_sweep_features_baseline_and_no_step():
    rng = np.random.default_rng(4)
    v = -65.0 + rng.normal(0, 0.25, int(0.8 * RATE))
    f = sweep_features(v, RATE, CurrentStep(0.1, 0.6, 0.0, 0.0), np.array([]))
    # Source: numpy mean and std over the 100 ms before onset
    pre = v[int(0.0 * RATE):int(0.1 * RATE)]
    assert f.baseline_mv == pytest.approx(pre.mean()) and f.baseline_noise_mv == pytest.approx(pre.std())
    none = sweep_features(v, RATE, None, np.array([]))
    assert np.isnan(none.baseline_mv) and none.spike_count == 0 and none.firing_rate_hz == 0
    with pytest.raises(InvalidSettingError):
        sweep_features(v, RATE, None, np.array([]), baseline_window_ms=0)


def test_without_a_step_the_firing_is_that_of_the_whole_sweep():
    """A gap-free sweep of 0.8 s with spikes every 50 ms from 0.02 s (16 spikes): by
    arithmetic, 20 Hz, mean ISI 50 ms, CV 0 and adaptation index 0; no latency or step."""
    v = np.full(int(0.8 * RATE), -65.0)
    times = 0.02 + 0.05 * np.arange(16)
    f = sweep_features(v, RATE, None, times)
    assert f.spike_count == 16 and f.firing_rate_hz == pytest.approx(20.0)
    assert f.mean_isi_ms == pytest.approx(50.0) and f.isi_cv == pytest.approx(0.0, abs=1e-9)
    assert f.adaptation_index == pytest.approx(0.0, abs=1e-12)
    assert np.isnan(f.first_spike_latency_ms) and np.isnan(f.stimulus_pa)
    # a long sweep read in pieces passes its duration instead of its samples
    g = sweep_features(np.zeros(0), RATE, None, times, duration_s=1.6)
    assert g.spike_count == 16 and g.firing_rate_hz == pytest.approx(10.0)


class TestBaselineDrift:
    """Source: a linear ramp V = V0 + k t. The mean of a ramp over any set of samples is the
    ramp at their mean time, so end-window mean minus baseline-window mean is exactly k times
    the difference of the windows' mean sample times (computed here from the indices)."""

    @pytest.mark.parametrize("slope_mv_per_s", [-4.0, 0.0, 2.5])
    def test_ramp(self, slope_mv_per_s):
        from spikemeasure.analysis.sweep_features import baseline_drift

        rate, n = 20_000.0, 16_000                     # 0.8 s; step 0.1 to 0.6 s
        t = np.arange(n) / rate
        v = -70.0 + slope_mv_per_s * t
        step = CurrentStep(0.1, 0.6, 50.0, 0.0)
        f = sweep_features(v, rate, step, np.array([]))
        base_idx = np.arange(int(0.1 * rate) - int(0.1 * rate), int(0.1 * rate))
        end_idx = np.arange(n - int(0.1 * rate), n)
        expected = slope_mv_per_s * (end_idx.mean() - base_idx.mean()) / rate
        assert f.baseline_drift_mv == pytest.approx(expected, abs=1e-9)
        # the windows' centres are 0.05 s and 0.75 s: 0.7 s apart, minus one sample
        assert f.baseline_drift_mv == pytest.approx(slope_mv_per_s * 0.7, abs=1e-3)
        assert baseline_drift(v, rate, 0.6, f.baseline_mv) == f.baseline_drift_mv
        assert f.sampling_rate_hz == rate and f.clipped_spike_count == 0

    def test_short_tail_uses_only_samples_after_the_step(self):
        """30 ms after the step: the window is those 30 ms, never the step itself."""
        from spikemeasure.analysis.sweep_features import baseline_drift

        rate = 10_000.0
        v = np.full(int(0.63 * rate), -70.0)
        v[int(0.1 * rate):int(0.6 * rate)] = -50.0      # a step response of +20 mV
        v[int(0.6 * rate):] = -69.0                     # 1 mV above the baseline after it
        assert baseline_drift(v, rate, 0.6, -70.0) == pytest.approx(1.0, abs=1e-12)

    def test_step_to_the_end_gives_nan(self):
        from spikemeasure.analysis.sweep_features import baseline_drift

        v = np.full(1000, -70.0)
        assert np.isnan(baseline_drift(v, 10_000.0, 0.1, -70.0))
        assert np.isnan(baseline_drift(v, 10_000.0, 0.05, float("nan")))


class TestMissingSamples:
    """Source: the noise-free sag trace measured without the gap (itself checked by hand
    above): with a stretch of NaN in one window, the values of the other windows are the same
    and those of that window NaN, flagged by window."""

    STEP = CurrentStep(0.1, 0.6, -100.0, 0.0)

    def _pair(self, start_s, stop_s, value=np.nan):
        v = sag_trace()
        clean = sweep_features(v, RATE, self.STEP, np.array([]))
        broken = v.copy()
        broken[int(start_s * RATE):int(stop_s * RATE)] = value
        return clean, sweep_features(broken, RATE, self.STEP, np.array([]))

    def test_clean_sweep_has_no_flags(self):
        clean, _ = self._pair(0.0, 0.0)
        assert clean.flags == () and clean.as_dict()["flags"] == ""

    def test_gap_in_the_baseline_window_only(self):
        clean, got = self._pair(0.02, 0.03)
        assert got.flags == ("gap_in_baseline_window",)
        assert np.isnan(got.baseline_mv) and np.isnan(got.baseline_noise_mv)
        assert np.isnan(got.baseline_drift_mv) and np.isnan(got.sag_fraction)
        assert got.steady_state_mv == clean.steady_state_mv and got.min_mv == clean.min_mv
        assert got.spike_count == 0 and got.firing_rate_hz == clean.firing_rate_hz

    @pytest.mark.parametrize("value", [np.nan, np.inf])
    def test_gap_in_the_step_before_the_steady_state_window(self, value):
        clean, got = self._pair(0.3, 0.31, value)
        assert set(got.flags) == {"gap_in_step", "spike_count_lower_bound"}
        assert got.baseline_mv == clean.baseline_mv and got.steady_state_mv == clean.steady_state_mv
        assert got.baseline_drift_mv == clean.baseline_drift_mv
        assert np.isnan(got.min_mv) and np.isnan(got.sag_fraction)
        assert got.spike_count == 0 and np.isnan(got.firing_rate_hz)

    def test_one_sample_in_the_steady_state_window(self):
        v = sag_trace()
        clean = sweep_features(v, RATE, self.STEP, np.array([]))
        v[int(0.55 * RATE)] = np.nan
        got = sweep_features(v, RATE, self.STEP, np.array([]))
        assert set(got.flags) == {"gap_in_step", "gap_in_steady_state_window",
                                  "spike_count_lower_bound"}
        assert np.isnan(got.steady_state_mv) and got.baseline_mv == clean.baseline_mv

    def test_gap_at_the_very_end_costs_only_the_drift(self):
        clean, got = self._pair(0.79, 0.8)
        assert got.flags == ("gap_in_drift_window",)
        assert np.isnan(got.baseline_drift_mv)
        for name in ("baseline_mv", "steady_state_mv", "min_mv", "sag_fraction"):
            assert getattr(got, name) == getattr(clean, name), name

    def test_gap_at_the_very_start_outside_the_baseline_window(self):
        """The baseline window is the 100 ms before onset; here onset is at 0.15 s."""
        v = sag_trace()
        step = CurrentStep(0.15, 0.6, -100.0, 0.0)
        clean = sweep_features(v, RATE, step, np.array([]))
        v[:100] = np.nan
        got = sweep_features(v, RATE, step, np.array([]))
        assert got.flags == clean.flags and got.baseline_mv == clean.baseline_mv

    def test_count_is_a_lower_bound_and_latency_kept_before_the_gap(self):
        """Spike times by hand: 0.12, 0.17, 0.27 and 0.42 s; a gap from 0.3 to 0.31 s may hide
        spikes, so the count (4 seen) is a lower bound and rate and interval statistics are
        empty; the first spike precedes the gap, so the latency (20 ms) stands."""
        v = sag_trace()
        v[int(0.3 * RATE):int(0.31 * RATE)] = np.nan
        times = np.array([0.12, 0.17, 0.27, 0.42])
        got = sweep_features(v, RATE, self.STEP, times)
        assert got.spike_count == 4 and "spike_count_lower_bound" in got.flags
        assert got.first_spike_latency_ms == pytest.approx(20.0)
        for name in ("firing_rate_hz", "mean_isi_ms", "isi_cv", "adaptation_index"):
            assert np.isnan(getattr(got, name)), name
        # a gap before the first spike: an earlier spike may hide in it
        v = sag_trace()
        v[int(0.11 * RATE):int(0.115 * RATE)] = np.nan
        assert np.isnan(sweep_features(v, RATE, self.STEP, times).first_spike_latency_ms)

    def test_without_a_step_a_gap_makes_the_count_a_lower_bound(self):
        v = np.full(int(0.8 * RATE), -65.0)
        times = 0.02 + 0.05 * np.arange(16)
        gaps = np.array([[int(0.5 * RATE), int(0.52 * RATE)]])
        got = sweep_features(np.zeros(0), RATE, None, times, duration_s=0.8, gaps=gaps)
        assert got.spike_count == 16 and np.isnan(got.firing_rate_hz)
        assert got.flags == ("spike_count_lower_bound",)
        assert sweep_features(v, RATE, None, times).flags == ()

    def test_too_slow_for_spikes(self):
        """At 1 kHz: the passive values are those of the same trace computed by hand (numpy
        means over the windows); every firing value is empty."""
        rate = 1000.0
        v = sag_trace(rate=rate)
        got = sweep_features(v, rate, self.STEP, np.array([]))
        assert got.flags == ("too_slow_for_spikes",)
        assert got.baseline_mv == pytest.approx(v[0:100].mean())
        assert got.steady_state_mv == pytest.approx(v[500:600].mean())
        for name in ("spike_count", "firing_rate_hz", "first_spike_latency_ms", "mean_isi_ms",
                     "clipped_spike_count"):
            assert np.isnan(getattr(got, name)), name
