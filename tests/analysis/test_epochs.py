"""Epochs of command currents and the main stimulus among them.

Source of every expected value: the analytic command each test builds (levels, times and
slopes known by construction, spikemeasure/testing/commands.py), or scipy where named.
"""
import numpy as np
import pytest
from scipy import ndimage, signal

from spikemeasure.analysis.epochs import (EPOCH_MEDIAN_SAMPLES, CommandEpochs, find_epochs,
                                          main_stimulus, running_median)
from spikemeasure.errors import InvalidSettingError
from spikemeasure.testing.commands import ramps, steps_after_test_pulse

RATE = 20_000.0


def _borders(found: CommandEpochs) -> list[tuple[int, int, str]]:
    return [(e.start, e.stop, e.shape) for e in found.epochs]


class TestFindEpochs:
    def test_levels_of_a_test_pulse_and_a_step(self):
        # built: holding -10 pA, pulse -50 pA over 0.02-0.07 s, step +30 pA over 0.3-0.8 s
        cmd = steps_after_test_pulse([30.0], sampling_rate_hz=RATE, holding_pa=-10.0)[0]
        found = find_epochs(cmd, RATE)
        assert _borders(found) == [(0, 400, "level"), (400, 1400, "level"),
                                   (1400, 6000, "level"), (6000, 16000, "level"),
                                   (16000, 20000, "level")]
        assert [e.mean_pa for e in found.epochs] == pytest.approx([-10, -60, -10, 20, -10])
        assert found.tolerance_pa == 1.0  # noise-free: the smallest tolerance

    def test_noisy_command_with_isolated_outliers(self):
        # built step family + Gaussian noise (SD 2 pA) + five single-sample spikes of 80 pA
        rng = np.random.default_rng(3)
        cmd = steps_after_test_pulse([-20.0], sampling_rate_hz=RATE)[0]
        cmd = cmd + rng.normal(0.0, 2.0, cmd.size)
        cmd[[3000, 9000, 12000, 17000, 19000]] += 80.0
        found = find_epochs(cmd, RATE)
        starts = [e.start for e in found.epochs]
        assert len(starts) == 5
        assert np.allclose(starts, [0, 400, 1400, 6000, 16000], atol=2)
        assert [e.shape for e in found.epochs] == ["level"] * 5
        assert [e.mean_pa for e in found.epochs] == pytest.approx([0, -50, 0, -20, 0], abs=0.6)
        # the robust noise SD (MAD of differences / sqrt 2) is near the 2 pA put in
        assert found.tolerance_pa == pytest.approx(5 * 2.0, rel=0.1)

    @pytest.mark.parametrize("slope", [75.0, 140.0, 215.0])
    def test_ramp_between_levels(self, slope):
        # built: 0 pA, then slope * (t - 0.5 s) from 0.5 s to 2.5 s, then 0 pA
        cmd = ramps([slope], sampling_rate_hz=RATE)[0]
        found = find_epochs(cmd, RATE)
        assert _borders(found) == [(0, 10000, "level"), (10000, 50000, "ramp"),
                                   (50000, 60000, "level")]
        ramp = found.epochs[1]
        assert ramp.rate_pa_per_s == pytest.approx(slope, rel=1e-9)
        assert ramp.start_pa == pytest.approx(0.0, abs=1e-6)
        assert ramp.end_pa == pytest.approx(2.0 * slope, rel=1e-9)

    def test_noisy_ramp_start_within_a_few_ms(self):
        # 2 pA of noise on a 75 pA/s ramp: 1 ms is 0.075 pA, far below the noise, so the
        # start is placed by the long line fit meeting the level
        cmd = ramps([75.0], sampling_rate_hz=RATE)[0]
        cmd = cmd + np.random.default_rng(5).normal(0.0, 2.0, cmd.size)
        found = find_epochs(cmd, RATE)
        assert [e.shape for e in found.epochs] == ["level", "ramp", "level"]
        assert found.epochs[1].start_s == pytest.approx(0.5, abs=0.005)
        assert found.epochs[1].end_s == pytest.approx(2.5, abs=1 / RATE)
        assert found.epochs[1].rate_pa_per_s == pytest.approx(75.0, rel=0.01)

    def test_step_through_a_bessel_filter(self):
        # a recorded command that passed a 4-pole 2 kHz Bessel filter (scipy.signal.bessel):
        # the border lies where the filtered edge passes half-way (within a sample)
        cmd = np.zeros(20_000)
        cmd[2000:12000] = 100.0
        sos = signal.bessel(4, 2000.0, fs=RATE, output="sos", norm="mag")
        filtered = signal.sosfilt(sos, cmd)
        half_up = int(np.argmax(filtered > 50.0))
        half_down = 12000 + int(np.argmax(filtered[12000:] < 50.0))
        found = find_epochs(filtered, RATE)
        assert [e.shape for e in found.epochs] == ["level"] * 3
        assert abs(found.epochs[1].start - half_up) <= 1
        assert abs(found.epochs[1].stop - half_down) <= 1

    def test_missing_samples_inside_and_at_a_border(self):
        cmd = steps_after_test_pulse([40.0], sampling_rate_hz=RATE)[0]
        cmd[8000:8500] = np.nan        # inside the step
        cmd[5990:6010] = np.nan        # across the step's onset
        found = find_epochs(cmd, RATE)
        assert _borders(found) == [(0, 400, "level"), (400, 1400, "level"),
                                   (1400, 5990, "level"), (6010, 16000, "level"),
                                   (16000, 20000, "level")]
        assert found.epochs[3].mean_pa == pytest.approx(40.0)

    def test_sweep_without_stimulus(self):
        found = find_epochs(np.full(4000, 25.0), RATE)
        assert _borders(found) == [(0, 4000, "level")]
        stimulus = main_stimulus(np.full(4000, 25.0), RATE)
        assert stimulus.shape == "none" and np.isnan(stimulus.onset_s)
        assert stimulus.holding_pa == pytest.approx(25.0)

    def test_too_few_finite_samples(self):
        assert find_epochs(np.array([1.0, np.nan, np.nan]), RATE).epochs == ()

    def test_bad_arguments_name_the_argument(self):
        with pytest.raises(InvalidSettingError, match="`command_pa`"):
            find_epochs(np.zeros((3, 3)), RATE)
        with pytest.raises(InvalidSettingError, match="`sampling_rate_hz`"):
            find_epochs(np.zeros(10), -1.0)
        with pytest.raises(InvalidSettingError, match="`tolerance_pa`"):
            find_epochs(np.zeros(10), RATE, tolerance_pa=0.0)
        with pytest.raises(InvalidSettingError, match="`min_level_change_pa`"):
            find_epochs(np.zeros(10), RATE, min_level_change_pa=np.nan)
        with pytest.raises(InvalidSettingError, match="`epochs`"):
            main_stimulus(np.zeros(10), RATE, epochs="steps")


