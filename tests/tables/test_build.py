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


def test_cell_summary_refuses_the_sweeps_of_two_electrodes():
    """One cell's summary from one electrode's sweeps: mixing two cells is refused."""
    from dataclasses import replace

    import numpy as np
    import pytest

    from spikemeasure.errors import InvalidSettingError
    from spikemeasure.io import Sweep
    from spikemeasure.tables.build import cell_summary, measure_sweep

    flat = Sweep(np.full(2000, -70.0), 20_000.0, file="x.nwb", electrode="a")
    results = [measure_sweep(flat), measure_sweep(replace(flat, electrode="b"))]
    with pytest.raises(InvalidSettingError, match="`results` must be the sweeps of one cell"):
        cell_summary(results)
