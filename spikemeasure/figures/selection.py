"""Which sweeps and spikes the cell figures show, taken from the tables' own rules."""
from __future__ import annotations

from typing import Sequence

from ..analysis.cell_features import CellFeatures
from ..tables.build import SweepResult, first_spike_in_step, rheobase_result
from .common import title

__all__ = ["measured_results", "stimulus_pa", "shown_spike", "figure_title"]


def measured_results(results: Sequence[SweepResult]) -> list[SweepResult]:
    """The results with features: the sweeps the tables have a row for."""
    return [r for r in results if r.error is None and r.features is not None]


def stimulus_pa(result: SweepResult) -> float:
    """The sweep's step size (pA), NaN when unknown or not measured."""
    return float(result.features.stimulus_pa) if result.features is not None else float("nan")


def shown_spike(results: Sequence[SweepResult], cell: CellFeatures
                ) -> tuple[SweepResult | None, int | None, str]:
    """The sweep and spike shown up close and in the phase plot, and how it was chosen.

    Returns
    -------
    result : SweepResult or None
        The rheobase sweep (:func:`~spikemeasure.tables.build.rheobase_result`); without one, the
        first measured sweep with a spike; None when no sweep has one.
    spike : int or None
        The first spike in the step (:func:`~spikemeasure.tables.build.first_spike_in_step`); for
        a sweep without a spike in its step, its first spike.
    chosen : str
        "rheobase sweep", "first sweep with a spike", or "" for none.
    """
    rheobase_sweep = rheobase_result(list(results), cell)
    if rheobase_sweep is not None:
        first = first_spike_in_step(rheobase_sweep)
        if first is not None:
            return rheobase_sweep, first, "rheobase sweep"
    for r in measured_results(results):  # step sizes unknown: the first sweep with a spike
        if r.spikes is not None and len(r.spikes):
            first = first_spike_in_step(r)
            return r, (0 if first is None else first), "first sweep with a spike"
    return None, None, ""


def figure_title(name: str | None, results: Sequence[SweepResult], what: str) -> str:
    """A cell figure's title: `name` (default: the sweeps' file, with the electrode when the
    file holds several cells), then `what`."""
    if results and results[0].sweep.cells_in_file > 1:
        name = f"{name or results[0].sweep.file}, {results[0].sweep.electrode}"
    return title(name, results[0].sweep.file if results else "", what)
