"""The data model of a recording: sweeps and traces left in their file.

Source of the expected answers: numpy's own slicing and scaling of the same array, and the
definition of a sweep's duration (samples divided by the sampling rate).
"""
import numpy as np
import pytest

from spikemeasure.io import LazyTrace, Sweep


def test_lazy_trace_slices_and_scales():
    data = np.arange(10.0)
    trace = LazyTrace(lambda a, b: data[a:b], data.size) * 1e3
    np.testing.assert_array_equal(trace[2:5], data[2:5] * 1e3)
    np.testing.assert_array_equal(trace[-3:], data[-3:] * 1e3)
    np.testing.assert_array_equal(np.asarray(trace), data * 1e3)
    assert trace[5:5].size == 0 and len(trace) == 10
    with pytest.raises(TypeError):
        trace[3]


def test_a_sweep_over_a_lazy_trace_has_its_length_and_duration():
    data = np.zeros(30_000)
    lazy = Sweep(LazyTrace(lambda a, b: data[a:b], data.size), 20_000.0, file="long.nwb")
    whole = Sweep(data, 20_000.0, file="long.nwb")
    assert lazy.is_lazy and not whole.is_lazy
    assert lazy.n_samples == whole.n_samples == data.size
    assert lazy.duration_s == whole.duration_s == pytest.approx(1.5)
