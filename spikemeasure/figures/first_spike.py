"""The first spike figure: the first spike at rheobase up close, its measurements labelled."""
from __future__ import annotations

import math
from typing import Callable, Sequence

import numpy as np

from ..analysis.cell_features import CellFeatures
from ..tables.build import SweepResult, cell_summary
from .common import (PEAK_COLOUR, STYLE, THRESHOLD_COLOUR, TROUGH_COLOUR, cell_figure,
                     matplotlib, note)
from .selection import figure_title, shown_spike, stimulus_pa

__all__ = ["first_spike_figure"]


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
    r, k, chosen = shown_spike(results, cell)
    with matplotlib().rc_context(STYLE):
        kept = cell_figure("first_spike", 4.2, [(0.10, 0.12, 0.86, 0.77)], new_figure, reuse)
        fig, (ax,) = kept.fig, kept.axes
        ax.set_xlabel("time from threshold (ms)")
        ax.set_ylabel("membrane voltage (mV)")
        if r is None:
            fig.suptitle(figure_title(name, results, "first spike"))
            note(ax, "no spikes detected in any sweep")
            return fig
        s = r.spikes
        stim = stimulus_pa(r)
        size = f", {stim:g} pA" if math.isfinite(stim) else ""
        fig.suptitle(figure_title(name, results, f"first spike of the {chosen} "
                                                 f"(sweep {r.sweep.index}{size})"))
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
            ax.plot([0.0], [thr_mv], ls="none", marker="o", ms=6, color=THRESHOLD_COLOUR,
                    label="threshold", zorder=4)
            ax.annotate(f"threshold {thr_mv:.1f} mV", (0.0, thr_mv), xytext=(-8, 4),
                        textcoords="offset points", ha="right", va="bottom")
        ax.plot([(peak_s - zero) * 1e3], [peak_mv], ls="none", marker="v", ms=6,
                color=PEAK_COLOUR, label="peak", zorder=4)
        ax.annotate(f"peak {peak_mv:.1f} mV", ((peak_s - zero) * 1e3, peak_mv), xytext=(8, 0),
                    textcoords="offset points", ha="left", va="center")
        width = float(s.half_width_ms[k])
        up_s, down_s = float(s.half_width_start_s[k]), float(s.half_width_end_s[k])
        if math.isfinite(width) and math.isfinite(up_s) and math.isfinite(down_s):
            level = thr_mv + 0.5 * (peak_mv - thr_mv)
            # the crossings as measured, kept in the spike results
            x = [(up_s - zero) * 1e3, (down_s - zero) * 1e3]
            ax.plot(x, [level, level], color=THRESHOLD_COLOUR, lw=1.5, marker="|", ms=8,
                    label="half-width", zorder=4)
            ax.annotate(f"half-width {width:.2f} ms", (x[1], level), xytext=(8, 0),
                        textcoords="offset points", ha="left", va="center")
        if math.isfinite(trough_s) and trough_s <= end_s:
            ahp = float(s.ahp_depth_mv[k])
            ax.plot([(trough_s - zero) * 1e3], [trough_mv], ls="none", marker="^", ms=6,
                    color=TROUGH_COLOUR, label="trough", zorder=4)
            text = f"trough {trough_mv:.1f} mV" + (f" (AHP {ahp:.1f} mV)"
                                                   if math.isfinite(ahp) else "")
            ax.annotate(text, ((trough_s - zero) * 1e3, trough_mv), xytext=(0, -12),
                        textcoords="offset points", ha="center", va="top")
            if math.isfinite(thr_mv):
                ax.axhline(thr_mv, color=THRESHOLD_COLOUR, lw=0.6, ls=":", zorder=1)
        elif math.isfinite(trough_s):
            ax.set_title(f"trough at {(trough_s - zero) * 1e3:.1f} ms, {trough_mv:.1f} mV "
                         "(beyond this view)", fontsize=8, loc="left")
        ax.margins(x=0.02, y=0.12)
        bottom, top = ax.get_ylim()
        ax.set_ylim(bottom - 0.08 * (top - bottom), top)  # room for the trough label
    return fig
