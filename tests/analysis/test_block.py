"""Depolarization block: the sweep flag, block_stimulus_pa, and the f-I values before block.

Sources: hand-made spike trains with a known answer; the Wang & Buzsaki (1996) and Hodgkin &
Huxley (1952) models driven into block by large steps, against the noise-free simulation
(where its upward 0 mV crossings, full spikes, stop); the adapting cortical model
(Pospischil et al. 2008), whose long last intervals are adaptation, not block.
"""
import numpy as np
import pytest

from spikemeasure.analysis.block import (BLOCK_MIN_SILENCE_MS, FULL_SPIKE_PEAK_MV,
                                         depolarization_block)
from spikemeasure.errors import InvalidSettingError
from spikemeasure.io import Recording, Sweep
from spikemeasure.tables.build import cell_summary, measure_recording
from spikemeasure.testing.acquisition import record_commands

RATE = 20_000.0
SIM_RATE = 100_000.0
ONSET, OFFSET, LENGTH = 0.1, 0.6, 0.8


def train(times_s, peak_mv=30.0, rest_mv=-60.0, length_s=LENGTH):
    """A trace at rest with a 1 ms spike of the given peak at each time (hand-made)."""
    v = np.full(int(length_s * RATE), rest_mv)
    peaks = np.broadcast_to(np.asarray(peak_mv, dtype=float), (len(times_s),))
    for t, p in zip(times_s, peaks):
        k = int(round(t * RATE))
        v[k:k + int(0.001 * RATE)] = p
    return v


class TestDepolarizationBlock:
    """Hand-made spike trains: the rule of analysis.block applied by hand."""

    def test_fast_firing_that_stops_is_block(self):
        times = ONSET + 0.005 * np.arange(10)          # 200 Hz for 50 ms, then silence
        found = depolarization_block(train(times), RATE, times, ONSET, OFFSET)
        assert found.blocked and found.full_spikes == 10
        assert found.last_isi_ms == pytest.approx(5.0)
        assert found.silence_ms == pytest.approx((OFFSET - times[-1]) * 1e3)

    def test_firing_to_the_end_is_not_block(self):
        times = ONSET + 0.005 * np.arange(99)
        assert not depolarization_block(train(times), RATE, times, ONSET, OFFSET).blocked

    def test_long_last_intervals_are_adaptation_not_block(self):
        times = np.array([0.11, 0.15, 0.25, 0.45])     # intervals 40, 100, 200 ms
        found = depolarization_block(train(times), RATE, times, ONSET, OFFSET)
        assert not found.blocked and found.last_isi_ms > 25.0

    def test_spikes_that_stop_overshooting_count_as_stopped(self):
        # full spikes for 20 ms, then shrunken ones (peaks at -10 mV) to the end
        times = ONSET + 0.005 * np.arange(99)
        peaks = np.where(np.arange(99) < 5, 30.0, -10.0)
        found = depolarization_block(train(times, peaks), RATE, times, ONSET, OFFSET)
        assert found.blocked and found.full_spikes == 5
        assert FULL_SPIKE_PEAK_MV == 0.0

    def test_a_pause_shorter_than_the_minimum_is_not_block(self):
        # 1 ms intervals, then 15 ms of silence to the end: over 10 intervals, under the
        # minimum silence
        times = np.arange(ONSET, OFFSET - 0.015, 0.001)
        assert 15.0 < BLOCK_MIN_SILENCE_MS
        found = depolarization_block(train(times), RATE, times, ONSET, OFFSET)
        assert found.silence_ms > 10 * found.last_isi_ms and not found.blocked

    @pytest.mark.parametrize("times", [[], [0.12]])
    def test_no_or_one_spike_is_not_block(self, times):
        times = np.array(times)
        found = depolarization_block(train(times), RATE, times, ONSET, OFFSET)
        assert not found.blocked and found.full_spikes == times.size
        assert np.isnan(found.last_isi_ms)

    def test_arguments_are_checked_by_name(self):
        with pytest.raises(InvalidSettingError, match="offset_s"):
            depolarization_block(train([]), RATE, np.array([]), 0.5, 0.1)
        with pytest.raises(InvalidSettingError, match="sampling_rate_hz"):
            depolarization_block(train([]), 0.0, np.array([]), 0.1, 0.5)
        with pytest.raises(InvalidSettingError, match="max_isi_ms"):
            depolarization_block(train([]), RATE, np.array([]), 0.1, 0.5, max_isi_ms=-1.0)


