"""Figures of one cell and of a batch: what a person looks at before trusting the numbers.

The only module that imports matplotlib, and only inside functions, so that the command line
and runs without figures do not pay for it. Figures are built on the Agg canvas (no window,
no global pyplot state, safe in worker processes) unless they are to be shown.

Per cell (see ``docs/figures.md``):

- :func:`traces_figure`: every sweep's voltage, the command current beneath, coloured by step
  size, with each spike's threshold, peak and trough marked; the rheobase sweep stands out.
- :func:`first_spike_figure`: the first spike of the rheobase sweep up close, its threshold,
  peak, half-width span and trough drawn and labelled with their values.
- :func:`phase_plot_figure`: dV/dt against V for the spikes of the rheobase sweep, with the
  onset rate marked.
- :func:`step_response_figure`: firing rate against step size (f-I) and steady-state
  deflection against step size with the fitted input-resistance line.

Across cells: :func:`batch_features_figure`, one panel per feature, each cell a point.

Long sweeps are drawn as a min/max envelope of at most :data:`ENVELOPE_BINS` bins, so drawing
time stays bounded; markers are drawn at their exact measured values.
"""
from __future__ import annotations

import hashlib
import io
import math
import os
import sys
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from .cell_features import CellFeatures, passive_sweeps
from .detection import DetectionSettings, smoothed_trace
from .errors import SpikemeasureError, printable_name
from .output import write_bytes_atomic
from .io import Recording
from .sweeps import MIN_SAMPLING_RATE_HZ
from .tables import SweepResult, cell_summary

__all__ = ["FIGURE_FORMATS", "CELL_FIGURE_NAMES", "BATCH_FIGURE_NAME", "BATCH_FEATURES",
           "ENVELOPE_BINS", "DisplayUnavailableError", "envelope", "traces_figure",
           "first_spike_figure", "phase_plot_figure", "step_response_figure", "cell_figures",
           "batch_features_figure", "write_cell_figures", "write_batch_figure",
           "figure_folder_name", "show_figures"]

#: Formats a figure can be written in.
FIGURE_FORMATS = ("png", "svg", "pdf")
#: File stem of each cell figure, in the order they are made and shown.
CELL_FIGURE_NAMES = ("traces", "first_spike", "phase_plot", "step_responses")
#: The phase plot of a long gap-free recording shows this much of it (s), from its first spike.
PHASE_PLOT_LONG_S = 10.0
#: File stem of the batch figure, written to the top of the figures folder.
BATCH_FIGURE_NAME = "cell_features_by_group"
#: (cells.csv column, panel title, axis label) of each panel of the batch figure.
BATCH_FEATURES = (
    ("rheobase_threshold_mv", "threshold", "threshold (mV)"),
    ("rheobase_half_width_ms", "half-width", "half-width (ms)"),
    ("rheobase_ahp_depth_mv", "AHP depth", "AHP depth (mV)"),
    ("input_resistance_mohm", "input resistance", "input resistance (MOhm)"),
    ("rheobase_pa", "rheobase", "rheobase (pA)"),
)
#: A sweep longer than twice this many samples is drawn as a min/max envelope of this many bins.
ENVELOPE_BINS = 700
#: The sweeps of the traces figure (all but the rheobase sweep) are bands at least this thick.
_TRACE_LINE_PT = 0.6
DPI = 110
_WIDTH_IN = 8.0
_THRESHOLD_COLOUR = "#e66101"
_PEAK_COLOUR = "#000000"
_TROUGH_COLOUR = "#0571b0"
_RHEOBASE_COLOUR = "#d7191c"
_UNKNOWN_COLOUR = "#888888"
_STYLE = {"font.size": 9, "axes.titlesize": 10, "axes.labelsize": 9, "xtick.labelsize": 8,
          "ytick.labelsize": 8, "legend.fontsize": 8, "figure.titlesize": 11,
          "axes.spines.top": False, "axes.spines.right": False, "svg.hashsalt": "spikemeasure",
          "path.simplify": True, "text.parse_math": False,  # a "$" in a file name is text
          "legend.frameon": True, "legend.framealpha": 1.0, "legend.edgecolor": "none"}


class DisplayUnavailableError(SpikemeasureError):
    """Figures were to be shown in a window, but there is no display to show them on."""


# --------------------------------------------------------------------------- helpers

def _mpl():
    """matplotlib, imported on first use."""
    import matplotlib

    return matplotlib


def _new_figure(height_in: float, new_figure: Callable | None, layout: str | None = None):
    """A figure of the house size on the Agg canvas that draws each distinct text once
    (:class:`~spikemeasure.figure_canvas.TextCachingCanvas`), or from `new_figure`, for a
    window.

    Cell figures have fixed margins (the same look for every cell, and no layout passes,
    which would cost more than the drawing); the batch figure uses constrained layout.
    """
    if new_figure is not None:
        return new_figure(figsize=(_WIDTH_IN, height_in), dpi=DPI, layout=layout)
    from matplotlib.figure import Figure

    from .figure_canvas import TextCachingCanvas

    fig = Figure(figsize=(_WIDTH_IN, height_in), dpi=DPI, layout=layout)
    TextCachingCanvas(fig)
    return fig


@dataclass
class _Kept:
    """A cell figure and its axes, kept to be drawn again for the next cell (`reuse`)."""
    fig: object
    axes: list
    own_x_locator: list
    colorbar: object = None


def _cell_figure(kind: str, height_in: float, rects: Sequence[tuple], new_figure,
                 reuse: dict | None, share_x: bool = False) -> _Kept:
    """The figure of one kind of cell figure with its axes at `rects` (the later ones sharing
    the first one's x axis when `share_x`): taken from `reuse` and emptied when it holds one,
    otherwise made (and put in `reuse`, when given).

    Emptying keeps what costs most to build and is the same for every cell (the axes, their
    ticks and labels) and removes everything drawn from the data, restoring the state a new
    figure starts in; ``tests/test_figures.py`` checks that a reused figure draws the same
    pixels as a new one.
    """
    if reuse is not None and kind in reuse:
        kept = reuse[kind]
        _empty(kept)
        return kept
    fig = _new_figure(height_in, new_figure)
    axes = []
    for k, rect in enumerate(rects):
        axes += _axes(fig, rect, sharex=axes[0] if share_x and k else None)
    kept = _Kept(fig, axes, [not (share_x and k) for k in range(len(rects))])
    if reuse is not None:
        reuse[kind] = kept
    return kept


