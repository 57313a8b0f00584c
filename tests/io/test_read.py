"""Reading NWB, NIX and text files into sweeps, and refusing what cannot be read."""
import os
import pickle
import re
import warnings

import numpy as np
import pytest

from conftest import (gaussian_train, set_hdf5_values, step_command, write_nix,
                      write_nix_sampling_interval, write_nwb, write_text)
from spikemeasure.errors import UnreadableInputError
from spikemeasure.io import limits, read_recording
from spikemeasure.run import measure_paths
from spikemeasure.tables.build import measure_recording, spike_table

RATE = 20_000.0


def _sweeps(n=3, n_samples=2000):
    """Distinct sweeps: sweep k has a (k + 1) * 10 pA step and k spikes."""
    out = []
    for k in range(n):
        _, v = gaussian_train(RATE, [25.0 + 15.0 * j for j in range(k)], n_samples / RATE * 1e3)
        out.append((v, step_command(n_samples, RATE, (k + 1) * 10.0, 0.02, 0.08, -5.0)))
    return out


class TestNWB:
    """Source: files written in the test with pynwb's intracellular API (the NWB standard)."""

    def test_sweeps_paired_with_their_own_stimulus(self, tmp_path):
        sweeps = _sweeps()
        rec = read_recording(write_nwb(tmp_path / "cell.nwb", sweeps, rate_hz=RATE))
        assert len(rec.sweeps) == 3
        for k, s in enumerate(rec.sweeps):
            assert s.index == k
            assert s.sampling_rate_hz == pytest.approx(RATE)
            np.testing.assert_allclose(s.voltage_mv, sweeps[k][0], rtol=1e-6, atol=1e-4)
            np.testing.assert_allclose(s.command_pa, sweeps[k][1], atol=1e-3)
        results = measure_recording(rec)
        assert [len(r.spikes) for r in results] == [0, 1, 2]
        assert [round(r.step.size_pa) for r in results] == [10, 20, 30]
        assert [round(r.step.holding_pa) for r in results] == [-5, -5, -5]

    def test_sweep_number_order_not_name_order(self, tmp_path):
        # twelve sweeps: names sort as 0, 1, 10, 11, 2 ... but sweep numbers are 0..11
        sweeps = _sweeps(12, 1200)
        rec = read_recording(write_nwb(tmp_path / "cell.nwb", sweeps, rate_hz=RATE))
        sizes = [round(measure_recording(rec)[k].step.size_pa) for k in range(12)]
        assert sizes == [10 * (k + 1) for k in range(12)]

    def test_units_volts_and_millivolts_picoamps_and_nanoamps_agree(self, tmp_path):
        sweeps = _sweeps()
        a = write_nwb(tmp_path / "mv_pa.nwb", sweeps, rate_hz=RATE)
        b = write_nwb(tmp_path / "v_na.nwb", sweeps, rate_hz=RATE, voltage_unit_scale=1.0,
                      current_scale=1e-9)
        ta = spike_table(measure_recording(read_recording(a)))
        tb = spike_table(measure_recording(read_recording(b)))
        for name in ("threshold_mv", "peak_mv", "half_width_ms", "trough_mv"):
            np.testing.assert_allclose(ta[name], tb[name], rtol=1e-5, atol=1e-4)

    def test_voltage_clamp_is_refused(self, tmp_path):
        path = write_nwb(tmp_path / "vc.nwb", _sweeps(1), rate_hz=RATE, voltage_clamp=True)
        with pytest.raises(UnreadableInputError, match=r"vc\.nwb: a voltage-clamp recording"):
            read_recording(path)

    def test_truncated_file(self, tmp_path):
        path = write_nwb(tmp_path / "cell.nwb", _sweeps(), rate_hz=RATE)
        data = path.read_bytes()
        path.write_bytes(data[: len(data) // 3])
        with pytest.raises(UnreadableInputError,
                           match=r"cell\.nwb: cannot be read as NWB \(the file is truncated: [0-9,]+ of"):
            read_recording(path)

    def test_not_hdf5(self, tmp_path):
        path = tmp_path / "fake.nwb"
        path.write_text("not a recording")
        with pytest.raises(UnreadableInputError, match="HDF5 signature"):
            read_recording(path)


class TestNIX:
    """Source: files written with neo's NixIO (the NIX open format)."""

    def test_one_sweep_per_segment_any_units(self, tmp_path):
        sweeps = _sweeps()
        a = read_recording(write_nix(tmp_path / "a.nix", sweeps, rate_hz=RATE))
        b = read_recording(write_nix(tmp_path / "b.nix", sweeps, rate_hz=RATE,
                                     voltage_units="V", current_units="nA"))
        assert len(a.sweeps) == len(b.sweeps) == 3
        for sa, sb, (v, i) in zip(a.sweeps, b.sweeps, sweeps):
            np.testing.assert_allclose(sa.voltage_mv, v, rtol=1e-12)
            np.testing.assert_allclose(sb.voltage_mv, v, rtol=1e-12)
            np.testing.assert_allclose(sb.command_pa, i, rtol=1e-12, atol=1e-9)
        assert [c.role for c in a.channels] == ["voltage", "command"]

    def test_no_voltage_channel(self, tmp_path):
        import neo
        import quantities as pq

        block = neo.Block()
        seg = neo.Segment()
        seg.analogsignals.append(neo.AnalogSignal(np.zeros((100, 1)), units="pA",
                                                  sampling_rate=RATE * pq.Hz, name="current"))
        block.segments.append(seg)
        path = tmp_path / "current_only.nix"
        with neo.io.NixIO(str(path), mode="ow") as io:
            io.write_block(block)
        with pytest.raises(UnreadableInputError,
                           match=r"current_only\.nix, sweep 0: no channel in volts"):
            read_recording(path)


class TestText:
    """Source: numpy.savetxt files with unit-suffixed headers."""

    def test_tab_and_comma_and_units(self, tmp_path):
        (v, i), = _sweeps(1)
        a = read_recording(write_text(tmp_path / "a.tsv", v, i, rate_hz=RATE))
        b = read_recording(write_text(tmp_path / "b.csv", v, i, rate_hz=RATE, delimiter=",",
                                      time_unit="ms", voltage_unit="V", current_unit="nA"))
        for rec in (a, b):
            s, = rec.sweeps
            assert s.sampling_rate_hz == pytest.approx(RATE, rel=1e-6)
            np.testing.assert_allclose(s.voltage_mv, v, rtol=1e-8)
            np.testing.assert_allclose(s.command_pa, i, atol=1e-6)
            assert s.voltage_mv.dtype == np.float64

    def test_without_time_needs_rate(self, tmp_path):
        (v, i), = _sweeps(1)
        path = write_text(tmp_path / "no_time.txt", v, i, with_time=False)
        with pytest.raises(UnreadableInputError, match="--sampling-rate"):
            read_recording(path)
        rec = read_recording(path, sampling_rate_hz=RATE)
        assert rec.sweeps[0].sampling_rate_hz == RATE

    def test_no_header(self, tmp_path):
        path = tmp_path / "bare.txt"
        path.write_text("0\t-70\n0.00005\t-70\n0.0001\t-70\n")
        with pytest.raises(UnreadableInputError, match="no header row"):
            read_recording(path)

    def test_truncated_rows(self, tmp_path):
        path = tmp_path / "cut.txt"
        path.write_text("time_s\tvoltage_mV\n0\t-70\n0.00005\t-70\n0.0001\n")
        with pytest.raises(UnreadableInputError,
                           match=r"cut\.txt: line 4 has 1 field but the header names 2 columns"):
            read_recording(path)

    def test_uneven_time(self, tmp_path):
        path = tmp_path / "uneven.txt"
        path.write_text("time_s,voltage_mV\n0,-70\n0.001,-70\n0.002,-70\n0.005,-70\n")
        with pytest.raises(UnreadableInputError, match="not evenly spaced"):
            read_recording(path)

    def test_no_voltage_column(self, tmp_path):
        path = tmp_path / "current.csv"
        path.write_text("time_s,current_pA\n0,0\n0.001,0\n0.002,0\n")
        with pytest.raises(UnreadableInputError, match="no voltage column"):
            read_recording(path)


class TestRefusals:
    def test_empty_file(self, tmp_path):
        for name in ("empty.nwb", "empty.txt", "empty.nix"):
            (tmp_path / name).write_bytes(b"")
            with pytest.raises(UnreadableInputError, match=rf"{name}: the file is empty"):
                read_recording(tmp_path / name)

    def test_missing_file(self, tmp_path):
        with pytest.raises(UnreadableInputError, match="no such file"):
            read_recording(tmp_path / "absent.nwb")

    def test_pickle_by_suffix_and_by_content(self, tmp_path):
        marker = tmp_path / "ran"
        payload = pickle.dumps({"voltage": [1, 2, 3]})
        (tmp_path / "data.pkl").write_bytes(payload)
        (tmp_path / "data.txt").write_bytes(payload)
        for name in ("data.pkl", "data.txt"):
            with pytest.raises(UnreadableInputError, match="pickle"):
                read_recording(tmp_path / name)
        assert not marker.exists()
        # The message names the file as the run shows it, like every other reading message.
        with pytest.raises(UnreadableInputError, match=r"^cells/data\.pkl: pickle"):
            read_recording(tmp_path / "data.pkl", shown_as="cells/data.pkl")

    def test_unknown_suffix(self, tmp_path):
        path = tmp_path / "cell.unknownformat"
        path.write_text("x")
        with pytest.raises(UnreadableInputError, match="no reader"):
            read_recording(path)


def test_other_formats_through_neo_detection(tmp_path):
    """Source: a file written by neo's own MATLAB-format writer, routed by its suffix to the
    neo reader of that format."""
    import neo
    import quantities as pq

    (v, i), = _sweeps(1)
    block = neo.Block()
    seg = neo.Segment()
    seg.analogsignals.append(neo.AnalogSignal(v[:, None] * 1e-3, units="V",
                                              sampling_rate=RATE * pq.Hz, name="Vm"))
    seg.analogsignals.append(neo.AnalogSignal(i[:, None] * 1e-3, units="nA",
                                              sampling_rate=RATE * pq.Hz, name="I"))
    block.segments.append(seg)
    path = tmp_path / "cell.mat"
    neo.io.NeoMatlabIO(str(path)).write_block(block)
    rec = read_recording(path)
    assert rec.format == "neo NeoMatlabIO"
    np.testing.assert_allclose(rec.sweeps[0].voltage_mv, v, rtol=1e-12)
    np.testing.assert_allclose(rec.sweeps[0].command_pa, i, rtol=1e-12, atol=1e-9)


# ------------------------------------------------------------------ damaged time axes and scales

class TestDamagedTimeAxis:
    """Files written with neo's NixIO and pynwb (the open standards), then given, with h5py,
    a sampling interval, rate, starting time or conversion factor no writer accepts. Each
    must be one error naming the file, the sweep and the value, not a crash."""

    @pytest.mark.parametrize("interval, shown", [(0.0, "0"), (np.nan, "nan"), (-5e-5, "-5e-05"),
                                                 (np.inf, "inf")])
    def test_nix_sampling_interval(self, tmp_path, interval, shown):
        path = write_nix_sampling_interval(tmp_path / "bad.nix", _sweeps(1), interval)
        with pytest.raises(UnreadableInputError) as caught:
            read_recording(path, shown_as="bad.nix")
        message = str(caught.value)
        assert message.startswith("bad.nix, sweep 0: the sampling rate is")
        assert f"(sampling interval {shown} s)" in message
        assert message.count("sampling") == 2  # one message, not two contradicting ones

    @pytest.mark.parametrize("offset", [np.nan, -np.inf])
    def test_nix_starting_time(self, tmp_path, offset):
        path = write_nix(tmp_path / "bad.nix", _sweeps(1))
        set_hdf5_values(path, "properties/t_start", value=[offset])  # where neo keeps it
        with pytest.raises(UnreadableInputError,
                           match=rf"^bad\.nix, sweep 0: the starting time is {offset:g} s; it "
                                 "must be a finite number"):
            read_recording(path, shown_as="bad.nix")

    @pytest.mark.parametrize("rate", [0.0, np.nan, -20_000.0, np.inf])
    def test_nwb_rate(self, tmp_path, rate):
        path = write_nwb(tmp_path / "bad.nwb", _sweeps(1), rate_hz=RATE)
        set_hdf5_values(path, "starting_time", attribute="rate", value=rate)
        with pytest.raises(UnreadableInputError,
                           match=rf"bad\.nwb, sweep 0, series voltage_0 \(sweep_number 0\): the "
                                 rf"sampling rate is {rate:g} Hz; it must be a positive, finite"):
            read_recording(path)

    @pytest.mark.parametrize("start", [np.nan, np.inf])
    def test_nwb_starting_time(self, tmp_path, start):
        path = write_nwb(tmp_path / "bad.nwb", _sweeps(1), rate_hz=RATE)
        set_hdf5_values(path, "starting_time", value=start, within="acquisition")
        with pytest.raises(UnreadableInputError,
                           match=rf"bad\.nwb, sweep 0, series voltage_0 .*the starting time is "
                                 rf"{start:g} s"):
            read_recording(path)

    @pytest.mark.parametrize("factor", [0.0, np.nan, -1e-3])
    def test_nwb_conversion_factor(self, tmp_path, factor):
        # 0 made neo take the stored millivolts for volts: -70 mV read as -70,000 mV
        path = write_nwb(tmp_path / "bad.nwb", _sweeps(1), rate_hz=RATE)
        set_hdf5_values(path, "data", attribute="conversion", value=factor, within="acquisition")
        with pytest.raises(UnreadableInputError,
                           match=rf"bad\.nwb, sweep 0, .*the conversion factor to volts is "
                                 rf"{factor:g}; it must be a positive, finite number"):
            read_recording(path)

    def test_one_bad_sweep_leaves_the_others(self, tmp_path):
        sweeps = _sweeps(3)
        path = write_nwb(tmp_path / "cell.nwb", sweeps, rate_hz=RATE)
        set_hdf5_values(path, "starting_time", attribute="rate", value=0.0, within="voltage_1")
        rec = read_recording(path, shown_as="cell.nwb")
        assert [s.index for s in rec.sweeps] == [0, 2]
        np.testing.assert_allclose(rec.sweeps[1].voltage_mv, sweeps[2][0], rtol=1e-6, atol=1e-4)
        assert len(rec.problems) == 1
        assert rec.problems[0].startswith("cell.nwb, sweep 1, series voltage_1 (sweep_number 1):")
        assert "the sampling rate is 0 Hz" in rec.problems[0]

    @pytest.mark.parametrize("times, expected", [
        ("0\n0\n0\n0", "does not increase at data row 2 \\(a step of zero or less\\)"),
        ("0\n0.001\n0.0005\n0.0015", "does not increase at data row 3 \\(a step of zero"),
        ("0\nnan\n0.002\n0.003", "is not a finite number at data row 2"),
    ])
    def test_text_time_that_does_not_increase(self, tmp_path, times, expected):
        path = tmp_path / "back.txt"
        path.write_text("time_s\tvoltage_mV\n" +
                        "\n".join(f"{t}\t-70" for t in times.split("\n")) + "\n")
        with pytest.raises(UnreadableInputError, match=rf"back\.txt: the time column {expected}"):
            read_recording(path)

    def test_a_series_sampled_at_timestamps_is_named(self, tmp_path):
        """pynwb: a current-clamp response with timestamps instead of a rate."""
        import datetime

        from pynwb import NWBHDF5IO, NWBFile
        from pynwb.icephys import CurrentClampSeries

        nwb = NWBFile(session_description="test", identifier="t",
                      session_start_time=datetime.datetime(2026, 1, 1,
                                                           tzinfo=datetime.timezone.utc))
        device = nwb.create_device(name="amplifier")
        electrode = nwb.create_icephys_electrode(name="e", description="test", device=device)
        nwb.add_acquisition(CurrentClampSeries(
            name="voltage_0", data=np.full(100, -0.07), electrode=electrode, gain=1.0,
            timestamps=np.arange(100) / RATE, sweep_number=0))
        path = tmp_path / "stamped.nwb"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # pynwb's note on the sweep number's type
            with NWBHDF5IO(str(path), "w") as io:
                io.write(nwb)
        with pytest.raises(UnreadableInputError,
                           match=r"stamped\.nwb, sweep 0, series voltage_0 \(sweep_number 0\): "
                                 r"sampled at listed times \(timestamps\), not at a constant"):
            read_recording(path, shown_as="stamped.nwb")

    def test_the_step_finder_refuses_an_infinite_rate(self):
        from spikemeasure.errors import InvalidSettingError
        from spikemeasure.analysis.sweeps import find_current_step

        with pytest.raises(InvalidSettingError, match="positive, finite"):
            find_current_step(np.zeros(100), float("inf"))


# ------------------------------------------------------------------ several voltage channels

def test_each_voltage_channel_of_a_nix_sweep_is_a_cell_of_its_own(tmp_path):
    """A NIX sweep (neo's NixIO) holding two voltage channels in one signal, a third in a
    second signal and two current channels: each voltage channel is a cell, named by its
    channel, with the current channel of the same rank as its command. Source: the arrays
    written, read back exactly."""
    import neo
    import quantities as pq

    (v, i), = _sweeps(1)
    seg = neo.Segment(name="sweep 0")
    seg.analogsignals.append(neo.AnalogSignal(np.column_stack([v, v + 1.0]), units="mV",
                                              sampling_rate=RATE * pq.Hz, name="vm"))
    seg.analogsignals.append(neo.AnalogSignal(v[:, None] * 1e-3, units="V",
                                              sampling_rate=RATE * pq.Hz, name="second"))
    seg.analogsignals.append(neo.AnalogSignal(np.column_stack([i, 2 * i]), units="pA",
                                              sampling_rate=RATE * pq.Hz, name="command"))
    block = neo.Block()
    block.segments.append(seg)
    path = tmp_path / "three_cells.nix"
    with neo.io.NixIO(str(path), mode="ow") as io:
        io.write_block(block)
    rec = read_recording(path)
    assert rec.problems == []
    assert rec.electrodes() == ["vm[0]", "vm[1]", "second"]
    first, second, third = rec.sweeps
    np.testing.assert_allclose(first.voltage_mv, v, rtol=1e-12)
    np.testing.assert_allclose(second.voltage_mv, v + 1.0, rtol=1e-12)
    np.testing.assert_allclose(third.voltage_mv, v, rtol=1e-12)
    np.testing.assert_allclose(first.command_pa, i, rtol=1e-12)
    np.testing.assert_allclose(second.command_pa, 2 * i, rtol=1e-12)
    assert third.command_pa is None
    assert [s.index for s in rec.sweeps] == [0, 0, 0]


def test_each_voltage_column_of_a_text_file_is_a_cell_with_its_own_command(tmp_path):
    """Source: the columns written with numpy.savetxt, read back."""
    (v, i), = _sweeps(1)
    t = np.arange(v.size) / RATE
    path = tmp_path / "two.csv"
    np.savetxt(path, np.column_stack([t, v, i, v - 5.0, 3 * i]), delimiter=",", comments="",
               header="time_s,cell_a_mV,cell_a_pA,cell_b_mV,cell_b_pA", fmt="%.10g")
    rec = read_recording(path)
    assert rec.problems == [] and rec.electrodes() == ["cell_a", "cell_b"]
    a, b = rec.sweeps
    np.testing.assert_allclose(a.voltage_mv, v, rtol=1e-9)
    np.testing.assert_allclose(b.voltage_mv, v - 5.0, rtol=1e-9)
    np.testing.assert_allclose(a.command_pa, i, rtol=1e-9)
    np.testing.assert_allclose(b.command_pa, 3 * i, rtol=1e-9)
    assert [c.role for c in rec.channels] == ["time", "voltage", "command", "voltage",
                                              "command"]


def test_one_voltage_column_keeps_an_empty_electrode(tmp_path):
    (v, i), = _sweeps(1)
    rec = read_recording(write_text(tmp_path / "cell.txt", v, i, rate_hz=RATE))
    assert rec.electrodes() == [""]


# ------------------------------------------------------------------ text files: what is wrong

_ROWS = [(0.0, -70.125, 10.5), (5e-5, -70.25, 10.5), (1e-4, -70.375, 10.5), (1.5e-4, -70.5, 0.0)]


def _text(rows, cell, sep):
    return "\n".join(sep.join(cell(x) for x in row) for row in rows) + "\n"


@pytest.mark.parametrize("name, content, expected", [
    ("semicolons.csv",
     "time_s;voltage_mV;current_pA\n" + _text(_ROWS, lambda x: repr(x).replace(".", ","), ";"),
     r"the columns are separated by semicolons and numbers use ',' as the decimal mark"),
    ("semicolons_dot.csv",
     "time_s;voltage_mV;current_pA\n" + _text(_ROWS, repr, ";"),
     r"the columns are separated by semicolons; "),
    ("decimal_comma.tsv",
     "time_s\tvoltage_mV\tcurrent_pA\n" + _text(_ROWS, lambda x: repr(x).replace(".", ","), "\t"),
     r"line 2, column 1 is not a number: it seems to use ',' as the decimal mark"),
    ("decimal_comma.csv",
     "time_s,voltage_mV,current_pA\n" + _text(_ROWS, lambda x: repr(x).replace(".", ","), ","),
     r"line 2 has 6 fields but the header names 3 columns \(a ',' used as the decimal mark"),
    ("thousands.tsv",
     "time_s\tvoltage_mV\tcurrent_pA\n" + _text([(r[0], r[1], 1234.5) for r in _ROWS],
                                                lambda x: f"{x:,}", "\t"),
     r"line 2, column 3 is not a number: it seems to hold a thousands separator"),
    ("spaces.txt",
     "time_s\tvoltage_mV\tcurrent_pA\n" + _text(_ROWS, repr, " "),
     r"line 2 is separated by spaces but the header by tabs"),
    ("comment_only.txt", "time_s\tvoltage_mV\n# nothing recorded\n",
     r"a header row but no data rows"),
    ("blank.txt", "\n\n\n", r"the file holds only blank lines"),
    ("quoted.csv", 'time_s,voltage_mV\n"0","-70"\n"0.00005","-70"\n"0.0001","-70"\n',
     r"line 2, column 1 is a number in quotes; write numbers without quotes"),
    ("word.txt", "time_s\tvoltage_mV\n0\t-70\n0.00005\tabc\n0.0001\t-70\n",
     r"line 3, column 2 is not a number; "),
])
def test_text_says_what_is_wrong(tmp_path, name, content, expected):
    """Each message names the file and the problem (the separator, the decimal mark, the line
    and column), not the header or the numbers."""
    path = tmp_path / name
    path.write_text(content, encoding="utf-8")
    with pytest.raises(UnreadableInputError, match=rf"^{re.escape(str(path))}: .*{expected}"):
        read_recording(path)


@pytest.mark.parametrize("encoding, expected", [("utf-16", "the file is UTF-16 text"),
                                                ("utf-16-le", "the file looks like UTF-16 text "
                                                              "without a byte-order mark"),
                                                ("utf-32", "the file is UTF-32 text"),
                                                ("latin-1", r"not UTF-8 text \(line 1 ")])
def test_text_in_other_encodings(tmp_path, encoding, expected):
    path = tmp_path / "cell.txt"
    path.write_bytes("time_s\tvoltage_µV\n0\t-70000\n0.00005\t-70000\n0.0001\t-70000\n"
                     .encode(encoding))
    with pytest.raises(UnreadableInputError, match=rf"cell\.txt: {expected}"):
        read_recording(path)


def test_a_pipe_named_like_a_recording_is_not_read(tmp_path):
    path = tmp_path / "x.txt"
    os.mkfifo(path)
    with pytest.raises(UnreadableInputError, match=r"x\.txt: not a regular file"):
        read_recording(path)


def test_binary_bytes_are_not_taken_for_text(tmp_path):
    path = tmp_path / "image.txt"
    path.write_bytes(bytes(range(256)) * 4)
    with pytest.raises(UnreadableInputError,
                       match=r"image\.txt: not a text file \(it holds zero bytes"):
        read_recording(path)


# ------------------------------------------------------------------ no file content in messages

SECRET = "s3cret-Line-7"


@pytest.mark.parametrize("content", [
    f"user:x:1000:1000:{SECRET}:/nonexistent:/bin/sh\nguest:x:1001:1001:{SECRET}\n",
    f"time_s\tvoltage_mV\n0\t{SECRET}\n0.1\t-70\n0.2\t-70\n",
    f"time_s\tvoltage_mV\n0\t-70 {SECRET}\n0.1\t-70\n",
])
def test_no_file_content_reaches_a_message(tmp_path, content):
    """A link named like a recording to some other file (a system file, in the case that was
    seen): the message and every output of the run say what is wrong, never what it holds."""
    target = tmp_path / "elsewhere" / "accounts"
    target.parent.mkdir()
    target.write_text(content, encoding="latin-1")
    folder = tmp_path / "in"
    folder.mkdir()
    (folder / "x.txt").symlink_to(target)
    with pytest.raises(UnreadableInputError) as caught:
        read_recording(folder / "x.txt", shown_as="x.txt")
    assert str(caught.value).startswith("x.txt")
    assert SECRET.lower() not in str(caught.value).lower()
    summary = measure_paths([str(folder / "x.txt")], tmp_path / "out", jobs=1)  # given: followed
    assert summary.files_failed == 1
    for written in (tmp_path / "out").rglob("*"):
        if written.is_file():
            assert SECRET.lower() not in written.read_text(errors="replace").lower(), written.name


def test_names_from_a_file_are_shown_only_when_plain(tmp_path):
    """A segment and a signal named with a line of text (as a file can name them): the
    message speaks of the sweep by its number and of the channel by its units."""
    import neo
    import quantities as pq

    seg = neo.Segment(name=f"user:x:1000:1000:{SECRET}:/nonexistent")
    seg.analogsignals.append(neo.AnalogSignal(np.zeros((100, 1)), units="pA",
                                              sampling_rate=RATE * pq.Hz,
                                              name=f"notes/{SECRET}/of the day"))
    block = neo.Block()
    block.segments.append(seg)
    path = tmp_path / "named.nix"
    with neo.io.NixIO(str(path), mode="ow") as io:
        io.write_block(block)
    with pytest.raises(UnreadableInputError,
                       match=r"named\.nix, sweep 0: no channel in volts \(1 channel in pA\)"
                       ) as caught:
        read_recording(path)
    assert SECRET not in str(caught.value)


@pytest.fixture
def example_reader_route(monkeypatch):
    """Route ``.fake`` to neo's example reader for one test: a neo reader that needs no file
    content (it makes up its signals, which is why the suffix table leaves it out)."""
    import neo.io

    from spikemeasure.io.neo_formats import read_with_neo
    from spikemeasure.io.suffixes import FormatReader, suffix_table

    def read(path, shown, sampling_rate_hz, max_sweep_samples):
        return read_with_neo(neo.io.ExampleIO, path, shown, max_sweep_samples)

    monkeypatch.setitem(suffix_table(), ".fake",
                        FormatReader("neo ExampleIO", read, neo.io.ExampleIO))


def test_a_reader_failure_is_named_by_its_type_only(tmp_path, monkeypatch,
                                                    example_reader_route):
    """Other formats go to the one neo reader their suffix names (``.fake`` routed to neo's
    example reader for the test); a reader's exception text can quote the file, so only its
    type is kept."""
    import neo.io

    def quoting_read(self, lazy=False):
        raise ValueError(f"could not parse {SECRET!r}")

    monkeypatch.setattr(neo.io.ExampleIO, "read", quoting_read)
    path = tmp_path / "cell.fake"
    path.write_text(SECRET)
    with pytest.raises(UnreadableInputError) as caught:
        read_recording(path, shown_as="cell.fake")
    assert str(caught.value) == (
        "cell.fake: no reader could open it (ExampleIO failed with ValueError); the file may "
        "be damaged or of another format")


def test_a_library_failure_keeps_its_type_not_its_text(tmp_path, monkeypatch):
    """pynwb/hdmf errors can quote names and values read from the file: only their type and
    a fixed description are kept (HDF5's own error texts hold no data and are kept). The
    file goes the pynwb way, as one the h5py reader does not read would."""
    import pynwb

    from spikemeasure.io import nwb

    path = write_nwb(tmp_path / "cell.nwb", _sweeps(1), rate_hz=RATE)

    def failing_read(self):
        raise ValueError(f"bad value {SECRET!r} in 'acquisition'")

    def not_read_here(*args):
        raise nwb.FastPathUnsupported("a layout the h5py reader does not read")

    monkeypatch.setattr(nwb, "_read_nwb_fast", not_read_here)
    monkeypatch.setattr(pynwb.NWBHDF5IO, "read", failing_read)
    with pytest.raises(UnreadableInputError,
                       match=r"cell\.nwb: cannot be read as NWB \(ValueError in the reading "
                             r"library; ") as caught:
        read_recording(path)
    assert SECRET not in str(caught.value)


def test_other_formats_are_size_checked_before_loading(tmp_path, example_reader_route):
    """neo's example reader (suffix .fake; it makes two segments of 100,000 samples of 8, 6
    and 2 channels, as neo generates them): with a limit under its declared size the sweeps
    are refused from their shapes, and the refusal names the file, sweep and limit."""
    path = tmp_path / "cell.fake"
    path.write_text("placeholder")
    rec = read_recording(path, shown_as="cell.fake")
    # one cell per voltage channel, each with the two segments as its sweeps
    assert len(rec.electrodes()) > 1 and {s.n_samples for s in rec.sweeps} == {100_000}
    assert all([s.index for s in rec.sweeps_of(e)] == [0, 1] for e in rec.electrodes())
    with pytest.raises(UnreadableInputError,
                       match=r"^cell\.fake, sweep 0: the file declares 800,000 samples for "
                             r"this sweep, more than max_sweep_samples \(500,000\); it was "
                             r"not read.*\(and 1 more problems\)$"):
        read_recording(path, shown_as="cell.fake", max_sweep_samples=500_000)


def test_a_text_file_is_size_checked_before_it_is_parsed(tmp_path, monkeypatch):
    """2,000 rows of numpy.savetxt: with max_sweep_samples 100 the file is refused from its
    size (numpy's parser is not called), and within the limit it is read as before."""
    (v, i), = _sweeps(1)
    path = write_text(tmp_path / "cell.txt", v, i, rate_hz=RATE)
    assert read_recording(path, max_sweep_samples=2000).sweeps[0].n_samples == 2000

    def no_parse(*args, **kwargs):
        raise AssertionError("the rows were parsed")

    monkeypatch.setattr(np, "loadtxt", no_parse)
    with pytest.raises(UnreadableInputError,
                       match=r"^cell\.txt, sweep 0: the file is at least [0-9,]+ rows long "
                             r"\(from its size\), more than max_sweep_samples \(100\)"):
        read_recording(path, shown_as="cell.txt", max_sweep_samples=100)
    monkeypatch.setattr(limits, "available_memory_bytes", lambda: 1000)
    with pytest.raises(UnreadableInputError, match=r"GiB of memory available; it was not read"):
        read_recording(path)