class TestMainStimulus:
    @pytest.mark.parametrize("size", [-20.0, -50.0, -100.0, 30.0])
    def test_step_after_a_test_pulse(self, size):
        # steps smaller than, equal to and larger than the -50 pA pulse: the main stimulus is
        # the longer, later step whatever its size (built: step 0.3-0.8 s, pulse 0.02-0.07 s)
        cmd = steps_after_test_pulse([size], sampling_rate_hz=RATE, holding_pa=-10.0)[0]
        found = main_stimulus(cmd, RATE)
        assert found.shape == "step"
        assert (found.onset_s, found.offset_s) == pytest.approx((0.3, 0.8))
        assert found.size_pa == pytest.approx(size)
        assert found.holding_pa == pytest.approx(-10.0)  # not averaged with the pulse
        assert found.test_pulse_pa == pytest.approx(-50.0)
        assert found.test_pulse_s == pytest.approx((0.02, 0.07))
        assert found.baseline_start_s == pytest.approx(0.07)  # the quiet stretch
        assert np.isnan(found.ramp_rate_pa_per_s)

    def test_of_two_equally_long_stimuli_the_later(self):
        cmd = np.zeros(10_000)
        cmd[1000:2000] = 40.0
        cmd[5000:6000] = 40.0
        found = main_stimulus(cmd, RATE)
        assert found.onset_s == pytest.approx(0.25)
        assert found.test_pulse_pa == pytest.approx(40.0)

    def test_ramp(self):
        cmd = ramps([140.0], sampling_rate_hz=RATE, holding_pa=15.0)[0]
        found = main_stimulus(cmd, RATE)
        assert found.shape == "ramp"
        assert (found.onset_s, found.offset_s) == pytest.approx((0.5, 2.5))
        assert found.ramp_rate_pa_per_s == pytest.approx(140.0)
        assert found.size_pa == pytest.approx(280.0)  # the line at the ramp's end
        assert found.holding_pa == pytest.approx(15.0)
        assert found.ramp_start_pa == pytest.approx(15.0)
        assert np.isnan(found.test_pulse_pa)

    def test_other_shape(self):
        # a step followed without a return to holding by a ramp: neither a step nor a ramp
        cmd = np.zeros(20_000)
        cmd[4000:8000] = 50.0
        cmd[8000:16000] = 50.0 + 100.0 * np.arange(8000) / RATE
        found = main_stimulus(cmd, RATE)
        assert found.shape == "other"
        assert (found.onset_s, found.offset_s) == pytest.approx((0.2, 0.8))
        assert found.size_pa == pytest.approx(cmd[4000:16000].mean())

    def test_stimulus_from_the_first_sample_has_no_quiet_stretch(self):
        cmd = np.zeros(4000)
        cmd[:3000] = -30.0
        found = main_stimulus(cmd, RATE)
        # the sweep starts at -30 pA: that is its holding level, and the stimulus the
        # return to 0 pA after it
        assert found.holding_pa == pytest.approx(-30.0)
        assert found.onset_s == pytest.approx(0.15)
        assert found.baseline_start_s == pytest.approx(0.0)