def _empty(kept: _Kept) -> None:
    """Remove what a cell drew on a kept figure and restore a new figure's axes state."""
    mpl = _mpl()
    for ax, own_x in zip(kept.axes, kept.own_x_locator):
        for artist in [*ax.lines, *ax.collections, *ax.texts, *ax.patches, *ax.images]:
            artist.remove()
        if ax.get_legend() is not None:
            ax.get_legend().remove()
        for loc in ("left", "center", "right"):
            ax.set_title("", loc=loc)
        ax.relim()
        ax.set_autoscale_on(True)
        ax.margins(mpl.rcParams["axes.xmargin"], mpl.rcParams["axes.ymargin"])
        _house_locators(ax, x=own_x)
    if kept.colorbar is not None:
        kept.colorbar.ax.set_visible(False)


#: (horizontal, vertical) side of the axes a legend location anchors to.
_LEGEND_ANCHORS = {"upper left": ("left", "upper"), "lower right": ("right", "lower"),
                   "center right": ("right", "center")}


def _legend_where_free(ax, candidates: Sequence[str], vertical_x: Sequence[float] = ()) -> None:
    """A legend at the first of `candidates` (locations) under which no drawn line or point of
    the axes runs, nor a vertical line at `vertical_x` (data); at the first when none is free.

    Each candidate legend is laid out and its box tested against the lines as drawn (segments
    sampled between their points), in pixels.
    """
    get_renderer = getattr(ax.figure.canvas, "get_renderer", None)
    if get_renderer is None or not ax.get_legend_handles_labels()[0]:
        _legend(ax, loc=candidates[0])
        return
    renderer = get_renderer()
    ax.autoscale_view()
    between = np.linspace(0.0, 1.0, 25)[:, np.newaxis]
    sampled = [np.empty((0, 2))]
    for line in ax.get_lines():
        xy = np.asarray(line.get_xydata(), dtype=float)
        if line.get_transform() != ax.transData:  # axhline/axvline: tested on their own
            continue
        xy = xy[np.isfinite(xy).all(axis=1)]
        sampled.append(xy)
        sampled += [a + between * (b - a) for a, b in zip(xy[:-1], xy[1:])]
    pixels = ax.transData.transform(np.concatenate(sampled))
    x_lines = [ax.transData.transform((v, 0.0))[0] for v in vertical_x if math.isfinite(v)]
    legend = ax.legend(loc=candidates[0])
    size = legend.get_window_extent(renderer)
    # the same box at each candidate place, as matplotlib anchors a legend inside the axes
    pad = renderer.points_to_pixels(legend.borderaxespad * legend.prop.get_size_in_points())
    frame = ax.bbox
    for loc in candidates:
        x0 = {"left": frame.x0 + pad,
              "right": frame.x1 - pad - size.width}[_LEGEND_ANCHORS[loc][0]]
        y0 = {"lower": frame.y0 + pad, "upper": frame.y1 - pad - size.height,
              "center": frame.y0 + (frame.height - size.height) / 2}[_LEGEND_ANCHORS[loc][1]]
        x1, y1 = x0 + size.width + 2, y0 + size.height + 2
        x0, y0 = x0 - 2, y0 - 2
        inside = ((pixels[:, 0] >= x0) & (pixels[:, 0] <= x1)
                  & (pixels[:, 1] >= y0) & (pixels[:, 1] <= y1))
        if not inside.any() and not any(x0 <= x <= x1 for x in x_lines):
            if loc != candidates[0]:
                ax.legend(loc=loc)
            return


def _legend(ax, **kw) -> None:
    """A legend of the labelled artists, if any."""
    if ax.get_legend_handles_labels()[0]:
        ax.legend(**kw)


def _axes(fig, *rects: tuple[float, float, float, float], sharex=None):
    """Axes at fixed positions (left, bottom, width, height in figure fractions), with at
    most about six ticks an axis: enough to read, and ticks are the dearest thing to draw."""
    out = []
    for rect in rects:
        ax = fig.add_axes(rect, sharex=sharex)
        _house_locators(ax, x=sharex is None)
        out.append(ax)
    return out


def _house_locators(ax, x: bool = True) -> None:
    """At most about six ticks on the y axis (and on the x axis, when `x`)."""
    from matplotlib.ticker import MaxNLocator

    ax.yaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
    if x:
        ax.xaxis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]))


