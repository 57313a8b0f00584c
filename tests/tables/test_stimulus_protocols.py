"""Real stimulus protocols measured end to end: a step family after a test pulse, and ramps.

Each sweep is a published model (Pospischil et al. 2008 regular-spiking cortical cell,
spikemeasure/testing/models.py) recorded through the simulated acquisition chain
(spikemeasure/testing/acquisition.py record_commands: bridge error, Ornstein-Uhlenbeck
synaptic background, hum, 4-pole Bessel filter, noise, decimation). Expected values come from
the protocol built (spikemeasure/testing/commands.py) and from the noise-free membrane
voltage the chain returns beside the recording, by definitions independent of the tool's.
"""
import numpy as np
import pytest

from spikemeasure.io import Recording, Sweep
from spikemeasure.tables.build import cell_summary, measure_recording
from spikemeasure.testing.acquisition import record_commands
from spikemeasure.testing.commands import ramps, steps_after_test_pulse

SIM_RATE = 100_000.0
MODEL = "cortical_adapting"
STEP_S, PULSE_S, PULSE_PA, HOLDING_PA = (0.3, 0.8), (0.02, 0.07), -50.0, -10.0
# smaller than, equal to and larger than the pulse, then depolarizing steps for rheobase
STEP_SIZES_PA = (-100.0, -50.0, -20.0, 0.0, 40.0, 60.0, 80.0, 100.0, 120.0)
RAMP_S, SLOPES = (0.5, 2.5), (75.0, 140.0, 215.0)  # 0 to 150, 280 and 430 pA over 2 s
SERIES_MOHM = 10.0


def _recording(rec, name: str) -> Recording:
    sweeps = [Sweep(rec.voltage_mv[k], rec.sampling_rate_hz, rec.command_pa[k], file=name,
                    index=k) for k in range(rec.voltage_mv.shape[0])]
    return Recording(name, "test", sweeps)


@pytest.fixture(scope="module")
def pulse_protocol():
    cmd = steps_after_test_pulse(STEP_SIZES_PA, sampling_rate_hz=SIM_RATE, duration_s=1.0,
                                 step_s=STEP_S, pulse_pa=PULSE_PA, pulse_s=PULSE_S,
                                 holding_pa=HOLDING_PA)
    rec = record_commands(MODEL, cmd, simulation_rate_hz=SIM_RATE, decimation=5,
                          noise_mv=0.2, synaptic_sd_pa=2.0, series_resistance_mohm=SERIES_MOHM,
                          hum_mv=0.05, seed=11)
    results = measure_recording(_recording(rec, "pulse.nwb"))
    return rec, results, cell_summary(results)


@pytest.fixture(scope="module")
def ramp_protocol():
    cmd = ramps(SLOPES, sampling_rate_hz=SIM_RATE, duration_s=3.0, ramp_s=RAMP_S)
    rec = record_commands(MODEL, cmd, simulation_rate_hz=SIM_RATE, decimation=5,
                          noise_mv=0.2, synaptic_sd_pa=2.0, hum_mv=0.05, seed=12)
    results = measure_recording(_recording(rec, "ramp.nwb"))
    return rec, results, cell_summary(results)


def _window_mean(v, rate, start_s, end_s):
    return float(np.mean(v[int(round(start_s * rate)):int(round(end_s * rate))]))


class TestTestPulseProtocol:
    def test_every_main_step_is_found_whatever_its_size(self, pulse_protocol):
        # source: the protocol built (sizes, times, holding and pulse by construction)
        rec, results, _ = pulse_protocol
        for size, r in zip(STEP_SIZES_PA, results):
            f = r.features
            assert f.stimulus_shape == "step"
            assert f.stimulus_pa == pytest.approx(size, abs=1e-9)
            assert f.holding_pa == pytest.approx(HOLDING_PA, abs=1e-9)  # pulse not averaged in
            assert (f.stimulus_start_s, f.stimulus_end_s) == pytest.approx(STEP_S, abs=1e-9)
            assert f.test_pulse_pa == pytest.approx(PULSE_PA, abs=1e-9)
            assert np.isnan(f.ramp_rate_pa_per_s)

    def test_baseline_is_the_quiet_stretch_before_the_step(self, pulse_protocol):
        # source: the noise-free membrane voltage over the 100 ms before onset, plus the
        # bridge error R_s x I at holding (Ohm's law), within the recording noise
        rec, results, _ = pulse_protocol
        rate = rec.sampling_rate_hz
        for k, r in enumerate(results):
            truth = (_window_mean(rec.membrane_mv[k], rate, STEP_S[0] - 0.1, STEP_S[0])
                     + SERIES_MOHM * HOLDING_PA * 1e-3)
            assert r.features.baseline_mv == pytest.approx(truth, abs=0.05)
            assert "baseline_window_cut_by_epoch" not in r.features.flags

    def test_rheobase_against_the_noise_free_membrane(self, pulse_protocol):
        # source: the smallest step whose noise-free membrane voltage overshoots 0 mV during
        # the step (a spike by the overshoot criterion, common practice)
        rec, _, cell = pulse_protocol
        rate = rec.sampling_rate_hz
        lo, hi = int(STEP_S[0] * rate), int(STEP_S[1] * rate)
        fired = [size for k, size in enumerate(STEP_SIZES_PA)
                 if rec.membrane_mv[k, lo:hi].max() > 0.0]
        assert fired, "the protocol must reach rheobase"
        assert cell.rheobase_pa == pytest.approx(min(fired))
        assert np.isnan(cell.ramp_rheobase_pa)

    def test_input_resistance_against_the_noise_free_membrane(self, pulse_protocol):
        # source: Ohm's law on the noise-free membrane (least-squares slope of the steady
        # deflection, last 100 ms of the step minus the 100 ms before, on the step size over
        # the hyperpolarizing steps) plus the series resistance the chain adds
        rec, _, cell = pulse_protocol
        rate = rec.sampling_rate_hz
        hyper = [k for k, size in enumerate(STEP_SIZES_PA) if size < 0]
        deflection = [_window_mean(rec.membrane_mv[k], rate, STEP_S[1] - 0.1, STEP_S[1])
                      - _window_mean(rec.membrane_mv[k], rate, STEP_S[0] - 0.1, STEP_S[0])
                      for k in hyper]
        truth = np.polyfit([STEP_SIZES_PA[k] for k in hyper], deflection, 1)[0] * 1e3
        assert cell.input_resistance_mohm == pytest.approx(truth + SERIES_MOHM, rel=0.01)


