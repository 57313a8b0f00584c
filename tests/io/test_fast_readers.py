"""The h5py readers of NWB and NIX against neo and pynwb, the reference readers.

Every NWB and NIX file the suite builds (sample_data, the example lab, several electrodes,
compact storage, the older pairing by sweep number, conversion factors for V, mV, A, pA and
nA, a series sampled at timestamps, NIX written by neo's NixIO in several units and with
named channels) is read both ways; the sweeps must be identical: samples bitwise, sampling
rate, command, electrode, labels, channels and every problem reported. Source of the
expected values: neo 0.14 (NWBIO's signal proxies, NixIO) over pynwb, which implement the NWB
and NIX open standards independently of this project.
"""
from __future__ import annotations

import datetime
import warnings
from pathlib import Path

import numpy as np
import pytest

from spikemeasure.io import nix, nwb, read_recording
from spikemeasure.io.nwb_hdf5 import FastPathUnsupported
from spikemeasure.testing.nwb_files import ElectrodeSweeps, write_electrodes_nwb

from conftest import REPOSITORY, set_hdf5_values, write_nix, write_nwb

RATE = 20_000.0
N = 2000


def _sweeps(n_sweeps: int = 2, offset_mv: float = -65.0, step_pa: float = 20.0):
    t = np.arange(N) / RATE
    voltage = np.stack([offset_mv + 3.0 * np.sin(2 * np.pi * (k + 1) * 7.0 * t) + 0.1 * k
                        for k in range(n_sweeps)])
    command = np.zeros((n_sweeps, N))
    command[:, N // 4: 3 * N // 4] = step_pa * (np.arange(n_sweeps)[:, None] + 1)
    return voltage, command


def _write_series_only(path: Path) -> Path:
    """NWB as written before the intracellular tables: series with sweep numbers only."""
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    nwbfile = NWBFile(session_description="simulated, series only", identifier="older",
                      session_start_time=datetime.datetime(2026, 1, 1,
                                                           tzinfo=datetime.timezone.utc))
    device = nwbfile.create_device(name="amplifier")
    for name, offset in (("e1", -70.0), ("e2", -60.0)):
        electrode = nwbfile.create_icephys_electrode(name=name, description="simulated",
                                                     device=device)
        voltage, command = _sweeps(2, offset)
        for k in (1, 0):  # written out of order: sweep numbers, not names, pair them
            nwbfile.add_acquisition(CurrentClampSeries(
                name=f"{name}_v{k}", data=voltage[k], electrode=electrode, gain=1.0,
                rate=RATE, starting_time=float(k), sweep_number=k, conversion=1e-3))
            nwbfile.add_stimulus(CurrentClampStimulusSeries(
                name=f"{name}_i{k}", data=command[k], electrode=electrode, gain=1.0,
                rate=RATE, starting_time=float(k), sweep_number=k, conversion=1e-12))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwbfile)
    return path


def _write_with_timestamps(path: Path) -> Path:
    """One sweep at a constant rate and one sampled at listed times (refused either way)."""
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries

    nwbfile = NWBFile(session_description="simulated", identifier="timestamps",
                      session_start_time=datetime.datetime(2026, 1, 1,
                                                           tzinfo=datetime.timezone.utc))
    device = nwbfile.create_device(name="amplifier")
    electrode = nwbfile.create_icephys_electrode(name="e", description="sim", device=device)
    voltage, _ = _sweeps(2)
    nwbfile.add_acquisition(CurrentClampSeries(
        name="by_rate", data=voltage[0], electrode=electrode, gain=1.0, rate=RATE,
        starting_time=0.0, sweep_number=0, conversion=1e-3))
    nwbfile.add_acquisition(CurrentClampSeries(
        name="by_times", data=voltage[1], electrode=electrode, gain=1.0,
        timestamps=1.0 + np.arange(N) / RATE, sweep_number=1, conversion=1e-3))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwbfile)
    return path


def _write_named_channels_nix(path: Path) -> Path:
    """A NIX sweep (neo's NixIO) with two named voltage channels in one signal and a
    current channel in V and nA."""
    import neo
    import quantities as pq

    voltage, command = _sweeps(2)
    block = neo.Block(name="cell")
    segment = neo.Segment(name="sweep 0")
    segment.analogsignals.append(neo.AnalogSignal(
        np.stack([voltage[0], voltage[1]], axis=1) * 1e-3, units="V",
        sampling_rate=RATE * pq.Hz, name="membrane",
        array_annotations={"channel_names": np.array(["left", "right"])}))
    segment.analogsignals.append(neo.AnalogSignal(
        command[0][:, None] * 1e-3, units="nA", sampling_rate=RATE * pq.Hz, name="command"))
    block.segments.append(segment)
    with neo.io.NixIO(str(path), mode="ow") as io:
        io.write_block(block)
    return path


