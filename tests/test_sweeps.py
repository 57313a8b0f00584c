"""Current steps found in command traces, and sweeps that cannot be measured."""
import numpy as np
import pytest

from conftest import step_command
from spikemeasure.errors import InvalidSettingError, UnmeasurableDataError
from spikemeasure.sweeps import Sweep, check_sweep, find_current_step, step_from_times

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
    def test_nan_stretch_named(self):
        v = np.full(2000, -70.0)
        v[1000:1100] = np.nan
        sweep = Sweep(v, RATE, file="cell.nwb", index=4)
        with pytest.raises(UnmeasurableDataError,
                           match=r"cell\.nwb, sweep 4: 100 voltage samples are NaN.*0\.0500 s"):
            check_sweep(sweep)

    def test_too_short(self):
        with pytest.raises(UnmeasurableDataError, match="only 2 voltage samples"):
            check_sweep(Sweep(np.zeros(2), RATE, file="x.txt"))

    def test_command_length_mismatch(self):
        with pytest.raises(UnmeasurableDataError, match="command has 10 samples"):
            check_sweep(Sweep(np.zeros(20), RATE, command_pa=np.zeros(10), file="x.txt"))


def test_too_slow_sampling_is_refused():
    with pytest.raises(UnmeasurableDataError, match=r"x\.txt, sweep 0: sampled at 1000 Hz"):
        check_sweep(Sweep(np.zeros(100), 1000.0, file="x.txt"))
