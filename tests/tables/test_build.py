"""Cell formatting of the tables. Source: Python's format specification (fixed point with
the declared decimals), with the table rules on top: a missing value is empty, no "-0"."""
from spikemeasure.columns import Column
from spikemeasure.tables.build import format_value


def test_cell_format():
    col = Column("x_mv", "mV", "test", 3)
    assert format_value(col, float("nan")) == ""
    assert format_value(col, -0.0001) == "0.000"
    assert format_value(col, -55.12345) == "-55.123"
    assert format_value(Column("file", "", "t"), "a/b.nwb") == "a/b.nwb"
