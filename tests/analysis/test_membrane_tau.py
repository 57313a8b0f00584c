"""The membrane time constant's fit and SD (analysis/membrane_tau.py) against closed forms
and simulated membranes.

Sources: the RC charging curve V(t) = V0 + dV (1 - exp(-t / tau)) (closed form); a
charging curve with a sag, whose minimum is where its derivative vanishes (scipy's
brentq); the plain reference implementation of the definition (testing/reference.py, its
own tests against closed forms in tests/testing/test_reference.py) on the noise-free
voltage of a published model (Wang & Buzsaki 1996, Hodgkin & Huxley 1952) simulated by
testing/acquisition.py record_commands; the noise-free trace is the truth of each noisy
draw.
"""
import numpy as np
import pytest
from scipy.optimize import brentq

from spikemeasure.analysis.membrane_tau import (FILTER_DELAY_MS, WINDOW_TAUS, fit_shared_tau,
                                                shared_tau_sd)
from spikemeasure.testing.acquisition import record_commands
from spikemeasure.testing.reference import reference_tau_ms

REST_MV = -70.0


def charging(tau_ms, sizes_mv, rate, duration_ms=300.0):
    """Noise-free RC charging curves, one row per size, from onset (t = 0)."""
    t = np.arange(int(round(duration_ms * 1e-3 * rate))) / rate * 1e3
    return REST_MV + np.asarray(sizes_mv, float)[:, None] * (1 - np.exp(-t / tau_ms))


class TestFitSharedTau:
    @pytest.mark.parametrize("tau_ms, rate", [(1.5, 10e3), (12.0, 20e3), (50.0, 50e3)])
    def test_closed_form_steps_share_their_tau(self, tau_ms, rate):
        sizes = [-2.0, -5.0, -9.0]
        fit = fit_shared_tau(charging(tau_ms, sizes, rate), rate)
        assert fit.tau_ms == pytest.approx(tau_ms, rel=1e-6)
        assert fit.v_inf_mv == pytest.approx(REST_MV + np.array(sizes), abs=1e-5)
        assert fit.v0_mv == pytest.approx(np.full(3, REST_MV), abs=1e-5)
        # the window: FILTER_DELAY_MS after onset to ln(50) tau (closed form), in samples
        first = int(np.ceil(FILTER_DELAY_MS * 1e-3 * rate - 1e-9))
        last = int(np.floor(np.log(50.0) * tau_ms * 1e-3 * rate))
        assert WINDOW_TAUS == pytest.approx(np.log(50.0))
        assert list(fit.n_samples) == [last - first + 1] * 3
        assert fit.steps == (0, 1, 2)

    def test_window_ends_at_the_minimum_of_a_sag(self):
        # -10 mV charging with tau 5 ms and +4 mV relaxing with 20 ms: the minimum, where
        # the derivative -10/5 exp(-t/5) + 4/20 exp(-t/20) vanishes, at about 12 ms, before
        # ln(50) tau (about 20 ms)
        rate = 50e3
        t = np.arange(int(0.2 * rate)) / rate * 1e3
        v = REST_MV - 10 * (1 - np.exp(-t / 5.0)) + 4 * (1 - np.exp(-t / 20.0))
        t_min = brentq(lambda s: -2.0 * np.exp(-s / 5.0) + 0.2 * np.exp(-s / 20.0), 1, 50)
        fit = fit_shared_tau([v], rate)
        end_ms = fit.start_ms + (fit.n_samples[0] - 1) / rate * 1e3
        # the minimum of a centred moving average max(1 ms, tau) wide: within 0.5 ms
        assert end_ms == pytest.approx(t_min, abs=0.5)
        assert end_ms < WINDOW_TAUS * fit.tau_ms
        # and the same fit as the plain reference's, on the trace at 4 times the rate
        fine = REST_MV - 10 * (1 - np.exp(-np.arange(int(0.2 * 4 * rate)) / (4 * rate) * 1e3
                                          / 5.0))
        fine += 4 * (1 - np.exp(-np.arange(fine.size) / (4 * rate) * 1e3 / 20.0))
        padded = np.concatenate([np.full(1000, REST_MV), fine])
        ref = reference_tau_ms(padded[None, :], 4 * rate, 1000 / (4 * rate), 0.2)
        assert fit.tau_ms == pytest.approx(ref, rel=0.01)

    def test_rising_or_flat_or_short_gives_none(self):
        rate = 20e3
        assert fit_shared_tau([np.full(3, REST_MV)], rate) is None
        assert fit_shared_tau([np.full(400, REST_MV)], rate) is None
        assert fit_shared_tau([np.array([REST_MV, np.nan] * 100)], rate) is None

    def test_a_step_with_a_gap_is_left_out(self):
        rate = 20e3
        v = charging(10.0, [-4.0, -8.0], rate)
        v[0, 50] = np.nan
        fit = fit_shared_tau(v, rate)
        assert fit.steps == (1,)
        assert fit.tau_ms == pytest.approx(10.0, rel=1e-6)


