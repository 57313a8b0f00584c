"""All figures of one cell, drawn and written together."""
from __future__ import annotations

import os
import threading
from pathlib import Path
from typing import Callable, Sequence

from ..cell_features import CellFeatures
from ..detection import DetectionSettings
from ..io import Recording
from ..tables import SweepResult, cell_summary
from .common import FIGURE_FORMATS, save_figure
from .first_spike import first_spike_figure
from .phase_plot import phase_plot_figure
from .step_responses import step_response_figure
from .traces import traces_figure

__all__ = ["CELL_FIGURE_NAMES", "cell_figures", "write_cell_figures"]

#: File stem of each cell figure, in the order they are made and shown.
CELL_FIGURE_NAMES = ("traces", "first_spike", "phase_plot", "step_responses")


def cell_figures(results: Sequence[SweepResult], cell: CellFeatures | None = None,
                 settings: DetectionSettings = DetectionSettings(), *,
                 name: str | None = None, new_figure: Callable | None = None,
                 reuse: dict | None = None) -> dict:
    """All figures of one cell, keyed by :data:`CELL_FIGURE_NAMES`, in that order; `name`
    (default: the sweeps' file) starts every title. `new_figure` and `reuse` as for
    :func:`traces_figure`."""
    cell = cell_summary(list(results)) if cell is None else cell
    kw = {"name": name, "new_figure": new_figure, "reuse": reuse}
    return {"traces": traces_figure(results, cell, **kw),
            "first_spike": first_spike_figure(results, cell, **kw),
            "phase_plot": phase_plot_figure(results, cell, settings, **kw),
            "step_responses": step_response_figure(results, cell, **kw)}


_kept_figures = threading.local()


def _kept_for_this_thread() -> dict:
    """The cell figures this thread drew last, to be drawn again for its next cell (workers
    of a Dask cluster may draw in several threads of one process)."""
    if not hasattr(_kept_figures, "figures"):
        _kept_figures.figures = {}
    return _kept_figures.figures


def write_cell_figures(recording: Recording, results: Sequence[SweepResult],
                       folder: str | os.PathLike, fmt: str = "png", *,
                       settings: DetectionSettings = DetectionSettings(),
                       cell: CellFeatures | None = None) -> list[str]:
    """Write a cell's figures into `folder`, each atomically; their file names.

    Parameters
    ----------
    recording : Recording
        The recording `results` were measured from; its path (as shown in the tables) starts
        every title. The traces drawn are those the results hold.
    results : sequence of SweepResult
    folder : str or path-like
        Created if missing.
    fmt : {'png', 'svg', 'pdf'}
    settings : DetectionSettings, optional
        The run's settings (the phase plot's dV/dt and onset rate).
    cell : CellFeatures, optional
        The cell summary, when already computed.

    Returns
    -------
    list of str
        File names in `folder`, in the order of :data:`CELL_FIGURE_NAMES`.

    Notes
    -----
    The figures are drawn on those this thread drew for its previous cell (`reuse` of
    :func:`cell_figures`), emptied first, and each distinct text is rendered once per process
    (:mod:`spikemeasure.figures.text_cache`): in a run over many cells, the axes, ticks and
    labels are built once per thread and most texts rendered once (``docs/benchmark.md``).
    """
    if fmt not in FIGURE_FORMATS:
        raise ValueError(f"`fmt` must be one of {', '.join(FIGURE_FORMATS)} (got {fmt!r})")
    folder = Path(folder)
    names = []
    figures = cell_figures(results, cell, settings, name=recording.path,
                           reuse=_kept_for_this_thread())
    for stem, fig in figures.items():
        name = f"{stem}.{fmt}"
        save_figure(fig, folder / name, fmt)
        names.append(name)
    return names
