"""Several cells in one file: an NWB file of two electrodes recorded at once, measured as two
cells, kept, figured, checked and accepted cell by cell.

Sources: the two cells are published models, Wang & Buzsaki (1996) and the adapting cortical
cell of Pospischil et al. (2008), simulated through the acquisition chain
(spikemeasure.testing.record_commands) and written with pynwb's intracellular API (the
intracellular, simultaneous and sequential recordings tables of the NWB standard). Each
sweep's spike count is compared with the noise-free simulated membrane voltage crossing
0 mV upward; each cell's values with those of the same sweeps written as a file of one
electrode (the file as the tool measured it before a file could hold several cells).
"""
import csv
import json
from pathlib import Path

import numpy as np
import pytest

from spikemeasure.checks.accept import accept_results
from spikemeasure.checks.apply import check_run
from spikemeasure.checks.junit import junit_xml
from spikemeasure.checks.settings import CheckSettings
from spikemeasure.run import CACHE_FOLDER, measure_paths
from spikemeasure.testing import record_commands
from spikemeasure.testing.nwb_files import ElectrodeSweeps, write_electrodes_nwb

SIM_RATE = 100_000.0
#: Each electrode's model and step sizes (pA): different commands on the two electrodes.
CELLS = {"cell_a": ("wang_buzsaki_1996", (-50.0, 20.0, 60.0, 120.0)),
         "cell_b": ("cortical_adapting", (-50.0, 40.0, 100.0, 200.0))}
STEP_S = (0.1, 0.4)


def _commands(amplitudes, duration_s=0.5):
    n = int(duration_s * SIM_RATE)
    command = np.zeros((len(amplitudes), n))
    for k, amplitude in enumerate(amplitudes):
        command[k, int(STEP_S[0] * SIM_RATE):int(STEP_S[1] * SIM_RATE)] = amplitude
    return command


def _upward_zero_crossings(membrane_mv):
    """Spikes of the noise-free membrane: upward crossings of 0 mV."""
    return [int(np.sum((row[:-1] < 0.0) & (row[1:] >= 0.0))) for row in membrane_mv]


def read_rows(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="module")
def recorded():
    """Each electrode's recording (with 0.1 mV noise and a 10 kHz Bessel filter)."""
    out = {}
    for k, (name, (model, amplitudes)) in enumerate(CELLS.items()):
        rec = record_commands(model, _commands(amplitudes), simulation_rate_hz=SIM_RATE,
                              decimation=5, bessel_hz=10_000.0, noise_mv=0.1, seed=k)
        out[name] = (rec, amplitudes)
    return out


@pytest.fixture(scope="module")
def measured(recorded, tmp_path_factory):
    """The two-electrode file and each electrode's sweeps alone, measured in one run."""
    root = tmp_path_factory.mktemp("electrodes")
    data = root / "data"
    data.mkdir()
    electrodes = [ElectrodeSweeps(name, rec.voltage_mv, rec.command_pa, rec.sampling_rate_hz)
                  for name, (rec, _) in recorded.items()]
    write_electrodes_nwb(data / "pair.nwb", electrodes)
    for one in electrodes:
        write_electrodes_nwb(data / f"{one.name}_alone.nwb", [one])
    out = root / "out"
    summary = measure_paths([str(data)], out, jobs=1, figure_format="png")
    return data, out, summary


def test_the_written_file_holds_the_standard_tables(measured):
    """pynwb reads back one simultaneous recording per sweep, each of both electrodes."""
    import pynwb

    data, _, _ = measured
    with pynwb.NWBHDF5IO(str(data / "pair.nwb"), "r") as io:
        nwbfile = io.read()
        assert len(nwbfile.intracellular_recordings) == 8
        assert len(nwbfile.icephys_simultaneous_recordings) == 4
        assert len(nwbfile.icephys_sequential_recordings) == 1
        assert sorted(nwbfile.icephys_electrodes) == ["cell_a", "cell_b"]
        assert "simulated" in nwbfile.session_description


def test_two_electrodes_are_two_cells(measured):
    _, out, summary = measured
    assert summary.failures == []
    cells = [r for r in read_rows(out / "cells.csv") if r["file"] == "pair.nwb"]
    assert [r["electrode"] for r in cells] == ["cell_a", "cell_b"]
    errors = read_rows(out / "errors.csv")
    assert errors == []  # no "responses share this sweep number"


