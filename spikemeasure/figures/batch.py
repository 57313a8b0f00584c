"""The batch figure: the main cell features across cells, one panel each, by group."""
from __future__ import annotations

import os
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from .common import STYLE, make_figure, matplotlib, note, save_figure

__all__ = ["BATCH_FIGURE_NAME", "BATCH_FEATURES", "batch_features_figure", "write_batch_figure"]

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
    with matplotlib().rc_context(STYLE):
        fig = make_figure(5.6, new_figure, layout="constrained")
        grid = fig.subplots(2, 3)
        axes = list(grid.ravel())
        axes[-1].set_axis_off()
        fig.suptitle(f"cell features across {len(cells)} cell" + ("" if len(cells) == 1 else "s")
                     + (f", by {group_label}" if groups else "")
                     + "; spike features of the first spike at rheobase")
        colours = matplotlib().colormaps["tab10"]
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
                note(ax, "no values")
    return fig


def write_batch_figure(path: str | os.PathLike, cells: Sequence[dict],
                       groups: dict[str, str] | None = None, group_label: str = "group",
                       fmt: str = "png") -> Path:
    """Write :func:`batch_features_figure` to `path`, atomically."""
    path = Path(path)
    save_figure(batch_features_figure(cells, groups, group_label), path, fmt)
    return path
