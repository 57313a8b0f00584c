"""Long gap-free recordings: measured in pieces, read through neo's lazy loading.

The reference for every check here is the same data measured in one pass over the whole
trace (what the issue asks: the same spikes whether read whole or in pieces), on traces of
the Wang & Buzsaki (1996) model driven by a slowly varying random current, so that spikes fall
at irregular times and some land on the borders between pieces.
"""
from __future__ import annotations

import csv
import fcntl
import os
from dataclasses import fields

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter1d

from spikemeasure.analysis import spikes_in_parts as measurement
from spikemeasure.io import LazyTrace, limits, read_recording
from spikemeasure.analysis.detection import DetectionSettings
from spikemeasure.errors import InvalidSettingError, UnreadableInputError
from spikemeasure.analysis.spikes import SpikeMeasurements, measure_trace
from spikemeasure.analysis.spikes_in_parts import measure_in_pieces, piece_margin_samples
from spikemeasure.run import measure_paths
from spikemeasure.testing import simulate_current_waveform

from conftest import write_nix, write_nix_huge_declared, write_nwb, write_nwb_huge_declared

RATE_HZ = 20_000.0


@pytest.fixture(scope="module")
def gap_free(tmp_path_factory) -> np.ndarray:
    """4 s of irregular firing (Wang & Buzsaki 1996 model) with 0.3 mV recording noise.

    Simulated once per test session: under pytest-xdist the first worker to get here writes
    it (.npy, read back without pickle) to the session's folder, under a lock, for the others.
    """
    worker = os.environ.get("PYTEST_XDIST_WORKER")
    if worker is None:
        return _simulate_gap_free()
    shared = tmp_path_factory.getbasetemp().parent  # this session's, common to its workers
    path = shared / "gap_free_trace.npy"
    with open(shared / "gap_free_trace.lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)  # released when the file closes
        if not path.exists():
            partial = shared / f"gap_free_trace.{worker}.npy"
            np.save(partial, _simulate_gap_free())
            os.replace(partial, path)
    return np.load(path, allow_pickle=False)


def _simulate_gap_free() -> np.ndarray:
    rng = np.random.default_rng(7)
    n = int(4 * RATE_HZ)
    drive = np.repeat(rng.normal(0.0, 1.0, n // 200 + 1), 200)[:n]
    command_pa = np.clip(40.0 + 250.0 * gaussian_filter1d(drive, 400), -50.0, None)
    voltage = simulate_current_waveform("wang_buzsaki_1996", command_pa, RATE_HZ)
    return voltage + rng.normal(0.0, 0.3, n)


def assert_same_spikes(pieces: SpikeMeasurements, whole: SpikeMeasurements) -> None:
    assert len(pieces) == len(whole)
    assert pieces.flags == whole.flags
    for f in fields(SpikeMeasurements):
        if f.name == "flags":
            continue
        a, b = getattr(pieces, f.name), getattr(whole, f.name)
        assert np.array_equal(np.isnan(a), np.isnan(b)), f.name
        # the same samples give the same numbers; times differ by rounding only, as each
        # piece's are shifted by its start
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-8, err_msg=f.name)


@pytest.mark.parametrize("method", ["onset_rate", "max_rate_fraction", "second_derivative_peak"])
def test_pieces_give_the_spikes_of_the_whole_trace(gap_free, method):
    settings = DetectionSettings(threshold_method=method)
    whole = measure_trace(gap_free, RATE_HZ, settings)
    assert len(whole) > 30
    for piece in (25_000, 77_777):
        assert_same_spikes(measure_in_pieces(gap_free, RATE_HZ, settings, piece_samples=piece),
                           whole)


def test_borders_through_a_spike_measure_it_once(gap_free):
    """Piece borders put on a spike's onset, between onset and peak, at the peak and inside
    its afterhyperpolarization: the spike is measured once, as in the whole trace."""
    settings = DetectionSettings()
    whole = measure_trace(gap_free, RATE_HZ, settings)
    k = len(whole) // 2
    onset = int(np.floor(whole.threshold_s[k] * RATE_HZ))
    peak = int(round(whole.peak_s[k] * RATE_HZ))
    for border in (onset, onset + 1, (onset + peak) // 2, peak, peak + 40, peak + 400):
        assert_same_spikes(measure_in_pieces(gap_free, RATE_HZ, settings, piece_samples=border),
                           whole)


def test_a_lazy_trace_is_read_in_bounded_pieces(gap_free):
    reads = []

    def read(start, stop):
        reads.append(stop - start)
        return gap_free[start:stop]

    lazy = LazyTrace(read, gap_free.size)
    settings = DetectionSettings()
    piece = 50_000
    assert_same_spikes(measure_in_pieces(lazy, RATE_HZ, settings, piece_samples=piece),
                       measure_trace(gap_free, RATE_HZ, settings))
    assert max(reads) <= piece + 2 * piece_margin_samples(settings, RATE_HZ)
    assert sum(reads) < 1.5 * gap_free.size


def test_nan_in_a_piece_is_measured_as_in_the_whole_trace(gap_free):
    """Source: the same trace with the same gap measured whole (measure_around_gaps): the
    spikes, their values, their flags and the gaps are the same read in pieces, including a
    gap across the border between two pieces."""
    v = gap_free.copy()
    v[50_000:50_010] = np.nan
    v[39_990:40_020] = np.inf        # across the border of the first two pieces
    v[70_000] = np.nan               # one sample
    whole = measurement.measure_around_gaps(v, RATE_HZ)
    pieces, gaps = measurement.measure_in_pieces_with_gaps(v, RATE_HZ, piece_samples=40_000)
    assert gaps.tolist() == [[39_990, 40_020], [50_000, 50_010], [70_000, 70_001]]
    assert len(pieces) == len(whole) > 10
    assert pieces.flags == whole.flags
    assert any(measurement.GAP_FLAG in f for f in whole.flags)
    for f in fields(SpikeMeasurements):
        if f.name == "flags":
            continue
        a, b = getattr(pieces, f.name), getattr(whole, f.name)
        assert np.array_equal(np.isnan(a), np.isnan(b)), f.name
        np.testing.assert_allclose(a[np.isfinite(a)], b[np.isfinite(b)], rtol=0, atol=1e-8,
                                   err_msg=f.name)


def test_piece_settings_are_checked(gap_free):
    with pytest.raises(InvalidSettingError, match="piece_samples"):
        measure_in_pieces(gap_free, RATE_HZ, piece_samples=0)
    with pytest.raises(InvalidSettingError, match="search_window_ms"):
        DetectionSettings(search_window_ms=1.0)


def test_the_search_window_bounds_the_trough():
    """A spike at 50 ms followed by an AHP of 5 (1 - exp(-s / 1 ms)) exp(-s / 10 ms) mV and,
    400 ms later, a slow dip to -80 mV. The AHP's minimum, by differentiating, lies at
    s = 1 ms * ln(11) with depth 5 * (10 / 11) * exp(-ln(11) / 10) mV; that is the trough within
    the default 200 ms, and the dip (-80 mV at 450 ms) the trough within 500 ms."""
    rate = 20_000.0
    t = np.arange(int(0.8 * rate)) / rate
    v = -70.0 + 100.0 * np.exp(-(t - 0.05) ** 2 / (2 * 0.0004 ** 2))
    s = np.clip(t - 0.05, 0.0, None)
    v -= 5.0 * (1.0 - np.exp(-s / 0.001)) * np.exp(-s / 0.010)
    v -= 10.0 * np.exp(-(t - 0.45) ** 2 / (2 * 0.02 ** 2))
    near = measure_trace(v, rate)
    far = measure_trace(v, rate, DetectionSettings(search_window_ms=500.0))
    s_min = 0.001 * np.log(11.0)
    depth = 5.0 * (10.0 / 11.0) * np.exp(-np.log(11.0) / 10.0)
    assert near.trough_s[0] == pytest.approx(0.05 + s_min, abs=2e-4)
    assert near.trough_mv[0] == pytest.approx(-70.0 - depth, abs=0.05)
    assert far.trough_mv[0] == pytest.approx(-80.0, abs=0.05)
    assert far.trough_s[0] == pytest.approx(0.45, abs=1e-3)


# ------------------------------------------------------------------ files, through the runner

def _rows(path):
    with open(path, newline="") as fh:
        return list(csv.reader(fh))


@pytest.fixture()
def small_pieces(monkeypatch):
    """Make 'long' mean more than 60,000 samples and pieces 40,000, so a 4 s file is long."""
    monkeypatch.setattr(limits, "LONG_SWEEP_SAMPLES", 60_000)
    monkeypatch.setattr(measurement, "PIECE_SAMPLES", 40_000)


@pytest.mark.parametrize("suffix", [".nwb", ".nix"])
def test_a_long_file_read_in_pieces_gives_the_spikes_of_a_whole_read(
        tmp_path, gap_free, suffix, monkeypatch):
    folder = tmp_path / "recordings"
    folder.mkdir()
    holding = np.full(gap_free.size, 0.0)
    writer = write_nwb if suffix == ".nwb" else write_nix
    writer(folder / f"gap_free{suffix}", [(gap_free, holding)], rate_hz=RATE_HZ)

    whole = measure_paths([str(folder)], tmp_path / "whole", jobs=1)
    assert whole.files_failed == 0
    with read_recording(folder / f"gap_free{suffix}") as rec:
        assert not rec.sweeps[0].is_lazy

    monkeypatch.setattr(limits, "LONG_SWEEP_SAMPLES", 60_000)
    monkeypatch.setattr(measurement, "PIECE_SAMPLES", 40_000)
    with read_recording(folder / f"gap_free{suffix}") as rec:
        assert rec.sweeps[0].is_lazy and rec.sweeps[0].command_pa is None
    pieces = measure_paths([str(folder)], tmp_path / "pieces", jobs=1)
    assert pieces.files_failed == 0
    whole_rows, piece_rows = _rows(whole.spikes_path), _rows(pieces.spikes_path)
    assert len(whole_rows) > 30
    assert piece_rows == whole_rows


def test_a_long_sweep_whose_command_steps_is_read_whole(tmp_path, gap_free, small_pieces):
    command = np.zeros(gap_free.size)
    command[20_000:60_000] = 50.0
    path = write_nwb(tmp_path / "stepped.nwb", [(gap_free, command)], rate_hz=RATE_HZ)
    with read_recording(path) as rec:
        sweep = rec.sweeps[0]
        assert not sweep.is_lazy and sweep.command_pa is not None
        assert isinstance(sweep.voltage_mv, np.ndarray)


def test_the_documented_sizes_hold():
    """docs/measurements.md says sweeps over twice the piece size are read in pieces."""
    assert limits.LONG_SWEEP_SAMPLES == 2 * measurement.PIECE_SAMPLES


def test_a_piece_that_cannot_be_read_names_the_file_and_sweep(tmp_path, gap_free, small_pieces,
                                                               monkeypatch):
    """The file opens, but a piece of it fails to read later (a damaged block of an HDF5 file):
    that sweep fails with the file, the sweep, the samples and the cause; the run goes on."""
    path = write_nwb(tmp_path / "damaged.nwb", [(gap_free, np.zeros(gap_free.size))],
                     rate_hz=RATE_HZ)
    from neo.io.nwbio import AnalogSignalProxy

    real_load = AnalogSignalProxy.load

    def failing_load(self, time_slice=None, strict_slicing=True):
        if time_slice is not None and float(time_slice[0].rescale("s").magnitude) > 1.0:
            raise OSError("Can't read data (inflate() failed)")
        return real_load(self, time_slice=time_slice, strict_slicing=strict_slicing)

    monkeypatch.setattr(AnalogSignalProxy, "load", failing_load)
    summary = measure_paths([str(path)], tmp_path / "out", jobs=1)
    assert summary.files_failed == 1
    message = summary.failures[0]["message"]
    assert message.startswith("damaged.nwb, sweep 0")
    assert "cannot be read" in message and "inflate() failed" in message


def test_envelope_of_a_lazy_trace_equals_that_of_the_array(gap_free):
    from spikemeasure.figures import envelope

    reads = []

    def read(start, stop):
        reads.append(stop - start)
        return gap_free[start:stop]

    t_lazy, v_lazy = envelope(LazyTrace(read, gap_free.size), RATE_HZ, bins=333)
    t_whole, v_whole = envelope(gap_free, RATE_HZ, bins=333)
    np.testing.assert_array_equal(t_lazy, t_whole)
    np.testing.assert_array_equal(v_lazy, v_whole)


def test_a_long_file_gets_its_figures_while_read_in_pieces(tmp_path, gap_free, small_pieces):
    path = write_nwb(tmp_path / "gap_free.nwb", [(gap_free, np.zeros(gap_free.size))],
                     rate_hz=RATE_HZ)
    summary = measure_paths([str(path)], tmp_path / "out", jobs=1, figure_format="png")
    assert summary.files_failed == 0 and summary.failures == []
    drawn = sorted(p.name for p in (tmp_path / "out" / "figures").rglob("*.png"))
    assert {"traces.png", "first_spike.png", "phase_plot.png"} <= set(drawn)


# ------------------------------------------------------------------ responses and stimuli of other lengths

def test_a_long_response_with_a_shorter_stimulus(tmp_path, gap_free, small_pieces):
    """NWB (pynwb): a response long enough to stay in the file, its stimulus shorter. As for
    short sweeps, the stimulus is not used as the command, and the problem says why."""
    short_stimulus = np.zeros(gap_free.size // 2)
    path = write_nwb(tmp_path / "short_stimulus.nwb", [(gap_free, short_stimulus)],
                     rate_hz=RATE_HZ)
    with read_recording(path, shown_as="short_stimulus.nwb") as rec:
        sweep, = rec.sweeps
        assert sweep.is_lazy and sweep.command_pa is None
        assert rec.problems == [
            "short_stimulus.nwb, sweep 0 (sweep_number 0, voltage_0): the current channel "
            f"({short_stimulus.size} samples at 20000 Hz) does not match the voltage "
            f"({gap_free.size} samples at 20000 Hz); it was not used as the command"]
    summary = measure_paths([str(path)], tmp_path / "out", jobs=1)
    assert summary.files_measured == 1 and len(summary.failures) == 1


def test_a_long_stimulus_that_starts_earlier_is_cut_to_the_response(tmp_path, gap_free,
                                                                    small_pieces):
    """Both long and left in the file; the stimulus starts 0.5 s before the response and
    steps inside it: its part under the response (by the series' starting times, NWB) is the
    command, as on the in-memory path, and the sweep is read whole for the step features."""
    lead = int(0.5 * RATE_HZ)
    stimulus = np.zeros(gap_free.size + 2 * lead)
    stimulus[lead + 20_000:lead + 60_000] = 50.0
    path = write_nwb(tmp_path / "early.nwb", [(gap_free, stimulus)], rate_hz=RATE_HZ,
                     stimulus_offset_s=-0.5)
    with read_recording(path) as rec:
        sweep, = rec.sweeps
        assert rec.problems == []
        assert not sweep.is_lazy
        np.testing.assert_allclose(sweep.command_pa, stimulus[lead:lead + gap_free.size],
                                   atol=1e-6)


def test_a_short_response_in_a_long_stimulus_gets_its_part(tmp_path, gap_free, small_pieces):
    """NWB (pynwb): a 1 s response inside a 4 s stimulus that starts 1 s earlier; the stimulus
    is long and left in the file, and its part under the response (by the starting times) is
    the command, read whole as the response is."""
    stimulus = np.zeros(gap_free.size)
    stimulus[int(1.2 * RATE_HZ):int(1.7 * RATE_HZ)] = 80.0
    response = gap_free[:int(RATE_HZ)]
    path = write_nwb(tmp_path / "inside.nwb", [(response, stimulus)], rate_hz=RATE_HZ,
                     stimulus_offset_s=-1.0)
    with read_recording(path) as rec:
        sweep, = rec.sweeps
        assert rec.problems == [] and not sweep.is_lazy
        assert isinstance(sweep.command_pa, np.ndarray)
        np.testing.assert_allclose(sweep.command_pa,
                                   stimulus[int(RATE_HZ):2 * int(RATE_HZ)], atol=1e-6)


# ------------------------------------------------------------------ declared sizes

class _Unread(Exception):
    """Raised by any attempt to read samples, to show a refusal reads none."""


@pytest.fixture()
def no_sample_reads(monkeypatch):
    from neo.io.nwbio import AnalogSignalProxy

    def refuse(self, time_slice=None, strict_slicing=True):
        raise _Unread("samples were read")

    monkeypatch.setattr(AnalogSignalProxy, "load", refuse)


def test_a_sweep_declaring_ten_billion_samples_is_refused_unread(tmp_path, no_sample_reads):
    """An NWB file (h5py: a chunked, gzip-compressed dataset of fill values, a few kB on disk)
    whose voltage and stimulus declare 10^10 samples: refused from its declared shape, before
    any sample is read (reading it took more than ten minutes)."""
    path = write_nwb_huge_declared(tmp_path / "huge.nwb")
    assert path.stat().st_size < 1_000_000
    with pytest.raises(UnreadableInputError) as caught:
        read_recording(path, shown_as="huge.nwb")
    message = str(caught.value)
    assert message.startswith("huge.nwb, sweep 0, series voltage_0 (sweep_number 0): the file "
                              "declares 10,000,000,000 samples for this sweep, more than "
                              "max_sweep_samples (1,000,000,000); it was not read")
    summary = measure_paths([str(path)], tmp_path / "out", jobs=1)
    assert summary.files_failed == 1
    assert "10,000,000,000 samples" in summary.failures[0]["message"]


def test_a_nix_sweep_declaring_ten_billion_samples_is_refused_the_other_kept(tmp_path,
                                                                            monkeypatch):
    """NIX (neo's NixIO, one array swapped by h5py for 10^10 declared samples): that sweep is
    refused before any of its samples is read (neo's proxies refuse to load here), and the
    other sweep of the file is read."""
    from neo.io.proxyobjects import AnalogSignalProxy

    path = write_nix_huge_declared(tmp_path / "huge.nix")
    real_load = AnalogSignalProxy.load

    def load_small_only(self, *args, **kwargs):
        if self.shape[0] > 10_000:
            raise _Unread("samples of the huge array were read")
        return real_load(self, *args, **kwargs)

    monkeypatch.setattr(AnalogSignalProxy, "load", load_small_only)
    with read_recording(path, shown_as="huge.nix") as rec:
        (kept,) = [s.index for s in rec.sweeps]  # which segment the huge array is in varies
        assert rec.problems == [
            f"huge.nix, sweep {1 - kept}: the file declares 10,000,000,000 samples for this "
            "sweep, more than max_sweep_samples (1,000,000,000); it was not read. Raise "
            "--max-sweep-samples if the recording really is that long"]


def test_the_limit_is_a_run_parameter(tmp_path):
    """--max-sweep-samples and the project file's max_sweep_samples reach the reader; the
    run record keeps the value."""
    import json

    from click.testing import CliRunner

    from spikemeasure.cli import main

    short = [(np.full(2000, -70.0), np.zeros(2000))]
    folder = tmp_path / "in"
    folder.mkdir()
    write_nix(folder / "cell.nix", short, rate_hz=RATE_HZ)
    with read_recording(folder / "cell.nix", max_sweep_samples=2000) as rec:
        assert len(rec.sweeps) == 1
    with pytest.raises(UnreadableInputError,
                       match=r"cell\.nix, sweep 0: the file declares 2,000 samples for this "
                             r"sweep, more than max_sweep_samples \(1,999\)"):
        read_recording(folder / "cell.nix", shown_as="cell.nix", max_sweep_samples=1999)
    with pytest.raises(InvalidSettingError, match="max_sweep_samples"):
        read_recording(folder / "cell.nix", max_sweep_samples=0)
    with pytest.raises(InvalidSettingError, match="max_sweep_samples"):
        measure_paths([str(folder)], tmp_path / "none", max_sweep_samples=2.5)
    assert not (tmp_path / "none").exists()

    result = CliRunner().invoke(main, ["measure", str(folder), "--out", str(tmp_path / "a"),
                                       "--max-sweep-samples", "1999", "--no-figures"])
    assert result.exit_code == 1, result.output
    assert "more than max_sweep_samples (1,999)" in (tmp_path / "a" / "errors.csv").read_text()
    record = json.loads((tmp_path / "a" / "run.json").read_text())
    assert record["parameters"]["max_sweep_samples"] == 1999

    (folder / "spikemeasure.toml").write_text("[measure]\nmax_sweep_samples = 1500\n")
    result = CliRunner().invoke(main, ["measure", str(folder), "--out", str(tmp_path / "b"),
                                       "--no-figures"])
    assert result.exit_code == 1, result.output
    assert "more than max_sweep_samples (1,500)" in (tmp_path / "b" / "errors.csv").read_text()


@pytest.mark.parametrize("line", ["max_sweep_samples = 0", "max_sweep_samples = 2.5",
                                  'max_sweep_samples = "many"', "max_sweep_samples = -1"])
def test_the_project_file_limit_is_checked(tmp_path, line):
    from spikemeasure.config import ConfigError, RunParameters, load_config

    path = tmp_path / "spikemeasure.toml"
    path.write_text(f"[measure]\n{line}\n")
    with pytest.raises(ConfigError, match=r"\[measure\] `max_sweep_samples` must be a whole "
                                          r"number, 1 or more"):
        load_config(path)
    path.write_text("[measure]\nmax_sweep_samples = 1e6\n")
    assert load_config(path) == {"max_sweep_samples": 1_000_000}
    values = RunParameters.from_dict({"max_sweep_samples": 5000}).as_dict()
    assert RunParameters.from_dict(values).max_sweep_samples == 5000


def test_a_sweep_larger_than_the_memory_available_is_not_read_whole(tmp_path, monkeypatch):
    """The declared size as float64 against the memory available (here said to be 1 kB):
    a 2,000-sample sweep (16 kB) read whole is refused before it is read."""
    monkeypatch.setattr(limits, "available_memory_bytes", lambda: 1000)
    for writer, name in ((write_nwb, "cell.nwb"), (write_nix, "cell.nix")):
        path = writer(tmp_path / name, [(np.full(2000, -70.0), np.zeros(2000))],
                      rate_hz=RATE_HZ)
        with pytest.raises(UnreadableInputError, match=r"GiB of memory available; it was not "
                                                       r"read"):
            read_recording(path)


def test_lazy_sweep_with_a_gap_gets_the_same_spikes_and_flags_as_whole(gap_free):
    """Source: the same trace with the same gap measured whole (measure_around_gaps); a long
    sweep kept in its file has the same spikes, and its count is flagged a lower bound."""
    from spikemeasure.io import Sweep
    from spikemeasure.tables.build import measure_sweep

    v = gap_free.copy()
    v[30_000:30_200] = np.nan
    lazy = Sweep(LazyTrace(lambda a, b: v[a:b], v.size), RATE_HZ, file="long.nwb")
    result = measure_sweep(lazy)
    whole = measurement.measure_around_gaps(v, RATE_HZ)
    assert result.error is None
    np.testing.assert_allclose(result.spikes.peak_s, whole.peak_s, rtol=0, atol=1e-8)
    assert result.spikes.flags == whole.flags
    assert result.features.spike_count == len(whole)
    assert result.features.flags == ("spike_count_lower_bound",)
    assert np.isnan(result.features.firing_rate_hz)