def _lazy_envelope(y, sampling_rate_hz: float, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`envelope` of a trace left in its file, read a block of whole bins at a time."""
    n = len(y)
    per = -(-n // bins)
    block = per * max(1, (1 << 21) // per)
    index, values = [np.zeros(1, dtype=np.int64)], [y[0:1]]
    for start in range(0, n, block):
        part = y[start:min(n, start + block)]
        count = -(-part.size // per)
        padded = np.concatenate([part, np.full(count * per - part.size, part[-1])]
                                ).reshape(count, per)
        offsets = np.arange(count) * per
        lo = np.minimum(offsets + np.argmin(padded, axis=1), part.size - 1)
        hi = np.minimum(offsets + np.argmax(padded, axis=1), part.size - 1)
        local = np.column_stack([np.minimum(lo, hi), np.maximum(lo, hi)]).ravel()
        index.append(start + local)
        values.append(part[local])
    index.append(np.array([n - 1]))
    values.append(y[n - 1:n])
    return np.concatenate(index) / sampling_rate_hz, np.concatenate(values)


def envelope(y: np.ndarray, sampling_rate_hz: float, bins: int = ENVELOPE_BINS
             ) -> tuple[np.ndarray, np.ndarray]:
    """Times (s) and values to draw a long trace with: each bin's minimum and maximum.

    Parameters
    ----------
    y : ndarray
        1-D samples.
    sampling_rate_hz : float
    bins : int, optional
        A trace of more than ``2 * bins`` samples is cut into at most `bins` bins of
        ``ceil(n / bins)`` samples (the last one shorter), each drawn as its minimum and
        maximum in the order they occur.

    Returns
    -------
    t_s, values : ndarray
        The samples themselves when the trace is short enough. Otherwise the first sample,
        two points per bin and the last sample: the trace's extremes are all kept, so no spike
        peak or trough is lost to the eye, and the line spans the whole sweep.
    """
    if bins < 1:
        raise ValueError("`bins` must be at least 1")
    if not isinstance(y, np.ndarray) and len(y) > 2 * bins:
        return _lazy_envelope(y, sampling_rate_hz, bins)
    y = np.asarray(y, dtype=float)
    n = y.size
    if n <= 2 * bins:
        return np.arange(n) / sampling_rate_hz, y
    per = -(-n // bins)
    count = -(-n // per)
    padded = np.concatenate([y, np.full(count * per - n, y[-1])]).reshape(count, per)
    starts = np.arange(count) * per
    lo = np.minimum(starts + np.argmin(padded, axis=1), n - 1)
    hi = np.minimum(starts + np.argmax(padded, axis=1), n - 1)
    index = np.concatenate([[0], np.column_stack([np.minimum(lo, hi), np.maximum(lo, hi)])
                            .ravel(), [n - 1]])
    return index / sampling_rate_hz, y[index]


def _measured(results: Sequence[SweepResult]) -> list[SweepResult]:
    return [r for r in results if r.error is None and r.features is not None]


def _title(name: str | None, results: Sequence[SweepResult], what: str) -> str:
    file = name if name is not None else (results[0].sweep.file if results else "")
    file = printable_name(str(file))  # a name whose bytes were not UTF-8 cannot be drawn
    return f"{file}: {what}" if file else what


def _spike_times(r: SweepResult) -> np.ndarray:
    s = r.spikes
    return np.where(np.isfinite(s.threshold_s), s.threshold_s, s.peak_s)


def _first_in_step(r: SweepResult) -> int | None:
    """Index of the first spike in the sweep's step (as the cell table's rheobase_* uses)."""
    if r.step is None or r.spikes is None or not len(r.spikes):
        return None
    t = _spike_times(r)
    inside = np.flatnonzero((t >= r.step.onset_s) & (t < r.step.offset_s))
    return int(inside[0]) if inside.size else None


def _rheobase_result(results: Sequence[SweepResult], cell: CellFeatures) -> SweepResult | None:
    """The rheobase sweep: the first measured sweep of step rheobase_pa with a spike in it."""
    if not math.isfinite(cell.rheobase_pa):
        return None
    for r in _measured(results):
        if r.features.stimulus_pa == cell.rheobase_pa and _first_in_step(r) is not None:
            return r
    return None


def _spike_sweep(results: Sequence[SweepResult], cell: CellFeatures
                 ) -> tuple[SweepResult | None, int | None, str]:
    """The sweep and spike shown up close and in the phase plot, and how it was chosen."""
    r = _rheobase_result(results, cell)
    if r is not None:
        return r, _first_in_step(r), "rheobase sweep"
    for r in _measured(results):  # step sizes unknown: the first sweep with a spike
        if r.spikes is not None and len(r.spikes):
            k = _first_in_step(r)
            return r, (0 if k is None else k), "first sweep with a spike"
    return None, None, ""


def _stimulus(r: SweepResult) -> float:
    return float(r.features.stimulus_pa) if r.features is not None else float("nan")


def _note(ax, text: str, clear_ticks: bool = True) -> None:
    """A note in the middle of the axes; an axes with nothing else in it loses its ticks,
    whose numbers would mean nothing."""
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", wrap=True,
            color="#444444")
    if clear_ticks and not ax.lines and not ax.collections:
        ax.set_xticks([])
        ax.set_yticks([])


def _sweep_colours(measured: Sequence[SweepResult]):
    """One colour per sweep, ordered by step size; the colour map and its limits."""
    mpl = _mpl()
    stim = np.array([_stimulus(r) for r in measured])
    known = np.isfinite(stim)
    cmap = mpl.colormaps["viridis"]
    if known.any():
        lo, hi = float(stim[known].min()), float(stim[known].max())
        if hi == lo:
            lo, hi = lo - 1.0, hi + 1.0
        norm = mpl.colors.Normalize(lo, hi)
        mapped = cmap(norm(np.where(known, stim, lo)))  # one call for all sweeps
        colours = [tuple(c) if ok else _UNKNOWN_COLOUR for c, ok in zip(mapped, known)]
        return colours, cmap, norm
    return [_UNKNOWN_COLOUR] * len(measured), None, None


def _command_trace(r: SweepResult) -> tuple[np.ndarray, np.ndarray, bool] | None:
    """(t_s, command_pa, recorded): the recorded command, or the step given on the command line
    drawn as a rectangle; None when neither is known."""
    s = r.sweep
    if s.command_pa is not None:
        t, c = envelope(s.command_pa, s.sampling_rate_hz)
        return t, c, True
    if r.step is not None and math.isfinite(r.step.size_pa):
        hold = r.step.holding_pa if math.isfinite(r.step.holding_pa) else 0.0
        t = np.array([0.0, r.step.onset_s, r.step.onset_s, r.step.offset_s, r.step.offset_s,
                      s.duration_s])
        c = hold + np.array([0, 0, 1, 1, 0, 0]) * r.step.size_pa
        return t, c, False
    return None


def _band(t: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(t_s, low, high) of a trace from :func:`envelope`: each bin's minimum and maximum at
    the mean time of the two, between the first and the last sample; a trace drawn sample by
    sample is its own low and high."""
    if values.size < 4 or values.size % 2:
        return t, values, values
    pairs = values[1:-1].reshape(-1, 2)
    times = np.concatenate([t[:1], t[1:-1].reshape(-1, 2).mean(axis=1), t[-1:]])
    low = np.concatenate([values[:1], pairs.min(axis=1), values[-1:]])
    high = np.concatenate([values[:1], pairs.max(axis=1), values[-1:]])
    return times, low, high


def _band_outline(t: np.ndarray, low: np.ndarray, high: np.ndarray,
                  thinnest: float = 0.0) -> np.ndarray:
    """The polygon between `low` and `high`, widened symmetrically where it is thinner than
    `thinnest` (data units).

    A band filled once costs a third of stroking the min/max zigzag it replaces (Agg strokes
    every up and down of the zigzag) and looks the same at a bin per pixel; ENVELOPE_BINS
    bins span the axes' width.
    """
    widen = np.maximum(0.0, (thinnest - (high - low)) / 2.0)
    return np.concatenate([np.column_stack([t, low - widen]),
                           np.column_stack([t[::-1], (high + widen)[::-1]])])


# --------------------------------------------------------------------------- cell figures

