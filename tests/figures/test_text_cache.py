"""The text cache: cached text against matplotlib's own Agg text rendering."""
import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties

from spikemeasure.figures import common, text_cache
from spikemeasure.figures.text_cache import TextCachingCanvas, TextCachingRenderer


def _ink(renderer):
    """Total coverage and its centroid (x, y in pixels) of what was drawn on white."""
    pixels = np.asarray(renderer.buffer_rgba())[..., 3].astype(float)
    rows, cols = np.indices(pixels.shape)
    total = pixels.sum()
    return total, (cols * pixels).sum() / total, (rows * pixels).sum() / total


class TestTextCachingRenderer:
    @pytest.fixture(autouse=True)
    def _empty_cache(self):
        text_cache.clear_text_cache()
        yield
        text_cache.clear_text_cache()

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
        assert len(text_cache._cache) == 3

    def test_clipped_to_the_axes_like_any_text(self):
        from matplotlib.transforms import Bbox

        for _ in range(2):  # rendered for the cache and composited, then composited
            renderer = TextCachingRenderer(200, 100, 110)
            gc = renderer.new_gc()
            gc.set_clip_rectangle(Bbox([[0, 0], [30, 100]]))  # only x < 30 may be drawn on
            renderer.draw_text(gc, 10.0, 50.0, "a long label", FontProperties(size=10), 0.0)
            alpha = np.asarray(renderer.buffer_rgba())[..., 3]
            assert alpha[:, :30].any() and not alpha[:, 31:].any()
        assert len(text_cache._cache) == 1

    def test_a_full_cache_starts_again(self, monkeypatch):
        monkeypatch.setattr(text_cache, "TEXT_CACHE_SIZE", 5)
        renderer = TextCachingRenderer(100, 60, 110)
        for k in range(12):
            renderer.draw_text(renderer.new_gc(), 10.0, 30.0, str(k), FontProperties(), 0.0)
        assert 1 <= len(text_cache._cache) <= 5

    def test_the_cache_holds_at_most_its_bytes_of_images(self, monkeypatch):
        monkeypatch.setattr(text_cache, "TEXT_CACHE_BYTES", 20_000)
        renderer = TextCachingRenderer(600, 60, 110)
        for k in range(40):  # unique, title-like texts
            renderer.draw_text(renderer.new_gc(), 10.0, 30.0, f"cell_{k:03d}.nwb: sweeps",
                               FontProperties(size=11), 0.0)
            held = sum(e[0].nbytes for e in text_cache._cache.values() if e)
            assert held == text_cache._cache_bytes[0] <= 20_000
        assert 1 <= len(text_cache._cache) < 40

    def test_a_figure_draws_through_it(self):
        fig = Figure(figsize=(3, 2), dpi=100)
        canvas = TextCachingCanvas(fig)
        fig.add_subplot().set_xlabel("time (s)")
        canvas.draw()
        first = np.asarray(canvas.buffer_rgba()).copy()
        canvas.draw()
        assert np.array_equal(first, np.asarray(canvas.buffer_rgba()))
        assert isinstance(canvas.get_renderer(), TextCachingRenderer)
        assert any(key[0] == "time (s)" for key in text_cache._cache)

    def test_a_renderer_swapped_by_size_draws_the_same(self):
        # savefig at another resolution resizes the canvas: a new renderer, the same text
        fig = Figure(figsize=(3, 2), dpi=100)
        canvas = TextCachingCanvas(fig)
        fig.add_subplot().set_xlabel("time (s)")
        first = canvas.get_renderer()
        fig.set_dpi(50)
        assert canvas.get_renderer() is not first
        fig.set_dpi(100)
        canvas.draw()
        assert isinstance(canvas.get_renderer(), TextCachingRenderer)


def test_the_plain_canvas_when_the_cache_is_off(monkeypatch):
    monkeypatch.setattr(common, "CACHE_TEXT", False)
    fig = common.make_figure(2.0)
    assert type(fig.canvas) is FigureCanvasAgg  # matplotlib's own
    monkeypatch.setattr(common, "CACHE_TEXT", True)
    assert isinstance(common.make_figure(2.0).canvas, TextCachingCanvas)
