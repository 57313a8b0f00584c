"""The column declarations, the CSV header and docs/measurements.md agree."""
from pathlib import Path

from spikemeasure.columns import SPIKE_COLUMNS, SPIKE_MARKS, columns_markdown, spike_column_names
from spikemeasure.analysis.spikes import FLAG_TEXT, SpikeMeasurements

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


def test_cell_format():
    from spikemeasure.columns import Column
    from spikemeasure.tables.build import format_value

    col = Column("x_mv", "mV", "test", 3)
    assert format_value(col, float("nan")) == ""
    assert format_value(col, -0.0001) == "0.000"
    assert format_value(col, -55.12345) == "-55.123"
    assert format_value(Column("file", "", "t"), "a/b.nwb") == "a/b.nwb"