@pytest.fixture(scope="module")
def built_files(tmp_path_factory) -> dict[str, Path]:
    """Every NWB and NIX variant, written once for the module: {name: path}."""
    folder = tmp_path_factory.mktemp("fast_readers")
    pairs = [tuple(s) for s in zip(*_sweeps(2))]
    a, b = _sweeps(2, -70.0, 10.0), _sweeps(2, -60.0, -25.0)
    files = {
        "electrodes.nwb": write_electrodes_nwb(folder / "electrodes.nwb", [
            ElectrodeSweeps("left", *a, RATE), ElectrodeSweeps("right", *b, RATE)]),
        "compact.nwb": write_electrodes_nwb(folder / "compact.nwb", [
            ElectrodeSweeps("only", *a, RATE)], compact=True),
        "older.nwb": _write_series_only(folder / "older.nwb"),
        "timestamps.nwb": _write_with_timestamps(folder / "timestamps.nwb"),
        "named.nix": _write_named_channels_nix(folder / "named.nix"),
        "mv_pa.nix": write_nix(folder / "mv_pa.nix", pairs, rate_hz=RATE),
        "v_na.nix": write_nix(folder / "v_na.nix", pairs, rate_hz=RATE, voltage_units="V",
                              current_units="nA"),
        "voltage_only.nix": write_nix(folder / "voltage_only.nix", pairs, rate_hz=RATE,
                                      include_current=False),
    }
    for v_scale, i_scale, name in ((1.0, 1.0, "v_a"), (1e-3, 1e-12, "mv_pa"),
                                   (1e-3, 1e-9, "mv_na")):
        files[f"{name}.nwb"] = write_nwb(folder / f"{name}.nwb", pairs, rate_hz=RATE,
                                         voltage_unit_scale=v_scale, current_scale=i_scale)
    files["late_stimulus.nwb"] = write_nwb(folder / "late_stimulus.nwb", pairs, rate_hz=RATE,
                                           stimulus_offset_s=0.01)
    return files


def _through_neo(path: Path):
    """The recording as neo and pynwb read it (the h5py readers switched off)."""
    def not_read_here(*args):
        raise FastPathUnsupported("switched off for the reference reading")

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(nwb, "_read_nwb_fast", not_read_here)
        patch.setattr(nix, "_read_nix_fast", not_read_here)
        return read_recording(path, shown_as=path.name)


def _through_h5py(path: Path):
    """The recording as the h5py reader reads it; fails if the file would go through neo."""
    if path.suffix == ".nwb":
        return nwb._read_nwb_fast(path, path.name, 10 ** 9)
    return nix._read_nix_fast(str(path), path.name, 10 ** 9)


def _assert_same(fast, reference) -> None:
    assert fast.format == reference.format
    assert fast.problems == reference.problems
    assert fast.problem_electrodes == reference.problem_electrodes
    assert fast.channels == reference.channels
    assert len(fast.sweeps) == len(reference.sweeps)
    for a, b in zip(fast.sweeps, reference.sweeps):
        a = a.loaded()  # samples that wait in the file, read as they are when measured
        assert a.voltage_mv.dtype == b.voltage_mv.dtype == np.float64
        assert a.voltage_mv.tobytes() == b.voltage_mv.tobytes()  # bitwise
        assert (a.command_pa is None) == (b.command_pa is None)
        if a.command_pa is not None:
            assert a.command_pa.tobytes() == b.command_pa.tobytes()
        for key in ("sampling_rate_hz", "file", "index", "label", "channel_info",
                    "electrode", "cells_in_file"):
            assert getattr(a, key) == getattr(b, key), key


SHIPPED = sorted([*(REPOSITORY / "sample_data").glob("*.nwb"),
                  *(REPOSITORY / "sample_data").glob("*.nix"),
                  *(REPOSITORY / "docs" / "example-lab" / "recordings").glob("*.nwb")])


@pytest.mark.parametrize("path", SHIPPED, ids=[p.name for p in SHIPPED])
def test_shipped_recordings_read_alike(path):
    _assert_same(_through_h5py(path), _through_neo(path))


@pytest.mark.parametrize("name", ["electrodes.nwb", "compact.nwb", "older.nwb",
                                  "timestamps.nwb", "v_a.nwb", "mv_pa.nwb", "mv_na.nwb",
                                  "late_stimulus.nwb", "named.nix", "mv_pa.nix", "v_na.nix",
                                  "voltage_only.nix"])
def test_built_variants_read_alike(built_files, name):
    _assert_same(_through_h5py(built_files[name]), _through_neo(built_files[name]))


def test_the_variants_hold_what_they_claim(built_files):
    """The variants test what they are named for: two cells, the older pairing, a refused
    timestamp series, named NIX channels, a command of 20 pA and 40 pA in every unit."""
    assert _through_h5py(built_files["electrodes.nwb"]).electrodes() == ["left", "right"]
    older = _through_h5py(built_files["older.nwb"])
    assert older.format.endswith("paired by sweep number)")
    assert older.electrodes() == ["e1", "e2"]
    refused = _through_h5py(built_files["timestamps.nwb"])
    assert len(refused.sweeps) == 1 and "timestamps" in refused.problems[0]
    assert _through_h5py(built_files["named.nix"]).electrodes() == ["left", "right"]
    for name in ("v_a.nwb", "mv_na.nwb", "v_na.nix"):
        sweeps = _through_h5py(built_files[name]).sweeps
        # the written step, in pA, as the units declared by the file say (within float32)
        assert [float(np.max(s.command_pa)) for s in sweeps] == pytest.approx([20.0, 40.0])


def test_an_offset_goes_the_reference_way(built_files, tmp_path):
    """A series with an NWB ``offset`` is not read from HDF5 (neo does not apply it; the
    result stays neo's)."""
    path = tmp_path / "offset.nwb"
    path.write_bytes(built_files["mv_pa.nwb"].read_bytes())
    set_hdf5_values(path, "voltage_0/data", attribute="offset", value=0.5)
    with pytest.raises(FastPathUnsupported):
        _through_h5py(path)
    _assert_same(read_recording(path, shown_as=path.name), _through_neo(path))
