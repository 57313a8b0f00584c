"""The top-level Python API (`import spikemeasure as sm`): arguments checked like
scipy.signal.find_peaks, values against closed forms and the files `measure` writes."""
import csv
import subprocess
import sys

import numpy as np
import pytest

import spikemeasure as sm
from conftest import GaussianSpike, sampled, textbook_trace
from spikemeasure.columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from spikemeasure.run import measure_paths

SAMPLE = "sample_data/region_a_cell_1.nwb"


@pytest.fixture(scope="module")
def sample(request):
    root = request.config.rootpath
    return root / SAMPLE


class TestMeasureTrace:
    def test_textbook_spike(self):
        # Source: the trace built to the round numbers of common practice (conftest.textbook_trace:
        # threshold -55, peak +30, AHP trough -90 mV, closed-form construction).
        v, truth = textbook_trace(50_000.0)
        spikes = sm.measure_trace(v, 50_000.0)
        assert len(spikes) == 1 and spikes.names == [c.name for c in SPIKE_COLUMNS]
        assert spikes["threshold_mv"][0] == pytest.approx(truth["threshold_mv"], abs=0.5)
        assert spikes["peak_mv"][0] == pytest.approx(truth["peak_mv"], abs=0.1)
        assert spikes["trough_mv"][0] == pytest.approx(truth["trough_mv"], abs=0.1)
        assert spikes["spike"].tolist() == [0] and spikes["sweep"].dtype.kind == "i"

    @pytest.mark.parametrize("onset", [20.0, 50.0])
    def test_onset_rate_by_keyword(self, onset):
        # Source: the Gaussian spike's closed form (conftest.GaussianSpike): the onset-rate
        # crossing at u^2 = -W_{-1}(-(r sigma / A)^2), Lambert W.
        spike = GaussianSpike()
        _, v = sampled(spike, 50_000.0)
        got = sm.measure_trace(v, 50_000.0, onset_rate_v_per_s=onset)["threshold_mv"]
        truth = spike.voltage_at_u(spike.u_at_rate(onset))
        assert got.size == 1 and abs(got[0] - truth) < 0.01 * spike.amplitude_mv

    def test_no_spike_gives_zero_rows(self):
        table = sm.measure_trace(np.full(5000, -70.0), 20_000.0)
        assert len(table) == 0 and table["threshold_mv"].dtype == float

    @pytest.mark.parametrize("kwargs, named", [
        ({"settings": {"onset_rate_v_per_s": 30}}, "`settings` is not a setting"),
        ({"onset_rate": 30}, "`onset_rate` is not a setting"),
        ({"onset_rate_v_per_s": "fast"}, r"`onset_rate_v_per_s` must be a positive number, in V/s \(got 'fast'\)"),
        ({"onset_rate_v_per_s": -5}, "`onset_rate_v_per_s` must be a positive number"),
        ({"min_samples_across_width": 2.5}, "`min_samples_across_width` must be a whole"),
        ({"threshold_method": 3}, r"`threshold_method` must be one of .* \(got 3\)"),
        ({"threshold_method": "guess"}, "`threshold_method` must be one of"),
    ])
    def test_wrong_settings_name_the_argument(self, kwargs, named):
        v, _ = textbook_trace(50_000.0)
        with pytest.raises(sm.InvalidSettingError, match=named):
            sm.measure_trace(v, 50_000.0, **kwargs)

    @pytest.mark.parametrize("rate", [0, -1, float("nan"), "20k", None, True])
    def test_wrong_rate_is_named(self, rate):
        with pytest.raises(sm.InvalidSettingError, match="`sampling_rate_hz`"):
            sm.measure_trace(np.zeros(100), rate)

    def test_wrong_voltage_is_named(self):
        with pytest.raises(sm.InvalidSettingError, match="`voltage_mv`"):
            sm.measure_trace(np.zeros((10, 10)), 20_000.0)


class TestMeasure:
    def test_tables_hold_what_measure_writes(self, sample, tmp_path):
        # The same file through the command's run: every CSV cell is the API's value rounded
        # to the column's decimals (values themselves are checked against published models
        # and closed forms in test_measurement, test_sweep_features and test_cell_features).
        res = sm.measure(sample)
        measure_paths([str(sample)], tmp_path / "out", figure_format=None)
        for table, columns, name in ((res.spikes, SPIKE_COLUMNS, "spikes.csv"),
                                     (res.sweeps, SWEEP_COLUMNS, "sweeps.csv"),
                                     (res.cells, CELL_COLUMNS, "cells.csv")):
            with open(tmp_path / "out" / name, newline="") as fh:
                rows = list(csv.DictReader(fh))
            assert len(rows) == len(table) > 0
            for column in columns:
                if column.decimals is None or column.name == "file":
                    continue
                written = np.array([float(r[column.name]) if r[column.name] else np.nan
                                    for r in rows])
                assert np.allclose(np.round(table[column.name], column.decimals), written,
                                   equal_nan=True, atol=10.0 ** -column.decimals), column.name
        assert res.problems == []

    def test_a_recording_already_read(self, sample):
        with sm.read_recording(sample) as recording:
            res = sm.measure(recording, onset_rate_v_per_s=30)
        assert len(res.cells) == 1 and len(res.sweeps) == len(recording.sweeps)

    def test_to_frame(self, sample):
        pytest.importorskip("pandas")
        frame = sm.measure(sample).sweeps.to_frame()
        assert list(frame.columns) == [c.name for c in SWEEP_COLUMNS]
        assert frame["spike_count"].sum() == pytest.approx(
            np.nansum(sm.measure(sample).sweeps["spike_count"]))

    def test_wrong_arguments_are_named_before_reading(self, tmp_path):
        missing = tmp_path / "absent.nwb"  # never opened: the settings are checked first
        with pytest.raises(sm.InvalidSettingError, match="`smoothing_ms`"):
            sm.measure(missing, smoothing_ms=0)
        with pytest.raises(sm.InvalidSettingError, match="`step_s`"):
            sm.measure(missing, step_s=(0.1,))
        with pytest.raises(sm.InvalidSettingError, match="`recording`"):
            sm.measure(42)

    def test_unknown_column_names_the_columns(self, sample):
        with pytest.raises(KeyError, match="threshold_mv"):
            sm.measure(sample).spikes["threshold"]


def test_import_is_light():
    # The command line imports the package first: the API and its numerical stack load only
    # when one of its names is used.
    code = ("import sys, spikemeasure; print(sorted(m for m in ('numpy', 'spikemeasure.api') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip() == "[]"
