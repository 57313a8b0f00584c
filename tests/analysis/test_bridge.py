"""Bridge error: the electrode's voltage jump at a step's onset, apart from the charging.

Sources: an analytic RC membrane with a known jump (V = rest + J + dV (1 - exp(-t / tau))),
filtered by scipy.signal's 4-pole Bessel filter; and the acquisition chain of
spikemeasure.testing.acquisition, which adds R_s x I to the recorded voltage (Ohm's law),
with the noise-free membrane voltage beside it for the time constant.
"""
import numpy as np
import pytest

from spikemeasure.analysis.bridge import (MIN_TAU_TO_SETTLE, SETTLE_MS, bridge_error,
                                          edge_jump)
from spikemeasure.errors import InvalidSettingError
from spikemeasure.io import Recording, Sweep
from spikemeasure.tables.build import cell_summary, measure_recording
from spikemeasure.testing.acquisition import bessel_lowpass, record_commands
from spikemeasure.testing.reference import reference_tau_ms

RATE = 20_000.0
SIM_RATE = 100_000.0
ONSET, OFFSET, LENGTH = 0.1, 0.4, 0.6


def rc_with_jump(jump_mv, deflection_mv, tau_ms, rest_mv=-65.0, rate=RATE):
    """Analytic: rest, then rest + jump + deflection (1 - exp(-t / tau)) from ONSET to
    OFFSET, relaxing back after (without the jump)."""
    t = np.arange(int(LENGTH * rate)) / rate
    v = np.full(t.size, rest_mv)
    on = (t >= ONSET) & (t < OFFSET)
    v[on] += jump_mv + deflection_mv * (1 - np.exp(-(t[on] - ONSET) * 1e3 / tau_ms))
    after = t >= OFFSET
    reached = deflection_mv * (1 - np.exp(-(OFFSET - ONSET) * 1e3 / tau_ms))
    v[after] += reached * np.exp(-(t[after] - OFFSET) * 1e3 / tau_ms)
    return v


class TestEdgeJump:
    @pytest.mark.parametrize("tau_ms", [10.0, 40.0])
    def test_analytic_jump_is_recovered(self, tau_ms):
        v = rc_with_jump(-0.75, -5.0, tau_ms)
        assert edge_jump(v, RATE, ONSET) == pytest.approx(-0.75, abs=0.01)
        est = bridge_error(v, RATE, ONSET, OFFSET, -50.0)
        assert est.bridge_error_mohm == pytest.approx(15.0, abs=0.2)  # -0.75 mV / -50 pA

    def test_jump_through_a_bessel_filter(self):
        # scipy.signal.bessel, 4 poles, -3 dB at 5 kHz, at 100 kHz, then 20 kHz kept
        fine = rc_with_jump(-0.75, -5.0, 15.0, rate=SIM_RATE)
        v = bessel_lowpass(fine, SIM_RATE, 5_000.0)[::5]
        assert edge_jump(v, RATE, ONSET) == pytest.approx(-0.75, abs=0.03)

    def test_no_jump_reads_zero(self):
        v = rc_with_jump(0.0, -5.0, 20.0)
        assert edge_jump(v, RATE, ONSET) == pytest.approx(0.0, abs=0.01)

    def test_a_membrane_charging_within_the_settling_is_not_separable(self):
        v = rc_with_jump(-0.75, -5.0, 0.5 * MIN_TAU_TO_SETTLE * SETTLE_MS)
        assert np.isnan(edge_jump(v, RATE, ONSET))
        assert np.isnan(bridge_error(v, RATE, ONSET, OFFSET, -50.0).bridge_error_mohm)

    def test_gap_or_edge_outside_the_trace_gives_nan(self):
        v = rc_with_jump(-0.75, -5.0, 20.0)
        v[int(ONSET * RATE) + 30] = np.nan
        assert np.isnan(edge_jump(v, RATE, ONSET))
        assert np.isnan(edge_jump(v, RATE, 10.0))

    def test_arguments_are_checked_by_name(self):
        v = rc_with_jump(0.0, -5.0, 20.0)
        with pytest.raises(InvalidSettingError, match="step_pa"):
            bridge_error(v, RATE, ONSET, OFFSET, 0.0)
        with pytest.raises(InvalidSettingError, match="offset_s"):
            bridge_error(v, RATE, OFFSET, ONSET, -50.0)
        with pytest.raises(InvalidSettingError, match="sampling_rate_hz"):
            edge_jump(v, -1.0, ONSET)
        with pytest.raises(InvalidSettingError, match="settle_ms"):
            edge_jump(v, RATE, ONSET, settle_ms=-1.0)


