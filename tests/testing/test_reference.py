"""The benchmark's reference measurements against closed-form waveforms."""
import numpy as np
import pytest
from scipy.optimize import brentq

from spikemeasure.testing.reference import (
    derivative_v_per_s,
    reference_cell,
    reference_spikes,
    reference_sweep,
    reference_tau_ms,
)

RATE_HZ = 200_000.0
BASE_MV, HEIGHT_MV, SIGMA_MS = -65.0, 100.0, 0.3


def _gaussian_train(centres_ms, n_ms=200.0):
    t_ms = np.arange(int(n_ms * RATE_HZ / 1e3)) / RATE_HZ * 1e3
    v = np.full(t_ms.size, BASE_MV)
    for c in centres_ms:
        v += HEIGHT_MV * np.exp(-(t_ms - c) ** 2 / (2 * SIGMA_MS ** 2))
    return v


def _gaussian_truth():
    """Closed form of the Gaussian spike base + H exp(-t^2 / 2 s^2), t in ms, V in mV."""
    def rate(t):  # dV/dt, mV/ms = V/s
        return -HEIGHT_MV * t / SIGMA_MS ** 2 * np.exp(-t ** 2 / (2 * SIGMA_MS ** 2))
    t_thr = brentq(lambda t: rate(t) - 20.0, -10 * SIGMA_MS, -SIGMA_MS)  # scipy root
    thr_mv = BASE_MV + HEIGHT_MV * np.exp(-t_thr ** 2 / (2 * SIGMA_MS ** 2))
    peak_mv = BASE_MV + HEIGHT_MV
    level = (thr_mv + peak_mv) / 2
    half_width = 2 * SIGMA_MS * np.sqrt(2 * np.log(HEIGHT_MV / (level - BASE_MV)))
    max_rate = HEIGHT_MV / SIGMA_MS * np.exp(-0.5)  # at t = -sigma
    return t_thr, thr_mv, peak_mv, half_width, max_rate


def test_derivative_of_a_sine_is_its_cosine():
    t_s = np.arange(2000) / RATE_HZ
    v = 10.0 * np.sin(2 * np.pi * 1000.0 * t_s)
    expected = 10.0 * 2 * np.pi * 1000.0 * np.cos(2 * np.pi * 1000.0 * t_s) / 1e3  # V/s
    np.testing.assert_allclose(derivative_v_per_s(v, RATE_HZ)[2:-2], expected[2:-2],
                               atol=1e-6 * 62.8)


def test_gaussian_spike_matches_its_closed_form():
    t_thr, thr_mv, peak_mv, half_width, max_rate = _gaussian_truth()
    spikes = reference_spikes(_gaussian_train([50.0]), RATE_HZ)
    assert spikes.peak_mv.size == 1
    assert spikes.threshold_s[0] * 1e3 == pytest.approx(50.0 + t_thr, abs=1e-4)
    assert spikes.threshold_mv[0] == pytest.approx(thr_mv, abs=1e-3)
    assert spikes.peak_mv[0] == pytest.approx(peak_mv, abs=1e-6)
    assert spikes.peak_s[0] * 1e3 == pytest.approx(50.0, abs=1e-6)
    assert spikes.amplitude_mv[0] == pytest.approx(peak_mv - thr_mv, abs=1e-3)
    assert spikes.half_width_ms[0] == pytest.approx(half_width, abs=1e-4)
    assert spikes.rise_time_ms[0] == pytest.approx(-t_thr, abs=1e-4)
    assert spikes.max_dvdt_v_per_s[0] == pytest.approx(max_rate, rel=1e-5)
    assert spikes.min_dvdt_v_per_s[0] == pytest.approx(-max_rate, rel=1e-5)
    # the trace returns to base: the trough is the base, the AHP depth threshold - base
    assert spikes.trough_mv[0] == pytest.approx(BASE_MV, abs=1e-6)
    assert spikes.ahp_depth_mv[0] == pytest.approx(thr_mv - BASE_MV, abs=1e-3)


def test_train_intervals_and_adaptation_index():
    centres = [40.0, 60.0, 90.0, 130.0]  # intervals 20, 30, 40 ms
    v = _gaussian_train(centres)
    spikes = reference_spikes(v, RATE_HZ)
    np.testing.assert_allclose(spikes.isi_ms[1:], [20.0, 30.0, 40.0], atol=1e-6)
    sweep = reference_sweep(v, RATE_HZ, 0.03, 0.19, 50.0, spikes)
    t_thr = _gaussian_truth()[0]
    # adaptation index, mean of (ISI[k+1] - ISI[k]) / (ISI[k+1] + ISI[k]) (Druckmann et al.
    # 2007, from memory): (10/50 + 10/70) / 2
    assert sweep.adaptation_index == pytest.approx((10 / 50 + 10 / 70) / 2, abs=1e-9)
    assert sweep.spike_count == 4
    assert sweep.first_spike_latency_ms == pytest.approx(10.0 + t_thr, abs=1e-4)
    assert sweep.baseline_mv == pytest.approx(BASE_MV, abs=1e-9)


