"""The hum and drift estimator against analytic signals: a sinusoid of known amplitude,
frequency and phase plus a line of known slope, in white noise of known SD. The standard
errors are checked against the least-squares formula for white noise, sigma^2 (X^T X)^-1
(Kay 1993, Fundamentals of Statistical Signal Processing: Estimation Theory, chapter 4,
from memory)."""
import numpy as np
import pytest

from spikemeasure.analysis.line_noise import (corrected_weights, estimate_line_noise,
                                              remove_line_noise)
from spikemeasure.errors import InvalidSettingError

RATE = 20_000.0
QUIET_S = 0.2


def trace(hum_mv=0.3, hum_hz=50.0, phase=0.7, slope=1.0, noise_mv=0.2, seconds=0.5, seed=0,
          third_mv=0.0):
    t = np.arange(int(seconds * RATE)) / RATE
    rng = np.random.default_rng(seed)
    return (-65.0 + hum_mv * np.cos(2 * np.pi * hum_hz * t + phase)
            + third_mv * np.cos(2 * np.pi * 3 * hum_hz * t) + slope * t
            + rng.normal(0.0, noise_mv, t.size))


class TestEstimateLineNoise:

    @pytest.mark.parametrize("hum_hz", [50.0, 60.0])
    def test_amplitude_phase_and_slope(self, hum_hz):
        fit = estimate_line_noise(trace(hum_hz=hum_hz), RATE, 0.0, QUIET_S)
        assert fit.frequency_hz == hum_hz
        assert fit.harmonics == (1,)
        # white noise of 0.2 mV over 4000 samples: amplitude SE 0.2 sqrt(2 / 4000) = 0.0045
        assert fit.hum_amplitude_mv[0] == pytest.approx(0.3, abs=0.02)
        assert fit.hum_phase_rad[0] == pytest.approx(0.7, abs=0.07)
        # slope SE: 0.2 / sqrt(4000 x 0.2^2 / 12) = 0.055 mV/s
        assert fit.drift_mv_per_s == pytest.approx(1.0, abs=0.25)
        assert fit.drift_sd_mv_per_s == pytest.approx(0.2 / np.sqrt(4000 * 0.2 ** 2 / 12),
                                                      rel=0.3)

    def test_a_third_harmonic_is_found(self):
        fit = estimate_line_noise(trace(third_mv=0.2), RATE, 0.0, QUIET_S)
        assert fit.harmonics == (1, 3)
        assert fit.hum_amplitude_mv[1] == pytest.approx(0.2, abs=0.02)

    def test_noise_alone_keeps_nothing(self):
        # the false-alarm chance per term is 1e-3: of 40 traces (160 terms) about none
        found = [estimate_line_noise(trace(hum_mv=0.0, slope=0.0, seed=k), RATE, 0.0,
                                     QUIET_S).found for k in range(40)]
        assert sum(found) <= 2

    def test_removal_leaves_the_noise(self):
        v = trace()
        clean = trace(hum_mv=0.0, slope=0.0)
        fit = estimate_line_noise(v, RATE, 0.0, QUIET_S)
        out = remove_line_noise(v, fit)
        # over the whole sweep, extrapolated 0.3 s past the stretch: what is left is the
        # noise and a constant
        left = out - clean
        assert np.std(left) < 0.05

    def test_mean_over_the_reference_is_kept(self):
        v = trace()
        fit = estimate_line_noise(v, RATE, 0.0, QUIET_S, reference_s=(0.1, 0.2))
        out = remove_line_noise(v, fit)
        assert np.mean(out[2000:4000]) == pytest.approx(np.mean(v[2000:4000]), abs=1e-9)

    def test_too_short_or_missing_samples_keep_nothing(self):
        v = trace()
        assert not estimate_line_noise(v, RATE, 0.0, 0.02).found  # one period of 50 Hz
        v[100] = np.nan
        assert not estimate_line_noise(v, RATE, 0.0, QUIET_S).found

    def test_noise_free_constant_keeps_nothing(self):
        assert not estimate_line_noise(np.full(10000, -70.0), RATE, 0.0, QUIET_S).found

    @pytest.mark.parametrize("kwargs, name", [
        (dict(sampling_rate_hz=0.0), "sampling_rate_hz"),
        (dict(harmonics=0), "harmonics"),
        (dict(false_alarm=1.5), "false_alarm"),
        (dict(start_s=0.3, stop_s=0.1), "stop_s"),
    ])
    def test_bad_arguments_name_the_argument(self, kwargs, name):
        args = dict(sampling_rate_hz=RATE, start_s=0.0, stop_s=QUIET_S) | kwargs
        with pytest.raises(InvalidSettingError, match=name):
            estimate_line_noise(trace(), **args)


