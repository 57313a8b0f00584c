"""Figures of one cell and of a batch: what a person looks at before trusting the numbers.

The only package that imports matplotlib, and only inside functions, so that the command line
and runs without figures do not pay for it. Figures are built on matplotlib's Agg canvas (no
window, no global pyplot state, safe in worker processes) unless they are to be shown, and
written by its ``savefig``.

Per cell (see ``docs/figures.md``), one module each:

- :func:`traces_figure`: every sweep's voltage, the command current beneath, coloured by step
  size, with each spike's threshold, peak and trough marked; the rheobase sweep stands out.
- :func:`first_spike_figure`: the first spike of the rheobase sweep up close, its threshold,
  peak, half-width span and trough drawn and labelled with their values.
- :func:`phase_plot_figure`: dV/dt against V for the spikes of the rheobase sweep, with the
  onset rate marked.
- :func:`step_response_figure`: firing rate against step size (f-I) and steady-state
  deflection against step size with the fitted input-resistance line.

:func:`cell_figures` and :func:`write_cell_figures` make all four; :func:`show_figures` shows
them in windows. Across cells: :func:`batch_features_figure`, one panel per feature, each
cell a point. What the sweeps and spikes shown are comes from the tables' own rules
(:func:`~spikemeasure.tables.rheobase_result`,
:func:`~spikemeasure.tables.first_spike_in_step`); long sweeps are drawn as a min/max
:func:`envelope`.
"""
from .batch import BATCH_FEATURES, BATCH_FIGURE_NAME, batch_features_figure, write_batch_figure
from .cell import CELL_FIGURE_NAMES, cell_figures, write_cell_figures
from .common import DPI, FIGURE_FORMATS, figure_folder_name
from .envelope import ENVELOPE_BINS, envelope
from .first_spike import first_spike_figure
from .phase_plot import phase_plot_figure
from .step_responses import step_response_figure
from .traces import traces_figure
from .windows import DisplayUnavailableError, show_figures

__all__ = ["FIGURE_FORMATS", "CELL_FIGURE_NAMES", "BATCH_FIGURE_NAME", "BATCH_FEATURES",
           "ENVELOPE_BINS", "DPI", "DisplayUnavailableError", "envelope", "traces_figure",
           "first_spike_figure", "phase_plot_figure", "step_response_figure", "cell_figures",
           "batch_features_figure", "write_cell_figures", "write_batch_figure",
           "figure_folder_name", "show_figures"]
