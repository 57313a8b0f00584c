"""The figure canvas: PNG encoding checked against the PNG specification and Pillow's decoder,
and cached text against matplotlib's own Agg text rendering."""
import io
import struct
import zlib

import numpy as np
import pytest
from matplotlib.backends.backend_agg import RendererAgg
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from PIL import Image

from spikemeasure import figure_canvas
from spikemeasure.figure_canvas import TextCachingCanvas, TextCachingRenderer, png_bytes


def _chunks(data: bytes):
    """(type, body) of every chunk, checking each CRC as the PNG specification defines it
    (CRC-32 of type and body, the polynomial zlib.crc32 implements)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature
    position, found = 8, []
    while position < len(data):
        (length,) = struct.unpack(">I", data[position:position + 4])
        kind = data[position + 4:position + 8]
        body = data[position + 8:position + 8 + length]
        (crc,) = struct.unpack(">I", data[position + 8 + length:position + 12 + length])
        assert crc == zlib.crc32(kind + body) & 0xFFFFFFFF, kind
        found.append((kind, body))
        position += 12 + length
    return found


class TestPngBytes:
    def test_opaque_image_decodes_to_the_same_pixels_as_rgb(self):
        rng = np.random.default_rng(1)
        rgba = rng.integers(0, 256, size=(37, 53, 4), dtype=np.uint8)
        rgba[..., 3] = 255
        data = png_bytes(rgba, dpi=110)
        image = Image.open(io.BytesIO(data))
        assert image.mode == "RGB" and image.size == (53, 37)
        assert np.array_equal(np.asarray(image), rgba[..., :3])  # Pillow's decoder

    def test_transparency_is_kept(self):
        rng = np.random.default_rng(2)
        rgba = rng.integers(0, 256, size=(9, 11, 4), dtype=np.uint8)
        image = Image.open(io.BytesIO(png_bytes(rgba)))
        assert image.mode == "RGBA" and np.array_equal(np.asarray(image), rgba)

    def test_chunks_follow_the_specification(self):
        rgba = np.full((4, 6, 4), 255, dtype=np.uint8)
        kinds = _chunks(png_bytes(rgba, dpi=110))
        assert [k for k, _ in kinds] == [b"IHDR", b"pHYs", b"IDAT", b"IEND"]
        width, height, depth, colour, *_ = struct.unpack(">IIBBBBB", kinds[0][1])
        assert (width, height, depth, colour) == (6, 4, 8, 2)
        # pHYs: pixels per metre, unit 1 (metre); 110 dpi is 4331 per metre (110 / 0.0254)
        assert struct.unpack(">IIB", kinds[1][1]) == (4331, 4331, 1)
        assert Image.open(io.BytesIO(png_bytes(rgba, dpi=110))).info["dpi"] == pytest.approx(
            (110, 110), abs=0.01)

    def test_without_dpi_there_is_no_physical_size(self):
        kinds = [k for k, _ in _chunks(png_bytes(np.zeros((2, 2, 4), np.uint8)))]
        assert b"pHYs" not in kinds

    @pytest.mark.parametrize("bad", [np.zeros((4, 4, 3), np.uint8), np.zeros((4, 4, 4)),
                                     np.zeros((4, 4), np.uint8)])
    def test_rejects_what_is_not_rgba_bytes(self, bad):
        with pytest.raises(ValueError, match="rgba"):
            png_bytes(bad)

    def test_rejects_a_level_zlib_does_not_have(self):
        with pytest.raises(ValueError, match="level"):
            png_bytes(np.zeros((2, 2, 4), np.uint8), level=10)


def _ink(renderer):
    """Total coverage and its centroid (x, y in pixels) of what was drawn on white."""
    pixels = np.asarray(renderer.buffer_rgba())[..., 3].astype(float)
    rows, cols = np.indices(pixels.shape)
    total = pixels.sum()
    return total, (cols * pixels).sum() / total, (rows * pixels).sum() / total


class TestTextCachingRenderer:
    @pytest.fixture(autouse=True)
    def _empty_cache(self):
        figure_canvas.clear_text_cache()
        yield
        figure_canvas.clear_text_cache()

    @pytest.mark.parametrize("text, angle, alpha", [("-60", 0.0, None),
                                                    ("membrane voltage (mV)", 90.0, None),
                                                    ("threshold -41.2 mV", 0.0, 0.5),
                                                    ("step size (pA)", 30.0, None)])
    def test_cached_text_is_matplotlibs_text_within_half_a_pixel(self, text, angle, alpha):
        font = FontProperties(size=9)
        plain, cached = RendererAgg(300, 300, 110), TextCachingRenderer(300, 300, 110)
        for renderer in (plain, cached):
            gc = renderer.new_gc()
            gc.set_foreground("#e66101")
            gc.set_alpha(alpha)
            renderer.draw_text(gc, 120.3, 160.7, text, font, angle)
            gc.restore()
        ink_plain, x_plain, y_plain = _ink(plain)
        ink_cached, x_cached, y_cached = _ink(cached)
        # the same glyphs, moved at most half a pixel to a whole-pixel position
        assert ink_cached == pytest.approx(ink_plain, rel=0.03)
        assert abs(x_cached - x_plain) <= 0.5 + 1e-6 and abs(y_cached - y_plain) <= 0.5 + 1e-6
        alpha_max = np.asarray(cached.buffer_rgba())[..., 3].max()
        assert alpha_max == np.asarray(plain.buffer_rgba())[..., 3].max()
        colour = np.asarray(cached.buffer_rgba())[..., :3][
            np.asarray(cached.buffer_rgba())[..., 3] == alpha_max]
        assert colour.size and np.all(colour == (0xe6, 0x61, 0x01))

    def test_a_text_is_rendered_once_then_composited(self, monkeypatch):
        calls = []
        original = RendererAgg.draw_text

        def counting(self, *args, **kwargs):
            calls.append(args[3])
            return original(self, *args, **kwargs)

        monkeypatch.setattr(RendererAgg, "draw_text", counting)
        font = FontProperties(size=8)
        images = []
        for _ in range(3):
            renderer = TextCachingRenderer(100, 60, 110)
            gc = renderer.new_gc()
            renderer.draw_text(gc, 20.0, 30.0, "-80", font, 0.0)
            images.append(np.asarray(renderer.buffer_rgba()).copy())
        assert calls == ["-80"]  # rendered once, for the cache, then composited
        assert all(np.array_equal(images[0], image) for image in images[1:])

    def test_colour_and_size_are_part_of_the_text(self):
        renderer = TextCachingRenderer(200, 60, 110)
        for colour, size in (("black", 8), ("red", 8), ("black", 12)) * 2:
            gc = renderer.new_gc()
            gc.set_foreground(colour)
            renderer.draw_text(gc, 10.0, 30.0, "peak", FontProperties(size=size), 0.0)
        assert len(figure_canvas._cache) == 3

    def test_clipped_to_the_axes_like_any_text(self):
        from matplotlib.transforms import Bbox

        for _ in range(2):  # rendered for the cache and composited, then composited
            renderer = TextCachingRenderer(200, 100, 110)
            gc = renderer.new_gc()
            gc.set_clip_rectangle(Bbox([[0, 0], [30, 100]]))  # only x < 30 may be drawn on
            renderer.draw_text(gc, 10.0, 50.0, "a long label", FontProperties(size=10), 0.0)
            alpha = np.asarray(renderer.buffer_rgba())[..., 3]
            assert alpha[:, :30].any() and not alpha[:, 31:].any()
        assert len(figure_canvas._cache) == 1

    def test_a_full_cache_starts_again(self, monkeypatch):
        monkeypatch.setattr(figure_canvas, "TEXT_CACHE_SIZE", 5)
        renderer = TextCachingRenderer(100, 60, 110)
        for k in range(12):
            renderer.draw_text(renderer.new_gc(), 10.0, 30.0, str(k), FontProperties(), 0.0)
        assert 1 <= len(figure_canvas._cache) <= 5

    def test_the_cache_holds_at_most_its_bytes_of_images(self, monkeypatch):
        monkeypatch.setattr(figure_canvas, "TEXT_CACHE_BYTES", 20_000)
        renderer = TextCachingRenderer(600, 60, 110)
        for k in range(40):  # unique, title-like texts
            renderer.draw_text(renderer.new_gc(), 10.0, 30.0, f"cell_{k:03d}.nwb: sweeps",
                               FontProperties(size=11), 0.0)
            held = sum(e[0].nbytes for e in figure_canvas._cache.values() if e)
            assert held == figure_canvas._cache_bytes[0] <= 20_000
        assert 1 <= len(figure_canvas._cache) < 40

    def test_a_figure_draws_through_it(self):
        fig = Figure(figsize=(3, 2), dpi=100)
        canvas = TextCachingCanvas(fig)
        fig.add_subplot().set_xlabel("time (s)")
        canvas.draw()
        first = np.asarray(canvas.buffer_rgba()).copy()
        canvas.draw()
        assert np.array_equal(first, np.asarray(canvas.buffer_rgba()))
        assert isinstance(canvas.get_renderer(), TextCachingRenderer)
        assert any(key[0] == "time (s)" for key in figure_canvas._cache)