class TestPlateau:
    """A second stretch with a level of its own (the settled end of a step): the slope's
    standard error against the least-squares formula for white noise with one constant per
    stretch, sigma / sqrt(sum over both stretches of (t - their own mean t)^2) (Kay 1993,
    chapter 4, from memory), and a settling exponential refused."""

    BASE_S, PLATEAU_S = (0.1, 0.2), (0.4, 0.5)

    def stepped(self, settle_mv=0.0, seed=0, noise_mv=0.5, slope=1.0):
        """trace() with a -10 mV step from 0.2 s on, settled (or still relaxing with a 40 ms
        exponential of `settle_mv` left at the plateau's start)."""
        v = trace(hum_mv=0.0, slope=slope, noise_mv=noise_mv, seed=seed, seconds=0.6)
        t = np.arange(v.size) / RATE
        step = (t >= 0.2) & (t < 0.5)
        v[step] -= 10.0
        v[step] += settle_mv * np.exp(-(t[step] - 0.4) / 0.04)
        return v

    def test_standard_error_falls_as_least_squares_says(self):
        fit = estimate_line_noise(self.stepped(seed=1), RATE, *self.BASE_S,
                                  plateau_s=self.PLATEAU_S)
        t = np.arange(2000) / RATE
        expected = 0.5 / np.sqrt(2 * np.sum((t - t.mean()) ** 2))   # 0.17 mV/s
        assert fit.drift_sd_mv_per_s == pytest.approx(expected, rel=0.3)
        alone = estimate_line_noise(self.stepped(seed=1), RATE, *self.BASE_S)
        assert fit.drift_sd_mv_per_s < 0.85 * alone.drift_sd_mv_per_s

    def test_a_drift_the_baseline_misses_is_kept(self):
        # 1 mV/s at 0.5 mV: about 4 standard errors with the plateau, 2.9 without
        kept = [np.isfinite(estimate_line_noise(self.stepped(seed=k), RATE, *self.BASE_S,
                                                plateau_s=self.PLATEAU_S).drift_mv_per_s)
                for k in range(20)]
        alone = [np.isfinite(estimate_line_noise(self.stepped(seed=k), RATE,
                                                 *self.BASE_S).drift_mv_per_s)
                 for k in range(20)]
        assert sum(kept) > sum(alone) and sum(kept) >= 12

    def test_removal_with_the_plateau_leaves_the_step(self):
        v = self.stepped(seed=2, noise_mv=0.1)
        fit = estimate_line_noise(v, RATE, *self.BASE_S, plateau_s=self.PLATEAU_S)
        out = remove_line_noise(v, fit)
        # the step's true level, -10 mV from the baseline's, with the drift taken out
        level = np.mean(out[8000:10000]) - np.mean(out[2000:4000])
        assert level == pytest.approx(-10.0, abs=0.03)
        assert fit.untested_drift_sd_mv_per_s < 2 * fit.drift_sd_mv_per_s

    def test_a_settling_plateau_is_not_taken_for_drift(self):
        # no drift; the plateau still relaxes by 1 mV with a 40 ms time constant
        fits = [estimate_line_noise(self.stepped(settle_mv=1.0, seed=k, noise_mv=0.2,
                                                 slope=0.0), RATE, *self.BASE_S,
                                    plateau_s=self.PLATEAU_S) for k in range(10)]
        assert not any(np.isfinite(f.drift_mv_per_s) for f in fits)
        # what stays in (nothing kept) is in the SDs: the slope beyond its noise
        assert all(f.untested_drift_sd_mv_per_s == pytest.approx(np.sqrt(max(
            0.0, f.drift_estimate_mv_per_s ** 2 - f.drift_sd_mv_per_s ** 2))) for f in fits)

    def test_a_plateau_before_the_stretch_is_refused(self):
        with pytest.raises(InvalidSettingError, match="plateau_s"):
            estimate_line_noise(trace(), RATE, 0.1, 0.2, plateau_s=(0.0, 0.05))



