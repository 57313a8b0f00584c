"""Sweep and cell features of stimuli other than a plain step (test pulses, ramps, other
shapes), against closed forms on noise-free traces built by hand."""
import numpy as np
import pytest

from spikemeasure.analysis.cell_features import cell_features, ramp_rheobase
from spikemeasure.analysis.sweep_features import first_spike_current, sweep_features
from spikemeasure.analysis.sweeps import CurrentStep

RATE = 20_000.0


def _levels(pieces, rate=RATE):
    """A trace of constant pieces [(value, duration_s), ...]."""
    return np.concatenate([np.full(int(round(d * rate)), float(v)) for v, d in pieces])


class TestQuietBaseline:
    # voltage: -70 mV at rest, -80 mV during a test pulse (0.02-0.07 s), -72 mV after it,
    # a step from 0.1 s: every window mean is known by construction
    v = _levels([(-70, 0.02), (-80, 0.05), (-72, 0.03), (-60, 0.5), (-70, 0.2)])

    def test_baseline_stops_at_the_test_pulse(self):
        step = CurrentStep(0.1, 0.6, 20.0, 0.0, test_pulse_pa=-50.0, baseline_start_s=0.07)
        f = sweep_features(self.v, RATE, step, np.array([]))
        assert f.baseline_mv == pytest.approx(-72.0) and f.baseline_noise_mv == pytest.approx(0)
        assert "baseline_window_cut_by_epoch" in f.flags
        assert f.test_pulse_pa == -50.0

    def test_without_the_quiet_stretch_the_old_window_mixes_the_pulse_in(self):
        # control: the 100 ms before onset, pulse included: (20 x -70 + 50 x -80 + 30 x -72)/100
        f = sweep_features(self.v, RATE, CurrentStep(0.1, 0.6, 20.0, 0.0), np.array([]))
        assert f.baseline_mv == pytest.approx((20 * -70 + 50 * -80 + 30 * -72) / 100)
        assert "baseline_window_cut_by_epoch" not in f.flags

    def test_nothing_free_leaves_the_baseline_empty(self):
        step = CurrentStep(0.1, 0.6, 20.0, 0.0, baseline_start_s=0.1)
        f = sweep_features(self.v, RATE, step, np.array([]))
        assert np.isnan(f.baseline_mv) and np.isnan(f.baseline_drift_mv)
        assert "baseline_window_cut_by_epoch" in f.flags


class TestCurrentAtFirstSpike:
    def test_step_is_holding_plus_size(self):
        step = CurrentStep(0.1, 0.6, 60.0, -10.0)
        assert step.current_at(0.3) == pytest.approx(50.0)
        assert np.isnan(step.current_at(0.7))  # outside the step

    def test_ramp_reads_its_line(self):
        # a ramp from 5 pA (holding) at 0.5 s rising 100 pA/s to 205 pA at 2.5 s
        ramp = CurrentStep(0.5, 2.5, 200.0, 5.0, shape="ramp", ramp_rate_pa_per_s=100.0)
        assert ramp.current_at(np.array([0.5, 1.25, 2.4])) == pytest.approx([5.0, 80.0, 195.0])
        assert first_spike_current(ramp, 750.0, RATE) == pytest.approx(80.0)
        assert np.isnan(first_spike_current(ramp, np.nan, RATE))

    def test_other_shape_reads_the_command(self):
        command = np.linspace(0.0, 99.0, 100) * 2.0  # 2 pA per sample
        other = CurrentStep(0.001, 0.004, 50.0, 0.0, shape="other")
        # spike 1.5 ms after onset: 2.5 ms, sample 50 at 20 kHz, 100 pA
        assert first_spike_current(other, 1.5, RATE, command) == pytest.approx(100.0)
        assert np.isnan(first_spike_current(other, 1.5, RATE))

    def test_ramp_sweep_features(self):
        v = np.full(int(3.0 * RATE), -70.0)
        ramp = CurrentStep(0.5, 2.5, 300.0, 0.0, shape="ramp", ramp_rate_pa_per_s=150.0)
        spikes = np.array([0.3, 1.1, 1.5, 2.0, 2.7])  # two outside the ramp
        f = sweep_features(v, RATE, ramp, spikes)
        assert f.stimulus_shape == "ramp" and f.ramp_rate_pa_per_s == 150.0
        assert f.spike_count == 3 and f.firing_rate_hz == pytest.approx(3 / 2.0)
        assert f.first_spike_latency_ms == pytest.approx(600.0)
        assert f.first_spike_current_pa == pytest.approx(150.0 * 0.6)
        assert np.isnan(f.steady_state_mv) and np.isnan(f.sag_fraction)
        assert "ramp_has_no_steady_state" in f.flags


def _row(shape, stimulus, count, rate_hz, current=np.nan):
    return {"stimulus_pa": stimulus, "holding_pa": 0.0, "baseline_mv": -70.0,
            "baseline_noise_mv": 0.1, "spike_count": count, "firing_rate_hz": rate_hz,
            "steady_state_mv": -70.0 + 0.1 * stimulus, "sag_fraction": np.nan,
            "stimulus_start_s": 0.1, "stimulus_end_s": 0.6, "flags": "",
            "stimulus_shape": shape, "first_spike_current_pa": current}


class TestRampsInCellFeatures:
    def test_ramp_rheobase_is_the_smallest_ramp_current(self):
        assert ramp_rheobase(["ramp", "step", "ramp", "ramp"],
                             [92.0, 40.0, 89.5, np.nan]) == 89.5
        assert np.isnan(ramp_rheobase(["step"], [40.0]))

    def test_step_values_leave_ramps_out(self):
        # steps 20 and 40 pA at 2 and 6 Hz: rheobase 20, f-I slope 4 / 20 = 0.2 Hz/pA; a ramp
        # with a smaller stimulus_pa firing faster must change neither
        rows = [_row("step", 0.0, 0, 0.0), _row("step", 20.0, 1, 2.0),
                _row("step", 40.0, 3, 6.0), _row("ramp", 10.0, 30, 15.0, current=8.0)]
        traces = [(np.full(100, -70.0), RATE)] * 4
        cell = cell_features(rows, traces, [None] * 4)
        assert cell.rheobase_pa == 20.0
        assert cell.fi_slope_hz_per_pa == pytest.approx(0.2)
        assert cell.ramp_rheobase_pa == 8.0

    def test_silent_ramps_are_flagged(self):
        rows = [_row("ramp", 150.0, 0, 0.0)]
        cell = cell_features(rows, [(np.full(100, -70.0), RATE)], [None])
        assert np.isnan(cell.ramp_rheobase_pa)
        assert {"no_spiking_ramp", "no_step_stimuli"} <= set(cell.flags)