def test_each_cell_has_its_own_commands_and_spike_counts(measured, recorded):
    """stimulus_pa of each sweep is its electrode's own step; its spike count is the
    noise-free membrane's upward crossings of 0 mV (the simulation, not the tool)."""
    _, out, _ = measured
    sweeps = [r for r in read_rows(out / "sweeps.csv") if r["file"] == "pair.nwb"]
    spikes = [r for r in read_rows(out / "spikes.csv") if r["file"] == "pair.nwb"]
    for name, (rec, amplitudes) in recorded.items():
        own = [r for r in sweeps if r["electrode"] == name]
        assert [int(r["sweep"]) for r in own] == [0, 1, 2, 3]
        np.testing.assert_allclose([float(r["stimulus_pa"]) for r in own], amplitudes,
                                   atol=0.5)
        counted = [sum(s["electrode"] == name and int(s["sweep"]) == k for s in spikes)
                   for k in range(len(amplitudes))]
        truth = _upward_zero_crossings(rec.membrane_mv)
        assert counted == truth
        assert sum(truth) > 0  # the comparison is not of empty sweeps
    assert _upward_zero_crossings(recorded["cell_a"][0].membrane_mv) != \
        _upward_zero_crossings(recorded["cell_b"][0].membrane_mv)


def test_each_cell_matches_its_electrode_measured_alone(measured):
    """The same sweeps written as a file of one electrode: every value of the cell's rows
    of all three tables is the same."""
    _, out, _ = measured
    for table, keys in (("cells.csv", ("file", "electrode")),
                        ("sweeps.csv", ("file", "electrode")),
                        ("spikes.csv", ("file", "electrode"))):
        rows = read_rows(out / table)
        for name in CELLS:
            pair = [{k: v for k, v in r.items() if k not in keys} for r in rows
                    if r["file"] == "pair.nwb" and r["electrode"] == name]
            alone = [{k: v for k, v in r.items() if k not in keys} for r in rows
                     if r["file"] == f"{name}_alone.nwb"]
            assert pair and pair == alone, (table, name)
    alone_cells = [r for r in read_rows(out / "cells.csv") if r["file"] != "pair.nwb"]
    assert {r["electrode"] for r in alone_cells} == set(CELLS)  # NWB names its electrode


def test_figures_are_in_a_folder_per_cell(measured):
    _, out, _ = measured
    for name in CELLS:
        folder = out / "figures" / f"pair.nwb__{name}"
        assert folder.is_dir() and any(folder.iterdir())
    assert (out / "figures" / "cell_a_alone.nwb").is_dir()  # a file of one cell: as before
    record = json.loads((out / "run.json").read_text())
    paths = record["figures"]["cells"]["pair.nwb"]
    assert {p.split("/")[1] for p in paths} == {"pair.nwb__cell_a", "pair.nwb__cell_b"}
    report = (out / "report.html").read_text()
    assert "pair.nwb, electrode cell_a" in report and "pair.nwb, electrode cell_b" in report


def test_the_cache_reuses_a_two_cell_outcome(measured, tmp_path):
    data, out, first = measured
    import shutil

    again = tmp_path / "out"
    shutil.copytree(out, again)
    second = measure_paths([str(data)], again, jobs=1, figure_format="png")
    assert second.files_reused == 3 and second.files_measured == 0
    assert (again / CACHE_FOLDER).is_dir()
    for table in ("spikes.csv", "sweeps.csv", "cells.csv", "errors.csv"):
        assert (again / table).read_bytes() == (out / table).read_bytes()