class TestRest:
    """A stretch after the step where the membrane is back at rest, sharing the baseline's
    level: the slope's standard error against the least-squares formula for white noise with
    one constant over both stretches, sigma / sqrt(sum over both of (t - their joint mean
    t)^2) (Kay 1993, chapter 4, from memory); a membrane still returning from the step is
    refused."""

    BASE_S, REST_S = (0.1, 0.2), (0.75, 1.0)

    def stepped(self, settle_mv=0.0, seed=0, noise_mv=0.5, slope=1.0):
        """trace() over 1 s with a -10 mV step from 0.2 to 0.5 s, after which the membrane
        is back at rest (or still returning with a 100 ms exponential of `settle_mv` left
        at the rest stretch's start)."""
        v = trace(hum_mv=0.0, slope=slope, noise_mv=noise_mv, seed=seed, seconds=1.0)
        t = np.arange(v.size) / RATE
        v[(t >= 0.2) & (t < 0.5)] -= 10.0
        after = t >= 0.5
        v[after] -= settle_mv * np.exp(-(t[after] - self.REST_S[0]) / 0.1)
        return v

    def test_standard_error_falls_as_least_squares_says(self):
        fit = estimate_line_noise(self.stepped(seed=1), RATE, *self.BASE_S,
                                  rest_s=self.REST_S)
        t = np.concatenate([np.arange(2000, 4000), np.arange(15000, 20000)]) / RATE
        expected = 0.5 / np.sqrt(np.sum((t - t.mean()) ** 2))   # about 0.017 mV/s
        assert fit.drift_sd_mv_per_s == pytest.approx(expected, rel=0.3)
        alone = estimate_line_noise(self.stepped(seed=1), RATE, *self.BASE_S)
        assert fit.drift_sd_mv_per_s < 0.2 * alone.drift_sd_mv_per_s

    def test_a_drift_the_baseline_misses_is_kept_and_removed(self):
        # 1 mV/s at 0.5 mV: about 2.9 standard errors on the baseline alone, 60 with rest
        fits = [estimate_line_noise(self.stepped(seed=k), RATE, *self.BASE_S,
                                    rest_s=self.REST_S) for k in range(10)]
        assert all(f.drift_mv_per_s == pytest.approx(1.0, abs=0.1) for f in fits)
        out = remove_line_noise(self.stepped(seed=3, noise_mv=0.1), fits[3])
        # the rest level back at the baseline's once the drift is out
        assert np.mean(out[15000:20000]) - np.mean(out[2000:4000]) == pytest.approx(
            0.0, abs=0.05)

    def test_a_membrane_still_returning_is_not_taken_for_drift(self):
        # no drift; the membrane is still 1 mV below rest at the stretch's start, returning
        # with a 100 ms time constant
        fits = [estimate_line_noise(self.stepped(settle_mv=1.0, seed=k, noise_mv=0.2,
                                                 slope=0.0), RATE, *self.BASE_S,
                                    rest_s=self.REST_S) for k in range(10)]
        assert not any(np.isfinite(f.drift_mv_per_s) for f in fits)

