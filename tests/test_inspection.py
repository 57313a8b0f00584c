"""`spikemeasure inspect` lists the epochs of each sweep's command.

Source of the expected epochs: the commands built (spikemeasure/testing/commands.py), whose
levels, times and slopes are known by construction.
"""
import numpy as np
from click.testing import CliRunner

from conftest import write_text
from spikemeasure.cli import main
from spikemeasure.testing.commands import ramps, steps_after_test_pulse

RATE = 10_000.0


def _resting(n):
    """A cell at rest with 0.1 mV of noise (a flat trace would read as voltage clamp)."""
    return -70.0 + np.random.default_rng(2).normal(0.0, 0.1, n)


def test_inspect_lists_a_ramp(tmp_path):
    cmd = ramps([75.0], sampling_rate_hz=RATE)[0]
    path = write_text(tmp_path / "ramp.txt", _resting(cmd.size), cmd, rate_hz=RATE)
    r = CliRunner().invoke(main, ["inspect", str(path)])
    assert r.exit_code == 0, r.output
    assert ("sweep 0: ramp; 0.000-0.500 s 0.0 pA, 0.500-2.500 s ramp 0.0 to 150.0 pA "
            "(75.0 pA/s) (main), 2.500-3.000 s 0.0 pA") in r.output


def test_inspect_marks_the_test_pulse(tmp_path):
    cmd = steps_after_test_pulse([-20.0], sampling_rate_hz=RATE, holding_pa=-10.0)[0]
    path = write_text(tmp_path / "pulse.txt", _resting(cmd.size), cmd, rate_hz=RATE)
    r = CliRunner().invoke(main, ["inspect", str(path)])
    assert r.exit_code == 0, r.output
    assert ("sweep 0: step; 0.000-0.020 s -10.0 pA, 0.020-0.070 s -60.0 pA (test pulse), "
            "0.070-0.300 s -10.0 pA, 0.300-0.800 s -30.0 pA (main), 0.800-1.000 s -10.0 pA"
            ) in r.output