def test_time_constant_and_sag_of_closed_form_steps():
    t_s = np.arange(int(0.5 * RATE_HZ)) / RATE_HZ
    after = np.clip(t_s - 0.1, 0, None) * 1e3
    tau_ms, size_mv = 12.0, -10.0
    charging = -70.0 + size_mv * (1 - np.exp(-after / tau_ms)) * (t_s >= 0.1)
    assert reference_tau_ms(charging, RATE_HZ, 0.1, 0.4) == pytest.approx(tau_ms, rel=1e-3)
    # a sag: -10 mV charging (12 ms) plus +3 mV relaxing with 40 ms; its minimum in closed
    # form where the derivative vanishes (scipy root), the steady state -77 mV (to 0.02 mV)
    sag = charging + 3.0 * (1 - np.exp(-after / 40.0)) * (t_s >= 0.1)
    t_min = brentq(lambda t: 10 / 12 * np.exp(-t / 12) - 3 / 40 * np.exp(-t / 40), 1.0, 200.0)
    v_min = -70.0 - 10.0 * (1 - np.exp(-t_min / 12)) + 3.0 * (1 - np.exp(-t_min / 40))
    sweep = reference_sweep(sag, RATE_HZ, 0.1, 0.4, -50.0, reference_spikes(sag, RATE_HZ))
    assert sweep.min_mv == pytest.approx(v_min, abs=0.01)
    assert sweep.sag_fraction == pytest.approx((-77.0 - v_min) / (-70.0 - v_min), abs=0.005)


def test_time_constant_shared_by_several_steps():
    # closed-form charging curves of three sizes with one tau: the joint fit returns it
    t_s = np.arange(int(0.5 * RATE_HZ)) / RATE_HZ
    after = np.clip(t_s - 0.1, 0, None) * 1e3
    sweeps = np.array([-70.0 + size * (1 - np.exp(-after / 8.0)) for size in (-3, -6, -9)])
    assert reference_tau_ms(sweeps, RATE_HZ, 0.1, 0.4) == pytest.approx(8.0, rel=1e-4)


def test_time_constant_window_ends_at_a_sag_minimum():
    # -10 mV charging with 5 ms and +4 mV relaxing with 20 ms: the minimum (where the
    # derivative vanishes, scipy's brentq) comes before ln(50) tau, so the fit ends there;
    # one exponential fitted by scipy.optimize.curve_fit on exactly that window (0.1 ms
    # after onset to the minimum) gives the same tau
    from scipy.optimize import curve_fit
    t_s = np.arange(int(0.5 * RATE_HZ)) / RATE_HZ
    after = np.clip(t_s - 0.1, 0, None) * 1e3
    v = -70.0 - 10 * (1 - np.exp(-after / 5.0)) + 4 * (1 - np.exp(-after / 20.0))
    t_min = brentq(lambda t: -2.0 * np.exp(-t / 5.0) + 0.2 * np.exp(-t / 20.0), 1.0, 50.0)
    t_ms = np.arange(int(np.ceil(0.1e-3 * RATE_HZ)), int(round(t_min * 1e-3 * RATE_HZ)) + 1)
    t_ms = t_ms / RATE_HZ * 1e3
    exact = -70.0 - 10 * (1 - np.exp(-t_ms / 5.0)) + 4 * (1 - np.exp(-t_ms / 20.0))
    (_, _, tau), _ = curve_fit(lambda t, a, b, c: a + b * np.exp(-t / c), t_ms, exact,
                               p0=(-76.0, 6.0, 5.0))
    found = reference_tau_ms(v, RATE_HZ, 0.1, 0.4)
    # the minimum of a moving average max(1 ms, tau) wide lies within a fraction of a ms of
    # the exact one; the fitted tau moves by well under 1 % with it
    assert found == pytest.approx(tau, rel=0.01)


def test_cell_values_from_sweeps():
    from spikemeasure.testing.reference import ReferenceSweep

    def sweep(delta_mv, count):
        return ReferenceSweep(count, -70.0, np.nan, np.nan, -70.0 + delta_mv, np.nan, np.nan,
                              count / 0.3)
    stimulus = np.array([-40.0, -20.0, 20.0, 40.0, 60.0])
    sweeps = [sweep(-8.0, 0), sweep(-4.0, 0), sweep(4.0, 0), sweep(8.0, 3), sweep(9.0, 9)]
    cell = reference_cell(stimulus, sweeps, 10.0)
    assert cell["input_resistance_mohm"] == pytest.approx(200.0)  # 4 mV / 20 pA (Ohm's law)
    assert cell["rheobase_pa"] == 40.0
    assert cell["fi_slope_hz_per_pa"] == pytest.approx((9 - 3) / 0.3 / 20.0)
