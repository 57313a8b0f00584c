"""Current steps found in command traces, and sweeps that cannot be measured."""
import numpy as np
import pytest

from conftest import step_command
from spikemeasure.errors import InvalidSettingError, UnmeasurableDataError
from spikemeasure.analysis.sweeps import check_sweep, find_current_step, protocol_steps, step_from_times
from spikemeasure.io import Sweep
from spikemeasure.testing.commands import steps_after_test_pulse

RATE = 20_000.0


class TestFindCurrentStep:
    """Source: analytic rectangular steps with known onset, offset, size and holding."""

    @pytest.mark.parametrize("size", [-100.0, -10.0, 25.0, 400.0])
    def test_exact_step(self, size):
        cmd = step_command(4000, RATE, size, 0.05, 0.15, holding_pa=-20.0)
        step = find_current_step(cmd, RATE)
        assert step.onset_s == pytest.approx(0.05)
        assert step.offset_s == pytest.approx(0.15)
        assert step.size_pa == pytest.approx(size)
        assert step.holding_pa == pytest.approx(-20.0)
        assert step.duration_s == pytest.approx(0.10)

    def test_noisy_recorded_command(self):
        rng = np.random.default_rng(1)
        cmd = step_command(4000, RATE, 50.0, 0.05, 0.15) + rng.normal(0, 2.0, 4000)
        step = find_current_step(cmd, RATE)
        assert step.onset_s == pytest.approx(0.05, abs=2 / RATE)
        assert step.offset_s == pytest.approx(0.15, abs=2 / RATE)
        assert step.size_pa == pytest.approx(50.0, abs=0.5)

    def test_flat_command_has_no_step(self):
        assert find_current_step(np.full(1000, 30.0), RATE) is None

    def test_bad_arguments(self):
        with pytest.raises(InvalidSettingError, match="1-D"):
            find_current_step(np.zeros((3, 3)), RATE)
        with pytest.raises(InvalidSettingError, match="positive"):
            find_current_step(np.zeros(10), 0.0)


def test_step_from_times():
    step = step_from_times(0.1, 0.6, 0.8)
    assert (step.onset_s, step.offset_s) == (0.1, 0.6)
    assert np.isnan(step.size_pa)
    with pytest.raises(InvalidSettingError, match="START < END"):
        step_from_times(0.5, 0.2, 1.0)
    with pytest.raises(InvalidSettingError, match="after the sweep ends"):
        step_from_times(2.0, 3.0, 1.0)


class TestCheckSweep:
    def test_nan_stretch_is_measured_around_not_refused(self):
        v = np.full(2000, -70.0)
        v[1000:1100] = np.nan
        check_sweep(Sweep(v, RATE, file="cell.nwb", index=4))  # no error

    @pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
    def test_nothing_left_is_refused_naming_the_sweep_and_stretch(self, bad):
        """NaN or infinite almost everywhere: two finite samples are no stretch to measure."""
        v = np.full(2000, bad)
        v[1000:1002] = -70.0
        sweep = Sweep(v, RATE, file="cell.nwb", index=4)
        with pytest.raises(UnmeasurableDataError,
                           match=r"cell\.nwb, sweep 4: 1998 of 2000 voltage samples are NaN or "
                                 r"infinite \(0\.0000-0\.0500 s, 0\.0501-0\.0999 s\).*nothing "
                                 r"is left to measure"):
            check_sweep(sweep)

    def test_too_short(self):
        with pytest.raises(UnmeasurableDataError, match="only 2 voltage samples"):
            check_sweep(Sweep(np.zeros(2), RATE, file="x.txt"))

    def test_command_length_mismatch(self):
        with pytest.raises(UnmeasurableDataError, match="command has 10 samples"):
            check_sweep(Sweep(np.zeros(20), RATE, command_pa=np.zeros(10), file="x.txt"))


def test_slow_sampling_is_measured_not_refused():
    """1 kHz is too slow for spikes (the tables leave them empty) but not for passive values."""
    check_sweep(Sweep(np.zeros(100), 1000.0, file="x.txt"))
    with pytest.raises(UnmeasurableDataError, match=r"x\.txt, sweep 0: the sampling rate is 0 Hz"):
        check_sweep(Sweep(np.zeros(100), 0.0, file="x.txt"))


