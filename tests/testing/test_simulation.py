"""Published conductance models: the detector finds every spike and the measurements fall in
the range the published models give.

Sources: Hodgkin & Huxley 1952 (J Physiol 117:500-544); Wang & Buzsaki 1996 (J Neurosci
16:6402-6413); Pospischil et al. 2008 (Biol Cybern 99:427-441). The spike count of reference
is independent of the detector: upward crossings of 0 mV by the noise-free simulation.
"""
import numpy as np
import pytest

from spikemeasure.analysis.spikes import measure_trace
from spikemeasure.testing import MODELS, resting_potential_mv, simulate_current_steps
from spikemeasure.analysis.sweeps import CurrentStep

RATE = 50_000.0
STEP = CurrentStep(onset_s=0.05, offset_s=0.25)


def zero_crossings(v: np.ndarray) -> int:
    return int(np.count_nonzero((v[:-1] < 0.0) & (v[1:] >= 0.0)))


@pytest.fixture(scope="module")
def hodgkin_huxley():
    return simulate_current_steps("hodgkin_huxley_1952", [0.0, 40.0, 80.0, 150.0],
                                  sampling_rate_hz=RATE, duration_s=0.3, step_start_s=0.05,
                                  step_end_s=0.25)


class TestHodgkinHuxley1952:
    def test_rest_at_minus_65(self):
        # the 1952 model with rest shifted to -65 mV (modern sign convention, from memory)
        assert resting_potential_mv("hodgkin_huxley_1952") == pytest.approx(-65.0, abs=0.5)

    def test_every_spike_found_none_extra(self, hodgkin_huxley):
        counts = []
        for v in hodgkin_huxley.voltage_mv:
            m = measure_trace(v, RATE, step=STEP)
            assert len(m) == zero_crossings(v)
            counts.append(len(m))
        assert counts[0] == 0 and counts[-1] > counts[1] >= 1

    def test_shape_in_the_published_range(self, hodgkin_huxley):
        m = measure_trace(hodgkin_huxley.voltage_mv[2], RATE, step=STEP)
        first = 0
        # action potential about 100 mV from rest, overshooting to roughly +30..+40 mV
        # (from memory)
        assert 90.0 <= m.peak_mv[first] + 65.0 <= 110.0
        assert 75.0 <= m.amplitude_mv[first] <= 100.0
        # half-width at 6.3 degC of the order of 1-2 ms (from memory)
        assert np.all((m.half_width_ms > 0.8) & (m.half_width_ms < 2.5))
        # undershoot some 10 mV below rest, to about -75 mV (from memory)
        assert np.all((m.trough_mv > -80.0) & (m.trough_mv < -72.0))
        np.testing.assert_allclose(m.ahp_depth_mv, m.threshold_mv - m.trough_mv)
        assert np.all((m.ahp_depth_mv > 15.0) & (m.ahp_depth_mv < 35.0))
        assert all(flags == () for flags in m.flags)

    def test_noise_moves_thresholds_less_than_1_5_mv(self, hodgkin_huxley):
        clean = hodgkin_huxley.voltage_mv[3]
        ref = measure_trace(clean, RATE, step=STEP)
        noisy = clean + np.random.default_rng(5).normal(0.0, 0.3, clean.size)
        m = measure_trace(noisy, RATE, step=STEP)
        assert len(m) == len(ref)
        assert np.max(np.abs(m.threshold_mv - ref.threshold_mv)) < 1.5


class TestOtherModels:
    def test_fast_spiking_interneuron_is_narrow(self):
        # Wang & Buzsaki 1996: narrow spikes (half-width well under 1 ms, from memory), high
        # firing rates without adaptation
        sim = simulate_current_steps("wang_buzsaki_1996", [200.0], sampling_rate_hz=RATE,
                                     duration_s=0.3, step_start_s=0.05, step_end_s=0.25)
        v = sim.voltage_mv[0]
        m = measure_trace(v, RATE, step=STEP)
        assert len(m) == zero_crossings(v) >= 5
        assert np.all(m.half_width_ms < 0.8)
        assert m.isi_ms[-1] == pytest.approx(m.isi_ms[2], rel=0.15)

    def test_cortical_model_adapts(self):
        # Pospischil et al. 2008 regular-spiking cell: the M-current lengthens intervals
        sim = simulate_current_steps("cortical_adapting", [250.0], sampling_rate_hz=RATE,
                                     duration_s=0.45, step_start_s=0.05, step_end_s=0.45)
        v = sim.voltage_mv[0]
        m = measure_trace(v, RATE, step=CurrentStep(0.05, 0.45))
        assert len(m) == zero_crossings(v) >= 4
        assert m.isi_ms[-1] > 1.3 * m.isi_ms[1]


def test_models_listed_and_unknown_refused():
    assert set(MODELS) == {"hodgkin_huxley_1952", "wang_buzsaki_1996", "cortical_adapting",
                           "passive_rc", "passive_sag"}
    with pytest.raises(ValueError, match="hodgkin_huxley_1952"):
        simulate_current_steps("no_such_model", [0.0])
