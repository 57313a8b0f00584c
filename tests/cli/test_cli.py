"""The command line: messages and exit codes as a user meets them."""
import csv
import hashlib
import json

import numpy as np
import pytest
from click.testing import CliRunner

from conftest import gaussian_train, step_command, write_nix, write_nwb, write_text
from spikemeasure.cli import main
from spikemeasure.columns import spike_column_names

RATE = 20_000.0


@pytest.fixture
def folder(tmp_path):
    """Two good cells (3 and 2 spikes), a truncated NWB file, and a sweep NaN almost everywhere."""
    d = tmp_path / "cells"
    (d / "region_a").mkdir(parents=True)
    _, v = gaussian_train(RATE, [30.0, 50.0, 70.0], 100.0)
    cmd = step_command(v.size, RATE, 100.0, 0.02, 0.08)
    write_nwb(d / "region_a" / "good.nwb", [(np.full(v.size, -65.0), cmd * 0), (v, cmd)],
              rate_hz=RATE)
    _, v2 = gaussian_train(RATE, [30.0, 60.0], 100.0)
    bad_sweep = v2.copy()
    bad_sweep[2:] = np.nan  # nothing left to measure
    write_nix(d / "good.nix", [(v2, cmd), (bad_sweep, cmd)], rate_hz=RATE)
    truncated = d / "broken.nwb"
    data = (d / "region_a" / "good.nwb").read_bytes()
    truncated.write_bytes(data[: len(data) // 4])
    return d


def run(args):
    return CliRunner().invoke(main, args)


def test_measure_folder_reports_failures_and_goes_on(folder, tmp_path):
    out = tmp_path / "results"
    r = run(["measure", str(folder), "--out", str(out)])
    assert r.exit_code == 1, r.output  # some failed: the rest measured, exit 1
    assert "broken.nwb: cannot be read as NWB" in r.output
    assert "good.nix, sweep 1" in r.output and "NaN" in r.output
    assert "Traceback" not in r.output
    with open(out / "spikes.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0].keys()) == spike_column_names()
    files = [(row["file"], row["sweep"], row["spike"]) for row in rows]
    assert files == [("good.nix", "0", "0"), ("good.nix", "0", "1"),
                     ("region_a/good.nwb", "1", "0"), ("region_a/good.nwb", "1", "1"),
                     ("region_a/good.nwb", "1", "2")]
    assert rows[0]["isi_ms"] == "" and float(rows[1]["isi_ms"]) == pytest.approx(30.0, abs=0.1)
    record = json.loads((out / "run.json").read_text())
    assert record["versions"]["neo"] and record["versions"]["numpy"]
    assert record["parameters"]["onset_rate_v_per_s"] == 20.0
    by_name = {i["file"]: i for i in record["inputs"]}
    good = folder / "region_a" / "good.nwb"
    assert by_name["region_a/good.nwb"]["sha256"] == hashlib.sha256(good.read_bytes()).hexdigest()
    assert by_name["region_a/good.nwb"]["size_bytes"] == good.stat().st_size
    assert by_name["broken.nwb"]["status"] == "failed"
    messages = [f["message"] for f in record["failures"]]
    assert any("broken.nwb" in m for m in messages)
    assert any(f["file"] == "good.nix" and f["stage"] == "sweep 1" for f in record["failures"])
    with open(out / "errors.csv", newline="") as fh:
        errors = list(csv.DictReader(fh))
    assert [(e["file"], e["stage"]) for e in errors] == [("broken.nwb", "read"),
                                                        ("good.nix", "sweep 1")]
    assert "truncated" in errors[0]["message"]
    assert "2 files measured, 1 failed" in r.output
    assert not list(out.glob(".*.part"))


def test_nothing_measured_exits_1(tmp_path):
    bad = tmp_path / "empty.nwb"
    bad.write_bytes(b"")
    r = run(["measure", str(bad), "--out", str(tmp_path / "out")])
    assert r.exit_code == 1
    assert "empty.nwb: the file is empty" in r.output
    assert "nothing could be measured" in r.output
    assert "Traceback" not in r.output


def test_missing_path_is_reported(tmp_path):
    r = run(["measure", str(tmp_path / "nowhere"), "--out", str(tmp_path / "out")])
    assert r.exit_code == 1
    assert "nowhere: no such file or folder" in r.output


def test_usage_errors_exit_2(tmp_path):
    assert run(["measure", "--out", str(tmp_path)]).exit_code == 2
    r = run(["measure", str(tmp_path), "--out", str(tmp_path / "o"), "--onset-rate", "-3"])
    assert r.exit_code == 2 and "--onset-rate" in r.output
    r = run(["measure", str(tmp_path), "--out", str(tmp_path / "o"),
             "--threshold-method", "guess"])
    assert r.exit_code == 2


def test_inspect(folder):
    r = run(["inspect", str(folder / "region_a" / "good.nwb")])
    assert r.exit_code == 0, r.output
    assert "NWB" in r.output and "20 kHz" in r.output
    # stored in mV and pA with NWB conversion factors, as neo reports them
    assert "[mV] as voltage" in r.output and "[pA] as command" in r.output
    lines = [ln.split() for ln in r.output.splitlines() if ln.strip().startswith(("0 ", "1 "))]
    assert lines[0][-1] == "0" or "no current step" in " ".join(lines[0])
    assert "100.0" in lines[1] and lines[1][-1] == "3"
    assert "2 of 2 sweeps measured, 3 spikes" in r.output


def test_inspect_bad_file_and_debug(folder):
    r = run(["inspect", str(folder / "broken.nwb")])
    assert r.exit_code == 1
    assert r.output.startswith("Error: ") and "broken.nwb" in r.output
    r = CliRunner().invoke(main, ["--debug", "inspect", str(folder / "broken.nwb")])
    assert r.exit_code == 1 and r.exception is not None  # the traceback is kept


def test_text_without_time_and_step_option(tmp_path):
    _, v = gaussian_train(RATE, [30.0, 50.0], 100.0)
    path = write_text(tmp_path / "cell.txt", v, with_time=False)
    r = run(["measure", str(path), "--out", str(tmp_path / "o")])
    assert r.exit_code == 1 and "--sampling-rate" in r.output
    r = run(["measure", str(path), "--out", str(tmp_path / "o"), "--sampling-rate", "20000",
             "--step", "0.02", "0.04"])
    assert r.exit_code == 0, r.output
    with open(tmp_path / "o" / "spikes.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 2
    # the last spike lies after the step, so its trough is searched to the sweep's end
    assert float(rows[1]["trough_s"]) > 0.05


def test_columns_command():
    r = run(["columns"])
    assert r.exit_code == 0 and "half_width_ms" in r.output


def test_help_mentions_caution():
    r = run(["--help"])
    assert "qualified person" in r.output and "clinical" in r.output


def test_coarse_sampling_is_said_per_spike(tmp_path):
    """A narrow spike at 10 kHz: the flag is in the CSV and in the progress line."""
    from conftest import GaussianSpike, sampled

    _, v = sampled(GaussianSpike(sigma_ms=0.1), 10_000.0, duration_ms=40.0, offset_fraction=0.5)
    path = write_text(tmp_path / "fast.txt", v, rate_hz=10_000.0)
    r = run(["measure", str(path), "--out", str(tmp_path / "o")])
    assert r.exit_code == 0, r.output
    assert "1 spike too_few_samples_across_spike" in r.output
    with open(tmp_path / "o" / "spikes.csv", newline="") as fh:
        row, = list(csv.DictReader(fh))
    assert row["half_width_ms"] == "" and row["flags"] == "too_few_samples_across_spike"
    assert row["peak_mv"] != ""


@pytest.mark.parametrize("kind", ["voltage_clamp", "pickle"])
def test_refused_inputs_exit_1_with_the_reason(tmp_path, kind):
    import pickle

    if kind == "voltage_clamp":
        _, v = gaussian_train(RATE, [], 50.0)
        path = write_nwb(tmp_path / "vc.nwb", [(v, step_command(v.size, RATE, 10.0))],
                         rate_hz=RATE, voltage_clamp=True)
        reason = "vc.nwb: a voltage-clamp recording"
    else:
        path = tmp_path / "cell.pkl"
        path.write_bytes(pickle.dumps([1, 2, 3]))
        reason = "cell.pkl: pickle files can run code"
    for args in (["measure", str(path), "--out", str(tmp_path / "o")], ["inspect", str(path)]):
        r = run(args)
        assert r.exit_code == 1
        assert reason in r.output and "Traceback" not in r.output


def test_inspect_shows_the_cell_summary():
    from pathlib import Path

    path = Path(__file__).resolve().parents[2] / "sample_data" / "region_a_cell_1.nwb"
    r = run(["inspect", str(path)])
    assert r.exit_code == 0
    for label in ("cell:", "resting potential", "rheobase", "input resistance",
                  "membrane time constant", "sag fraction", "first spike at rheobase"):
        assert label in r.output


def test_step_sizes_option(tmp_path):
    _, v = gaussian_train(RATE, [30.0], 100.0)
    path = write_text(tmp_path / "cell.txt", v)
    r = run(["measure", str(path), "--out", str(tmp_path / "o"), "--step-sizes", "-50:10"])
    assert r.exit_code == 2 and "--step-sizes needs --step" in r.output
    r = run(["measure", str(path), "--out", str(tmp_path / "o"), "--step", "0.02", "0.08",
             "--step-sizes", "minus fifty"])
    assert r.exit_code == 2 and "FIRST:INCREMENT" in r.output
    r = run(["measure", str(path), "--out", str(tmp_path / "o"), "--step", "0.02", "0.08",
             "--step-sizes", "50:10"])
    assert r.exit_code == 0, r.output
    with open(tmp_path / "o" / "sweeps.csv", newline="") as fh:
        row, = list(csv.DictReader(fh))
    assert row["stimulus_pa"] == "50.00" and row["spike_count"] == "1"
    with open(tmp_path / "o" / "cells.csv", newline="") as fh:
        cell, = list(csv.DictReader(fh))
    assert cell["rheobase_pa"] == "50.00" and "rheobase_is_first_step" in cell["flags"]


class TestProjectFile:
    """A lab's spikemeasure.toml: the command line overrides it, run.json records both."""

    @pytest.fixture
    def cell_folder(self, tmp_path):
        d = tmp_path / "lab"
        d.mkdir()
        _, v = gaussian_train(RATE, [30.0, 50.0], 100.0)
        write_nwb(d / "cell.nwb", [(v, step_command(v.size, RATE, 50.0))], rate_hz=RATE)
        return d

    def test_file_values_and_command_line_precedence(self, cell_folder, tmp_path):
        (cell_folder / "spikemeasure.toml").write_text(
            "[measure]\nonset_rate_v_per_s = 30.0\nmin_rise_mv = 25.0\n")
        r = run(["measure", str(cell_folder), "--out", str(tmp_path / "o"), "--onset-rate", "15"])
        assert r.exit_code == 0, r.output
        record = json.loads((tmp_path / "o" / "run.json").read_text())
        assert record["parameters"]["onset_rate_v_per_s"] == 15.0   # command line wins
        assert record["parameters"]["min_rise_mv"] == 25.0          # from the file
        assert record["parameters"]["peak_window_ms"] == 5.0        # default
        assert record["config_file"].endswith("spikemeasure.toml")

    def test_found_in_the_current_folder_first(self, cell_folder, tmp_path, monkeypatch):
        """As check and accept do: the file of the folder run from (a lab repository's top)
        comes before that of the recording folder."""
        (tmp_path / "spikemeasure.toml").write_text("[measure]\nmin_rise_mv = 22.0\n")
        monkeypatch.chdir(tmp_path)
        r = run(["measure", "lab", "--out", "o"])
        assert r.exit_code == 0, r.output
        record = json.loads((tmp_path / "o" / "run.json").read_text())
        assert record["parameters"]["min_rise_mv"] == 22.0
        (cell_folder / "spikemeasure.toml").write_text("[measure]\nmin_rise_mv = 30.0\n")
        r = run(["measure", "lab", "--out", "o2"])
        record = json.loads((tmp_path / "o2" / "run.json").read_text())
        assert record["parameters"]["min_rise_mv"] == 22.0

    def test_unknown_key_and_bad_value(self, cell_folder, tmp_path):
        config = tmp_path / "lab.toml"
        config.write_text("[measure]\nonset_rate = 30.0\n")
        r = run(["measure", str(cell_folder), "--out", str(tmp_path / "o"), "--config",
                 str(config)])
        assert r.exit_code == 2 and "onset_rate" in r.output and "onset_rate_v_per_s" in r.output
        config.write_text('[measure]\nthreshold_method = "guess"\n')
        r = run(["measure", str(cell_folder), "--out", str(tmp_path / "o"), "--config",
                 str(config)])
        assert r.exit_code == 2 and "threshold_method" in r.output and "lab.toml" in r.output
        assert "Traceback" not in r.output


#: Project files each wrong in one way, with a part of the message that says how.
BAD_PROJECT_FILES = {
    "not_toml": ("[measure]\nonset_rate_v_per_s = = 3\n", "not valid TOML at line 2"),
    "unknown_key": ("[measure]\nonset_rate = 30.0\n", "onset_rate_v_per_s"),
    "bad_value": ("[measure]\nonset_rate_v_per_s = -5.0\n", "onset_rate_v_per_s"),
    "bad_quality_value": ("[quality]\nmax_baseline_noise_mv = \"low\"\n",
                          "max_baseline_noise_mv"),
    "bad_regression_key": ("[regression]\naccepted = \"x\"\n", "accepted_folder"),
    "unknown_table": ("[measures]\n", "did you mean [measure]"),
}


@pytest.fixture
def small_lab(tmp_path, monkeypatch):
    """One recording in recordings/, the current folder at the lab's top."""
    _, v = gaussian_train(RATE, [30.0, 50.0], 100.0)
    (tmp_path / "recordings").mkdir()
    write_nwb(tmp_path / "recordings" / "cell.nwb", [(v, step_command(v.size, RATE, 50.0))],
              rate_hz=RATE)
    monkeypatch.chdir(tmp_path)
    return tmp_path


@pytest.mark.parametrize("command", ["measure", "inspect"])
@pytest.mark.parametrize("kind", sorted(BAD_PROJECT_FILES))
def test_a_bad_project_file_is_a_usage_error(small_lab, command, kind):
    """Exit 2 (as in check and accept) and 'Error: <file>: <what>', before anything is
    written; the traceback only with --debug."""
    text, expected = BAD_PROJECT_FILES[kind]
    (small_lab / "spikemeasure.toml").write_text(text)
    args = {"measure": ["measure", "recordings", "--out", "results"],
            "inspect": ["inspect", "recordings/cell.nwb"]}[command]
    r = run(args)
    assert r.exit_code == 2, r.output
    assert r.output.startswith("Error: spikemeasure.toml: ") and expected in r.output
    assert "Traceback" not in r.output
    assert not (small_lab / "results").exists()
    r = CliRunner().invoke(main, ["--debug", *args])
    assert r.exception is not None and type(r.exception).__name__ == "ConfigError"


@pytest.mark.parametrize("kind", ["unknown_key", "bad_value"])
def test_check_and_accept_of_a_finished_run_refuse_a_bad_measure_table(small_lab, kind):
    """The project file is checked whole by every command, also the table a command does
    not use: a typo under [measure] is not passed over by check or accept."""
    assert run(["measure", "recordings", "--out", "results"]).exit_code == 0
    (small_lab / "spikemeasure.toml").write_text(BAD_PROJECT_FILES[kind][0])
    for command in ("check", "accept"):
        r = run([command, "results"])
        assert r.exit_code == 2, r.output
        assert r.output.startswith("Error: spikemeasure.toml: [measure]") or \
            r.output.startswith("Error: spikemeasure.toml: unknown key"), r.output
    assert not (small_lab / "accepted").exists()


@pytest.mark.parametrize("command", ["measure", "inspect"])
def test_option_values_inconsistent_together_are_a_usage_error(small_lab, command):
    """Each value valid alone, the pair not (the smoothing window must be shorter than the
    peak window): exit 2 like any bad option value, naming both options."""
    args = {"measure": ["measure", "recordings", "--out", "results"],
            "inspect": ["inspect", "recordings/cell.nwb"]}[command]
    r = run([*args, "--smoothing", "10", "--peak-window", "1"])
    assert r.exit_code == 2, r.output
    assert "smoothing_ms" in r.output and "peak_window_ms" in r.output
    assert "Traceback" not in r.output and not (small_lab / "results").exists()


def test_inspect_names_a_file_not_utf8_as_text(folder):
    """A Latin-1 byte in the name (held by Python as a surrogate) is shown as \\xe9."""
    import os

    raw = os.path.join(os.fsencode(folder), b"caf\xe9.nix")
    os.rename(folder / "good.nix", raw)
    r = run(["inspect", os.fsdecode(raw)])
    assert r.exit_code == 0, r.output
    first = r.output.splitlines()[0]
    assert first.startswith("file:") and first.split()[1].endswith("caf\\xe9.nix")


def test_out_below_a_regular_file_is_a_usage_error(folder, tmp_path):
    a_file = tmp_path / "notes.txt"
    a_file.write_text("not a folder\n")
    r = run(["measure", str(folder), "--out", str(a_file / "results")])
    assert r.exit_code == 2, r.output
    assert r.output.startswith("Error: ") and str(a_file) in r.output
    assert "is a file, not a folder" in r.output and "Traceback" not in r.output
    assert a_file.read_text() == "not a folder\n"


def test_out_that_cannot_be_written_is_a_usage_error(folder, tmp_path, monkeypatch):
    """A read-only --out (simulated: the superuser may write anywhere, so a mode cannot stand
    for it in a test): 'Error:' naming the folder, exit 2, nothing measured."""
    import errno
    import tempfile

    out = tmp_path / "read_only"
    out.mkdir()
    original = tempfile.mkstemp

    def refuse(*args, **kwargs):
        if str(kwargs.get("dir", "")).startswith(str(out)):
            raise PermissionError(errno.EACCES, "Permission denied")
        return original(*args, **kwargs)

    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    r = run(["measure", str(folder), "--out", str(out)])
    assert r.exit_code == 2, r.output
    assert r.output.startswith("Error: ") and str(out) in r.output
    assert "Permission denied" in r.output and "Traceback" not in r.output
    assert list(out.iterdir()) == []


def test_full_disk_during_the_run_keeps_the_tables_written(folder, tmp_path, monkeypatch):
    """No space left while the final tables are written: 'Error:' naming the file and saying
    what was not written, exit 1, the earlier tables intact and no temporary files left."""
    import errno
    import tempfile

    out = tmp_path / "results"
    assert run(["measure", str(folder), "--out", str(out), "--no-figures"]).exit_code == 1
    before = {name: (out / name).read_bytes() for name in
              ("spikes.csv", "sweeps.csv", "cells.csv", "errors.csv")}
    original = tempfile.mkstemp

    def disk_full_for_cells(*args, **kwargs):
        if str(kwargs.get("prefix", "")).startswith(".cells.csv"):
            raise OSError(errno.ENOSPC, "No space left on device")
        return original(*args, **kwargs)

    monkeypatch.setattr(tempfile, "mkstemp", disk_full_for_cells)
    r = run(["measure", str(folder), "--out", str(out), "--no-figures", "--force",
             "--onset-rate", "25"])
    assert r.exit_code == 1, r.output
    assert "Traceback" not in r.output and "Error: " in r.output
    assert str(out / "cells.csv") in r.output and "No space left on device" in r.output
    assert "Not written" in r.output
    # all tables or none: the earlier ones stay, side by side, as they were
    assert {name: (out / name).read_bytes() for name in before} == before
    assert not list(out.glob(".*.part"))
    # and run.json does not say this run is complete
    record = json.loads((out / "run.json").read_text())
    assert record["status"] != "complete"
