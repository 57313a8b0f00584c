"""The batch figure: the main cell features across cells, one panel each, by group.

Two renderings of one layout (:func:`group_layout`): a matplotlib figure written beside the
tables (:func:`batch_features_figure`), and an SVG text for the report
(:func:`batch_features_svg`), drawn without matplotlib, in which every point names its cell
(an SVG ``<title>``) and links to the cell's section of the page.
"""
from __future__ import annotations

import html
import math
import os
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from .common import STYLE, make_figure, matplotlib, note, save_figure

__all__ = ["BATCH_FIGURE_NAME", "BATCH_FEATURES", "NO_GROUP", "group_layout",
           "batch_features_figure", "batch_features_svg", "write_batch_figure"]

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
#: The group of a cell whose file the groups file does not list.
NO_GROUP = "(no group)"
#: The group of every cell when there is no groups file.
ALL_CELLS = "all cells"


def group_layout(cells: Sequence[dict], groups: dict[str, str] | None = None
                 ) -> tuple[list[str], list[str], np.ndarray]:
    """Each cell's group, the groups in the order drawn, and each cell's x position.

    Parameters
    ----------
    cells : sequence of dict
        One per cell, with ``file``.
    groups : dict, optional
        File -> group name (see :func:`batch_features_figure`).

    Returns
    -------
    names : list of str
        Each cell's group.
    order : list of str
        The groups, sorted by name, ``(no group)`` last.
    x : ndarray
        Each cell's position: its group's index plus a fixed spread within the group (the
        golden-ratio sequence over the group's members, so that a rerun draws the same
        figure), in (-0.2, 0.2).
    """
    names = [groups.get(c["file"], NO_GROUP) if groups else ALL_CELLS for c in cells]
    order = sorted(set(names), key=lambda g: (g == NO_GROUP, g))
    x = np.zeros(len(cells))
    for g, group in enumerate(order):
        member = np.flatnonzero([n == group for n in names])
        x[member] = g + (((np.arange(member.size) * 0.618034) % 1.0) - 0.5) * 0.4
    return names, order, x


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
    names, order, x = group_layout(cells, groups)
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
                ax.plot(x[member][ok], y[ok], ls="none", marker="o", ms=4, alpha=0.8,
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


#: Colours of the groups in the SVG figure, in group order (repeating after ten).
GROUP_COLOURS = ("#1f77b4", "#ff7f0e", "#2ca02c", "#d62728", "#9467bd", "#8c564b", "#e377c2",
                 "#7f7f7f", "#bcbd22", "#17becf")
#: Size of one panel of the SVG figure (px) and its plot area's margins (left, top, right,
#: bottom).
_PANEL_W, _PANEL_H = 290, 230
_MARGINS = (58, 30, 14, 52)


def _nice_ticks(low: float, high: float, count: int = 5) -> np.ndarray:
    """About `count` round tick values (1, 2 or 5 times a power of ten apart) in [low, high]."""
    raw = (high - low) / max(count - 1, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    first = math.ceil(low / step) * step
    return np.arange(first, high + step * 1e-9, step)


def _svg_text(x: float, y: float, text: str, anchor: str = "middle", extra: str = "") -> str:
    return (f'<text x="{x:.1f}" y="{y:.1f}" text-anchor="{anchor}"{extra}>'
            f"{html.escape(text)}</text>")


def _svg_panel(k: int, column: str, title: str, label: str, values: np.ndarray,
               layout: tuple[list[str], list[str], np.ndarray], labels: Sequence[str],
               links: Sequence[str], value_text: Callable[[str, float], str]) -> list[str]:
    """One panel: axes, ticks, each cell a linked point with its name, the group medians."""
    names, order, x = layout
    left = (k % 3) * _PANEL_W + _MARGINS[0]
    top = (k // 3) * _PANEL_H + _MARGINS[1]
    width = _PANEL_W - _MARGINS[0] - _MARGINS[2]
    height = _PANEL_H - _MARGINS[1] - _MARGINS[3]
    out = [_svg_text(left + width / 2, top - 12, title, extra=' class="panel-title"'),
           _svg_text(left - 44, top + height / 2, label,
                     extra=f' transform="rotate(-90 {left - 44:.1f} {top + height / 2:.1f})"'),
           f'<rect x="{left}" y="{top}" width="{width}" height="{height}" class="frame"/>']
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return out + [_svg_text(left + width / 2, top + height / 2, "no values")]
    low, high = float(finite.min()), float(finite.max())
    pad = 0.08 * (high - low) if high > low else max(abs(high) * 0.1, 1.0)
    low, high = low - pad, high + pad

    def to_y(v):
        return top + height * (high - v) / (high - low)

    def to_x(v):
        return left + width * (v + 0.6) / len(order)

    for tick in _nice_ticks(low, high):
        out.append(f'<line x1="{left - 4}" x2="{left}" y1="{to_y(tick):.1f}" '
                   f'y2="{to_y(tick):.1f}" class="axis"/>')
        out.append(_svg_text(left - 6, to_y(tick) + 3, f"{tick:g}", "end"))
    for g, group in enumerate(order):
        shown = group if len(group) <= 18 else group[:17] + "\u2026"
        gx = to_x(g)
        out.append(_svg_text(gx, top + height + 14, shown,
                             *(("end", f' transform="rotate(-30 {gx:.1f} {top + height + 14})"')
                               if len(order) > 1 else ())))
        member = np.array([n == group for n in names]) & np.isfinite(values)
        if member.any():
            median = to_y(float(np.median(values[member])))
            out.append(f'<line x1="{to_x(g - 0.3):.1f}" x2="{to_x(g + 0.3):.1f}" '
                       f'y1="{median:.1f}" y2="{median:.1f}" class="median"/>')
    for i in np.flatnonzero(np.isfinite(values)):
        colour = GROUP_COLOURS[order.index(names[i]) % len(GROUP_COLOURS)]
        unit = label[label.find("(") + 1:-1] if label.endswith(")") else ""
        group = f" [{names[i]}]" if names[i] != ALL_CELLS else ""
        name = f"{labels[i]}{group}: {title} {value_text(column, float(values[i]))} {unit}"
        point = (f'<circle class="point" data-cell="{html.escape(links[i])}" '
                 f'cx="{to_x(x[i]):.1f}" cy="{to_y(values[i]):.1f}" r="4" fill="{colour}">'
                 f"<title>{html.escape(name)}</title></circle>")
        out.append(f'<a href="#{html.escape(links[i])}">{point}</a>')
    return out


def batch_features_svg(cells: Sequence[dict], groups: dict[str, str] | None = None,
                       group_label: str = "group", *, labels: Sequence[str] | None = None,
                       links: Sequence[str] | None = None,
                       value_text: Callable[[str, float], str] | None = None) -> str:
    """The batch figure as SVG text, for a web page: every point names its cell and links to it.

    Parameters
    ----------
    cells : sequence of dict
        As :func:`batch_features_figure` takes them.
    groups : dict, optional
        File -> group name, as :func:`batch_features_figure` takes it.
    group_label : str, optional
        The name of the group column, for the caption.
    labels : sequence of str, optional
        Each cell's name, shown on hover (default: its file).
    links : sequence of str, optional
        Each cell's anchor on the page, the target of its points (default: ``cell-K``, K the
        cell's index).
    value_text : callable, optional
        ``value_text(column, value) -> str``, a value as the point shows it (default: 4
        significant digits).

    Returns
    -------
    str
        An ``<svg>`` element (no scripts, no external resources), the layout of
        :func:`batch_features_figure`: five panels and the cell counts by group. Every text
        from a file is escaped. Each point is an ``<a>`` around a ``<circle class="point">``
        with a ``data-cell`` attribute (its link) and a ``<title>``: the cell's name, its
        group and the value.

    Notes
    -----
    Drawn without matplotlib: a few hundred elements, a few hundred bytes per cell.
    """
    labels = [c["file"] for c in cells] if labels is None else list(labels)
    links = [f"cell-{k}" for k in range(len(cells))] if links is None else list(links)
    if not len(labels) == len(links) == len(cells):
        raise ValueError("`labels` and `links` must have one entry per cell")
    value_text = value_text or (lambda column, value: f"{value:.4g}")
    layout = group_layout(cells, groups)
    names, order, _ = layout
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="batch" role="img" '
             f'viewBox="0 0 {3 * _PANEL_W} {2 * _PANEL_H}" width="{3 * _PANEL_W}" '
             f'height="{2 * _PANEL_H}">',
             f"<title>{html.escape(_caption(len(cells), groups, group_label))}</title>"]
    for k, (column, title, label) in enumerate(BATCH_FEATURES):
        values = np.array([c.get(column, math.nan) for c in cells], dtype=float)
        parts += _svg_panel(k, column, title, label, values, layout, labels, links, value_text)
    left, top = 2 * _PANEL_W + 20, _PANEL_H + 30
    for g, group in enumerate(order[:12] + (["..."] if len(order) > 12 else [])):
        count = names.count(group)
        text = group if group == "..." else f"{group}: {count} cell" + ("" if count == 1 else "s")
        colour = GROUP_COLOURS[g % len(GROUP_COLOURS)]
        parts.append(f'<circle cx="{left}" cy="{top + 16 * g - 4}" r="4" fill="{colour}"/>')
        parts.append(_svg_text(left + 10, top + 16 * g, text, "start"))
    parts.append("</svg>")
    return "\n".join(parts)


def _caption(n_cells: int, groups: dict | None, group_label: str) -> str:
    return (f"cell features across {n_cells} cell" + ("" if n_cells == 1 else "s")
            + (f", by {group_label}" if groups else "")
            + "; spike features of the first spike at rheobase")
