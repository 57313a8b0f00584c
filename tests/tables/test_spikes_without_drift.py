"""Spike voltages read on the voltage less the sweep's hum and drift (tables.build).

A Hodgkin-Huxley cell (Hodgkin & Huxley 1952, J Physiol 117:500; spikemeasure.testing) is
simulated once and recorded with 50 Hz hum and a linear drift added before the filter; the
filter is linear, so that recording less the filtered hum and drift is the clean one (the
truth of benchmarks/benchmark_accuracy.py). Both get the same noise samples.
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
from spikemeasure.testing.acquisition import bessel_lowpass, record_commands

SIMULATION_RATE_HZ = 50_000.0
DECIMATION = 2  # 25 kHz, behind a 10 kHz filter
BESSEL_HZ = 10_000.0
SWEEP_S, ONSET_S, OFFSET_S = 0.6, 0.12, 0.42
DRIFT_MV_PER_S, HUM_MV = 2.0, 0.3
BASELINE_MIDDLE_S = ONSET_S - 0.05  # the middle of the 100 ms baseline window


@functools.lru_cache(maxsize=None)
def recordings():
    """(clean, with hum and drift): the measured sweeps of one simulation."""
    n = int(round(SWEEP_S * SIMULATION_RATE_HZ))
    command = np.zeros((1, n))
    on, off = (int(round(t * SIMULATION_RATE_HZ)) for t in (ONSET_S, OFFSET_S))
    command[0, on:off] = 100.0  # pA: repetitive firing, below depolarization block
    sim = record_commands("hodgkin_huxley_1952", command, simulation_rate_hz=SIMULATION_RATE_HZ,
                          decimation=1, bessel_hz=BESSEL_HZ, hum_mv=HUM_MV,
                          drift_mv_per_s=DRIFT_MV_PER_S)
    # the filter is linear: less the filtered hum and drift, the clean recording
    artefact = bessel_lowpass(HUM_MV * np.sin(2 * np.pi * 50.0 * sim.time_s)
                              + DRIFT_MV_PER_S * sim.time_s, SIMULATION_RATE_HZ, BESSEL_HZ)
    noise = np.random.default_rng(3).standard_normal(n // DECIMATION) * 0.02
    rate = SIMULATION_RATE_HZ / DECIMATION
    step = find_current_step(command[0, ::DECIMATION], rate)
    return tuple(measure_sweep(Sweep(v[::DECIMATION] + noise, rate, command[0, ::DECIMATION],
                                     file="cell.nwb", index=0), step=step).spikes
                 for v in (sim.voltage_mv[0] - artefact, sim.voltage_mv[0]))


class TestSpikeVoltagesWithoutHumAndDrift:
    def test_voltages_equal_the_clean_recordings_plus_the_baseline_mean(self):
        clean, drifting = recordings()
        assert len(clean) >= 5
        np.testing.assert_allclose(drifting.peak_s, clean.peak_s, atol=1e-4)
        offset = DRIFT_MV_PER_S * BASELINE_MIDDLE_S
        for name in ("threshold_mv", "peak_mv", "trough_mv"):
            np.testing.assert_allclose(getattr(drifting, name), getattr(clean, name) + offset,
                                       atol=0.03, err_msg=name)

    def test_truth_within_two_sd(self):
        # the clean recording's peaks plus the baseline's mean of the artefacts lie within
        # 2 SD of the peaks read through the hum and drift
        clean, drifting = recordings()
        error = np.asarray(drifting.peak_mv) - (np.asarray(clean.peak_mv)
                                                + DRIFT_MV_PER_S * BASELINE_MIDDLE_S)
        assert np.all(np.abs(error) <= 2 * np.asarray(drifting.peak_mv_sd))