def traces_figure(results: Sequence[SweepResult], cell: CellFeatures | None = None, *,
                  name: str | None = None, new_figure: Callable | None = None,
                  reuse: dict | None = None):
    """Every sweep's voltage over time with the command current beneath.

    Parameters
    ----------
    results : sequence of SweepResult
        From :func:`~spikemeasure.tables.measure_recording`; failed sweeps are left out.
    cell : CellFeatures, optional
        From :func:`~spikemeasure.tables.cell_summary` (computed when not given).
    new_figure : callable, optional
        Makes the figure (``matplotlib.pyplot.figure`` to show it in a window); default an Agg
        figure.
    reuse : dict, optional
        Figures kept from an earlier call, for drawing many cells in a row: the figure of this
        kind is taken from it, emptied and drawn again (several times quicker than building
        it), or made and put in it. The same Figure object is then returned for every cell,
        so write or copy it before the next call. Default: a new figure.

    Returns
    -------
    matplotlib.figure.Figure
        Axes 0 the voltage, axes 1 the command. Sweeps are coloured by step size (the colour
        bar); all but the rheobase sweep are one PolyCollection in axes 0, each sweep the band
        between the minima and maxima of :func:`envelope`, at least 0.6 pt thick; the rheobase
        sweep is a line through them, thicker, in red, on top. Spike markers are three lines
        without a connecting line, labelled ``threshold``, ``peak`` and ``trough``, at the
        exact ``threshold_s, threshold_mv`` (and so on) of every spike of every sweep.
    """
    from matplotlib.collections import LineCollection, PolyCollection

    cell = cell_summary(list(results)) if cell is None else cell
    measured = _measured(results)
    with _mpl().rc_context(_STYLE):
        kept = _cell_figure("traces", 6.0,
                            [(0.10, 0.335, 0.75, 0.575), (0.10, 0.085, 0.75, 0.2)],
                            new_figure, reuse, share_x=True)
        fig, (ax_v, ax_i) = kept.fig, kept.axes
        ax_v.tick_params(labelbottom=False)
        fig.suptitle(_title(name, results, "sweeps"), y=0.985)
        ax_v.set_ylabel("membrane voltage (mV)")
        ax_i.set_ylabel("command (pA)")
        ax_i.set_xlabel("time from sweep start (s)")
        if not measured:
            _note(ax_v, "no sweep could be measured", clear_ticks=False)
            return fig
        colours, cmap, norm = _sweep_colours(measured)
        rheo = _rheobase_result(results, cell)
        order = np.argsort([(_stimulus(r) if np.isfinite(_stimulus(r)) else -np.inf)
                            for r in measured], kind="stable")
        v_bands, v_cols, i_lines, i_cols = [], [], [], []
        drawn_command = recorded_any = False
        for k in order:
            r = measured[k]
            if r is rheo:
                continue
            v_bands.append(_band(*envelope(r.sweep.voltage_mv, r.sweep.sampling_rate_hz)))
            v_cols.append(colours[k])
            cmd = _command_trace(r)
            if cmd is not None:
                i_lines.append(np.column_stack(cmd[:2]))
                i_cols.append(colours[k])
                drawn_command = True
                recorded_any |= cmd[2]
        bands = PolyCollection([_band_outline(*band) for band in v_bands], facecolors=v_cols,
                               edgecolors="none", linewidths=0, alpha=0.85)
        ax_v.add_collection(bands)
        ax_i.add_collection(LineCollection(i_lines, colors=i_cols, linewidths=0.8))
        if rheo is not None:
            t, v = envelope(rheo.sweep.voltage_mv, rheo.sweep.sampling_rate_hz)
            ax_v.plot(t, v, color=_RHEOBASE_COLOUR, lw=1.1, zorder=3,
                      label=f"rheobase sweep {rheo.sweep.index} ({_stimulus(rheo):g} pA)")
            cmd = _command_trace(rheo)
            if cmd is not None:
                ax_i.plot(cmd[0], cmd[1], color=_RHEOBASE_COLOUR, lw=1.1, zorder=3)
                drawn_command = True
                recorded_any |= cmd[2]
        _spike_markers(ax_v, measured)
        ax_v.autoscale_view()
        ax_i.autoscale_view()
        if v_bands:  # now that the scale is known: every band at least a thin line thick
            bottom, top = ax_v.get_ylim()
            mv_per_px = (top - bottom) / (ax_v.get_position().height * fig.get_figheight()
                                          * fig.dpi)
            thinnest_mv = _TRACE_LINE_PT / 72.0 * fig.dpi * mv_per_px
            bands.set_verts([_band_outline(*band, thinnest=thinnest_mv) for band in v_bands])
            ax_v.set_ylim(bottom, top)
        if not drawn_command:
            gap_free = any(r.sweep.is_lazy for r in measured)
            _note(ax_i, "gap-free recording: no current step" if gap_free else
                  "no command channel and no step size given", clear_ticks=False)
        elif not recorded_any:
            ax_i.set_title("no command channel: the step given with --step / --step-sizes",
                           fontsize=8, loc="left")
        _legend(ax_v, loc="lower center", bbox_to_anchor=(0.5, 1.0), ncols=4,
                    borderaxespad=0.2)
        steps = {_stimulus(r) for r in measured if np.isfinite(_stimulus(r))}
        if cmap is not None and len(steps) > 1:  # one step size needs no colour key
            mappable = _mpl().cm.ScalarMappable(norm=norm, cmap=cmap)
            if kept.colorbar is None:
                kept.colorbar = fig.colorbar(mappable,
                                             cax=fig.add_axes((0.875, 0.085, 0.018, 0.825)))
                kept.colorbar.set_label("step size (pA)")
            else:
                bar = kept.colorbar
                if (bar.norm.vmin, bar.norm.vmax, bar.cmap.name) != (norm.vmin, norm.vmax,
                                                                     cmap.name):
                    bar.update_normal(mappable)  # costly: only when the step range changed
                bar.ax.set_visible(True)
    return fig


