"""The step responses figure: firing rate (f-I) and steady-state deflection against step size."""
from __future__ import annotations

import math
from typing import Callable, Sequence

import numpy as np

from ..analysis.cell_features import CellFeatures, passive_sweeps
from ..analysis.sweeps import MIN_SAMPLING_RATE_HZ
from ..tables.build import SweepResult, cell_summary
from .common import (RHEOBASE_COLOUR, STYLE, TROUGH_COLOUR, cell_figure, legend,
                     legend_where_free, matplotlib, note)
from .selection import figure_title, measured_results, stimulus_pa

__all__ = ["step_response_figure"]


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
    # ramps and other shapes have no step size: the step values leave them out
    measured = [r for r in measured_results(results)
                if r.features.stimulus_shape in ("step", "none")]
    with matplotlib().rc_context(STYLE):
        kept = cell_figure("step_responses", 3.6,
                           [(0.09, 0.14, 0.375, 0.73), (0.6, 0.14, 0.375, 0.73)], new_figure,
                           reuse)
        fig, (ax_f, ax_v) = kept.fig, kept.axes
        fig.suptitle(figure_title(name, results, "responses to the steps"))
        ax_f.set_xlabel("step size (pA)")
        ax_f.set_ylabel("firing rate (Hz)")
        ax_v.set_xlabel("step size (pA)")
        ax_v.set_ylabel("steady state - baseline (mV)")
        stim = np.array([stimulus_pa(r) for r in measured])
        if not measured or not np.isfinite(stim).any():
            for ax in (ax_f, ax_v):
                note(ax, "step sizes unknown\n(no command channel: give --step-sizes)"
                     if measured else "no step sweeps\n(ramps or other stimuli only)"
                     if measured_results(results) else "no sweep could be measured")
            return fig
        rate = np.array([r.features.firing_rate_hz for r in measured], dtype=float)
        dv = np.array([r.features.steady_state_mv - r.features.baseline_mv for r in measured],
                      dtype=float)
        order = np.argsort(stim)
        slow = sum("too_slow_for_spikes" in r.features.flags for r in measured)
        if slow and not np.isfinite(rate).any():
            # nothing to draw: say why rather than show an empty, labelled axes
            note(ax_f, f"spikes not counted:\nsampled below {MIN_SAMPLING_RATE_HZ:g} Hz")
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
            ax_f.axvline(cell.rheobase_pa, color=RHEOBASE_COLOUR, ls="--", lw=0.9,
                         label=f"rheobase {cell.rheobase_pa:g} pA")
        if math.isfinite(cell.fi_slope_hz_per_pa):
            use = np.isfinite(stim) & np.isfinite(rate) & (stim >= cell.rheobase_pa)
            slope = cell.fi_slope_hz_per_pa
            intercept = float(np.mean(rate[use] - slope * stim[use]))
            x = np.array([stim[use].min(), stim[use].max()])
            ax_f.plot(x, intercept + slope * x, color=TROUGH_COLOUR, lw=1.2,
                      label=f"f-I slope {slope:.3g} Hz/pA")
        # the legend where no point, line or the rheobase line runs under it
        legend_where_free(ax_f, ("upper left", "lower right", "center right"),
                          [cell.rheobase_pa])
        passive = passive_sweeps([r.features.as_dict() for r in measured],
                                 [(r.sweep.voltage_mv, r.sweep.sampling_rate_hz)
                                  for r in measured])
        other = np.isfinite(stim) & np.isfinite(dv) & ~passive
        # a legend entry only for points there are
        if passive.any():
            ax_v.plot(stim[passive], dv[passive], ls="none", marker="o", ms=5,
                      color="#333333", label="fitted sweeps")
        if other.any():
            ax_v.plot(stim[other], dv[other], ls="none", marker="o", ms=5, mfc="none",
                      color="#777777", label="other sweeps")
        if math.isfinite(cell.input_resistance_mohm):
            slope = cell.input_resistance_mohm / 1000.0
            intercept = float(np.mean(dv[passive] - slope * stim[passive]))
            x = np.array([min(stim[passive].min(), 0.0), 0.0])
            ax_v.plot(x, intercept + slope * x, color=TROUGH_COLOUR, lw=1.2,
                      label=f"input resistance {cell.input_resistance_mohm:.0f} MOhm")
        else:
            ax_v.set_title("no input resistance: fewer than 2 fitted sweeps",
                           fontsize=8, loc="left")
        ax_v.axhline(0.0, color="#999999", lw=0.5, zorder=0)
        # depolarizing steps deflect up, hyperpolarizing ones down: lower right stays empty
        legend(ax_v, loc="lower right")
    return fig
