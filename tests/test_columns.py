"""The column declarations, the CSV header and docs/measurements.md agree."""
from pathlib import Path

import numpy as np
import pytest

from spikemeasure.columns import SPIKE_COLUMNS, SPIKE_MARKS, columns_markdown, spike_column_names
from spikemeasure.analysis.spikes import FLAG_TEXT, TIME_FIELDS, SpikeMeasurements

DOCS = Path(__file__).resolve().parents[1] / "docs" / "measurements.md"

# The order the spike table must start with (the project's output contract).
REQUIRED_ORDER = ["file", "sweep", "spike", "threshold_s", "threshold_mv", "peak_s", "peak_mv",
                  "amplitude_mv", "half_width_ms", "rise_time_ms", "max_dvdt_v_per_s",
                  "min_dvdt_v_per_s", "trough_s", "trough_mv", "ahp_depth_mv", "isi_ms"]


def test_required_columns_first_in_order():
    assert spike_column_names()[:len(REQUIRED_ORDER)] == REQUIRED_ORDER
    assert "flags" in spike_column_names()


def test_every_measured_field_is_declared():
    """Each field of the spike results is a column of spikes.csv or a mark kept for figures."""
    measured = set(SpikeMeasurements.__dataclass_fields__)
    assert measured <= set(spike_column_names()) | {c.name for c in SPIKE_MARKS}


def test_time_columns_are_the_time_fields():
    """The spike columns declared times are exactly the fields the results move as times
    (SpikeMeasurements.shifted), so neither list can drift from the other."""
    declared = {c.name for c in SPIKE_COLUMNS + SPIKE_MARKS if c.is_time}
    assert declared == set(TIME_FIELDS)


def test_analysis_does_not_import_columns():
    """Imports flow one way: columns declares the output over analysis results, not the
    reverse. Checked in a fresh interpreter through Python's record of loaded modules."""
    import json
    import subprocess
    import sys

    program = ("import json, sys\n"
               "import spikemeasure.analysis.spikes_in_parts, spikemeasure.analysis.cell_features\n"
               "import spikemeasure.analysis.sweep_features\n"
               "print(json.dumps(sorted(sys.modules)))\n")
    done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 0, done.stderr
    loaded = json.loads(done.stdout.strip().splitlines()[-1])
    assert "spikemeasure.analysis.spikes_in_parts" in loaded  # the probe sees what it imports
    assert "spikemeasure.columns" not in loaded


def test_units_are_name_suffixes():
    suffix = {"s": "_s", "mV": "_mv", "ms": "_ms", "V/s": "_v_per_s"}
    for c in SPIKE_COLUMNS:
        if c.unit:
            assert c.name.endswith(suffix[c.unit]), c.name
        assert c.definition


def test_docs_are_generated_from_the_declarations():
    assert DOCS.read_text() == columns_markdown(), (
        "docs/measurements.md is out of date: run `spikemeasure columns --markdown > "
        "docs/measurements.md`")
    for name in FLAG_TEXT:
        assert f"`{name}`" in DOCS.read_text()


class TestPeakToTrough:
    """Source: closed form of an analytic waveform, a Gaussian spike (peak at tp) followed by a
    Gaussian trough (minimum at tt): V = base + A g(t - tp; sigma) - B g(t - tt; tau). With
    tt - tp = 12 sigma = 4.8 tau, each Gaussian's slope at the other's extremum is below
    1e-3 mV/ms, moving the extrema by under 1e-6 ms, so the peak is at tp and the trough at tt;
    the symmetric smoothing does not move a symmetric minimum."""

    @staticmethod
    def waveform(rate_hz, tp_ms=10.0, tt_ms=14.8, sigma_ms=0.4, tau_ms=1.0, trough_mv=8.0):
        t = np.arange(0.0, 40.0, 1e3 / rate_hz) + 0.37e3 / rate_hz  # peak between samples
        v = (-65.0 + 100.0 * np.exp(-(t - tp_ms) ** 2 / (2 * sigma_ms ** 2))
             - trough_mv * np.exp(-(t - tt_ms) ** 2 / (2 * tau_ms ** 2)))
        return t, v

    @pytest.mark.parametrize("rate", [20_000.0, 50_000.0, 100_000.0])
    def test_closed_form(self, rate):
        from spikemeasure.analysis.spikes import measure_trace
        from spikemeasure.tables.build import spike_values

        t, v = self.waveform(rate)
        values = spike_values(measure_trace(v, rate), "analytic", 0)
        assert len(values["peak_to_trough_ms"]) == 1
        dt_ms = 1e3 / rate
        # peak (spline) and trough (parabola) each within a tenth of a sample
        assert values["peak_to_trough_ms"][0] == pytest.approx(14.8 - 10.0, abs=0.2 * dt_ms)
        assert values["peak_s"][0] * 1e3 + t[0] == pytest.approx(10.0, abs=0.1 * dt_ms)
        assert values["trough_s"][0] * 1e3 + t[0] == pytest.approx(14.8, abs=0.1 * dt_ms)

    def test_empty_without_a_trough(self):
        from spikemeasure.analysis.spikes import measure_trace
        from spikemeasure.tables.build import format_rows, spike_values

        rate = 20_000.0
        t, v = self.waveform(rate)
        cut = v[t < 10.3]  # the trace ends before the spike repolarizes: no trough
        values = spike_values(measure_trace(cut, rate), "analytic", 0)
        assert np.isnan(values["trough_s"][0]) and np.isnan(values["peak_to_trough_ms"][0])
        column = [c.name for c in SPIKE_COLUMNS].index("peak_to_trough_ms")
        assert format_rows(values)[0][column] == ""
