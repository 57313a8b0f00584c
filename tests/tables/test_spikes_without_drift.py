"""Spike voltages read on the voltage less the sweep's hum and drift (tables.build).

A Hodgkin-Huxley cell (Hodgkin & Huxley 1952, J Physiol 117:500; spikemeasure.testing) is
simulated once, and recorded twice through the same acquisition chain and the same noise
samples: once clean, once with 50 Hz hum and a linear drift added before the filter. The
filter is linear, so the second recording is the first plus the filtered hum and drift.
The hum and drift are removed keeping their mean over the baseline window (the 100 ms before
the step), so each spike's voltages from the second recording should equal those from the
first plus that mean: for a drift of k mV/s, k times the window's middle (the hum's mean over
five whole periods is zero). Without the removal a spike at time t reads k t plus the hum
there, 0.1-0.8 mV off.
"""
import functools

import numpy as np

from spikemeasure.analysis.sweeps import find_current_step
from spikemeasure.io import Sweep
from spikemeasure.tables.build import measure_sweep
from spikemeasure.testing.acquisition import record_commands

SIMULATION_RATE_HZ = 100_000.0
DECIMATION = 4  # 25 kHz, behind a 10 kHz filter
SWEEP_S, ONSET_S, OFFSET_S = 0.6, 0.12, 0.42
DRIFT_MV_PER_S, HUM_MV = 2.0, 0.3
BASELINE_MIDDLE_S = ONSET_S - 0.05  # the middle of the 100 ms baseline window


@functools.lru_cache(maxsize=None)
def recorded(drift_mv_per_s: float, hum_mv: float):
    n = int(round(SWEEP_S * SIMULATION_RATE_HZ))
    command = np.zeros((1, n))
    on, off = (int(round(t * SIMULATION_RATE_HZ)) for t in (ONSET_S, OFFSET_S))
    command[0, on:off] = 100.0  # pA: repetitive firing, below depolarization block
    sim = record_commands("hodgkin_huxley_1952", command, simulation_rate_hz=SIMULATION_RATE_HZ,
                          decimation=DECIMATION, bessel_hz=10_000.0, noise_mv=0.02,
                          hum_mv=hum_mv, drift_mv_per_s=drift_mv_per_s, seed=3)
    sweep = Sweep(sim.voltage_mv[0], sim.sampling_rate_hz, sim.command_pa[0], file="cell.nwb",
                  index=0)
    return measure_sweep(sweep, step=find_current_step(sweep.command_pa, sweep.sampling_rate_hz))


class TestSpikeVoltagesWithoutHumAndDrift:
    def test_voltages_equal_the_clean_recordings_plus_the_baseline_mean(self):
        clean = recorded(0.0, 0.0).spikes
        drifting = recorded(DRIFT_MV_PER_S, HUM_MV).spikes
        assert len(clean) >= 5
        np.testing.assert_allclose(drifting.peak_s, clean.peak_s, atol=1e-4)
        offset = DRIFT_MV_PER_S * BASELINE_MIDDLE_S
        for name in ("threshold_mv", "peak_mv", "trough_mv"):
            np.testing.assert_allclose(getattr(drifting, name), getattr(clean, name) + offset,
                                       atol=0.03, err_msg=name)

    def test_truth_within_two_sd(self):
        # the clean recording's peaks plus the baseline's mean of the artefacts lie within
        # 2 SD of the peaks read through the hum and drift
        clean = recorded(0.0, 0.0).spikes
        drifting = recorded(DRIFT_MV_PER_S, HUM_MV).spikes
        error = np.asarray(drifting.peak_mv) - (np.asarray(clean.peak_mv)
                                                + DRIFT_MV_PER_S * BASELINE_MIDDLE_S)
        assert np.all(np.abs(error) <= 2 * np.asarray(drifting.peak_mv_sd))
