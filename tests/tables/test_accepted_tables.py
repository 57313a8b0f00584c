"""Adding peak_to_trough_ms changed nothing else the tables say.

Source: the accepted tables as they were before the column was added (tests/accepted/, at
commit 5008ded), pinned here by the SHA-256 of their parsed rows. Each accepted table of
today, with peak_to_trough_ms taken out of spikes.csv, must give the same rows; and the new
column must be trough_s - peak_s, in ms, as its definition says. The next intended change of
values re-accepts the tables, and replaces these pins with that acceptance's.
"""
import csv
import hashlib
import json
from pathlib import Path

import pytest

ACCEPTED = Path(__file__).resolve().parents[1] / "accepted"
ADDED = "peak_to_trough_ms"

BEFORE_THE_COLUMN = {
    ("sample_data", "spikes.csv"): "e8efe5e79ffb31af2f9572a082dd085fa04a1f870e04497360bd1874bd0b9b55",
    ("sample_data", "sweeps.csv"): "05d04420989d1ea1c47aa341d8a010d42df94cc2f231a083d662e5b89697a002",
    ("sample_data", "cells.csv"): "82f360b3d327f19e98fdf3f977f7ea1eca33bf24dcea49e70373a135ab190e68",
    ("example_lab", "spikes.csv"): "ed7766a3e972e12902bdf81f28cb9e4e3e466973ae803467402586122f6698e2",
    ("example_lab", "sweeps.csv"): "e1e4c083f3b37e2ffa52c95df2cd4b064e4a6bc5572c9f0ccb5e2f58999729f7",
    ("example_lab", "cells.csv"): "35fdc69213be8ff3ad641418e2d00f21cef846f960d848ddaca345e01e5b0310",
}


def rows_of(path: Path) -> list[list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


def without(rows: list[list[str]], column: str) -> list[list[str]]:
    i = rows[0].index(column)
    return [r[:i] + r[i + 1:] for r in rows]


@pytest.mark.parametrize("folder, table", sorted(BEFORE_THE_COLUMN))
def test_identical_but_for_the_added_column(folder, table):
    rows = rows_of(ACCEPTED / folder / table)
    if table == "spikes.csv":
        rows = without(rows, ADDED)
    else:
        assert ADDED not in rows[0]
    digest = hashlib.sha256(json.dumps(rows).encode()).hexdigest()
    assert digest == BEFORE_THE_COLUMN[(folder, table)]


@pytest.mark.parametrize("folder", ["sample_data", "example_lab"])
def test_added_column_is_trough_minus_peak(folder):
    header, *rows = rows_of(ACCEPTED / folder / "spikes.csv")
    assert header.index(ADDED) == header.index("flags") - 1
    measured = 0
    for row in rows:
        cell = dict(zip(header, row))
        if cell["trough_s"] and cell["peak_s"]:
            expected = (float(cell["trough_s"]) - float(cell["peak_s"])) * 1e3
            # times written with 7 decimals, the column with 5: rounding of both
            assert float(cell[ADDED]) == pytest.approx(expected, abs=2e-4)
            measured += 1
        else:
            assert cell[ADDED] == ""
    assert measured > 0
