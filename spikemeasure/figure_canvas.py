"""The drawing surface of the cell figures: matplotlib's Agg canvas with text drawn once, and
PNG encoding.

Imported only by :mod:`spikemeasure.figures`, and only inside its functions, so that importing
spikemeasure, or a run without figures, never imports matplotlib.

Why this exists: drawing a cell's four figures with a plain Agg canvas cost about as much as
measuring the cell (``docs/benchmark.md``). Half of the drawing time went to text, and nearly
all of the text is the same in every figure of every cell (tick labels, axis labels, legend
entries). :class:`TextCachingCanvas` renders each distinct text once per process, as a small
image, and composites that image wherever the text is drawn again. Every text goes through
that image, the first time too, so a figure's pixels do not depend on what was drawn before.
Vector formats (SVG, PDF) are written by matplotlib's own canvases and are not affected.
"""
from __future__ import annotations

import math
import struct
import threading
import zlib

import matplotlib as mpl
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg

__all__ = ["TextCachingCanvas", "TextCachingRenderer", "png_bytes", "clear_text_cache",
           "TEXT_CACHE_SIZE", "TEXT_CACHE_BYTES"]

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

    def get_renderer(self):
        # as FigureCanvasAgg.get_renderer, with the caching renderer
        w, h = self.get_width_height(physical=True)
        key = w, h, self.figure.dpi
        if self._lastKey != key:
            self.renderer = TextCachingRenderer(w, h, self.figure.dpi)
            self._lastKey = key
        return self.renderer


def _chunk(tag: bytes, data: bytes) -> bytes:
    return (struct.pack(">I", len(data)) + tag + data
            + struct.pack(">I", zlib.crc32(tag + data) & 0xFFFFFFFF))


def png_bytes(rgba: np.ndarray, dpi: float | None = None, level: int = 1) -> bytes:
    """Encode an 8-bit RGBA image as PNG.

    Parameters
    ----------
    rgba : ndarray
        Shape (rows, columns, 4), dtype uint8, the first row the top of the image.
    dpi : float, optional
        Written as the image's physical pixel size (pHYs chunk, pixels per metre).
    level : int, optional
        zlib compression level, 0 to 9.

    Returns
    -------
    bytes
        A PNG file: 8-bit truecolour, with alpha only when some pixel is not opaque.

    Notes
    -----
    Every row uses filter type 0 (none) and the image data is one zlib stream in one IDAT
    chunk, as the PNG specification (W3C / ISO/IEC 15948) allows. At level 1 this encodes a
    figure about twice as fast as Pillow's encoder at its fastest setting, at a similar size.

    References
    ----------
    .. [1] Portable Network Graphics (PNG) Specification, W3C Recommendation / ISO/IEC 15948.
    """
    image = np.asarray(rgba)
    if image.ndim != 3 or image.shape[2] != 4 or image.dtype != np.uint8:
        raise ValueError("`rgba` must be a (rows, columns, 4) array of uint8")
    if not 0 <= level <= 9:
        raise ValueError("`level` must be 0 to 9")
    opaque = bool((image[..., 3] == 255).all())
    pixels = image[..., :3] if opaque else image
    rows, cols, channels = pixels.shape
    raw = np.empty((rows, 1 + cols * channels), dtype=np.uint8)
    raw[:, 0] = 0  # each row's filter type: none
    raw[:, 1:].reshape(rows, cols, channels)[...] = pixels  # one copy, no temporary
    header = struct.pack(">IIBBBBB", cols, rows, 8, 2 if opaque else 6, 0, 0, 0)
    out = [b"\x89PNG\r\n\x1a\n", _chunk(b"IHDR", header)]
    if dpi is not None and dpi > 0:
        per_metre = int(round(dpi / 0.0254))
        out.append(_chunk(b"pHYs", struct.pack(">IIB", per_metre, per_metre, 1)))
    out.append(_chunk(b"IDAT", zlib.compress(raw.tobytes(), level)))
    out.append(_chunk(b"IEND", b""))
    return b"".join(out)