class TestCorrectedWeights:

    def test_matches_the_corrected_mean_with_a_plateau(self):
        v = TestPlateau().stepped(seed=4, slope=3.0)
        fit = estimate_line_noise(v, RATE, 0.1, 0.2, plateau_s=(0.4, 0.5))
        assert fit.found
        window = np.full((1, 2000), 1 / 2000)  # the mean of samples 8000-10000
        rows, first = corrected_weights(window, 8000, fit)
        direct = np.mean(remove_line_noise(v, fit)[8000:10000])
        assert rows[0] @ v[first:first + rows.shape[1]] == pytest.approx(direct, abs=1e-9)

    def test_matches_the_corrected_mean(self):
        v = trace()
        fit = estimate_line_noise(v, RATE, 0.0, QUIET_S)
        window = np.full((1, 2000), 1 / 2000)  # the mean of samples 8000-10000
        rows, first = corrected_weights(window, 8000, fit)
        direct = np.mean(remove_line_noise(v, fit)[8000:10000])
        assert rows[0] @ v[first:first + rows.shape[1]] == pytest.approx(direct, abs=1e-9)

    def test_nothing_found_leaves_the_weights(self):
        fit = estimate_line_noise(trace(hum_mv=0.0, slope=0.0, seed=3), RATE, 0.0, QUIET_S)
        rows, first = corrected_weights(np.ones((1, 5)), 7, fit)
        assert first == 7 and np.array_equal(rows, np.ones((1, 5)))



def test_the_fit_is_least_squares():
    """The hum-and-drift fit's coefficients are the least-squares solution numpy's SVD solver
    (``numpy.linalg.lstsq``) gives for a constant, a drift line and the hum's harmonics."""
    from spikemeasure.analysis import line_noise

    v = trace(third_mv=0.2)
    samples = np.arange(0, int(QUIET_S * RATE))
    t = samples / RATE
    coef, _, _ = line_noise._fit(v[samples], samples, RATE, 50.0, (1, 2, 3), True)
    columns = [np.ones_like(t), t] + [f(2 * np.pi * h * 50.0 * t) for h in (1, 2, 3)
                                      for f in (np.cos, np.sin)]
    reference = np.linalg.lstsq(np.column_stack(columns), v[samples], rcond=None)[0]
    assert coef == pytest.approx(reference[1:], abs=1e-9)


