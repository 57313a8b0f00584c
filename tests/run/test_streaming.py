"""A file is measured one sweep at a time: the memory a file's task holds does not grow with
its sweeps, and the values are those of its sweeps measured from memory."""
from __future__ import annotations

import tracemalloc

import numpy as np
import pytest

from conftest import rc_cell_sweeps, write_nix
from spikemeasure.analysis.detection import DetectionSettings
from spikemeasure.io import Recording, Sweep, read_recording
from spikemeasure.io.sweep import StoredTrace
from spikemeasure.run.task import measure_file
from spikemeasure.tables.build import cell_summary, measure_recording

N_SWEEPS = 16
DURATION_S = 0.5
#: What one more sweep adds that is not its samples: its values, spike rows, sweep object
#: and the file's dataset handles (about 7 kB measured; the samples of one sweep are 80 kB).
SMALL_PER_SWEEP_BYTES = 12_000
PARAMETERS = {"settings": DetectionSettings().as_dict(), "step_s": None,
              "step_sizes_pa": None}


@pytest.fixture(scope="module")
def step_series(tmp_path_factory):
    """A passive RC membrane's step series (closed form, spikes added on depolarizing
    steps), written as NIX: all 16 sweeps, and every fourth sweep alone."""
    steps = tuple(np.linspace(-100.0, 200.0, N_SWEEPS))
    spikes = tuple(0 if s <= 0 else int(s // 60) for s in steps)
    sweeps = rc_cell_sweeps(steps, spikes, duration_s=DURATION_S)
    folder = tmp_path_factory.mktemp("streaming")
    return {"sweeps": sweeps, "many": write_nix(folder / "many.nix", sweeps),
            "few": write_nix(folder / "few.nix", sweeps[::4])}


def _peak_bytes(path) -> tuple[int, object]:
    """tracemalloc's peak while one file's task measures `path` (without figures)."""
    tracemalloc.start()
    try:
        outcome = measure_file(str(path), path.name, PARAMETERS)
        return tracemalloc.get_traced_memory()[1], outcome
    finally:
        tracemalloc.stop()


def test_samples_wait_in_the_file_until_measured(step_series):
    with read_recording(step_series["many"]) as recording:
        assert len(recording.sweeps) == N_SWEEPS
        assert all(isinstance(s.voltage_mv, StoredTrace) and isinstance(s.command_pa, StoredTrace)
                   for s in recording.sweeps)
        loaded = recording.sweeps[3].loaded()
        v, c = step_series["sweeps"][3]
        # float64 written, float64 read: the samples as numpy holds them, bit for bit
        assert loaded.voltage_mv.tobytes() == np.asarray(v, dtype=np.float64).tobytes()
        assert loaded.command_pa.tobytes() == np.asarray(c, dtype=np.float64).tobytes()


def test_memory_does_not_grow_with_the_sweeps(step_series, monkeypatch):
    """Measuring 16 sweeps peaks at most 2 sweeps' float64 bytes (numpy's nbytes of one
    voltage) above measuring 4 of them, besides what each sweep's results and file handles
    take (SMALL_PER_SWEEP_BYTES): only the sweep being measured is in memory. Holding the
    file's sweeps would add 2 x 12 sweeps' bytes (voltage and command). The hum fits' kept
    designs are left out (a limit of 0): they hold no samples, are bounded by their own
    limit (tests/analysis/test_line_noise.py, TestKeptDesigns) and dropped after each
    cell."""
    import spikemeasure.analysis.line_noise as line_noise

    monkeypatch.setattr(line_noise, "DESIGN_CACHE_BYTES", 0)
    _peak_bytes(step_series["few"])  # imports and caches first, outside the comparison
    few, few_outcome = _peak_bytes(step_series["few"])
    many, many_outcome = _peak_bytes(step_series["many"])
    sweep_bytes = step_series["sweeps"][0][0].nbytes
    assert few_outcome.sweeps_measured == 4 and many_outcome.sweeps_measured == N_SWEEPS
    extra_sweeps = N_SWEEPS - 4
    assert many - few <= 2 * sweep_bytes + extra_sweeps * SMALL_PER_SWEEP_BYTES, \
        (many - few) / sweep_bytes


def test_values_equal_those_of_the_sweeps_in_memory(step_series):
    """The same sweeps measured from memory (the arrays written) give the same tables."""
    settings = DetectionSettings()
    in_memory = Recording("many.nix", "arrays", [
        Sweep(np.asarray(v, dtype=float), 20_000.0, np.asarray(c, dtype=float),
              file="many.nix", index=k) for k, (v, c) in enumerate(step_series["sweeps"])])
    with read_recording(step_series["many"], shown_as="many.nix") as recording:
        streamed = measure_recording(recording, settings)
        expected = measure_recording(in_memory, settings)
        assert [repr(r.features) for r in streamed] == [repr(r.features) for r in expected]
        for a, b in zip(streamed, expected):
            assert a.spikes.threshold_mv.tobytes() == b.spikes.threshold_mv.tobytes()
        assert repr(cell_summary(streamed)) == repr(cell_summary(expected))  # NaN alike


def test_kept_designs_dropped_after_the_file(step_series):
    """The hum fits' designs kept between a cell's sweeps are dropped once it is measured."""
    import spikemeasure.analysis.line_noise as line_noise

    measure_file(str(step_series["few"]), "few.nix", PARAMETERS)
    assert not line_noise._designs