class TestMissingStretches:
    """Source: stretches placed by hand (start, stop exclusive)."""

    def test_stretches_at_the_ends_in_the_middle_and_one_sample_long(self):
        from spikemeasure.analysis.sweeps import missing_stretches, stretches_text

        v = np.zeros(100)
        v[:3] = np.nan
        v[50] = np.inf
        v[60:62] = -np.inf
        v[97:] = np.nan
        got = missing_stretches(v)
        assert got.tolist() == [[0, 3], [50, 51], [60, 62], [97, 100]]
        assert stretches_text(got, 100.0) == ("0.0000-0.0200 s, 0.5000 s, 0.6000-0.6100 s, "
                                              "and 1 more")
        assert missing_stretches(np.zeros(5)).shape == (0, 2)


class TestCommandWithGaps:
    """Source: an analytic rectangular step (onset 0.05 s, offset 0.15 s, +50 pA on -20 pA)
    with missing samples; the step is the same as without them."""

    def test_gap_inside_the_step_and_before_it(self):
        cmd = step_command(4000, RATE, 50.0, 0.05, 0.15, holding_pa=-20.0)
        cmd[1500:1600] = np.nan     # inside the step
        cmd[200:210] = np.inf       # in the holding stretch
        step = find_current_step(cmd, RATE)
        assert step is not None
        assert (step.onset_s, step.offset_s) == (pytest.approx(0.05), pytest.approx(0.15))
        assert step.size_pa == pytest.approx(50.0) and step.holding_pa == pytest.approx(-20.0)

    def test_gap_at_the_onset_moves_it_to_the_first_sample_seen(self):
        cmd = step_command(4000, RATE, 50.0, 0.05, 0.15)
        cmd[990:1010] = np.nan      # around the onset sample 1000
        step = find_current_step(cmd, RATE)
        assert step.onset_s == pytest.approx(1010 / RATE)
        assert step.offset_s == pytest.approx(0.15)

    def test_a_zero_sweep_with_a_gap_over_the_window_gets_no_step(self):
        from spikemeasure.analysis.sweeps import protocol_steps

        n = 4000
        cmds = [step_command(n, RATE, a, 0.05, 0.15) for a in (-50.0, 0.0)]
        cmds[1][2000:2400] = np.nan   # the 0 pA sweep's window: its step may be in the gap
        steps = protocol_steps([Sweep(np.zeros(n), RATE, c, index=k)
                                for k, c in enumerate(cmds)])
        assert steps[0] is not None and steps[1] is None


class TestStepHolds:
    """Source: the documented rule of sweeps.csv, spike_count: a spike counts when its time
    lies in [stimulus_start_s, stimulus_end_s), the onset in, the offset out."""

    def test_half_open_interval(self):
        from spikemeasure.analysis.sweeps import CurrentStep

        step = CurrentStep(0.1, 0.6, 20.0, 0.0)
        times = np.array([0.0999, 0.1, 0.35, 0.5999, 0.6, np.nan])
        assert step.holds(times).tolist() == [False, True, True, True, False, False]


class TestProtocolStepsWithATestPulse:
    """Source: the commands built (spikemeasure/testing/commands.py): holding -10 pA, a -50 pA
    test pulse over 0.02-0.07 s, steps over 0.3-0.8 s."""

    def _sweeps(self, sizes):
        cmd = steps_after_test_pulse(sizes, sampling_rate_hz=RATE, holding_pa=-10.0)
        return [Sweep(np.full(cmd.shape[1], -70.0), RATE, c, file="p.nwb", index=k)
                for k, c in enumerate(cmd)]

    def test_a_sweep_with_only_the_test_pulse_is_the_0_pa_step(self):
        steps = protocol_steps(self._sweeps([-50.0, 0.0, 50.0]))
        zero = steps[1]
        assert (zero.onset_s, zero.offset_s) == pytest.approx((0.3, 0.8))
        assert zero.size_pa == 0.0 and zero.shape == "step"
        assert zero.holding_pa == pytest.approx(-10.0)   # the pulse is not averaged in
        assert zero.test_pulse_pa == pytest.approx(-50.0)
        assert zero.baseline_start_s == pytest.approx(0.07)
        for step, size in zip(steps, (-50.0, 0.0, 50.0)):
            assert step.size_pa == pytest.approx(size)

    def test_without_a_command_the_step_times_are_used(self):
        sweeps = [Sweep(np.full(4000, -70.0), RATE, None, file="t.txt", index=0)]
        step, = protocol_steps(sweeps, step_s=(0.05, 0.15), step_sizes_pa=(20.0, 10.0))
        assert (step.onset_s, step.offset_s, step.size_pa) == (0.05, 0.15, 20.0)
        assert step.shape == "step" and step.baseline_start_s == 0.0
        assert np.isnan(step.holding_pa) and np.isnan(step.test_pulse_pa)
