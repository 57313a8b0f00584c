"""What every figure shares: the house look, making and reusing figures, legends and notes,
and saving them.

matplotlib is imported inside functions only, so that importing the package costs nothing
when no figure is drawn.
"""
from __future__ import annotations

import hashlib
import io
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from ..errors import printable_name
from ..output import write_bytes_atomic

__all__ = ["FIGURE_FORMATS", "DPI", "CACHE_TEXT", "WIDTH_IN", "STYLE", "THRESHOLD_COLOUR",
           "PEAK_COLOUR", "TROUGH_COLOUR", "RHEOBASE_COLOUR", "UNKNOWN_COLOUR", "KeptFigure",
           "matplotlib", "make_figure", "cell_figure", "legend", "legend_where_free", "note",
           "title", "save_figure", "MAX_FOLDER_NAME_CHARS", "figure_folder_name"]

#: Formats a figure can be written in.
FIGURE_FORMATS = ("png", "svg", "pdf")
#: Resolution of the written figures (dots per inch).
DPI = 110
#: Width of every figure (inches); heights differ by figure.
WIDTH_IN = 8.0
THRESHOLD_COLOUR = "#e66101"
PEAK_COLOUR = "#000000"
TROUGH_COLOUR = "#0571b0"
RHEOBASE_COLOUR = "#d7191c"
UNKNOWN_COLOUR = "#888888"
#: matplotlib settings every figure is drawn under.
STYLE = {"font.size": 9, "axes.titlesize": 10, "axes.labelsize": 9, "xtick.labelsize": 8,
         "ytick.labelsize": 8, "legend.fontsize": 8, "figure.titlesize": 11,
         "axes.spines.top": False, "axes.spines.right": False, "svg.hashsalt": "spikemeasure",
         "path.simplify": True, "text.parse_math": False,  # a "$" in a file name is text
         "legend.frameon": True, "legend.framealpha": 1.0, "legend.edgecolor": "none"}
#: Draw the figures on the text-caching canvas (:mod:`spikemeasure.figures.text_cache`);
#: false: on matplotlib's plain Agg canvas.
CACHE_TEXT = True
#: zlib level of the PNGs: the fastest, at a size close to the default level's.
_PNG_COMPRESS_LEVEL = 1


def matplotlib():
    """matplotlib, imported on first use."""
    import matplotlib as mpl

    return mpl


def make_figure(height_in: float, make: Callable | None = None, layout: str | None = None):
    """A figure of the house width on matplotlib's Agg canvas, drawing each distinct text
    once (:class:`~spikemeasure.figures.text_cache.TextCachingCanvas`, unless
    :data:`CACHE_TEXT` is false), or from `make` (for a window: ``matplotlib.pyplot.figure``).

    Cell figures have fixed margins (the same look for every cell, and no layout passes,
    which would cost more than the drawing); the batch figure uses constrained layout.
    """
    if make is not None:
        return make(figsize=(WIDTH_IN, height_in), dpi=DPI, layout=layout)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from .text_cache import TextCachingCanvas

    fig = Figure(figsize=(WIDTH_IN, height_in), dpi=DPI, layout=layout)
    (TextCachingCanvas if CACHE_TEXT else FigureCanvasAgg)(fig)
    return fig


@dataclass
class KeptFigure:
    """A cell figure and its axes, kept to be drawn again for the next cell (`reuse`)."""
    fig: object
    axes: list
    own_x_locator: list
    colorbar: object = None


def cell_figure(kind: str, height_in: float, rects: Sequence[tuple], make: Callable | None,
                reuse: dict | None, share_x: bool = False) -> KeptFigure:
    """The figure of one kind of cell figure with its axes at `rects` (left, bottom, width,
    height in figure fractions; the later ones sharing the first one's x axis when
    `share_x`): taken from `reuse` and emptied when it holds one, otherwise made (and put in
    `reuse`, when given).

    Emptying keeps what costs most to build and is the same for every cell (the axes, their
    ticks and labels) and removes everything drawn from the data, restoring the state a new
    figure starts in; ``tests/figures`` checks that a reused figure draws the same pixels as
    a new one.
    """
    if reuse is not None and kind in reuse:
        kept = reuse[kind]
        _empty(kept)
        return kept
    fig = make_figure(height_in, make)
    axes = []
    for k, rect in enumerate(rects):
        ax = fig.add_axes(rect, sharex=axes[0] if share_x and k else None)
        _house_locators(ax, x=not (share_x and k))
        axes.append(ax)
    kept = KeptFigure(fig, axes, [not (share_x and k) for k in range(len(rects))])
    if reuse is not None:
        reuse[kind] = kept
    return kept


