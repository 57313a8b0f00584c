"""Time constant and sag where the baseline fluctuates: synaptic background, noise, hum and
drift.

Sources: the acquisition chain of spikemeasure.testing.acquisition (an Ornstein-Uhlenbeck
synaptic background acting on the membrane; hum, drift, 4-pole Bessel filter and noise on
the recording) with the noise-free membrane voltage beside the recording; the models'
published equations: the fast-spiking (Wang & Buzsaki 1996) and adapting cortical
(Pospischil et al. 2008) models have no h-current, and their noise-free responses to small
hyperpolarizing steps have no sag (checked here); the squid-axon model (Hodgkin & Huxley
1952) does undershoot and settle back at small hyperpolarizing steps, through its gates,
which is a sag the noise-free trace shows.
"""
import dataclasses
import functools

import numpy as np
import pytest

from spikemeasure.analysis.cell_features import MAX_FLUCTUATION_TO_DEFLECTION
from spikemeasure.analysis.fluctuation import slow_fluctuation_mv
from spikemeasure.errors import InvalidSettingError
from spikemeasure.io import Recording, Sweep
from spikemeasure.tables.build import cell_summary, measure_recording
from spikemeasure.testing.acquisition import record_commands

SIM_RATE = 100_000.0
ONSET, OFFSET, LENGTH = 0.1, 0.6, 0.8


@functools.lru_cache(maxsize=16)
def _noise_free(model, steps, frozen_kwargs):
    n = int(LENGTH * SIM_RATE)
    cmd = np.zeros((len(steps), n))
    for row, size in zip(cmd, steps):
        row[int(ONSET * SIM_RATE):int(OFFSET * SIM_RATE)] = size
    return record_commands(model, cmd, **dict(frozen_kwargs))


def recorded(model, steps, **kwargs):
    noise_mv, seed = kwargs.pop("noise_mv", 0.0), kwargs.pop("seed", 0)
    if kwargs.get("synaptic_sd_pa"):
        # the background draws from the generator before the noise: simulate it all
        sim = _noise_free.__wrapped__(model, tuple(steps),
                                      tuple(dict(kwargs, noise_mv=noise_mv, seed=seed).items()))
    else:
        # the membrane is deterministic and simulated once per model and steps; the noise is
        # what record_commands adds last, drawn from the same seed (the same samples)
        clean = _noise_free(model, tuple(steps), tuple(sorted(kwargs.items())))
        noise = np.random.default_rng(seed).standard_normal(clean.voltage_mv.shape) * noise_mv
        sim = dataclasses.replace(clean, voltage_mv=clean.voltage_mv + noise)
    sweeps = [Sweep(v, sim.sampling_rate_hz, c, file="cell.nwb", index=k)
              for k, (v, c) in enumerate(zip(sim.voltage_mv, sim.command_pa))]
    results = measure_recording(Recording("cell.nwb", "simulated", sweeps))
    return sim, results, cell_summary(results)


def noise_free_sag(membrane_mv, rate):
    """(steady - minimum) / (baseline - minimum) of the noise-free membrane (the sag_fraction
    definition, on the clean trace: minimum and steady state over the last 100 ms)."""
    base = membrane_mv[:int(ONSET * rate)].mean()
    step = membrane_mv[int(ONSET * rate):int(OFFSET * rate)]
    steady = step[-int(0.1 * rate):].mean()
    return (steady - step.min()) / (base - step.min())


class TestSlowFluctuation:
    RATE = 20_000.0

    def test_white_noise_is_averaged_down(self):
        # source: the SD of a mean of n independent samples is SD / sqrt(n) (n = 20 in 1 ms)
        v = np.random.default_rng(0).normal(-70.0, 1.0, int(2.0 * self.RATE))
        found = slow_fluctuation_mv(v, self.RATE, 2.0, 1.0, window_ms=2000.0)
        assert found == pytest.approx(1.0 / np.sqrt(20.0), rel=0.05)

    def test_hum_keeps_its_size(self):
        # source: a sine of amplitude A has SD A / sqrt(2); a 1 ms average barely damps
        # 50 Hz (sinc(0.05) = 0.996)
        t = np.arange(int(0.2 * self.RATE)) / self.RATE
        v = -70.0 + 0.3 * np.sin(2 * np.pi * 50.0 * t)
        found = slow_fluctuation_mv(v, self.RATE, 0.2, 1.0, window_ms=200.0)
        assert found == pytest.approx(0.3 / np.sqrt(2.0) * np.sinc(0.05), rel=0.01)

    def test_gap_or_no_baseline_gives_nan_and_arguments_are_checked(self):
        v = np.full(4000, -70.0)
        v[100] = np.nan
        assert np.isnan(slow_fluctuation_mv(v, self.RATE, 0.1, 1.0))
        assert np.isnan(slow_fluctuation_mv(v, self.RATE, 0.0, 1.0))
        with pytest.raises(InvalidSettingError, match="smooth_ms"):
            slow_fluctuation_mv(v, self.RATE, 0.1, 0.0)
        with pytest.raises(InvalidSettingError, match="sampling_rate_hz"):
            slow_fluctuation_mv(v, 0.0, 0.1, 1.0)