def recorded_cell(model, series_resistance_mohm, steps=(-70.0, -50.0, -30.0, -10.0, 40.0),
                  **kwargs):
    n = int(LENGTH * SIM_RATE)
    cmd = np.zeros((len(steps), n))
    for row, size in zip(cmd, steps):
        row[int(ONSET * SIM_RATE):int(OFFSET * SIM_RATE)] = size
    sim = record_commands(model, cmd, series_resistance_mohm=series_resistance_mohm, **kwargs)
    sweeps = [Sweep(v, sim.sampling_rate_hz, c, file="cell.nwb", index=k)
              for k, (v, c) in enumerate(zip(sim.voltage_mv, sim.command_pa))]
    return cell_summary(measure_recording(Recording("cell.nwb", "simulated", sweeps))), sim


class TestBridgeErrorInModels:
    """Source: record_commands adds R_s x I (Ohm's law) before its 4-pole Bessel filter."""

    @pytest.mark.parametrize("model, rs, extra", [
        ("wang_buzsaki_1996", 0.0, {}),
        ("wang_buzsaki_1996", 15.0, {}),
        ("wang_buzsaki_1996", 30.0, {"hum_mv": 0.2, "drift_mv_per_s": 1.0}),
        ("cortical_adapting", 15.0, {}),
        ("cortical_adapting", 8.0, {"hum_mv": 0.2, "bessel_hz": 3_000.0}),
    ])
    def test_series_resistance_is_recovered(self, model, rs, extra):
        cell, _ = recorded_cell(model, rs, noise_mv=0.1, seed=5, **extra)
        assert cell.bridge_error_mohm == pytest.approx(rs, abs=2.0)

    @pytest.mark.parametrize("model", ["wang_buzsaki_1996", "cortical_adapting"])
    def test_tau_fit_leaves_the_jump_out(self, model):
        # source: the definition on the noise-free membrane voltage of the three smallest
        # hyperpolarizing steps (no electrode, filter or noise), by the plain reference
        taus = {}
        for rs in (0.0, 15.0):
            cell, sim = recorded_cell(model, rs, noise_mv=0.1, seed=5)
            truth = reference_tau_ms(sim.membrane_mv[1:4], sim.sampling_rate_hz, ONSET, OFFSET)
            assert cell.membrane_tau_ms == pytest.approx(truth, rel=0.03), rs
            taus[rs] = cell.membrane_tau_ms
        assert taus[15.0] == pytest.approx(taus[0.0], rel=0.03)

    def test_squid_axon_membrane_is_not_separable(self):
        # Hodgkin & Huxley 1952: the membrane charges within about 1 ms
        cell, _ = recorded_cell("hodgkin_huxley_1952", 15.0, noise_mv=0.1, seed=5)
        assert np.isnan(cell.bridge_error_mohm)
        assert "bridge_error_not_separable" in cell.flags


class TestBridgeErrorFromTestPulses:
    """Source: record_commands adds R_s x I (Ohm's law) before its 4-pole Bessel filter; the
    protocol is a -50 pA test pulse then a step in every sweep, at 0.25 mV of noise, where a
    single -50 pA edge scatters by about 3 MOhm (measured on the noise-free and noisy runs of
    this simulation), so the median needs the test pulses' edges too."""

    @pytest.mark.parametrize("model, area, rs, seed", [
        ("wang_buzsaki_1996", None, 12.0, 401),
        ("cortical_adapting", 1.6e-4, 0.0, 402),
        ("cortical_adapting", 1.6e-4, 20.0, 403),
    ])
    def test_series_resistance_is_recovered_with_test_pulses(self, model, area, rs, seed):
        from spikemeasure.testing.commands import steps_after_test_pulse

        sizes = np.arange(-100.0, 301.0, 50.0)
        cmd = steps_after_test_pulse(sizes, sampling_rate_hz=SIM_RATE, duration_s=1.0,
                                     step_s=(0.3, 0.8), pulse_pa=-50.0, pulse_s=(0.02, 0.07))
        sim = record_commands(model, cmd, simulation_rate_hz=SIM_RATE, decimation=5,
                              bessel_hz=10_000.0, noise_mv=0.25, series_resistance_mohm=rs,
                              membrane_area_cm2=area, seed=seed)
        sweeps = [Sweep(v, sim.sampling_rate_hz, c, file="pulses.nwb", index=k)
                  for k, (v, c) in enumerate(zip(sim.voltage_mv, sim.command_pa))]
        cell = cell_summary(measure_recording(Recording("pulses.nwb", "simulated", sweeps)))
        assert cell.bridge_error_mohm == pytest.approx(rs, abs=2.0)