@pytest.fixture(scope="module")
def active_membrane():
    """Wang & Buzsaki (1996) under -20, -40 and -60 pA, noise-free through a 5 kHz Bessel,
    simulated at 50 kHz; the truth by the reference at that rate."""
    rate, onset_s, end_s = 50e3, 0.02, 0.17
    cmd = np.zeros((3, int(0.17 * rate)))
    cmd[:, int(onset_s * rate):] = np.array([-20.0, -40.0, -60.0])[:, None]
    sim = record_commands("wang_buzsaki_1996", cmd, simulation_rate_hz=rate, decimation=1,
                          bessel_hz=5000.0, noise_mv=0.0, seed=0)
    truth = reference_tau_ms(sim.voltage_mv, rate, onset_s, end_s)
    return sim.voltage_mv[:, int(onset_s * rate):int(end_s * rate)], rate, truth


class TestActiveMembrane:
    """The fast-spiking model's charging is not one exponential (its gates move): the tool
    fits what the definition fits, at the recording's rate."""

    @pytest.mark.parametrize("decimation", [1, 5])
    def test_noise_free_agrees_with_the_reference(self, active_membrane, decimation):
        steps, rate, truth = active_membrane
        fit = fit_shared_tau(steps[:, ::decimation], rate / decimation)
        assert fit.tau_ms == pytest.approx(truth, rel=0.002)

    def test_sd_calibrated_over_60_noise_draws(self, active_membrane):
        # 0.3 mV of white noise at 10 kHz: the truth within +/- 2 SD in 85-99.5 % of draws
        # (the SD from a 200 ms baseline of the same noise), and within the 10 % tolerance
        # in every one
        steps, rate, truth = active_membrane
        clean = steps[:, ::5]
        rng = np.random.default_rng(7)
        est, sd = [], []
        for _ in range(60):
            noisy = clean + rng.normal(0.0, 0.3, clean.shape)
            fit = fit_shared_tau(noisy, rate / 5, noise_mv=[0.3] * 3)
            est.append(fit.tau_ms)
            sd.append(shared_tau_sd(fit, rate / 5, [rng.normal(0.0, 0.3, 2000)] * 3))
        est, sd = np.array(est), np.array(sd)
        assert np.all(np.abs(est / truth - 1) <= 0.10)
        assert 0.85 <= np.mean(np.abs(est - truth) <= 2 * sd) <= 0.995


class TestSharedTauSd:
    @pytest.mark.parametrize("tau_ms, rate, sizes", [(1.5, 20e3, [-6.0, -12.0]),
                                                     (20.0, 10e3, [-2.0, -4.0, -6.0])])
    def test_calibrated_over_60_noise_draws(self, tau_ms, rate, sizes):
        # closed-form RC charging with 0.5 mV of white noise: the truth (tau_ms) within
        # +/- 2 SD in 85-99.5 % of draws
        clean = charging(tau_ms, sizes, rate, duration_ms=max(10 * tau_ms, 20.0))
        rng = np.random.default_rng(3)
        est, sd = [], []
        for _ in range(60):
            fit = fit_shared_tau(clean + rng.normal(0.0, 0.5, clean.shape), rate,
                                 noise_mv=[0.5] * len(sizes))
            est.append(fit.tau_ms)
            sd.append(shared_tau_sd(fit, rate, [rng.normal(0.0, 0.5, 2000)] * len(sizes)))
        est, sd = np.array(est), np.array(sd)
        assert 0.85 <= np.mean(np.abs(est - tau_ms) <= 2 * np.array(sd)) <= 0.995

    def test_white_noise_gives_the_least_squares_covariance(self):
        # source: for white noise of SD s the sandwich is s^2 [(J^T J)^-1]_tau,tau (Press et
        # al. 2007, section 15.5, from memory), J the Jacobian of the stacked model
        rate, tau = 20e3, 8.0
        clean = charging(tau, [-3.0, -6.0], rate)
        fit = fit_shared_tau(clean + np.random.default_rng(1).normal(0, 0.2, clean.shape), rate)
        rows = []
        for j in range(2):
            t = fit.start_ms + np.arange(fit.n_samples[j]) / rate * 1e3
            e = np.exp(-t / fit.tau_ms)
            block = np.zeros((t.size, 5))
            block[:, 2 * j], block[:, 2 * j + 1] = 1.0, e
            block[:, 4] = (fit.v0_mv[j] - fit.v_inf_mv[j]) * t / fit.tau_ms ** 2 * e
            rows.append(block)
        jac = np.vstack(rows)
        expected = 0.2 * np.sqrt(np.linalg.inv(jac.T @ jac)[4, 4])
        # the SD from 40 baselines of 100 ms of that noise: their spectra scatter (a
        # periodogram's bins are exponential variables), their mean variance does not
        rng = np.random.default_rng(2)
        found = np.mean([shared_tau_sd(fit, rate, [rng.normal(0, 0.2, 2000)] * 2) ** 2
                         for _ in range(40)])
        assert np.sqrt(found) == pytest.approx(expected, rel=0.05)
