"""The traces figure: every sweep's voltage, the command current beneath."""
from __future__ import annotations

import math
from typing import Callable, Sequence

import numpy as np

from ..analysis.cell_features import CellFeatures
from ..tables.build import SweepResult, cell_summary, rheobase_result
from .common import (RHEOBASE_COLOUR, PEAK_COLOUR, STYLE, THRESHOLD_COLOUR, TROUGH_COLOUR,
                     UNKNOWN_COLOUR, cell_figure, legend, matplotlib, note)
from .envelope import band, band_outline, envelope
from .selection import figure_title, measured_results, stimulus_pa

__all__ = ["TRACE_LINE_PT", "traces_figure"]

#: The sweeps of the traces figure (all but the rheobase sweep) are bands at least this thick.
TRACE_LINE_PT = 0.6


def _sweep_colours(measured: Sequence[SweepResult]):
    """One colour per sweep, ordered by step size; the colour map and its limits."""
    mpl = matplotlib()
    stim = np.array([stimulus_pa(r) for r in measured])
    known = np.isfinite(stim)
    cmap = mpl.colormaps["viridis"]
    if known.any():
        lo, hi = float(stim[known].min()), float(stim[known].max())
        if hi == lo:
            lo, hi = lo - 1.0, hi + 1.0
        norm = mpl.colors.Normalize(lo, hi)
        mapped = cmap(norm(np.where(known, stim, lo)))  # one call for all sweeps
        colours = [tuple(c) if ok else UNKNOWN_COLOUR for c, ok in zip(mapped, known)]
        return colours, cmap, norm
    return [UNKNOWN_COLOUR] * len(measured), None, None


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


def traces_figure(results: Sequence[SweepResult], cell: CellFeatures | None = None, *,
                  name: str | None = None, new_figure: Callable | None = None,
                  reuse: dict | None = None):
    """Every sweep's voltage over time with the command current beneath.

    Parameters
    ----------
    results : sequence of SweepResult
        From :func:`~spikemeasure.tables.build.measure_recording`; failed sweeps are left out.
    cell : CellFeatures, optional
        From :func:`~spikemeasure.tables.build.cell_summary` (computed when not given).
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
    measured = measured_results(results)
    with matplotlib().rc_context(STYLE):
        kept = cell_figure("traces", 6.0,
                           [(0.10, 0.335, 0.75, 0.575), (0.10, 0.085, 0.75, 0.2)],
                           new_figure, reuse, share_x=True)
        fig, (ax_v, ax_i) = kept.fig, kept.axes
        ax_v.tick_params(labelbottom=False)
        fig.suptitle(figure_title(name, results, "sweeps"), y=0.985)
        ax_v.set_ylabel("membrane voltage (mV)")
        ax_i.set_ylabel("command (pA)")
        ax_i.set_xlabel("time from sweep start (s)")
        if not measured:
            note(ax_v, "no sweep could be measured", clear_ticks=False)
            return fig
        colours, cmap, norm = _sweep_colours(measured)
        rheo = rheobase_result(list(results), cell)
        order = np.argsort([(stimulus_pa(r) if np.isfinite(stimulus_pa(r)) else -np.inf)
                            for r in measured], kind="stable")
        v_bands, v_cols, i_lines, i_cols = [], [], [], []
        drawn_command = recorded_any = False
        for k in order:
            r = measured[k]
            if r is rheo:
                continue
            v_bands.append(band(*envelope(r.sweep.voltage_mv, r.sweep.sampling_rate_hz)))
            v_cols.append(colours[k])
            cmd = _command_trace(r)
            if cmd is not None:
                i_lines.append(np.column_stack(cmd[:2]))
                i_cols.append(colours[k])
                drawn_command = True
                recorded_any |= cmd[2]
        bands = PolyCollection([band_outline(*b) for b in v_bands], facecolors=v_cols,
                               edgecolors="none", linewidths=0, alpha=0.85)
        ax_v.add_collection(bands)
        ax_i.add_collection(LineCollection(i_lines, colors=i_cols, linewidths=0.8))
        if rheo is not None:
            t, v = envelope(rheo.sweep.voltage_mv, rheo.sweep.sampling_rate_hz)
            ax_v.plot(t, v, color=RHEOBASE_COLOUR, lw=1.1, zorder=3,
                      label=f"rheobase sweep {rheo.sweep.index} ({stimulus_pa(rheo):g} pA)")
            cmd = _command_trace(rheo)
            if cmd is not None:
                ax_i.plot(cmd[0], cmd[1], color=RHEOBASE_COLOUR, lw=1.1, zorder=3)
                drawn_command = True
                recorded_any |= cmd[2]
        _spike_markers(ax_v, measured)
        ax_v.autoscale_view()
        ax_i.autoscale_view()
        if v_bands:  # now that the scale is known: every band at least a thin line thick
            _thicken(ax_v, bands, v_bands)
        _command_note(ax_i, measured, drawn_command, recorded_any)
        legend(ax_v, loc="lower center", bbox_to_anchor=(0.5, 1.0), ncols=4,
               borderaxespad=0.2)
        _colour_bar(kept, measured, cmap, norm)
    return fig


def _thicken(ax, bands, outlines: list) -> None:
    """Widen the bands of `outlines` (from :func:`band`) where they are thinner than
    :data:`TRACE_LINE_PT` at the axes' present scale, keeping that scale."""
    fig = ax.figure
    bottom, top = ax.get_ylim()
    mv_per_px = (top - bottom) / (ax.get_position().height * fig.get_figheight() * fig.dpi)
    thinnest_mv = TRACE_LINE_PT / 72.0 * fig.dpi * mv_per_px
    bands.set_verts([band_outline(*b, thinnest=thinnest_mv) for b in outlines])
    ax.set_ylim(bottom, top)


