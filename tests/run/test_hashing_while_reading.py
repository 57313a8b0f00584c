"""Where a run hashes its inputs: while each file is read when there is no kept outcome to look
up, before measuring when there is. The digests are checked against hashlib over the files'
bytes (Python's standard library SHA-256, FIPS 180-4)."""
from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest

from spikemeasure.run import measure_paths, plan

from conftest import step_command, write_nix, write_text

RATE = 20_000.0


@pytest.fixture
def two_files(tmp_path):
    """A text file and a NIX file of one short sweep each (a flat membrane under a step)."""
    folder = tmp_path / "recordings"
    folder.mkdir()
    n = 4000
    voltage, command = np.full(n, -65.0), step_command(n, RATE, 50.0)
    write_text(folder / "a.txt", voltage, command, rate_hz=RATE)
    write_nix(folder / "b.nix", [(voltage, command)], rate_hz=RATE)
    return folder


def _counting(monkeypatch) -> list:
    """Count the hashing passes the plan makes of its own."""
    calls = []
    original = plan.file_sha256

    def counted(path, *args):
        calls.append(path)
        return original(path, *args)

    monkeypatch.setattr(plan, "file_sha256", counted)
    return calls


def _digests(out) -> dict:
    record = json.loads((out / "run.json").read_text())
    return {i["file"]: i["sha256"] for i in record["inputs"]}


def test_a_first_run_hashes_while_reading_and_a_rerun_reuses(two_files, tmp_path, monkeypatch):
    calls = _counting(monkeypatch)
    out = tmp_path / "out"
    first = measure_paths([str(two_files)], out, jobs=1)
    assert first.files_measured == 2 and calls == []  # no pass of the plan's own
    expected = {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
                for p in two_files.iterdir()}
    assert _digests(out) == expected
    again = measure_paths([str(two_files)], out, jobs=1)
    assert (again.files_reused, again.files_measured) == (2, 0)  # kept under those digests
    assert len(calls) == 2  # looked up: hashed before measuring
    assert _digests(out) == expected


def test_force_hashes_while_reading(two_files, tmp_path, monkeypatch):
    out = tmp_path / "out"
    measure_paths([str(two_files)], out, jobs=1)
    calls = _counting(monkeypatch)
    forced = measure_paths([str(two_files)], out, jobs=1, force=True)
    assert forced.files_measured == 2 and calls == []
    assert set(_digests(out).values()) == {hashlib.sha256(p.read_bytes()).hexdigest()
                                           for p in two_files.iterdir()}


def test_an_unreadable_file_is_still_hashed(tmp_path):
    folder = tmp_path / "recordings"
    folder.mkdir()
    (folder / "bad.nwb").write_bytes(b"not an HDF5 file at all")
    out = tmp_path / "out"
    measure_paths([str(folder)], out, jobs=1)
    assert _digests(out) == {"bad.nwb": hashlib.sha256(b"not an HDF5 file at all").hexdigest()}