def _first_threshold_s(membrane_mv, rate, start_s, end_s, onset_v_per_s=20.0):
    """First time in [start, end) the noise-free membrane's dV/dt (first difference) rises
    through 20 V/s: the dV/dt criterion of threshold (Sekerli et al. 2004, from memory),
    interpolated between samples."""
    dvdt = np.diff(membrane_mv) * rate * 1e-3  # mV per sample -> V/s
    lo, hi = int(start_s * rate), int(end_s * rate)
    above = np.flatnonzero(dvdt[lo:hi] >= onset_v_per_s)
    if not above.size:
        return float("nan")
    k = lo + int(above[0])
    # dvdt[k] is the slope between samples k and k + 1, placed at their midpoint
    frac = (onset_v_per_s - dvdt[k - 1]) / (dvdt[k] - dvdt[k - 1])
    return (k - 0.5 + frac) / rate


class TestRamps:
    def test_ramps_are_ramps(self, ramp_protocol):
        # source: the protocol built (slopes, start and end by construction)
        _, results, _ = ramp_protocol
        for slope, r in zip(SLOPES, results):
            f = r.features
            assert f.stimulus_shape == "ramp"
            assert f.ramp_rate_pa_per_s == pytest.approx(slope, rel=1e-6)
            assert (f.stimulus_start_s, f.stimulus_end_s) == pytest.approx(RAMP_S, abs=1e-4)
            assert f.stimulus_pa == pytest.approx(slope * (RAMP_S[1] - RAMP_S[0]), rel=1e-6)
            assert np.isnan(f.test_pulse_pa)
            assert np.isnan(f.steady_state_mv) and "ramp_has_no_steady_state" in f.flags

    def test_current_at_first_threshold_within_2_pa(self, ramp_protocol):
        # source: the noise-free simulation: the command built at the first dV/dt threshold
        # crossing of the noise-free membrane voltage
        rec, results, cell = ramp_protocol
        rate = rec.sampling_rate_hz
        truths = []
        for k, (slope, r) in enumerate(zip(SLOPES, results)):
            t = _first_threshold_s(rec.membrane_mv[k], rate, *RAMP_S)
            truth_pa = slope * (t - RAMP_S[0])
            truths.append(truth_pa)
            assert r.features.spike_count > 0
            assert r.features.first_spike_current_pa == pytest.approx(truth_pa, abs=2.0)
            # latency counts from the ramp's start, not from where it passes half its top
            assert r.features.first_spike_latency_ms == pytest.approx(
                (t - RAMP_S[0]) * 1e3, abs=2.0 / slope * 1e3)
        assert cell.ramp_rheobase_pa == pytest.approx(min(truths), abs=2.0)

    def test_spike_count_and_rate_over_the_ramp(self, ramp_protocol):
        # source: spikes of the noise-free membrane, counted as upward crossings of 0 mV
        # within the ramp (overshoot criterion, common practice); rate over the ramp's 2 s
        rec, results, _ = ramp_protocol
        rate = rec.sampling_rate_hz
        lo, hi = int(RAMP_S[0] * rate), int(RAMP_S[1] * rate)
        for k, r in enumerate(results):
            v = rec.membrane_mv[k, lo - 1:hi]
            crossings = int(np.sum((v[:-1] < 0.0) & (v[1:] >= 0.0)))
            assert r.features.spike_count == crossings
            assert r.features.firing_rate_hz == pytest.approx(crossings / 2.0)

    def test_step_values_leave_ramps_out(self, ramp_protocol):
        # a file of ramps only: the step-only cell values are empty, and say why
        _, _, cell = ramp_protocol
        assert np.isnan(cell.rheobase_pa) and np.isnan(cell.input_resistance_mohm)
        assert "no_step_stimuli" in cell.flags