def _command_note(ax, measured: Sequence[SweepResult], drawn: bool, recorded: bool) -> None:
    """Say why no command is drawn, or that the one drawn was given, not recorded."""
    if not drawn:
        gap_free = any(r.sweep.is_lazy for r in measured)
        note(ax, "gap-free recording: no current step" if gap_free else
             "no command channel and no step size given", clear_ticks=False)
    elif not recorded:
        ax.set_title("no command channel: the step given with --step / --step-sizes",
                     fontsize=8, loc="left")


def _colour_bar(kept, measured: Sequence[SweepResult], cmap, norm) -> None:
    """The colour key of the step sizes, when there is more than one (the kept figure's
    colour bar, updated only when the step range changed: updating is costly)."""
    steps = {stimulus_pa(r) for r in measured if np.isfinite(stimulus_pa(r))}
    if cmap is None or len(steps) < 2:  # one step size needs no colour key
        return
    mappable = matplotlib().cm.ScalarMappable(norm=norm, cmap=cmap)
    shapes = {r.step.shape for r in measured if r.step is not None}
    label = ("step size (pA)" if shapes <= {"step"} else
             "current at the ramp's end (pA)" if shapes == {"ramp"} else "stimulus (pA)")
    if kept.colorbar is None:
        fig = kept.fig
        kept.colorbar = fig.colorbar(mappable, cax=fig.add_axes((0.875, 0.085, 0.018, 0.825)))
        kept.colorbar.set_label(label)
        return
    bar = kept.colorbar
    if bar.ax.get_ylabel() != label:
        bar.set_label(label)
    if (bar.norm.vmin, bar.norm.vmax, bar.cmap.name) != (norm.vmin, norm.vmax, cmap.name):
        bar.update_normal(mappable)
    bar.ax.set_visible(True)


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
    for what, marker, colour, size in (("threshold", "o", THRESHOLD_COLOUR, 3.5),
                                       ("peak", "v", PEAK_COLOUR, 3.5),
                                       ("trough", "^", TROUGH_COLOUR, 3.5)):
        x, y = flat[f"{what}_s"], flat[f"{what}_mv"]
        ok = np.isfinite(x) & np.isfinite(y)
        ax.plot(x[ok], y[ok], ls="none", marker=marker, ms=size, color=colour, mew=0,
                label=what, zorder=4)
