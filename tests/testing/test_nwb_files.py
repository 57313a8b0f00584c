"""The multi-electrode NWB writer, read back with pynwb (the NWB standard's reference API)."""
import numpy as np
import pytest

from spikemeasure.testing.nwb_files import ElectrodeSweeps, write_electrodes_nwb


def test_written_series_read_back_with_pynwb(tmp_path):
    import pynwb

    v = np.arange(12.0).reshape(3, 4) - 70.0
    c = np.arange(12.0).reshape(3, 4) * 10.0
    path = write_electrodes_nwb(tmp_path / "x.nwb", [ElectrodeSweeps("a", v, c, 1000.0),
                                                     ElectrodeSweeps("b", v + 5, -c, 2000.0)])
    with pynwb.NWBHDF5IO(str(path), "r") as io:
        nwb = io.read()
        table = nwb.intracellular_recordings.category_tables
        responses = table["responses"]["response"]
        electrodes = table["electrodes"]["electrode"]
        assert [electrodes[k].name for k in range(6)] == ["a", "b"] * 3
        ref = responses[3]  # sweep 1 of electrode b
        assert ref.timeseries.electrode.name == "b" and ref.timeseries.rate == 2000.0
        np.testing.assert_allclose(np.asarray(ref.timeseries.data) * ref.timeseries.conversion,
                                   (v[1] + 5) * 1e-3)
        stimulus = table["stimuli"]["stimulus"][3].timeseries
        np.testing.assert_allclose(np.asarray(stimulus.data) * stimulus.conversion,
                                   -c[1] * 1e-12)
        assert len(nwb.icephys_simultaneous_recordings) == 3


@pytest.mark.parametrize("bad, match", [
    ([], "at least one"),
    ([ElectrodeSweeps("a", np.zeros((2, 3)), np.zeros((2, 4)), 1e3)], "one shape"),
    ([ElectrodeSweeps("a/b", np.zeros((2, 3)), np.zeros((2, 3)), 1e3)], "without '/'"),
    ([ElectrodeSweeps("a", np.zeros((2, 3)), np.zeros((2, 3)), 0.0)], "positive"),
])
def test_bad_arguments_are_named(tmp_path, bad, match):
    with pytest.raises(ValueError, match=match):
        write_electrodes_nwb(tmp_path / "x.nwb", bad)