class TestSynapticBackground:
    STEPS = (-100.0, -70.0, -50.0, -30.0)

    @pytest.mark.parametrize("synaptic_sd_pa, seed", [(18.0, 2), (20.0, 3), (16.0, 4)])
    def test_tau_is_flagged_and_left_empty(self, synaptic_sd_pa, seed):
        sim, _, cell = recorded("cortical_adapting", self.STEPS, noise_mv=0.1,
                                synaptic_sd_pa=synaptic_sd_pa, seed=seed)
        # the background gives 2-3 mV of membrane fluctuation before the steps
        before = sim.membrane_mv[:, :int(ONSET * sim.sampling_rate_hz)]
        assert 2.0 <= before.std() <= 3.0
        assert np.isnan(cell.membrane_tau_ms)
        assert {"baseline_fluctuates", "tau_fit_poor", "tau_within_noise"} & set(cell.flags)

    def test_a_fit_bent_by_the_background_is_not_reported(self):
        # on a -10 pA step (about 2.6 mV) the background can bend the fit into a nearly
        # straight line with an enormous time constant and a deflection to match
        sim, _, cell = recorded("cortical_adapting", (-70.0, -50.0, -30.0, -10.0, 100.0),
                                noise_mv=0.1, synaptic_sd_pa=18.0, seed=0)
        before = sim.membrane_mv[:, :int(ONSET * sim.sampling_rate_hz)]
        assert 1.5 <= before.std() <= 3.0
        assert np.isnan(cell.membrane_tau_ms)
        assert {"baseline_fluctuates", "tau_fit_poor", "tau_within_noise"} & set(cell.flags)

    def test_background_on_large_steps_leaves_tau_empty(self):
        # larger steps: deflections well over 5 times the baseline SD; fitted together over
        # ln(50) time constants, what the background leaves in the residual is over 1.5
        # times the noise and 5 % of the deflections, or its fluctuation is large against
        # them, or the SD it gives tau (the baselines' spectra hold it) is over 5 %: each
        # rule leaves the time constant empty
        sim, _, cell = recorded("cortical_adapting", (-150.0, -120.0, -100.0, -80.0),
                                noise_mv=0.1, synaptic_sd_pa=18.0, seed=2)
        before = sim.membrane_mv[:, :int(ONSET * sim.sampling_rate_hz)]
        assert 2.0 <= before.std() <= 3.0
        assert np.isnan(cell.membrane_tau_ms)
        assert {"baseline_fluctuates", "tau_fit_poor", "tau_within_noise"} & set(cell.flags)

    def test_without_background_tau_is_reported(self):
        # source: the definition on the noise-free membrane of the three smallest steps (no
        # background, no noise), by the plain reference implementation
        from spikemeasure.testing.reference import reference_tau_ms
        sim, _, cell = recorded("cortical_adapting", self.STEPS, noise_mv=0.1, seed=2)
        truth = reference_tau_ms(sim.membrane_mv[1:], sim.sampling_rate_hz, ONSET, OFFSET)
        assert cell.membrane_tau_ms == pytest.approx(truth, rel=0.03)
        assert not {"baseline_fluctuates", "tau_fit_poor"} & set(cell.flags)
        assert MAX_FLUCTUATION_TO_DEFLECTION < 0.1


class TestSagWithinNoise:
    @pytest.mark.parametrize("model", ["wang_buzsaki_1996", "cortical_adapting"])
    @pytest.mark.parametrize("seed", [1, 2, 3])
    def test_no_sag_current_no_sag_reported(self, model, seed):
        steps = (-20.0, -10.0)
        sim, results, cell = recorded(model, steps, noise_mv=0.2, hum_mv=0.3,
                                      drift_mv_per_s=1.0, seed=seed)
        assert noise_free_sag(sim.membrane_mv[0], sim.sampling_rate_hz) < 0.02
        assert cell.sag_fraction == 0.0
        assert "sag_within_noise" in cell.flags

    def test_a_sag_the_noise_free_trace_shows_is_reported(self):
        # a 1.1 mV sag over milder hum and drift than above (4 x 0.3 mV of hum SD plus the
        # drift would hide it)
        sim, _, cell = recorded("hodgkin_huxley_1952", (-20.0, -10.0), noise_mv=0.2,
                                hum_mv=0.1, drift_mv_per_s=0.2, seed=1)
        truth = noise_free_sag(sim.membrane_mv[0], sim.sampling_rate_hz)
        assert truth > 0.2
        assert cell.sag_fraction == pytest.approx(truth, abs=0.08)
        assert "sag_within_noise" not in cell.flags