class TestRunningMedian:
    """Source: scipy.ndimage.median_filter(size=5, mode='nearest'), which the run-length
    computation must equal exactly (a median of an odd count is one of the values)."""

    @pytest.mark.parametrize("kind", ["levels", "float32 levels", "outliers", "noise", "short"])
    def test_equals_scipy_median_filter(self, kind):
        rng = np.random.default_rng(len(kind))
        if kind == "short":
            values = np.array([3.0, -1.0, 7.0, 7.0, 2.0])
        elif kind == "noise":
            values = rng.normal(0.0, 2.0, 5000)  # changes at every sample: filtered whole
        else:
            values = steps_after_test_pulse([35.0], sampling_rate_hz=RATE)[0]
            if kind == "float32 levels":
                values = (values * 1e-3).astype(np.float32).astype(float) * 1e3
            if kind == "outliers":  # single samples, pairs and a triple, at and near the ends
                for at, width in ((0, 1), (1, 2), (500, 1), (7000, 2), (9000, 3), (19999, 1)):
                    values[at:at + width] += 80.0
        expected = ndimage.median_filter(values, size=EPOCH_MEDIAN_SAMPLES, mode="nearest")
        np.testing.assert_array_equal(running_median(values), expected)

    def test_flat_run_needs_no_line_fit(self):
        # Source: numpy.polyfit. The shortcut for a run of equal values assumes its fitted
        # slope and residuals are rounding errors below 1e-9 of the value (so inside half of
        # any tolerance the shortcut accepts); here they are checked against the fit itself.
        for value in (0.0, 200.00000298023224, -1234.5678, 1e6 + 0.1):
            for n in (2, 3, 1000, 100_000):
                x = np.arange(n, dtype=float)
                slope, intercept = np.polyfit(x, np.full(n, value), 1)
                worst = max(abs(slope) * n, np.max(np.abs(value - (slope * x + intercept))))
                assert worst < 1e-9 * max(1.0, abs(value)), (value, n)


def test_long_command_with_known_epochs():
    """A 30 s command at 20 kHz (600,000 samples, float32 in nA as a file stores it) built of
    known epochs: a test pulse, five steps of 2 s, a ramp of 2 s and their returns to holding.
    Source: the borders by construction."""
    rate, holding = 20_000.0, -12.0
    pieces = [(0.5, holding), (0.1, holding - 50.0), (1.4, holding)]
    for size in (-40.0, 20.0, 60.0, 100.0, 140.0):
        pieces += [(2.0, holding + size), (2.0, holding)]
    cmd = np.concatenate([np.full(int(round(s * rate)), level) for s, level in pieces])
    ramp_at = cmd.size
    ramp = holding + 100.0 * np.arange(int(2 * rate)) / rate  # 100 pA/s for 2 s
    cmd = np.concatenate([cmd, ramp, np.full(int(round(6.0 * rate)), holding)])
    cmd = (cmd * 1e-3).astype(np.float32).astype(float) * 1e3
    assert cmd.size == 600_000
    borders = np.cumsum([0] + [int(round(s * rate)) for s, _ in pieces])
    expected = [(int(a), int(b), "level") for a, b in zip(borders[:-1], borders[1:])]
    expected += [(ramp_at, ramp_at + ramp.size, "ramp"), (ramp_at + ramp.size, 600_000, "level")]
    assert _borders(find_epochs(cmd, rate)) == expected
    # with noise, its first 10 s (test pulse, two steps): starts within 2 samples
    first = cmd[:200_000] + np.random.default_rng(9).normal(0.0, 1.0, 200_000)
    noisy = find_epochs(first, rate)
    known = [(a, b, shape) for a, b, shape in expected if b <= 200_000]
    assert [e.shape for e in noisy.epochs] == [shape for _, _, shape in known]
    assert np.max(np.abs(np.subtract([e.start for e in noisy.epochs],
                                     [a for a, _, _ in known]))) <= 2
    stimulus = main_stimulus(cmd, rate)  # the ramp: as long as each step, and the last
    assert (stimulus.shape, stimulus.holding_pa) == ("ramp", pytest.approx(holding, abs=1e-4))
    # the test pulse is the last single level before the main stimulus: the last step
    assert stimulus.test_pulse_pa == pytest.approx(140.0, abs=1e-4)