def _spike_markers(ax, measured: Sequence[SweepResult]) -> None:
    """Threshold, peak and trough of every spike, at their measured values."""
    cols = {"threshold_s": [], "threshold_mv": [], "peak_s": [], "peak_mv": [], "trough_s": [],
            "trough_mv": []}
    for r in measured:
        if r.spikes is None or not len(r.spikes):
            continue
        for name in cols:
            cols[name].append(getattr(r.spikes, name))
    if not cols["peak_s"]:
        return
    flat = {k: np.concatenate(v) for k, v in cols.items()}
    for what, marker, colour, size in (("threshold", "o", _THRESHOLD_COLOUR, 3.5),
                                       ("peak", "v", _PEAK_COLOUR, 3.5),
                                       ("trough", "^", _TROUGH_COLOUR, 3.5)):
        x, y = flat[f"{what}_s"], flat[f"{what}_mv"]
        ok = np.isfinite(x) & np.isfinite(y)
        ax.plot(x[ok], y[ok], ls="none", marker=marker, ms=size, color=colour, mew=0,
                label=what, zorder=4)


def _crossings(v: np.ndarray, level: float, peak: int) -> tuple[float, float]:
    """Fractional indices of the last upward crossing of `level` before sample `peak` and the
    first downward one after it (NaN where missing), linearly interpolated."""
    below = np.flatnonzero(v[:peak + 1] < level)
    up = float("nan")
    if below.size and below[-1] + 1 <= peak:
        j = int(below[-1])
        up = j + (level - v[j]) / (v[j + 1] - v[j])
    after = np.flatnonzero(v[peak:] < level)
    down = float("nan")
    if after.size and after[0] > 0:
        j = peak + int(after[0])
        down = (j - 1) + (v[j - 1] - level) / (v[j - 1] - v[j])
    return up, down


def first_spike_figure(results: Sequence[SweepResult], cell: CellFeatures | None = None, *,
                       name: str | None = None, new_figure: Callable | None = None,
                       reuse: dict | None = None):
    """The first spike of the rheobase sweep up close, its measurements drawn and labelled.

    Parameters
    ----------
    results, cell, new_figure, reuse
        As for :func:`traces_figure`.

    Returns
    -------
    matplotlib.figure.Figure
        One axes, time in ms from the spike's threshold. Lines labelled ``threshold``,
        ``peak`` and ``trough`` hold one point each at the table's values; ``half-width`` is
        the span between the crossings of threshold_mv + amplitude_mv / 2 by the raw voltage.
        Without a rheobase (step sizes unknown) the first spike of the first sweep with one is
        shown; without spikes, a note says so.
    """
    cell = cell_summary(list(results)) if cell is None else cell
    r, k, chosen = _spike_sweep(results, cell)
    with _mpl().rc_context(_STYLE):
        kept = _cell_figure("first_spike", 4.2, [(0.10, 0.12, 0.86, 0.77)], new_figure, reuse)
        fig, (ax,) = kept.fig, kept.axes
        ax.set_xlabel("time from threshold (ms)")
        ax.set_ylabel("membrane voltage (mV)")
        if r is None:
            fig.suptitle(_title(name, results, "first spike"))
            _note(ax, "no spikes detected in any sweep")
            return fig
        s = r.spikes
        stim = _stimulus(r)
        size = f", {stim:g} pA" if math.isfinite(stim) else ""
        fig.suptitle(_title(name, results, f"first spike of the {chosen} (sweep {r.sweep.index}{size})"))
        rate = r.sweep.sampling_rate_hz
        thr_s, thr_mv = float(s.threshold_s[k]), float(s.threshold_mv[k])
        peak_s, peak_mv = float(s.peak_s[k]), float(s.peak_mv[k])
        trough_s, trough_mv = float(s.trough_s[k]), float(s.trough_mv[k])
        zero = thr_s if math.isfinite(thr_s) else peak_s
        end_s = trough_s + 0.002 if math.isfinite(trough_s) else peak_s + 0.005
        end_s = min(end_s, zero + 0.040)  # a late trough would squash the spike
        lo = max(0, int(math.floor((zero - 0.002) * rate)))
        hi = min(r.sweep.n_samples, int(math.ceil(end_s * rate)) + 1)
        # only the samples shown are read (a long recording stays in its file)
        v = np.asarray(r.sweep.voltage_mv[lo:hi], dtype=float)
        t_ms = (np.arange(lo, hi) / rate - zero) * 1e3
        ax.plot(t_ms, v, color="#333333", lw=1.0, label="voltage")
        if math.isfinite(thr_mv):
            ax.plot([0.0], [thr_mv], ls="none", marker="o", ms=6, color=_THRESHOLD_COLOUR,
                    label="threshold", zorder=4)
            ax.annotate(f"threshold {thr_mv:.1f} mV", (0.0, thr_mv), xytext=(-8, 4),
                        textcoords="offset points", ha="right", va="bottom")
        ax.plot([(peak_s - zero) * 1e3], [peak_mv], ls="none", marker="v", ms=6,
                color=_PEAK_COLOUR, label="peak", zorder=4)
        ax.annotate(f"peak {peak_mv:.1f} mV", ((peak_s - zero) * 1e3, peak_mv), xytext=(8, 0),
                    textcoords="offset points", ha="left", va="center")
        width = float(s.half_width_ms[k])
        if math.isfinite(width) and math.isfinite(thr_mv):
            level = thr_mv + 0.5 * (peak_mv - thr_mv)
            up, down = _crossings(v, level, int(np.argmax(v)))
            if math.isfinite(up) and math.isfinite(down):
                x = [((lo + up) / rate - zero) * 1e3, ((lo + down) / rate - zero) * 1e3]
                ax.plot(x, [level, level], color=_THRESHOLD_COLOUR, lw=1.5, marker="|", ms=8,
                        label="half-width", zorder=4)
                ax.annotate(f"half-width {width:.2f} ms", (x[1], level), xytext=(8, 0),
                            textcoords="offset points", ha="left", va="center")
        if math.isfinite(trough_s) and trough_s <= end_s:
            ahp = float(s.ahp_depth_mv[k])
            ax.plot([(trough_s - zero) * 1e3], [trough_mv], ls="none", marker="^", ms=6,
                    color=_TROUGH_COLOUR, label="trough", zorder=4)
            text = f"trough {trough_mv:.1f} mV" + (f" (AHP {ahp:.1f} mV)"
                                                   if math.isfinite(ahp) else "")
            ax.annotate(text, ((trough_s - zero) * 1e3, trough_mv), xytext=(0, -12),
                        textcoords="offset points", ha="center", va="top")
            if math.isfinite(thr_mv):
                ax.axhline(thr_mv, color=_THRESHOLD_COLOUR, lw=0.6, ls=":", zorder=1)
        elif math.isfinite(trough_s):
            ax.set_title(f"trough at {(trough_s - zero) * 1e3:.1f} ms, {trough_mv:.1f} mV "
                         "(beyond this view)", fontsize=8, loc="left")
        ax.margins(x=0.02, y=0.12)
        bottom, top = ax.get_ylim()
        ax.set_ylim(bottom - 0.08 * (top - bottom), top)  # room for the trough label
    return fig


