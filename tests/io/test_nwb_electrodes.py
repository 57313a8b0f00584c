"""NWB files of several electrodes, and NWB files written before the intracellular tables.

Sources: files written in the tests with pynwb (the NWB standard's reference API), either with
the intracellular tables (spikemeasure.testing.nwb_files, pynwb's add_intracellular_recording
and the simultaneous and sequential recordings tables) or, as older files were, as series
carrying a sweep_number and an electrode, added with add_acquisition and add_stimulus only.
The arrays written are the expected values.
"""
import datetime
import warnings

import numpy as np
import pytest

from spikemeasure.io import read_recording
from spikemeasure.testing.nwb_files import ElectrodeSweeps, write_electrodes_nwb

RATE = 20_000.0
N = 2_000


def _traces(n_sweeps, offset_mv, step_pa):
    """Distinct flat voltages and step commands: sweep k at offset + k mV, step (k + 1) x
    step_pa from sample 500 to 1500."""
    voltage = np.array([np.full(N, offset_mv + k) for k in range(n_sweeps)])
    command = np.zeros((n_sweeps, N))
    for k in range(n_sweeps):
        command[k, 500:1500] = (k + 1) * step_pa
    return voltage, command


def _write_series_only(path, electrodes: dict):
    """An NWB file as written before the intracellular tables: each electrode's series with
    a sweep_number, added with add_acquisition and add_stimulus (no tables)."""
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    nwb = NWBFile(session_description="simulated, series only", identifier="series-only",
                  session_start_time=datetime.datetime(2026, 1, 1,
                                                       tzinfo=datetime.timezone.utc))
    device = nwb.create_device(name="amplifier")
    for name, (voltage, command) in electrodes.items():
        electrode = nwb.create_icephys_electrode(name=name, description="simulated",
                                                 device=device)
        for k in range(voltage.shape[0]):
            nwb.add_acquisition(CurrentClampSeries(
                name=f"{name}_v{k}", data=voltage[k], electrode=electrode, gain=1.0,
                rate=RATE, starting_time=float(k), sweep_number=k, conversion=1e-3))
            nwb.add_stimulus(CurrentClampStimulusSeries(
                name=f"{name}_i{k}", data=command[k], electrode=electrode, gain=1.0,
                rate=RATE, starting_time=float(k), sweep_number=k, conversion=1e-12))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwb)
        with NWBHDF5IO(str(path), "r") as io:  # the layout of older files: no tables
            table = io.read().intracellular_recordings
            assert table is None or len(table) == 0
    return path


class TestIntracellularTables:
    def test_two_electrodes_each_with_its_own_command(self, tmp_path):
        a, b = _traces(3, -70.0, 10.0), _traces(3, -60.0, -25.0)
        path = write_electrodes_nwb(tmp_path / "pair.nwb", [
            ElectrodeSweeps("left", *a, RATE), ElectrodeSweeps("right", *b, RATE)])
        rec = read_recording(path, shown_as="pair.nwb")
        assert rec.problems == []
        assert rec.electrodes() == ["left", "right"]
        for name, (voltage, command) in (("left", a), ("right", b)):
            sweeps = rec.sweeps_of(name)
            assert [s.index for s in sweeps] == [0, 1, 2]
            for k, sweep in enumerate(sweeps):
                np.testing.assert_allclose(sweep.voltage_mv, voltage[k], rtol=1e-12)
                np.testing.assert_allclose(sweep.command_pa, command[k], rtol=1e-12)
                assert sweep.electrode == name

    def test_electrodes_at_their_own_rates(self, tmp_path):
        a, b = _traces(2, -70.0, 10.0), _traces(2, -65.0, 20.0)
        path = write_electrodes_nwb(tmp_path / "rates.nwb", [
            ElectrodeSweeps("fast", *a, RATE), ElectrodeSweeps("slow", *b, RATE / 2)])
        rec = read_recording(path)
        assert {s.electrode: s.sampling_rate_hz for s in rec.sweeps} == {
            "fast": RATE, "slow": RATE / 2}

    def test_a_sweep_message_names_the_electrode(self, tmp_path):
        a, b = _traces(2, -70.0, 10.0), _traces(2, -65.0, 20.0)
        path = write_electrodes_nwb(tmp_path / "pair.nwb", [
            ElectrodeSweeps("left", *a, RATE), ElectrodeSweeps("right", *b, RATE)])
        sweep = read_recording(path, shown_as="pair.nwb").sweeps_of("right")[1]
        assert sweep.where().startswith("pair.nwb, electrode right, sweep 1 (")

    def test_the_writer_refuses_electrodes_of_unequal_sweep_counts(self, tmp_path):
        with pytest.raises(ValueError, match="same number of sweeps"):
            write_electrodes_nwb(tmp_path / "x.nwb", [
                ElectrodeSweeps("a", *_traces(2, -70.0, 1.0), RATE),
                ElectrodeSweeps("b", *_traces(3, -70.0, 1.0), RATE)])