def test_accept_and_check_name_the_changed_cell(measured, tmp_path):
    """A value changed in the second cell of the file is found and named by file and
    electrode; the first cell passes."""
    import shutil

    _, out, _ = measured
    run = tmp_path / "run"
    shutil.copytree(out, run, ignore=shutil.ignore_patterns(CACHE_FOLDER, "figures"))
    accepted = tmp_path / "accepted"
    accept_results(run, accepted, project_dir=tmp_path)
    assert check_run(run, CheckSettings(accepted_dir=accepted)).passed
    rows = read_rows(run / "cells.csv")
    k = next(i for i, r in enumerate(rows) if (r["file"], r["electrode"]) == ("pair.nwb",
                                                                             "cell_b"))
    rows[k]["resting_mv"] = f"{float(rows[k]['resting_mv']) + 1.0:.4f}"
    with open(run / "cells.csv", "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    report = check_run(run, CheckSettings(accepted_dir=accepted))
    finding, = report.findings
    assert (finding.file, finding.electrode, finding.column) == ("pair.nwb", "cell_b",
                                                                 "resting_mv")
    assert "pair.nwb, electrode cell_b: cells.csv resting_mv" in junit_xml(report)


def test_accepted_results_without_the_electrode_column_still_compare(measured, tmp_path):
    """Accepted results of an older version (no electrode column, one cell per file): a
    file of one cell compares as electrode ""; the cells they lack are named."""
    import shutil

    _, out, _ = measured
    run = tmp_path / "run"
    shutil.copytree(out, run, ignore=shutil.ignore_patterns(CACHE_FOLDER, "figures"))
    accepted = tmp_path / "accepted"
    accept_results(run, accepted, project_dir=tmp_path)
    for table in ("spikes.csv", "sweeps.csv", "cells.csv"):
        rows = [{k: v for k, v in r.items() if k != "electrode"}
                for r in read_rows(accepted / table) if r["file"] != "pair.nwb"]
        with open(accepted / table, "w", newline="", encoding="utf-8") as fh:
            writer = csv.DictWriter(fh, fieldnames=list(rows[0]), lineterminator="\n")
            writer.writeheader()
            writer.writerows(rows)
    record = json.loads((accepted / "run.json").read_text())
    record["inputs"] = [i for i in record["inputs"] if i["file"] != "pair.nwb"]
    (accepted / "run.json").write_text(json.dumps(record))
    report = check_run(run, CheckSettings(accepted_dir=accepted, allow_new_files=True))
    assert report.passed, [f.message for f in report.findings]
    edited = read_rows(accepted / "cells.csv")
    edited[0]["resting_mv"] = f"{float(edited[0]['resting_mv']) - 2.0:.4f}"
    with open(accepted / "cells.csv", "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(edited[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows(edited)
    finding, = check_run(run, CheckSettings(accepted_dir=accepted,
                                            allow_new_files=True)).findings
    assert finding.file == edited[0]["file"] and finding.column == "resting_mv"


def test_a_text_file_of_two_voltage_columns_is_two_cells(recorded, tmp_path):
    """One sweep of each model as columns of one text file (numpy.savetxt), each voltage
    column beside its own command: two rows of cells.csv, named by the columns, and each
    sweep's spike count that of its noise-free simulation."""
    a, b = recorded["cell_a"][0], recorded["cell_b"][0]
    path = tmp_path / "pair.csv"
    np.savetxt(path, np.column_stack([a.time_s, a.voltage_mv[3], a.command_pa[3],
                                      b.voltage_mv[3], b.command_pa[3]]),
               delimiter=",", comments="", fmt="%.10g",
               header="time_s,left_mV,left_pA,right_mV,right_pA")
    out = tmp_path / "out"
    summary = measure_paths([str(path)], out, jobs=1)
    assert summary.failures == []
    cells = read_rows(out / "cells.csv")
    assert [(r["file"], r["electrode"]) for r in cells] == [("pair.csv", "left"),
                                                            ("pair.csv", "right")]
    spikes = read_rows(out / "spikes.csv")
    for name, rec in (("left", a), ("right", b)):
        counted = sum(r["electrode"] == name for r in spikes)
        assert counted == _upward_zero_crossings(rec.membrane_mv[3:4])[0] > 0


def test_the_api_and_inspect_give_a_cell_per_electrode(measured):
    """Python API and `inspect` on the two-electrode file: the same two cells as cells.csv."""
    import spikemeasure as sm
    from spikemeasure.inspection import describe_file

    data, out, _ = measured
    res = sm.measure(data / "pair.nwb")
    assert list(res.cells["electrode"]) == ["cell_a", "cell_b"]
    rows = [r for r in read_rows(out / "cells.csv") if r["file"] == "pair.nwb"]
    np.testing.assert_allclose(res.cells["resting_mv"],
                               [float(r["resting_mv"]) for r in rows], atol=1e-4)
    text, ok = describe_file(str(data / "pair.nwb"))
    assert ok and "8 (2 cells, one per electrode)" in text
    assert "cell (electrode cell_a):" in text and "cell (electrode cell_b):" in text
    channels = next(ln for ln in text.splitlines() if ln.startswith("channels:"))
    # each electrode's voltage and command channel, not the first electrode's alone
    assert channels.count("as voltage") == 2 and channels.count("as command") == 2
    sweep_lines = [ln.split() for ln in text.splitlines() if ln.startswith("cell_")]
    assert [(ln[0], ln[1]) for ln in sweep_lines] == [
        (name, str(k)) for name in CELLS for k in range(4)]


def test_a_sweep_failure_names_its_electrode(recorded, tmp_path):
    """One sweep of the second electrode all NaN: its row of errors.csv carries that
    electrode and its message names it; the other cell is measured whole."""
    rec_a, rec_b = recorded["cell_a"][0], recorded["cell_b"][0]
    broken = rec_b.voltage_mv.copy()
    broken[1] = np.nan
    write_electrodes_nwb(tmp_path / "pair.nwb", [
        ElectrodeSweeps("cell_a", rec_a.voltage_mv, rec_a.command_pa, rec_a.sampling_rate_hz),
        ElectrodeSweeps("cell_b", broken, rec_b.command_pa, rec_b.sampling_rate_hz)])
    out = tmp_path / "out"
    measure_paths([str(tmp_path / "pair.nwb")], out, jobs=1)
    error, = read_rows(out / "errors.csv")
    assert (error["file"], error["electrode"], error["stage"]) == ("pair.nwb", "cell_b",
                                                                   "sweep 1")
    assert error["message"].startswith("pair.nwb, electrode cell_b, sweep 1 (")
    sweeps = read_rows(out / "sweeps.csv")
    assert sum(r["electrode"] == "cell_a" for r in sweeps) == 4
    assert sum(r["electrode"] == "cell_b" for r in sweeps) == 3