def phase_plot_figure(results: Sequence[SweepResult], cell: CellFeatures | None = None,
                      settings: DetectionSettings = DetectionSettings(), *,
                      name: str | None = None, new_figure: Callable | None = None,
                      reuse: dict | None = None):
    """dV/dt against V for the spikes of the rheobase sweep, with the onset rate marked.

    Parameters
    ----------
    results, cell, new_figure, reuse
        As for :func:`traces_figure`.
    settings : DetectionSettings, optional
        The run's settings: dV/dt is the Savitzky-Golay derivative of detection
        (``smoothing_ms``), and ``onset_rate_v_per_s`` is drawn as a horizontal line.

    Returns
    -------
    matplotlib.figure.Figure
        Each spike drawn from 2 ms before its threshold to 5 ms after its peak, in order of
        occurrence (light to dark). The line labelled ``threshold`` holds each spike's
        (threshold_mv, dV/dt at threshold_s); the one labelled ``onset rate`` the detection
        level. Without spikes, the sweep of the largest step is drawn whole.
    """
    cell = cell_summary(list(results)) if cell is None else cell
    r, _, chosen = _spike_sweep(results, cell)
    measured = _measured(results)
    with _mpl().rc_context(_STYLE):
        kept = _cell_figure("phase_plot", 4.2, [(0.10, 0.12, 0.86, 0.77)], new_figure, reuse)
        fig, (ax,) = kept.fig, kept.axes
        ax.set_xlabel("membrane voltage (mV)")
        ax.set_ylabel("dV/dt (V/s)")
        if not measured:
            fig.suptitle(_title(name, results, "phase plot"))
            _note(ax, "no sweep could be measured")
            return fig
        if r is None:
            r = max(measured, key=lambda m: (np.nan_to_num(_stimulus(m), nan=-np.inf)))
            chosen = "largest step, no spikes"
        stim = _stimulus(r)
        size = f", {stim:g} pA" if math.isfinite(stim) else ""
        fig.suptitle(_title(name, results, f"phase plot, {chosen} (sweep {r.sweep.index}{size})"))
        rate = r.sweep.sampling_rate_hz
        s = r.spikes
        shift = 0
        if r.sweep.is_lazy:
            # a long recording: the first PHASE_PLOT_LONG_S of it from its first spike
            first = float(s.peak_s[0]) if s is not None and len(s) else 0.0
            shift = max(0, int((first - 0.05) * rate))
            stop = min(r.sweep.n_samples, shift + int(PHASE_PLOT_LONG_S * rate))
            if s is not None:
                peaks = s.peak_s * rate
                s = s.subset((peaks >= shift + 0.01 * rate) & (peaks < stop - 0.01 * rate))
            fig.suptitle(_title(name, results, f"phase plot, {chosen} (sweep {r.sweep.index}"
                                               f"{size}), its first {PHASE_PLOT_LONG_S:g} s"))
            voltage = np.asarray(r.sweep.voltage_mv[shift:stop], dtype=float)
        else:
            voltage = r.sweep.voltage_mv
        trace = smoothed_trace(voltage, rate, settings.smoothing_ms)
        v, dvdt = trace.voltage_mv, trace.dvdt_v_per_s
        n = len(s) if s is not None else 0
        if n == 0:
            stride = max(1, v.size // (2 * ENVELOPE_BINS))  # a slow, smooth trajectory
            ax.plot(v[::stride], dvdt[::stride], color="#555555", lw=0.6, label="whole sweep")
        else:
            cmap = _mpl().colormaps["viridis"]
            start = np.where(np.isfinite(s.threshold_s), s.threshold_s, s.peak_s)
            for j in range(n):
                lo = max(0, int((start[j] - 0.002) * rate) - shift)
                hi = min(v.size, int((s.peak_s[j] + 0.005) * rate) + 1 - shift)
                label = None
                if j == 0:
                    label = "spike 1" if n == 1 else "spike 1 (dark)"
                elif j == n - 1:
                    label = f"spike {n} (light)"
                ax.plot(v[lo:hi], dvdt[lo:hi], color=cmap(0.85 * j / max(1, n - 1)), lw=0.8,
                        label=label)
            ok = np.isfinite(s.threshold_s)
            thr_rate = np.interp(s.threshold_s[ok] * rate - shift, np.arange(v.size), dvdt)
            ax.plot(s.threshold_mv[ok], thr_rate, ls="none", marker="o", ms=4,
                    color=_THRESHOLD_COLOUR, label="threshold", zorder=4)
        ax.axhline(settings.onset_rate_v_per_s, color=_RHEOBASE_COLOUR, lw=0.9, ls="--",
                   label=f"onset rate {settings.onset_rate_v_per_s:g} V/s")
        ax.axhline(0.0, color="#999999", lw=0.5, zorder=0)
        _legend(ax, loc="upper left")
    return fig


def step_response_figure(results: Sequence[SweepResult], cell: CellFeatures | None = None, *,
                         name: str | None = None, new_figure: Callable | None = None,
                         reuse: dict | None = None):
    """Firing rate and steady-state deflection against step size.

    Parameters
    ----------
    results, cell, new_figure, reuse
        As for :func:`traces_figure`.

    Returns
    -------
    matplotlib.figure.Figure
        Axes 0: ``firing_rate_hz`` against ``stimulus_pa`` of every measured sweep (the line
        labelled ``sweeps``), the rheobase as a dashed vertical line and the f-I slope as a
        line (least-squares intercept with the table's slope) over the steps at or above
        rheobase. Axes 1: ``steady_state_mv - baseline_mv`` against ``stimulus_pa``; filled
        points are the hyperpolarizing spike-free sweeps the input resistance is fitted to,
        and the line labelled ``input resistance`` has slope input_resistance_mohm / 1000
        (mV/pA) and the least-squares intercept for that slope.
    """
    cell = cell_summary(list(results)) if cell is None else cell
    measured = _measured(results)
    with _mpl().rc_context(_STYLE):
        kept = _cell_figure("step_responses", 3.6,
                            [(0.09, 0.14, 0.375, 0.73), (0.6, 0.14, 0.375, 0.73)], new_figure,
                            reuse)
        fig, (ax_f, ax_v) = kept.fig, kept.axes
        fig.suptitle(_title(name, results, "responses to the steps"))
        ax_f.set_xlabel("step size (pA)")
        ax_f.set_ylabel("firing rate (Hz)")
        ax_v.set_xlabel("step size (pA)")
        ax_v.set_ylabel("steady state - baseline (mV)")
        stim = np.array([_stimulus(r) for r in measured])
        if not measured or not np.isfinite(stim).any():
            for ax in (ax_f, ax_v):
                _note(ax, "step sizes unknown\n(no command channel: give --step-sizes)"
                      if measured else "no sweep could be measured")
            return fig
        rate = np.array([r.features.firing_rate_hz for r in measured], dtype=float)
        dv = np.array([r.features.steady_state_mv - r.features.baseline_mv for r in measured],
                      dtype=float)
        order = np.argsort(stim)
        slow = sum("too_slow_for_spikes" in r.features.flags for r in measured)
        if slow and not np.isfinite(rate).any():
            # nothing to draw: say why rather than show an empty, labelled axes
            _note(ax_f, f"spikes not counted:\nsampled below {MIN_SAMPLING_RATE_HZ:g} Hz")
        else:
            ax_f.plot(stim[order], rate[order], marker="o", ms=4, color="#333333", lw=0.8,
                      label="sweeps")
        if slow and np.isfinite(rate).any():
            ax_f.set_title(f"{slow} sweep{'s' if slow != 1 else ''} sampled below "
                           f"{MIN_SAMPLING_RATE_HZ:g} Hz: spikes not counted",
                           fontsize=8, loc="left")
        if ax_f.lines and not np.nanmax(rate, initial=0.0) > 0:
            ax_f.set_ylim(-1.0, 10.0)  # no firing: a plain 0 to 10 Hz axis, not +-0.05
        if math.isfinite(cell.rheobase_pa):
            ax_f.axvline(cell.rheobase_pa, color=_RHEOBASE_COLOUR, ls="--", lw=0.9,
                         label=f"rheobase {cell.rheobase_pa:g} pA")
        if math.isfinite(cell.fi_slope_hz_per_pa):
            use = np.isfinite(stim) & np.isfinite(rate) & (stim >= cell.rheobase_pa)
            slope = cell.fi_slope_hz_per_pa
            intercept = float(np.mean(rate[use] - slope * stim[use]))
            x = np.array([stim[use].min(), stim[use].max()])
            ax_f.plot(x, intercept + slope * x, color=_TROUGH_COLOUR, lw=1.2,
                      label=f"f-I slope {slope:.3g} Hz/pA")
        # the legend where no point, line or the rheobase line runs under it
        _legend_where_free(ax_f, ("upper left", "lower right", "center right"),
                           [cell.rheobase_pa])
        passive = passive_sweeps([r.features.as_dict() for r in measured],
                                 [(r.sweep.voltage_mv, r.sweep.sampling_rate_hz)
                                  for r in measured])
        other = np.isfinite(stim) & np.isfinite(dv) & ~passive
        ax_v.plot(stim[passive], dv[passive], ls="none", marker="o", ms=5, color="#333333",
                  label="fitted sweeps")
        ax_v.plot(stim[other], dv[other], ls="none", marker="o", ms=5, mfc="none",
                  color="#777777", label="other sweeps")
        if math.isfinite(cell.input_resistance_mohm):
            slope = cell.input_resistance_mohm / 1000.0
            intercept = float(np.mean(dv[passive] - slope * stim[passive]))
            x = np.array([min(stim[passive].min(), 0.0), 0.0])
            ax_v.plot(x, intercept + slope * x, color=_TROUGH_COLOUR, lw=1.2,
                      label=f"input resistance {cell.input_resistance_mohm:.0f} MOhm")
        else:
            ax_v.set_title("no input resistance: fewer than 2 fitted sweeps",
                           fontsize=8, loc="left")
        ax_v.axhline(0.0, color="#999999", lw=0.5, zorder=0)
        # depolarizing steps deflect up, hyperpolarizing ones down: lower right stays empty
        _legend(ax_v, loc="lower right")
    return fig


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


#: A figure folder's name is cut to this many characters (then a hash follows), well within
#: the 255 bytes most file systems allow a name.
MAX_FOLDER_NAME_CHARS = 120


def figure_folder_name(shown: str) -> str:
    """A one-level folder name for a file's figures: its shown path with separators made safe
    (``day_1/cell 2.nwb`` -> ``day_1__cell 2.nwb``).

    Distinct shown names give distinct folders: when the name had to be changed in a way that
    could make two names alike (a character replaced by ``_``, ``__`` or a separator next to
    ``_`` in the name, a backslash, ``.`` or ``..``), or is longer than
    :data:`MAX_FOLDER_NAME_CHARS`, the first 8 hex digits of the SHA-256 of the shown name
    follow a ``-``.
    """
    if not isinstance(shown, str):
        raise ValueError(f"`shown` must be a str (got {type(shown).__name__})")
    parts = shown.split("/")
    plain = bool(shown) and all(
        p not in ("", ".", "..") and "__" not in p and not p.startswith("_")
        and not p.endswith("_") and "\\" not in p
        and all(c.isprintable() and c not in '<>:"|?*' for c in p) for p in parts)
    safe = shown.replace("\\", "/").strip("/")
    safe = "__".join(part for part in safe.split("/") if part not in ("", ".", ".."))
    safe = "".join(c if c.isprintable() and c not in '<>:"|?*' else "_" for c in safe)
    safe = safe or "unnamed"
    if len(safe) > MAX_FOLDER_NAME_CHARS:
        safe, plain = safe[:MAX_FOLDER_NAME_CHARS], False
    if plain or (len(parts) == 1 and safe == shown and "__" not in shown):
        return safe
    digest = hashlib.sha256(shown.encode("utf-8", "surrogatepass")).hexdigest()[:8]
    return f"{safe}-{digest}"


def _save(fig, path: Path, fmt: str) -> None:
    """Write `fig` to `path` atomically: PNG from the Agg canvas' pixels, SVG and PDF by
    matplotlib's own canvases; no dates or software names, so reruns write the same bytes."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if fmt == "png" and isinstance(fig.canvas, FigureCanvasAgg) and fig.dpi == DPI:
        from .figure_canvas import png_bytes

        fig.canvas.draw()
        write_bytes_atomic(path, png_bytes(np.asarray(fig.canvas.buffer_rgba()), dpi=DPI))
        return
    buffer = io.BytesIO()
    metadata = {"png": {"Software": None}, "svg": {"Date": None},
                "pdf": {"CreationDate": None}}[fmt]
    fig.savefig(buffer, format=fmt, dpi=DPI, metadata=metadata)
    write_bytes_atomic(path, buffer.getvalue())


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
    :func:`cell_figures`), emptied first, and texts are rendered once per process
    (:mod:`spikemeasure.figure_canvas`): in a run over many cells, each cell's figures cost a
    fraction of building them anew (``docs/benchmark.md``).
    """
    if fmt not in FIGURE_FORMATS:
        raise ValueError(f"`fmt` must be one of {', '.join(FIGURE_FORMATS)} (got {fmt!r})")
    folder = Path(folder)
    names = []
    figures = cell_figures(results, cell, settings, name=recording.path,
                           reuse=_kept_for_this_thread())
    for stem, fig in figures.items():
        name = f"{stem}.{fmt}"
        _save(fig, folder / name, fmt)
        names.append(name)
    return names


# --------------------------------------------------------------------------- batch figure

def batch_features_figure(cells: Sequence[dict], groups: dict[str, str] | None = None,
                          group_label: str = "group", *, new_figure: Callable | None = None):
    """The main cell features across cells, one panel each, each cell a point.

    Parameters
    ----------
    cells : sequence of dict
        One per cell, with ``file`` and the columns of :data:`BATCH_FEATURES` as floats (NaN
        when empty).
    groups : dict, optional
        File -> group name; cells without a group go in ``(no group)``. Without it all cells
        are one group, ``all cells``.
    group_label : str, optional
        The name of the group column, for the axis.

    Returns
    -------
    matplotlib.figure.Figure
        One axes per feature; within it, each group's cells as one line of points (no
        connecting line) at x = group position plus a fixed spread, and the group median as a
        short horizontal line.
    """
    groups = groups or {}
    names = [groups.get(c["file"], "(no group)") if groups else "all cells" for c in cells]
    order = sorted(set(names), key=lambda g: (g == "(no group)", g))
    with _mpl().rc_context(_STYLE):
        fig = _new_figure(5.6, new_figure, layout="constrained")
        grid = fig.subplots(2, 3)
        axes = list(grid.ravel())
        axes[-1].set_axis_off()
        fig.suptitle(f"cell features across {len(cells)} cell" + ("" if len(cells) == 1 else "s")
                     + (f", by {group_label}" if groups else "")
                     + "; spike features of the first spike at rheobase")
        colours = _mpl().colormaps["tab10"]
        counts = [f"{g}: {names.count(g)} cell" + ("" if names.count(g) == 1 else "s")
                  for g in order]
        axes[-1].text(0.05, 0.95, "\n".join(counts[:12] + (["..."] if len(counts) > 12 else [])),
                      transform=axes[-1].transAxes, va="top", ha="left")
        for ax, (column, title, label) in zip(axes, BATCH_FEATURES):
            ax.set_title(title)
            ax.set_ylabel(label)
            values = np.array([c.get(column, float("nan")) for c in cells], dtype=float)
            for g, group in enumerate(order):
                member = np.array([n == group for n in names])
                y = values[member]
                ok = np.isfinite(y)
                # a fixed spread (golden-ratio sequence) so reruns give the same figure
                spread = (((np.arange(y.size) * 0.618034) % 1.0) - 0.5) * 0.4
                ax.plot(g + spread[ok], y[ok], ls="none", marker="o", ms=4, alpha=0.8,
                        color=colours(g % 10), label=group)
                if ok.any():
                    ax.plot([g - 0.3, g + 0.3], [np.median(y[ok])] * 2, color="#222222", lw=1)
            ax.set_xticks(range(len(order)), order, rotation=30 if len(order) > 1 else 0,
                          ha="right" if len(order) > 1 else "center")
            ax.set_xlim(-0.6, len(order) - 0.4)
            if not np.isfinite(values).any():
                _note(ax, "no values")
    return fig


def write_batch_figure(path: str | os.PathLike, cells: Sequence[dict],
                       groups: dict[str, str] | None = None, group_label: str = "group",
                       fmt: str = "png") -> Path:
    """Write :func:`batch_features_figure` to `path`, atomically."""
    path = Path(path)
    _save(batch_features_figure(cells, groups, group_label), path, fmt)
    return path


# --------------------------------------------------------------------------- windows

def _has_display() -> bool:
    if sys.platform.startswith(("win", "darwin")):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def _window_backend(where: str) -> None:
    """Switch matplotlib to a window toolkit, unless it already uses one."""
    import matplotlib.pyplot as plt

    backend = _mpl().get_backend().lower()
    if backend not in ("agg", "pdf", "svg", "ps", "cairo", "template"):
        return
    for candidate in ("QtAgg", "TkAgg", "GTK4Agg", "GTK3Agg", "WXAgg"):
        try:
            plt.switch_backend(candidate)
            return
        except (ImportError, RuntimeError):
            continue
    raise DisplayUnavailableError(
        f"{where}cannot show figures: matplotlib finds no window toolkit (Tk, Qt, GTK or wx) "
        "to use; install one (e.g. Debian's python3-tk) or write the figures to files with "
        "`spikemeasure measure FILE --out FOLDER`")


def _open_window(figures: list) -> None:
    import matplotlib.pyplot as plt

    plt.show()


def show_figures(results: Sequence[SweepResult], cell: CellFeatures | None = None,
                 settings: DetectionSettings = DetectionSettings(), *, file: str = "") -> None:
    """Show a cell's figures (those written by :func:`write_cell_figures`) in windows.

    Raises
    ------
    DisplayUnavailableError
        When there is no display, or matplotlib has no window toolkit to use.
    """
    where = f"{file}: " if file else ""
    if not _has_display():
        raise DisplayUnavailableError(
            f"{where}cannot show figures: there is no display (DISPLAY is not set). Run "
            "`spikemeasure measure FILE --out FOLDER` to write them to files instead")
    _window_backend(where)
    import matplotlib.pyplot as plt

    figures = list(cell_figures(results, cell, settings, name=file or None,
                                new_figure=plt.figure).values())
    _open_window(figures)