def _empty(kept: KeptFigure) -> None:
    """Remove what a cell drew on a kept figure and restore a new figure's axes state."""
    mpl = matplotlib()
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


def _house_locators(ax, x: bool = True) -> None:
    """At most about six ticks on the y axis (and on the x axis, when `x`): enough to read,
    and ticks are the dearest thing to draw."""
    from matplotlib.ticker import MaxNLocator

    ax.yaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
    if x:
        ax.xaxis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]))


def legend(ax, **kw) -> None:
    """A legend of the labelled artists, if any."""
    if ax.get_legend_handles_labels()[0]:
        ax.legend(**kw)


#: (horizontal, vertical) side of the axes a legend location anchors to.
_LEGEND_ANCHORS = {"upper left": ("left", "upper"), "lower right": ("right", "lower"),
                   "center right": ("right", "center")}


def _line_pixels(ax) -> np.ndarray:
    """Points of the axes' data lines, and points sampled along their segments, in pixels."""
    between = np.linspace(0.0, 1.0, 25)[:, np.newaxis]
    sampled = [np.empty((0, 2))]
    for line in ax.get_lines():
        if line.get_transform() != ax.transData:  # axhline/axvline: tested on their own
            continue
        xy = np.asarray(line.get_xydata(), dtype=float)
        xy = xy[np.isfinite(xy).all(axis=1)]
        sampled.append(xy)
        sampled += [a + between * (b - a) for a, b in zip(xy[:-1], xy[1:])]
    return ax.transData.transform(np.concatenate(sampled))


def legend_where_free(ax, candidates: Sequence[str], vertical_x: Sequence[float] = ()) -> None:
    """A legend at the first of `candidates` (locations) under which no drawn line or point of
    the axes runs, nor a vertical line at `vertical_x` (data); at the first when none is free.

    Each candidate legend is laid out and its box tested against the lines as drawn (segments
    sampled between their points), in pixels.
    """
    get_renderer = getattr(ax.figure.canvas, "get_renderer", None)
    if get_renderer is None or not ax.get_legend_handles_labels()[0]:
        legend(ax, loc=candidates[0])  # a window canvas that cannot lay out: the first place
        return
    renderer = get_renderer()
    ax.autoscale_view()
    pixels = _line_pixels(ax)
    x_lines = [ax.transData.transform((v, 0.0))[0] for v in vertical_x if math.isfinite(v)]
    placed = ax.legend(loc=candidates[0])
    size = placed.get_window_extent(renderer)
    # the same box at each candidate place, as matplotlib anchors a legend inside the axes
    pad = renderer.points_to_pixels(placed.borderaxespad * placed.prop.get_size_in_points())
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


def note(ax, text: str, clear_ticks: bool = True) -> None:
    """A note in the middle of the axes; an axes with nothing else in it loses its ticks,
    whose numbers would mean nothing."""
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", wrap=True,
            color="#444444")
    if clear_ticks and not ax.lines and not ax.collections:
        ax.set_xticks([])
        ax.set_yticks([])


def title(name: str | None, file: str, what: str) -> str:
    """A figure's title: the file's name (`name`, or else `file`), then `what`."""
    shown = name if name is not None else file
    shown = printable_name(str(shown))  # a name whose bytes were not UTF-8 cannot be drawn
    return f"{shown}: {what}" if shown else what


def save_figure(fig, path: str | os.PathLike, fmt: str) -> Path:
    """Write `fig` to `path` atomically in format `fmt` (one of :data:`FIGURE_FORMATS`)
    through matplotlib's ``savefig``, at :data:`DPI`; no dates or software names, so reruns
    write the same bytes."""
    if fmt not in FIGURE_FORMATS:
        raise ValueError(f"`fmt` must be one of {', '.join(FIGURE_FORMATS)} (got {fmt!r})")
    buffer = io.BytesIO()
    extra = {"png": {"metadata": {"Software": None},
                     "pil_kwargs": {"compress_level": _PNG_COMPRESS_LEVEL}},
             "svg": {"metadata": {"Date": None}},
             "pdf": {"metadata": {"CreationDate": None}}}[fmt]
    fig.savefig(buffer, format=fmt, dpi=DPI, **extra)
    return write_bytes_atomic(path, buffer.getvalue())


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