def test_prefix_line_fits_equal_numpy_polyfit():
    """Source: numpy.polyfit's residual sum of squares of each prefix's least-squares line, for
    the sums formed once per command and read by every piece's split search."""
    from spikemeasure.analysis.epochs import _IndexSums, _line_sse

    rng = np.random.default_rng(4)
    y = np.cumsum(rng.normal(0.0, 1.0, 400)) + 30.0
    sums = _IndexSums(1000)  # a longer command's sums serve a shorter piece
    for piece in (y, y[::-1], y[100:250]):
        sse = _line_sse(piece, sums)
        for k in (2, 3, 50, piece.size):
            x = np.arange(k, dtype=float)
            residual = np.polyfit(x, piece[:k], 1, full=True)[1]
            expected = float(residual[0]) if residual.size else 0.0
            assert sse[k - 1] == pytest.approx(expected, rel=1e-6, abs=1e-9)
        assert sse[0] == 0.0


def test_shared_index_sums_find_the_same_epochs():
    """Within ``sharing_index_sums`` the split search reads the sums formed for the longest
    command met: commands of several lengths, each with a step whose borders are known by
    construction, give those borders and the same epochs as with sums of their own."""
    from spikemeasure.analysis import epochs

    rng = np.random.default_rng(5)
    commands = []
    for seconds, size in ((1.2, 30.0), (0.8, -20.0), (1.0, 50.0)):
        cmd = steps_after_test_pulse([size], sampling_rate_hz=RATE, duration_s=seconds)[0]
        commands += [cmd, cmd + rng.normal(0.0, 1.0, cmd.size)]
    alone = [find_epochs(cmd, RATE) for cmd in commands]
    with epochs.sharing_index_sums():
        shared = [find_epochs(cmd, RATE) for cmd in commands]
        kept = epochs._shared.sums
    assert kept.x.size == max(cmd.size for cmd in commands)
    assert getattr(epochs._shared, "sums", None) is None  # dropped at the end
    assert shared == alone
    # built: the step over 0.3-0.8 s (its end cut by a shorter sweep)
    for cmd, found in zip(commands[::2], shared[::2]):
        assert (6000, min(16000, cmd.size)) in [(e.start, e.stop) for e in found.epochs]


@pytest.mark.parametrize("kind", ["levels", "noise", "mostly_level", "even", "rises_often"])
def test_command_noise_is_the_median_formula(kind):
    """Source: the robust noise of find_epochs' step 3 computed with numpy's median; the
    count that stands in for it on a command held at levels gives the same number."""
    from spikemeasure.analysis.epochs import _command_noise

    rng = np.random.default_rng(8)
    cmd = steps_after_test_pulse([40.0], sampling_rate_hz=RATE)[0]
    if kind == "noise":
        cmd = cmd + rng.normal(0.0, 2.0, cmd.size)
    elif kind == "mostly_level":  # 45 % of the differences not zero: still a level
        where = rng.choice(cmd.size - 1, int(0.45 * cmd.size), replace=False)
        cmd = cmd.copy()
        cmd[where + 1] += rng.normal(0.0, 1.0, where.size)
    elif kind == "even":
        cmd = cmd[:1001]  # 1000 differences: the median of the two middle values
    elif kind == "rises_often":  # 60 % of the differences positive
        cmd = np.cumsum(np.where(rng.random(cmd.size) < 0.6, 1.0, 0.0))
    d = np.diff(cmd)
    expected = 1.4826 * float(np.median(np.abs(d - np.median(d)))) / np.sqrt(2.0)
    assert _command_noise(cmd) == expected
