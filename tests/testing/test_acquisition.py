"""The simulated acquisition chain against closed-form answers and scipy."""
import numpy as np
from scipy import signal

from spikemeasure.testing.acquisition import bessel_lowpass, ornstein_uhlenbeck, record_commands


def test_ornstein_uhlenbeck_has_its_stationary_sd_and_correlation_time():
    # stationary OU: variance sd^2, autocorrelation exp(-lag / tau) (Uhlenbeck & Ornstein 1930)
    fs, tau_ms = 20_000.0, 2.0
    x = ornstein_uhlenbeck(400_000, fs, 3.0, tau_ms, np.random.default_rng(4))[0]
    assert abs(x.std() - 3.0) < 0.1
    lag = int(tau_ms * 1e-3 * fs)
    r = np.corrcoef(x[:-lag], x[lag:])[0, 1]
    assert abs(r - np.exp(-1)) < 0.03


def test_bessel_filter_is_3_db_down_at_its_cutoff():
    # a 4-pole Bessel normalized to -3 dB at the cutoff (scipy.signal.bessel, norm='mag')
    fs, fc = 100_000.0, 5_000.0
    t = np.arange(40_000) / fs
    for f, expected in ((fc, 10 ** (-3 / 20)), (200.0, 1.0)):
        out = bessel_lowpass(np.sin(2 * np.pi * f * t), fs, fc)
        assert abs(np.abs(out[20_000:]).max() - expected) < 0.01
    # a constant passes untouched from the first sample (filter started at rest)
    assert np.allclose(bessel_lowpass(np.full(50, -70.0), fs, fc), -70.0)
    rows = np.vstack([np.full(30, 1.0), np.full(30, -2.0)])
    assert np.allclose(bessel_lowpass(rows, fs, fc), rows)


def test_bridge_error_is_series_resistance_times_current():
    # Ohm's law: 15 MOhm x 100 pA = 1.5 mV, added to the membrane voltage
    fs = 100_000.0
    cmd = np.zeros(int(0.3 * fs))
    cmd[int(0.1 * fs):int(0.2 * fs)] = -100.0
    rec = record_commands("hodgkin_huxley_1952", cmd, simulation_rate_hz=fs, decimation=5,
                          series_resistance_mohm=15.0)
    late = slice(int(0.19 * rec.sampling_rate_hz), int(0.2 * rec.sampling_rate_hz) - 5)
    assert np.allclose(rec.voltage_mv[0, late] - rec.membrane_mv[0, late], -1.5, atol=0.01)
    assert rec.sampling_rate_hz == 20_000.0
    assert rec.voltage_mv.shape == rec.command_pa.shape == rec.membrane_mv.shape