class TestSeriesWithoutTables:
    def test_one_electrode_reads_as_before(self, tmp_path):
        voltage, command = _traces(3, -70.0, 10.0)
        path = _write_series_only(tmp_path / "old.nwb", {"electrode": (voltage, command)})
        rec = read_recording(path, shown_as="old.nwb")
        assert rec.problems == [] and rec.electrodes() == ["electrode"]
        assert [s.label for s in rec.sweeps] == [f"sweep_number {k}, electrode_v{k}"
                                                  for k in range(3)]
        for k, sweep in enumerate(rec.sweeps):
            np.testing.assert_allclose(sweep.voltage_mv, voltage[k], rtol=1e-12)
            np.testing.assert_allclose(sweep.command_pa, command[k], rtol=1e-12)

    def test_two_electrodes_sharing_sweep_numbers_are_two_cells(self, tmp_path):
        """Before, the second electrode's responses were dropped ("2 responses share this
        sweep number"); now each is paired with its own electrode's stimulus."""
        a, b = _traces(2, -70.0, 10.0), _traces(2, -55.0, 30.0)
        path = _write_series_only(tmp_path / "old.nwb", {"e1": a, "e2": b})
        rec = read_recording(path)
        assert rec.problems == [] and rec.electrodes() == ["e1", "e2"]
        for name, (voltage, command) in (("e1", a), ("e2", b)):
            for k, sweep in enumerate(rec.sweeps_of(name)):
                assert sweep.index == k
                np.testing.assert_allclose(sweep.voltage_mv, voltage[k], rtol=1e-12)
                np.testing.assert_allclose(sweep.command_pa, command[k], rtol=1e-12)


def test_table_rows_referring_to_parts_of_one_series(tmp_path):
    """Two intracellular recordings referring to halves of one series (pynwb's
    response_start_index and response_index_count): two sweeps, each its own half."""
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    nwb = NWBFile(session_description="simulated", identifier="parts",
                  session_start_time=datetime.datetime(2026, 1, 1,
                                                       tzinfo=datetime.timezone.utc))
    electrode = nwb.create_icephys_electrode(name="e", description="simulated",
                                             device=nwb.create_device(name="amplifier"))
    voltage = np.concatenate([np.full(N, -70.0), np.full(N, -60.0)])
    command = np.concatenate([np.zeros(N), np.full(N, 5.0)])
    response = CurrentClampSeries(name="v", data=voltage, electrode=electrode, gain=1.0,
                                  rate=RATE, starting_time=0.0, conversion=1e-3)
    stimulus = CurrentClampStimulusSeries(name="i", data=command, electrode=electrode,
                                          gain=1.0, rate=RATE, starting_time=0.0,
                                          conversion=1e-12)
    for k in range(2):
        nwb.add_intracellular_recording(
            electrode=electrode, stimulus=stimulus, response=response,
            stimulus_start_index=k * N, stimulus_index_count=N,
            response_start_index=k * N, response_index_count=N)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(tmp_path / "parts.nwb"), "w") as io:
            io.write(nwb)
    rec = read_recording(tmp_path / "parts.nwb")
    assert rec.problems == [] and [s.index for s in rec.sweeps] == [0, 1]
    for k, sweep in enumerate(rec.sweeps):
        np.testing.assert_allclose(sweep.voltage_mv, voltage[k * N:(k + 1) * N], rtol=1e-12)
        np.testing.assert_allclose(sweep.command_pa, command[k * N:(k + 1) * N], rtol=1e-12)
