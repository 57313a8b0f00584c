"""The column declarations, the CSV header and docs/measurements.md agree."""
from pathlib import Path

import numpy as np
import pytest

from spikemeasure.columns import SPIKE_COLUMNS, SPIKE_MARKS, columns_markdown, spike_column_names
from spikemeasure.analysis.spikes import FLAG_TEXT, TIME_FIELDS, SpikeMeasurements

DOCS = Path(__file__).resolve().parents[1] / "docs" / "measurements.md"

# The order the spike table must start with (the project's output contract).
# Each SD column follows its value's column.
REQUIRED_ORDER = ["file", "electrode", "sweep", "spike", "threshold_s", "threshold_mv",
                  "threshold_mv_sd", "peak_s", "peak_mv", "peak_mv_sd",
                  "amplitude_mv", "half_width_ms", "half_width_ms_sd", "rise_time_ms",
                  "max_dvdt_v_per_s", "max_dvdt_v_per_s_sd",
                  "min_dvdt_v_per_s", "trough_s", "trough_mv", "ahp_depth_mv", "ahp_depth_mv_sd",
                  "isi_ms"]


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
    from conftest import loaded_spikemeasure_modules

    loaded = loaded_spikemeasure_modules(("spikemeasure.analysis.spikes_in_parts",
                                          "spikemeasure.analysis.cell_features",
                                          "spikemeasure.analysis.sweep_features"))
    assert "spikemeasure.analysis.spikes_in_parts" in loaded  # the probe sees what it imports
    assert "spikemeasure.columns" not in loaded


def test_definitions_quote_the_declared_defaults():
    """Every default the column definitions and docs/measurements.md quote beside an option
    ("`--search-window` (200 ms)", "(`--onset-rate`, 20 V/s)", "0.1 ms (`--rate-smoothing`)")
    is the one params.py declares."""
    import re

    from spikemeasure.params import PARAMETERS

    by_option = {p.option: p for p in PARAMETERS}
    text = " ".join(columns_markdown().split())
    after = re.finditer(r"`(--[\w-]+)`(?:,| \() ?([-\d.]+)[ ),]", text)
    before = re.finditer(r"([-\d.]+) (?:V/s|mV|ms) \(`(--[\w-]+)`", text)
    quotes = [m.group(1, 2) for m in after] + [m.group(2, 1) for m in before]
    for option, value in quotes:
        assert float(value) == pytest.approx(by_option[option].default), (option, value)
    assert {o for o, _ in quotes} >= {"--onset-rate", "--threshold-fraction", "--search-window",
                                      "--min-samples-across-width", "--rate-smoothing",
                                      "--lowest-peak", "--peak-window"}


class TestDerivativeNoise:
    """Source: scipy.signal.savgol_coeffs. The SD of white noise (SD sigma) through a linear
    filter is sigma * sqrt(sum of the squared coefficients)."""

    @pytest.mark.parametrize("window_ms", [0.06, 0.1, 0.3, 1.0])
    def test_closed_form_matches_the_filter_coefficients(self, window_ms):
        from scipy.signal import savgol_coeffs

        from spikemeasure.analysis.detection import SMOOTHING_POLYORDER, smoothing_window_samples
        from spikemeasure.columns import derivative_noise_v_per_s

        rate, sigma = 50e3, 0.3
        n = smoothing_window_samples(window_ms, rate)
        coeffs = savgol_coeffs(n, SMOOTHING_POLYORDER, deriv=1, delta=1.0 / rate)
        expected_v_per_s = sigma * np.sqrt(np.sum(coeffs ** 2)) / 1e3
        assert derivative_noise_v_per_s(sigma, rate, window_ms) == pytest.approx(
            expected_v_per_s, rel=1e-9)

    def test_the_quoted_values(self):
        from spikemeasure.columns import derivative_noise_v_per_s

        # 0.3 mV at 50 kHz: 4.7 V/s over 0.1 ms (5 samples), 0.9 V/s over 0.3 ms (15 samples),
        # by the formula N (N^2 - 1) / 12 = sum of k^2 (Savitzky & Golay 1964)
        assert derivative_noise_v_per_s(0.3, 50e3, 0.1) == pytest.approx(
            0.3 * 50e3 / np.sqrt(10) / 1e3)
        assert round(derivative_noise_v_per_s(0.3, 50e3, 0.3), 1) == 0.9


def test_units_are_name_suffixes():
    suffix = {"s": "_s", "mV": "_mv", "ms": "_ms", "V/s": "_v_per_s"}
    for c in SPIKE_COLUMNS:
        if c.unit:  # an SD column carries its value's unit, then "_sd"
            assert c.name.removesuffix("_sd").endswith(suffix[c.unit]), c.name
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
