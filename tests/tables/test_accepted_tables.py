"""Columns added since the last change of values changed nothing else the tables say.

Source: the accepted tables as they were before the columns of ADDED_COLUMNS were added
(tests/accepted/, at commit 5008ded), pinned here by the SHA-256 of their parsed rows. Each
accepted table of today, with the added columns taken out, must give the same rows (same
files, sweeps and spikes, same values to the last digit); peak_to_trough_ms must be
trough_s - peak_s, in ms, as its definition says. A new column is added to ADDED_COLUMNS when
the tables are re-accepted with it. The next intended change of values re-accepts the tables
and replaces these pins (and empties ADDED_COLUMNS); a change of values in some columns only
may instead list them in CHANGED_COLUMNS and pin the old tables without them, so the other
columns are still proved unmoved. Files added to a set since the pins (ADDED_FILES) are left
out of the comparison: their rows are checked by their own tests against their simulations.
"""
import csv
import hashlib
import json
from pathlib import Path

import pytest

ACCEPTED = Path(__file__).resolve().parents[1] / "accepted"
ADDED = "peak_to_trough_ms"

#: Columns added to each table since the pins below.
ADDED_COLUMNS = {
    "spikes.csv": ("peak_to_trough_ms", "electrode", "threshold_mv_sd", "peak_mv_sd",
                   "half_width_ms_sd", "max_dvdt_v_per_s_sd", "ahp_depth_mv_sd"),
    "sweeps.csv": ("electrode", "stimulus_shape", "test_pulse_pa", "ramp_rate_pa_per_s",
                   "first_spike_current_pa", "sag_fraction_sd"),
    "cells.csv": ("electrode", "ramp_rheobase_pa", "block_stimulus_pa", "bridge_error_mohm",
                  "input_resistance_mohm_sd", "membrane_tau_ms_sd"),
}

#: Columns whose values were changed on purpose since the pins, left out of the comparison:
#: a cell's sag within the noise is now 0 with the flag sag_within_noise (the models of the
#: sample data and of the example lab's cell_1 have no sag current, yet their old values
#: were 0.003 to 0.035, noise), and so is a sweep's (old values 0.003 to 0.074); a
#: hyperpolarizing sweep's min_mv is read on a window matched to its charging time (it rose
#: by at most 0.12 mV, the pull of noise on the old 1 ms window); the time-constant fit
#: leaves out the filter's delay (membrane_tau_ms moved by at most 0.1 ms, 5 %, with its
#: fit's R^2 and residual). The pins below are those of the accepted tables before these
#: changes, with these columns taken out.
CHANGED_COLUMNS = {
    "spikes.csv": (),
    "sweeps.csv": ("min_mv", "sag_fraction", "flags"),
    "cells.csv": ("membrane_tau_ms", "sag_fraction", "membrane_tau_fit_r2",
                  "membrane_tau_residual_to_noise", "flags"),
}

BEFORE_THE_COLUMN = {
    ("sample_data", "spikes.csv"): "e8efe5e79ffb31af2f9572a082dd085fa04a1f870e04497360bd1874bd0b9b55",
    ("sample_data", "sweeps.csv"): "cd2e191767e6258d3cc44505bb0cb55555590fd9a500108020ebbd252f0f699e",
    ("sample_data", "cells.csv"): "a8f2b9bcfe217470115e7ea2f2ce1e075acf1571c2afbb6ffdf07e204f091fa8",
    ("example_lab", "spikes.csv"): "ed7766a3e972e12902bdf81f28cb9e4e3e466973ae803467402586122f6698e2",
    ("example_lab", "sweeps.csv"): "b9e40fc09650f261bfadf8e1f8e966dd58dae726588328c56de33614db6b4d62",
    ("example_lab", "cells.csv"): "74fe1ad6569ace64e9163816d1492ed233bae4a0594c08a5899923e18e666c75",
}


#: Files added to each accepted set since the pins (new sample files of other protocols).
ADDED_FILES = {
    "sample_data": ("region_a_cell_3_ramps.nwb", "region_b_pair_1.nwb"),
    "example_lab": (),
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
    rows = rows[:1] + [r for r in rows[1:] if r[0] not in ADDED_FILES[folder]]
    for column in ADDED_COLUMNS[table] + CHANGED_COLUMNS[table]:
        rows = without(rows, column)
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