def recorded_steps(model, steps_pa, **kwargs):
    """Steps 0.1-0.6 s of 0.8 s sweeps through the acquisition chain (20 kHz out), as a
    Recording, with the noise-free membrane voltage beside it."""
    n = int(LENGTH * SIM_RATE)
    cmd = np.zeros((len(steps_pa), n))
    for row, size in zip(cmd, steps_pa):
        row[int(ONSET * SIM_RATE):int(OFFSET * SIM_RATE)] = size
    rec = record_commands(model, cmd, **kwargs)
    sweeps = [Sweep(v, rec.sampling_rate_hz, c, file=f"{model}.nwb", index=k)
              for k, (v, c) in enumerate(zip(rec.voltage_mv, rec.command_pa))]
    return Recording(f"{model}.nwb", "simulated", sweeps), rec


def full_spike_times(membrane_mv, rate):
    """Reference: upward 0 mV crossings of the noise-free membrane inside the step."""
    up = np.flatnonzero((membrane_mv[:-1] < 0.0) & (membrane_mv[1:] >= 0.0)) / rate
    return up[(up >= ONSET) & (up < OFFSET)]


def reference_block(membrane_mv, rate):
    """Reference: full spikes (0 mV crossings) stop more than the minimum silence before the
    step ends, after at least 2 of them."""
    up = full_spike_times(membrane_mv, rate)
    return up.size >= 2 and (OFFSET - up[-1]) * 1e3 > BLOCK_MIN_SILENCE_MS


class TestBlockInModels:
    @pytest.fixture(scope="class", params=[
        ("wang_buzsaki_1996", (-50.0, 500.0, 1000.0, 2000.0, 3000.0, 3400.0, 3700.0, 4000.0)),
        ("hodgkin_huxley_1952", (-50.0, 100.0, 200.0, 300.0, 400.0, 500.0, 600.0, 650.0,
                                 700.0))])
    def measured(self, request):
        model, steps = request.param
        rec, sim = recorded_steps(model, steps, noise_mv=0.1)
        results = measure_recording(rec)
        return steps, sim, results, cell_summary(results)

    def test_flag_where_the_noise_free_full_spikes_stop(self, measured):
        steps, sim, results, _ = measured
        flagged = ["depolarization_block" in r.features.flags for r in results]
        expected = [reference_block(m, sim.sampling_rate_hz) for m in sim.membrane_mv]
        assert any(expected) and not all(expected)
        assert flagged == expected

    def test_block_stimulus_is_the_smallest_blocked_step(self, measured):
        steps, sim, _, cell = measured
        blocked = [s for s, m in zip(steps, sim.membrane_mv)
                   if reference_block(m, sim.sampling_rate_hz)]
        assert cell.block_stimulus_pa == min(blocked)

    def test_fi_slope_and_largest_rate_stop_before_block(self, measured):
        # reference: the noise-free simulation's own rate-current relation (full spikes per
        # second of step) over the firing steps below block
        steps, sim, _, cell = measured
        rate = np.array([full_spike_times(m, sim.sampling_rate_hz).size / (OFFSET - ONSET)
                         for m in sim.membrane_mv])
        stim = np.array(steps)
        use = (stim >= cell.rheobase_pa) & (stim < cell.block_stimulus_pa)
        assert use.sum() >= 2
        slope = np.polyfit(stim[use], rate[use], 1)[0]
        # 3 %: a spike that starts with the step has its threshold within a sample of the
        # step onset, so whether it counts turns on less than a sample (1 spike in 60)
        assert cell.fi_slope_hz_per_pa == pytest.approx(slope, rel=0.03)
        assert cell.max_firing_rate_hz == pytest.approx(rate[use].max(), rel=0.02)


class TestAdaptingCellIsNotBlocked:
    def test_long_intervals_before_silence_are_not_flagged(self):
        # source: the adapting cortical model's noise-free trace fires to near the step's end
        # with lengthening intervals (Pospischil et al. 2008, M-current adaptation)
        steps = (-50.0, 100.0, 150.0, 200.0, 400.0, 800.0)
        rec, sim = recorded_steps("cortical_adapting", steps, noise_mv=0.1)
        results = measure_recording(rec)
        first = full_spike_times(sim.membrane_mv[1], sim.sampling_rate_hz)
        assert np.diff(first).min() > 0.025              # the slowest sweep: long intervals
        assert not any("depolarization_block" in r.features.flags for r in results)
        assert np.isnan(cell_summary(results).block_stimulus_pa)
