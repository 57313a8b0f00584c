"""The phase plot: dV/dt against V for the spikes of the rheobase sweep."""
from __future__ import annotations

import math
from typing import Callable, Sequence

import numpy as np

from ..cell_features import CellFeatures
from ..detection import DetectionSettings, smoothed_trace
from ..tables import SweepResult, cell_summary
from .common import RHEOBASE_COLOUR, STYLE, THRESHOLD_COLOUR, cell_figure, legend, matplotlib, note
from .envelope import ENVELOPE_BINS
from .selection import figure_title, measured_results, shown_spike, stimulus_pa

__all__ = ["PHASE_PLOT_LONG_S", "phase_plot_figure"]

#: The phase plot of a long gap-free recording shows this much of it (s), from its first spike.
PHASE_PLOT_LONG_S = 10.0


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
    r, _, chosen = shown_spike(results, cell)
    measured = measured_results(results)
    with matplotlib().rc_context(STYLE):
        kept = cell_figure("phase_plot", 4.2, [(0.10, 0.12, 0.86, 0.77)], new_figure, reuse)
        fig, (ax,) = kept.fig, kept.axes
        ax.set_xlabel("membrane voltage (mV)")
        ax.set_ylabel("dV/dt (V/s)")
        if not measured:
            fig.suptitle(figure_title(name, results, "phase plot"))
            note(ax, "no sweep could be measured")
            return fig
        if r is None:
            r = max(measured, key=lambda m: (np.nan_to_num(stimulus_pa(m), nan=-np.inf)))
            chosen = "largest step, no spikes"
        stim = stimulus_pa(r)
        size = f", {stim:g} pA" if math.isfinite(stim) else ""
        fig.suptitle(figure_title(name, results,
                                  f"phase plot, {chosen} (sweep {r.sweep.index}{size})"))
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
            fig.suptitle(figure_title(name, results,
                                      f"phase plot, {chosen} (sweep {r.sweep.index}{size}), "
                                      f"its first {PHASE_PLOT_LONG_S:g} s"))
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
            cmap = matplotlib().colormaps["viridis"]
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
                    color=THRESHOLD_COLOUR, label="threshold", zorder=4)
        ax.axhline(settings.onset_rate_v_per_s, color=RHEOBASE_COLOUR, lw=0.9, ls="--",
                   label=f"onset rate {settings.onset_rate_v_per_s:g} V/s")
        ax.axhline(0.0, color="#999999", lw=0.5, zorder=0)
        legend(ax, loc="upper left")
    return fig