class TestKeptDesigns:
    """The hum fit's designs kept between sweeps (line_noise.DESIGN_CACHE_BYTES): a fit from
    a kept design is the fresh fit bit for bit, and the kept bytes stay under the limit."""

    RATE = 10_000.0

    def _stretches(self, seed=0):
        rng = np.random.default_rng(seed)
        samples = np.concatenate([np.arange(500, 1500), np.arange(4000, 5500)])
        t = samples / self.RATE
        part = (0.3 * np.cos(2 * np.pi * 50 * t + 0.4) + 0.2 * t
                + rng.normal(0.0, 0.5, samples.size))
        return part, samples

    def _all_fits(self, part, samples):
        from spikemeasure.analysis.line_noise import _fit
        out = []
        for covariance in (False, True, "rows"):
            coef, rows, cov = _fit(part, samples, self.RATE, 50.0, (1, 2, 3), True,
                                   covariance=covariance)
            out.append((coef, rows, cov))
        return out

    def test_kept_design_fits_as_fresh(self, monkeypatch):
        import spikemeasure.analysis.line_noise as ln
        part, samples = self._stretches()
        ln.forget_designs()
        monkeypatch.setattr(ln, "DESIGN_CACHE_BYTES", 0)
        fresh = self._all_fits(part, samples)
        assert not ln._designs  # nothing kept at a limit of 0
        monkeypatch.setattr(ln, "DESIGN_CACHE_BYTES", 2 ** 24)
        self._all_fits(*self._stretches(seed=1))  # keeps the design
        assert len(ln._designs) == 1
        kept = self._all_fits(part, samples)  # from the kept design
        for (c0, r0, v0), (c1, r1, v1) in zip(fresh, kept):
            assert c0.tobytes() == c1.tobytes()
            assert (r0 is None) == (r1 is None) and (r0 is None or r0.tobytes() == r1.tobytes())
            assert (v0 is None) == (v1 is None) and (v0 is None or v0.tobytes() == v1.tobytes())
        ln.forget_designs()

    def test_coefficients_match_lstsq(self):
        # numpy.linalg.lstsq (an SVD solver) on the same columns: a constant, the line and
        # cos and sin of three harmonics of 50 Hz
        import spikemeasure.analysis.line_noise as ln
        part, samples = self._stretches()
        ln.forget_designs()
        t = samples / self.RATE
        columns = [np.ones_like(t), t]
        for h in (1, 2, 3):
            columns += [np.cos(2 * np.pi * 50 * h * t), np.sin(2 * np.pi * 50 * h * t)]
        expected = np.linalg.lstsq(np.column_stack(columns), part, rcond=None)[0][1:]
        for _ in range(2):  # fresh, then from the kept design
            for covariance in (False, True):
                coef, _, _ = ln._fit(part, samples, self.RATE, 50.0, (1, 2, 3), True,
                                     covariance=covariance)
                np.testing.assert_allclose(coef, expected, rtol=1e-9, atol=1e-12)
        ln.forget_designs()

    def test_covariance_as_over_the_dense_rows(self):
        # the kept FFTs give what stretches_covariance gives on the rows spread over their
        # span (zero between the stretches), bit for bit
        import spikemeasure.analysis.line_noise as ln
        from spikemeasure.analysis.fluctuation import stretches_covariance
        part, samples = self._stretches()
        ln.forget_designs()
        made = ln._design(samples, self.RATE, 50.0, (1, 2, 3), True, None, None)
        rows = made.pinv()[made.k:]
        dense = np.zeros((rows.shape[0], samples[-1] - samples[0] + 1))
        dense[:, samples - samples[0]] = rows
        noise = np.random.default_rng(2).normal(0.0, 1.0, 800)
        for _ in range(2):
            got = ln._stretches_covariance(made, noise, self.RATE)
            assert got.tobytes() == stretches_covariance(dense, noise, self.RATE).tobytes()
        ln.forget_designs()

    def test_byte_limit_holds(self, monkeypatch):
        import spikemeasure.analysis.line_noise as ln
        part, samples = self._stretches()
        ln.forget_designs()
        limit = 400_000
        monkeypatch.setattr(ln, "DESIGN_CACHE_BYTES", limit)
        for shift in range(8):  # eight different windows, each design ~100-250 kB
            self._all_fits(part, samples + 100 * shift)
            assert sum(d.nbytes for d in ln._designs.values()) <= limit
        assert 0 < len(ln._designs) < 8
        monkeypatch.setattr(ln, "DESIGN_CACHE_BYTES", 1000)  # smaller than any design
        self._all_fits(part, samples + 5000)
        assert not ln._designs
        ln.forget_designs()


def test_removal_in_blocks_equals_whole_sweep():
    """remove_line_noise forms the hum and drift a block of samples at a time: bit for bit
    the voltage less the kept terms over the whole sweep times the coefficients, on a sweep
    longer than two blocks (a 50 Hz hum of known amplitude and a line, in white noise)."""
    import spikemeasure.analysis.line_noise as ln
    v = trace(seconds=7.0, seed=3)
    fit = estimate_line_noise(v, RATE, 0.0, QUIET_S)
    assert fit.found and v.size > 2 * ln._REMOVAL_BLOCK
    whole = v - fit.basis(0, v.size) @ fit.coefficients
    assert remove_line_noise(v, fit).tobytes() == whole.tobytes()
