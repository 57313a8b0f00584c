"""Text drawn once per process: the Agg canvas of the cell figures, with a text cache.

Why this exists: nearly every text of a cell figure (tick labels, axis labels, legend entries)
is the same in every figure of every cell, and rendering text is the largest part of drawing
the figures after matplotlib's own layout (``docs/benchmark.md``).
:class:`TextCachingRenderer` renders each distinct text once per process, as a small image,
and composites that image wherever the text is drawn again. Every text goes through that
image, the first time too, so a figure's pixels do not depend on what was drawn before.

Built on matplotlib's public backend interface only: a renderer's ``draw_text`` and
``draw_image``, a canvas' ``get_renderer``. A text the cache cannot take (math text, or one
whose image would not fit the scratch area) is drawn by matplotlib's own Agg renderer, and
:data:`spikemeasure.figures.common.CACHE_TEXT` set false draws every figure the plain way.
Vector formats (SVG, PDF) are written by matplotlib's own canvases and are not affected.

Imported only inside the functions of :mod:`spikemeasure.figures.common`, so that importing
spikemeasure never imports matplotlib.
"""
from __future__ import annotations

import math
import threading

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg

__all__ = ["TextCachingCanvas", "TextCachingRenderer", "clear_text_cache", "TEXT_CACHE_SIZE",
           "TEXT_CACHE_BYTES"]

#: Texts kept per process, at most this many and this many bytes of images; the cache is
#: emptied when either is reached. A cell's figures draw about a hundred texts, most of them
#: shared with every other cell; the titles, which name the file, are not.
TEXT_CACHE_SIZE = 4000
TEXT_CACHE_BYTES = 32 * 2 ** 20

_cache: dict = {}
_cache_bytes = [0]
_cache_lock = threading.Lock()
_MISSING = object()


def clear_text_cache() -> None:
    """Forget every rendered text (they are rendered again when next drawn)."""
    with _cache_lock:
        _cache.clear()
        _cache_bytes[0] = 0


def _hashable(value):
    if isinstance(value, (list, tuple)):
        return tuple(_hashable(v) for v in value)
    if isinstance(value, dict):
        return tuple(sorted((k, _hashable(v)) for k, v in value.items()))
    return value


class TextCachingRenderer(RendererAgg):
    """An Agg renderer that renders each distinct text once and then composites its image.

    A text is the same when its string, font properties, angle, colour, alpha, antialiasing,
    resolution and matplotlib's text hinting settings are. The image is placed at the whole
    pixel nearest to where matplotlib would start the text (matplotlib's own Agg renderer
    places glyphs at fractions of a pixel, so a cached text can sit up to half a pixel from
    where an uncached one would). Math text, and any text whose image would not fit the
    scratch area, is drawn by :class:`~matplotlib.backends.backend_agg.RendererAgg` itself.
    """

    def draw_text(self, gc, x, y, s, prop, angle, ismath=False, mtext=None):
        # docstring inherited
        if ismath or not s:
            return super().draw_text(gc, x, y, s, prop, angle, ismath, mtext)
        extras = ()
        if mtext is not None:
            extras = tuple(_hashable(getattr(mtext, name)())
                           for name in ("get_fontfeatures", "get_language")
                           if hasattr(mtext, name))
        key = (s, prop, float(angle), tuple(gc.get_rgb()), gc.get_alpha(),
               bool(gc.get_antialiased()), float(self.dpi), mpl.rcParams["text.hinting"],
               mpl.rcParams["text.hinting_factor"], extras)
        entry = _cache.get(key, _MISSING)
        if entry is _MISSING:
            entry = self._render_text(gc, s, prop, angle, mtext)
            size = entry[0].nbytes if entry else 0
            with _cache_lock:
                if (len(_cache) >= TEXT_CACHE_SIZE
                        or _cache_bytes[0] + size > TEXT_CACHE_BYTES):
                    _cache.clear()
                    _cache_bytes[0] = 0
                _cache[key] = entry
                _cache_bytes[0] += size
        if entry is False:  # did not fit the scratch area: draw it the ordinary way
            return super().draw_text(gc, x, y, s, prop, angle, ismath, mtext)
        if entry is None:  # renders to nothing (white space)
            return None
        image, dx, dy_bottom = entry
        blit = self.new_gc()
        blit.copy_properties(gc)
        blit.set_alpha(1.0)  # the image already carries the text's alpha
        # draw_image takes the image's lower left corner, y up from the canvas' bottom
        self.draw_image(blit, int(round(x)) + dx,
                        int(self.height) - (int(round(y)) + dy_bottom), image)
        blit.restore()
        return None

    def _render_text(self, gc, s, prop, angle, mtext):
        """(image, dx, dy_bottom) of `s` drawn at a whole pixel of a scratch canvas, relative
        to that pixel (image rows bottom up, as draw_image takes them); None for an empty
        image, False when the text touched the scratch area's border."""
        # a box the text surely fits in, without measuring it (as costly as drawing it):
        # a glyph at most an em wide, ascent at most 1.2 em, descent at most 0.5 em
        em = prop.get_size_in_points() * self.dpi / 72.0
        width, height, descent = (len(s) + 1) * em, 1.2 * em, 0.5 * em
        c, si = math.cos(math.radians(angle)), math.sin(math.radians(angle))
        corners = [(0.0, -descent), (width, -descent), (width, height), (0.0, height)]
        xs = [px * c - py * si for px, py in corners]
        ys = [px * si + py * c for px, py in corners]
        pad = int(math.ceil(height + descent)) + 4  # room for either baseline convention
        anchor_x = pad + int(math.ceil(-min(xs)))
        anchor_y = pad + int(math.ceil(max(ys)))  # rows count down from the top
        size_w = anchor_x + int(math.ceil(max(xs))) + pad
        size_h = anchor_y + int(math.ceil(-min(ys))) + pad
        scratch = RendererAgg(size_w, size_h, self.dpi)
        draw = scratch.new_gc()
        draw.copy_properties(gc)
        draw.set_clip_rectangle(None)
        draw.set_clip_path(None)
        RendererAgg.draw_text(scratch, draw, anchor_x, anchor_y, s, prop, angle, False, mtext)
        draw.restore()
        alpha = np.asarray(scratch.buffer_rgba())[..., 3]
        rows = np.flatnonzero(alpha.any(axis=1))
        cols = np.flatnonzero(alpha.any(axis=0))
        if rows.size == 0:
            return None
        r0, r1, c0, c1 = int(rows[0]), int(rows[-1]) + 1, int(cols[0]), int(cols[-1]) + 1
        if r0 == 0 or c0 == 0 or r1 == size_h or c1 == size_w:
            return False
        image = np.ascontiguousarray(np.asarray(scratch.buffer_rgba())[r0:r1, c0:c1][::-1])
        return image, c0 - anchor_x, r1 - anchor_y


class TextCachingCanvas(FigureCanvasAgg):
    """A :class:`~matplotlib.backends.backend_agg.FigureCanvasAgg` drawing with
    :class:`TextCachingRenderer`."""

    def __init__(self, figure=None):
        super().__init__(figure)
        self._caching_renderer_key = None

    def get_renderer(self):
        # as FigureCanvasAgg.get_renderer: one renderer while size and resolution stay
        w, h = self.get_width_height(physical=True)
        key = w, h, self.figure.dpi
        if self._caching_renderer_key != key:
            self.renderer = TextCachingRenderer(w, h, self.figure.dpi)
            self._caching_renderer_key = key
        return self.renderer
