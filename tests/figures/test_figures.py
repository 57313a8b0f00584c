"""Figures: markers where the tables say, lines with the tables' slopes, every kind of cell
drawn without errors, and no text drawn over other text."""
import csv
import itertools
import warnings

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image
from scipy.signal import peak_prominences, peak_widths, savgol_coeffs

from conftest import (RC_R_GOHM as R_GOHM, RC_RATE_HZ, RC_SPIKES_PER_STEP as SPIKES_PER_STEP,
                      RC_STEP_S, RC_STEPS_PA as STEPS_PA, rc_cell_sweeps, write_nix, write_text)
from spikemeasure import figures
from spikemeasure.figures import windows
from spikemeasure.figures.selection import shown_spike
from spikemeasure.figures.traces import TRACE_LINE_PT
from conftest import GaussianSpike, rc_recording  # closed-form spike, analytic RC membrane
from spikemeasure.cli import main
from spikemeasure.analysis.detection import DetectionSettings
from spikemeasure.io import read_recording
from spikemeasure.run import measure_paths
from spikemeasure.tables.build import cell_summary, measure_recording, spike_table, sweep_table

RATE = RC_RATE_HZ
ONSET_S, OFFSET_S = RC_STEP_S


@pytest.fixture(scope="module")
def cell_file(tmp_path_factory):
    return write_nix(tmp_path_factory.mktemp("cell") / "rc_cell.nix", rc_cell_sweeps(),
                     rate_hz=RATE)


@pytest.fixture(scope="module")
def cell(cell_file):
    recording = read_recording(cell_file, shown_as="rc_cell.nix")
    results = measure_recording(recording)
    summary = cell_summary(results)
    return {"recording": recording, "results": results, "cell": summary,
            "figures": figures.cell_figures(results, summary, name="rc_cell.nix")}


@pytest.fixture(scope="module")
def odd_cells(tmp_path_factory):
    """A cell without spikes, a single-sweep file, and a text file without a command channel
    (step from --step / --step-sizes), each drawn through write_cell_figures."""
    root = tmp_path_factory.mktemp("odd")
    sweeps = rc_cell_sweeps()
    write_nix(root / "no_spikes.nix", rc_cell_sweeps(spikes=(0,) * len(STEPS_PA)), rate_hz=RATE)
    write_nix(root / "one_sweep.nix", [sweeps[4]], rate_hz=RATE)
    write_text(root / "no_command.txt", sweeps[5][0], rate_hz=RATE)
    cases = {}
    for name, step_s, step_sizes_pa in (("no_spikes.nix", None, None),
                                         ("one_sweep.nix", None, None),
                                         ("no_command.txt", (ONSET_S, OFFSET_S), (60.0, 0.0))):
        recording = read_recording(root / name, shown_as=name)
        results = measure_recording(recording, DetectionSettings(), step_s, step_sizes_pa)
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # a warning while drawing is a defect too
            written = figures.write_cell_figures(recording, results, root / "out" / name, "png")
        cases[name] = {"results": results, "written": written, "folder": root / "out" / name,
                       "figures": figures.cell_figures(results, name=name)}
    return cases


def lines(ax, label):
    found = [ln for ln in ax.get_lines() if ln.get_label() == label]
    assert len(found) == 1, (label, [ln.get_label() for ln in ax.get_lines()])
    return np.asarray(found[0].get_xdata(), float), np.asarray(found[0].get_ydata(), float)


class TestEnvelope:
    def test_short_traces_are_drawn_sample_by_sample(self):
        y = np.arange(10.0)
        t, v = figures.envelope(y, 1000.0, bins=5)
        assert np.array_equal(v, y) and np.allclose(t, np.arange(10) / 1000.0)

    def test_each_bin_keeps_its_minimum_and_maximum_in_time_order(self):
        rng = np.random.default_rng(3)
        y = rng.normal(size=10_007)
        t, v = figures.envelope(y, 10_000.0, bins=100)
        assert v.size == 2 + 2 * 100 and np.all(np.diff(t) >= 0)
        assert (v[0], v[-1], t[-1]) == (y[0], y[-1], (y.size - 1) / 10_000.0)  # whole sweep
        per = -(-y.size // 100)
        bins = [y[k:k + per] for k in range(0, y.size, per)]
        pairs = v[1:-1]
        # numpy's own reductions over the same bins
        assert np.array_equal(np.minimum(pairs[0::2], pairs[1::2]), [b.min() for b in bins])
        assert np.array_equal(np.maximum(pairs[0::2], pairs[1::2]), [b.max() for b in bins])
        assert v.max() == y.max() and v.min() == y.min()


    @pytest.mark.parametrize("bad, argument", [({"bins": 0}, "bins"), ({"bins": 2.5}, "bins"),
                                               ({"sampling_rate_hz": 0.0}, "sampling_rate_hz")])
    def test_bad_arguments_are_named(self, bad, argument):
        kw = {"y": np.zeros(10), "sampling_rate_hz": 1000.0, **bad}
        with pytest.raises(ValueError, match=f"`{argument}`"):
            figures.envelope(**kw)


class TestShownSpike:
    def test_the_rheobase_sweep_and_its_first_spike_in_the_step(self, cell):
        # Source: the simulated cell's construction (conftest): the first step with one spike
        # per step is the rheobase, and its spike lies inside the step
        result, spike, chosen = shown_spike(cell["results"], cell["cell"])
        assert chosen == "rheobase sweep"
        assert result.features.stimulus_pa == STEPS_PA[SPIKES_PER_STEP.index(1)]
        assert ONSET_S <= result.spikes.threshold_s[spike] < OFFSET_S
        # the values the cell table took from it
        assert result.spikes.threshold_mv[spike] == cell["cell"].rheobase_threshold_mv

    def test_without_spikes_there_is_nothing_to_show(self, odd_cells):
        results = odd_cells["no_spikes.nix"]["results"]
        assert shown_spike(results, cell_summary(results)) == (None, None, "")


class TestTracesFigure:
    def test_markers_sit_at_the_spike_table_values(self, cell):
        table = spike_table(cell["results"])
        ax = cell["figures"]["traces"].axes[0]
        for what in ("threshold", "peak", "trough"):
            x, y = lines(ax, what)
            want_x = np.array(table[f"{what}_s"], float)
            want_y = np.array(table[f"{what}_mv"], float)
            ok = np.isfinite(want_x) & np.isfinite(want_y)
            assert ok.sum() == sum(SPIKES_PER_STEP)
            assert np.array_equal(x, want_x[ok]) and np.array_equal(y, want_y[ok])

    def test_markers_match_spikes_csv_of_a_run(self, cell_file, tmp_path):
        measure_paths([str(cell_file)], tmp_path, figure_format="png")
        with open(tmp_path / "spikes.csv", newline="") as fh:
            rows = list(csv.DictReader(fh))
        x, y = lines(figures.cell_figures(measure_recording(read_recording(cell_file)))[
            "traces"].axes[0], "peak")
        assert np.allclose(x, [float(r["peak_s"]) for r in rows], atol=1e-7)
        assert np.allclose(y, [float(r["peak_mv"]) for r in rows], atol=1e-4)

    def test_the_rheobase_sweep_stands_out(self, cell):
        rheobase = cell["cell"].rheobase_pa
        assert rheobase == STEPS_PA[SPIKES_PER_STEP.index(1)]
        ax = cell["figures"]["traces"].axes[0]
        (line,) = [ln for ln in ax.get_lines() if ln.get_label().startswith("rheobase sweep")]
        sweep = next(r.sweep for r in cell["results"] if r.features.stimulus_pa == rheobase)
        assert np.array_equal(line.get_ydata(),
                              figures.envelope(sweep.voltage_mv, RATE)[1])
        (others,) = ax.collections
        assert len(others.get_paths()) == len(STEPS_PA) - 1
        # the other sweeps are bands thinner than the rheobase line where the trace is flat
        drawn = ax.transData.transform([[0, 0], [0, 1]])
        px_per_mv = drawn[1, 1] - drawn[0, 1]
        line_px = line.get_linewidth() / 72 * ax.figure.dpi
        flat = [_band_thickness_px(p, px_per_mv) for p in others.get_paths()]
        assert max(np.median(f) for f in flat) < line_px

    def test_each_band_covers_its_sweeps_extremes_bin_by_bin(self, cell):
        ax = cell["figures"]["traces"].axes[0]
        rheobase = cell["cell"].rheobase_pa
        sweeps = [r.sweep for r in sorted(cell["results"], key=lambda r: r.features.stimulus_pa)
                  if r.features.stimulus_pa != rheobase]
        drawn = ax.transData.transform([[0, 0], [0, 1]])
        widen_mv = (TRACE_LINE_PT / 72 * ax.figure.dpi / (drawn[1, 1] - drawn[0, 1])
                    / 2 + 1e-9)
        for path, sweep in zip(ax.collections[0].get_paths(), sweeps):
            v = sweep.voltage_mv
            per = -(-v.size // figures.ENVELOPE_BINS)
            bins = [v[k:k + per] for k in range(0, v.size, per)]
            outline = _outline(path)
            half = len(outline) // 2
            low, high = outline[1:half - 1, 1], outline[half + 1:-1, 1][::-1]
            # numpy's own reductions over the same bins: inside the band, which is widened
            # by at most half the thinnest line on each side
            mins, maxs = np.array([b.min() for b in bins]), np.array([b.max() for b in bins])
            assert np.all(low <= mins) and np.all(high >= maxs)
            assert np.all(low >= mins - widen_mv) and np.all(high <= maxs + widen_mv)

    def test_colours_follow_step_size(self, cell):
        fig = cell["figures"]["traces"]
        bar = fig.axes[-1]
        assert bar.get_ylabel() == "step size (pA)"
        assert bar.get_ylim() == pytest.approx((min(STEPS_PA), max(STEPS_PA)))

    def test_legend_covers_no_marker(self, cell):
        fig = cell["figures"]["traces"]
        fig.canvas.draw()
        ax = fig.axes[0]
        box = ax.get_legend().get_window_extent()
        for what in ("threshold", "peak", "trough"):
            points = ax.transData.transform(np.column_stack(lines(ax, what)))
            inside = ((points[:, 0] > box.x0) & (points[:, 0] < box.x1)
                      & (points[:, 1] > box.y0) & (points[:, 1] < box.y1))
            assert not inside.any(), what


def _outline(path):
    """A band's vertices without the closing one PolyCollection adds."""
    from matplotlib.path import Path

    closed = path.codes is not None and path.codes[-1] == Path.CLOSEPOLY
    return path.vertices[:-1] if closed else path.vertices


def _band_thickness_px(path, px_per_mv):
    outline = _outline(path)
    half = len(outline) // 2
    return (outline[half:, 1][::-1] - outline[:half, 1]) * px_per_mv


class TestFirstSpikeFigure:
    def test_values_are_those_of_the_cell_table(self, cell):
        c = cell["cell"]
        ax = cell["figures"]["first_spike"].axes[0]
        rheo = next(r for r in cell["results"] if r.features.stimulus_pa == c.rheobase_pa)
        s = rheo.spikes
        x, y = lines(ax, "threshold")
        assert x.tolist() == [0.0] and y[0] == c.rheobase_threshold_mv
        x, y = lines(ax, "peak")
        assert y[0] == pytest.approx(c.rheobase_threshold_mv + c.rheobase_amplitude_mv,
                                     abs=1e-9)
        assert x[0] == pytest.approx((s.peak_s[0] - s.threshold_s[0]) * 1e3)
        x, y = lines(ax, "trough")
        assert y[0] == pytest.approx(c.rheobase_threshold_mv - c.rheobase_ahp_depth_mv)
        texts = " ".join(t.get_text() for t in ax.texts)
        assert f"threshold {c.rheobase_threshold_mv:.1f} mV" in texts
        assert f"half-width {c.rheobase_half_width_ms:.2f} ms" in texts

    def test_half_width_span_agrees_with_scipy_peak_widths(self, cell):
        c = cell["cell"]
        rheo = next(r for r in cell["results"] if r.features.stimulus_pa == c.rheobase_pa)
        x, y = lines(cell["figures"]["first_spike"].axes[0], "half-width")
        assert y[0] == y[1] == pytest.approx(c.rheobase_threshold_mv
                                             + c.rheobase_amplitude_mv / 2)
        # scipy.signal.peak_widths at the same absolute level: height - prominence * rel
        v = rheo.sweep.voltage_mv
        peak = int(np.argmax(v))
        prominence = peak_prominences(v, [peak])[0][0]
        rel = (v[peak] - y[0]) / prominence
        width = peak_widths(v, [peak], rel_height=rel)[0][0] / RATE * 1e3
        assert x[1] - x[0] == pytest.approx(width, abs=1e-9)
        assert x[1] - x[0] == pytest.approx(c.rheobase_half_width_ms, abs=1e-9)


class TestPhasePlot:
    def test_onset_rate_and_thresholds(self, cell):
        ax = cell["figures"]["phase_plot"].axes[0]
        onset = DetectionSettings().onset_rate_v_per_s
        (line,) = [ln for ln in ax.get_lines() if ln.get_label().startswith("onset rate")]
        assert set(line.get_ydata()) == {onset}
        x, y = lines(ax, "threshold")
        rheo = next(r for r in cell["results"]
                    if r.features.stimulus_pa == cell["cell"].rheobase_pa)
        assert np.array_equal(x, rheo.spikes.threshold_mv)
        # threshold is the onset-rate crossing of dV/dt, corrected for the smoothing bias of
        # its window (docs/measurements.md); the plotted dV/dt, a quadratic fit over the
        # 0.3 ms smoothing window, reads the accelerating rise high there: by what scipy's
        # Savitzky-Golay slope weights give on the closed-form spike (95 mV, sigma 0.35 ms,
        # conftest.rc_cell_sweeps) around its 20 V/s crossing (Lambert W), 22.0 V/s; within
        # 1.5 V/s: the 0.05 mV of noise moves the crossing (a 3-sample onset window here,
        # 0.7 V/s of rate noise, about 0.005 ms on this rise, where the plotted rate climbs
        # 145 V/s per ms); the membrane's own slope under the spike is 0.02 V/s
        spike = GaussianSpike(base_mv=0.0, amplitude_mv=95.0, sigma_ms=0.35)
        crossing_ms = spike.time_at_u(spike.u_at_rate(onset))
        window, dt_ms = 7, 1e3 / RC_RATE_HZ  # 0.3 ms at 20 kHz
        around = crossing_ms + (np.arange(window) - window // 2) * dt_ms
        weights = savgol_coeffs(window, 2, deriv=1, delta=dt_ms, use="dot")
        plotted = weights @ spike.voltage(around)
        assert np.allclose(y, plotted, atol=1.5)
        assert ax.get_xlabel() == "membrane voltage (mV)" and ax.get_ylabel() == "dV/dt (V/s)"


class TestStepResponses:
    def test_fi_points_are_the_sweep_table(self, cell):
        table = sweep_table(cell["results"])
        x, y = lines(cell["figures"]["step_responses"].axes[0], "sweeps")
        order = np.argsort(table["stimulus_pa"])
        assert np.array_equal(x, np.array(table["stimulus_pa"])[order])
        assert np.array_equal(y, np.array(table["firing_rate_hz"])[order])

    def test_fi_slope_line(self, cell):
        ax = cell["figures"]["step_responses"].axes[0]
        (line,) = [ln for ln in ax.get_lines() if ln.get_label().startswith("f-I slope")]
        x, y = np.asarray(line.get_xdata()), np.asarray(line.get_ydata())
        assert (y[1] - y[0]) / (x[1] - x[0]) == pytest.approx(cell["cell"].fi_slope_hz_per_pa)

    def test_input_resistance_line(self, cell):
        ax = cell["figures"]["step_responses"].axes[1]
        (line,) = [ln for ln in ax.get_lines() if ln.get_label().startswith("input resistance")]
        x, y = np.asarray(line.get_xdata()), np.asarray(line.get_ydata())
        slope = (y[1] - y[0]) / (x[1] - x[0])
        assert slope == pytest.approx(cell["cell"].input_resistance_mohm / 1000, rel=1e-9)
        # closed form: the RC membrane's steady state after 20 tau is R I (to 2e-9)
        assert slope == pytest.approx(R_GOHM, rel=0.02)
        px, py = lines(ax, "fitted sweeps")
        assert sorted(px) == [-40.0, -20.0]
        assert np.allclose(py, R_GOHM * px, atol=0.2)

    def test_legend_names_only_the_points_there_are(self, cell):
        # Source: the analytic RC membrane (closed form): every step hyperpolarizing, so every
        # sweep is spike-free and fitted, and there are no "other sweeps" to name.
        ax = figures.step_response_figure(measure_recording(rc_recording())).axes[1]
        entries = [t.get_text() for t in ax.get_legend().get_texts()]
        assert "fitted sweeps" in entries and "other sweeps" not in entries
        assert lines(ax, "fitted sweeps")[0].size == 4
        # the simulated cell (conftest) has depolarizing steps as well: both are named
        ax = cell["figures"]["step_responses"].axes[1]
        entries = [t.get_text() for t in ax.get_legend().get_texts()]
        assert "fitted sweeps" in entries and "other sweeps" in entries


class TestAwkwardCells:
    @pytest.mark.parametrize("name", ["no_spikes.nix", "one_sweep.nix", "no_command.txt"])
    def test_all_figures_are_written_and_not_blank(self, odd_cells, name):
        from matplotlib.image import imread

        case = odd_cells[name]
        assert case["written"] == [f"{stem}.png" for stem in figures.CELL_FIGURE_NAMES]
        for file in case["written"]:
            image = imread(case["folder"] / file)
            assert image.shape[0] > 300 and image.std() > 0.01, file
        assert not list(case["folder"].glob(".*.part"))

    def test_no_spikes_says_so(self, odd_cells):
        figs = odd_cells["no_spikes.nix"]["figures"]
        assert "no spikes detected in any sweep" in [t.get_text()
                                                     for t in figs["first_spike"].axes[0].texts]
        # the passive sweeps still give the input-resistance line
        ax = figs["step_responses"].axes[1]
        assert any(ln.get_label().startswith("input resistance") for ln in ax.get_lines())

    def test_sweeps_too_slow_for_spikes_say_so(self):
        # Source: the analytic RC membrane (closed form) sampled at 1 kHz, below the rate at
        # which spikes are counted; the passive panel still holds the fitted sweeps.
        results = measure_recording(rc_recording(rate=1000.0))
        fig = figures.step_response_figure(results)
        ax_f, ax_v = fig.axes
        assert [t.get_text() for t in ax_f.texts] == [
            "spikes not counted:\nsampled below 2000 Hz"]
        assert not ax_f.lines and ax_f.get_legend() is None
        assert lines(ax_v, "fitted sweeps")[0].size >= 2

    def test_no_command_channel_draws_the_given_step(self, odd_cells):
        ax = odd_cells["no_command.txt"]["figures"]["traces"].axes[1]
        segments = ax.collections[0].get_segments() + [np.column_stack(ln.get_data())
                                                        for ln in ax.get_lines()]
        (step,) = [s for s in segments if len(s)]
        assert step[:, 1].max() == 60.0
        assert step[2, 0] == ONSET_S and step[4, 0] == OFFSET_S
        assert "no command channel" in ax.get_title(loc="left")


def _pixels(fig):
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())[..., :3].copy()


class TestReusedFigures:
    """write_cell_figures draws each cell on the figures of the previous one (``reuse``)."""

    def test_a_reused_figure_draws_the_pixels_of_a_new_one(self, cell, odd_cells):
        cases = {"rc_cell.nix": cell, **odd_cells}
        new = {name: {stem: _pixels(fig) for stem, fig in case["figures"].items()}
               for name, case in cases.items()}
        kept = {}
        names = list(cases)
        # every cell after every other: spikes or none, one step (no colour bar) or many,
        # a recorded command or one given on the command line
        for name in names + names[::-1] + names[1::2] + names[::2]:
            drawn = figures.cell_figures(cases[name]["results"], name=name, reuse=kept)
            for stem, fig in drawn.items():
                assert fig is kept[stem].fig
                assert np.array_equal(_pixels(fig), new[name][stem]), (name, stem)

    def test_the_png_written_is_the_figure_drawn(self, cell, tmp_path):
        written = figures.write_cell_figures(cell["recording"], cell["results"], tmp_path,
                                             "png", cell=cell["cell"])
        for stem, file in zip(figures.CELL_FIGURE_NAMES, written):
            with Image.open(tmp_path / file) as image:  # Pillow's PNG decoder
                assert image.info["dpi"] == pytest.approx((figures.DPI, figures.DPI), abs=0.01)
                assert np.array_equal(np.asarray(image.convert("RGB")),
                                      _pixels(cell["figures"][stem]))


def _drawn_texts(fig):
    """Every non-empty visible text the figure draws, with its box (pixels)."""
    from matplotlib.text import Text

    renderer = fig.canvas.get_renderer()
    fig.draw(renderer)
    found = []
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            low, high = sorted(axis.get_view_interval())
            span = (high - low) or 1.0
            for tick in axis.get_major_ticks():
                for label in (tick.label1, tick.label2):
                    if (label.get_visible() and label.get_text()
                            and low - 1e-9 * span <= tick.get_loc() <= high + 1e-9 * span):
                        found.append(label)
            found.append(axis.label)
        found += [ax.title, ax._left_title, ax._right_title] + list(ax.texts)
        legend = ax.get_legend()
        if legend is not None:
            found += legend.get_texts()
    if fig._suptitle is not None:
        found.append(fig._suptitle)
    found += fig.texts
    boxes, seen = [], set()
    for t in found:
        if id(t) in seen:
            continue
        seen.add(id(t))
        if isinstance(t, Text) and t.get_visible() and t.get_text().strip():
            boxes.append((t.get_text(), t.get_window_extent(renderer)))
    return boxes, fig.bbox


def _assert_no_overlaps(fig):
    boxes, frame = _drawn_texts(fig)
    assert boxes
    for text, box in boxes:  # inside the figure, whole
        assert box.x0 >= frame.x0 - 1 and box.x1 <= frame.x1 + 1, text
        assert box.y0 >= frame.y0 - 1 and box.y1 <= frame.y1 + 1, text
    for (a, box_a), (b, box_b) in itertools.combinations(boxes, 2):
        shrunk_a = box_a.expanded(1, 1).padded(-1)
        assert not shrunk_a.overlaps(box_b.padded(-1)), (a, b, box_a, box_b)


def _assert_legends_cover_no_point(fig):
    fig.canvas.draw()
    for ax in fig.axes:
        legend = ax.get_legend()
        if legend is None:
            continue
        box = legend.get_window_extent()
        for line in ax.get_lines():
            if line.get_marker() in (None, "None", "", " "):
                continue
            xy = np.column_stack(line.get_data()).astype(float)
            if not xy.size:
                continue
            points = ax.transData.transform(xy)
            inside = ((points[:, 0] > box.x0) & (points[:, 0] < box.x1)
                      & (points[:, 1] > box.y0) & (points[:, 1] < box.y1))
            assert not inside.any(), (fig.get_suptitle(), line.get_label())


class TestReadable:
    @pytest.mark.parametrize("stem", figures.CELL_FIGURE_NAMES)
    def test_legends_cover_no_data_point(self, cell, odd_cells, stem):
        for case in [cell, *odd_cells.values()]:
            _assert_legends_cover_no_point(case["figures"][stem])

    @pytest.mark.parametrize("stem", figures.CELL_FIGURE_NAMES)
    def test_no_text_overlaps_text(self, cell, odd_cells, stem):
        _assert_no_overlaps(cell["figures"][stem])
        for case in odd_cells.values():
            _assert_no_overlaps(case["figures"][stem])

    @pytest.mark.parametrize("stem", figures.CELL_FIGURE_NAMES)
    def test_every_axis_has_a_unit_and_the_title_names_the_file(self, cell, stem):
        fig = cell["figures"][stem]
        assert "rc_cell.nix" in fig.get_suptitle()
        for ax in fig.axes[:2] if stem != "traces" else fig.axes[:2]:
            for label in (ax.get_ylabel(), ax.get_xlabel() or fig.axes[1].get_xlabel()):
                assert label.endswith(")") and "(" in label, (stem, label)

    def test_same_size_for_every_cell(self, cell, odd_cells):
        for stem in figures.CELL_FIGURE_NAMES:
            sizes = {tuple(c["figures"][stem].get_size_inches())
                     for c in [cell, *odd_cells.values()]}
            assert len(sizes) == 1, stem

    def test_batch_figure_by_group(self):
        cells = [{"file": f"c{k}.nix", "rheobase_threshold_mv": -50.0 + k,
                  "rheobase_half_width_ms": 0.5 + 0.1 * k, "rheobase_ahp_depth_mv": 10.0,
                  "input_resistance_mohm": 100.0 * (k + 1), "rheobase_pa": 20.0 * k}
                 for k in range(6)]
        groups = {f"c{k}.nix": ("control" if k % 2 else "treated") for k in range(5)}
        fig = figures.batch_features_figure(cells, groups, "condition")
        _assert_no_overlaps(fig)
        ax = fig.axes[3]
        assert [t.get_text() for t in ax.get_xticklabels()] == ["control", "treated",
                                                                "(no group)"]
        drawn = sorted(np.concatenate([ln.get_ydata() for ln in ax.get_lines()
                                       if ln.get_linestyle() == "None"]))
        assert drawn == sorted(c["input_resistance_mohm"] for c in cells)


class TestShow:
    def test_inspect_show_opens_the_same_figures(self, cell_file, monkeypatch):
        shown = []
        monkeypatch.setattr(windows, "_has_display", lambda: True)
        monkeypatch.setattr(windows, "_window_backend", lambda where: None)
        monkeypatch.setattr(windows, "_open_window", lambda figs: shown.extend(figs))
        r = CliRunner().invoke(main, ["inspect", str(cell_file), "--show"])
        assert r.exit_code == 0, r.output
        assert "sweeps measured" in r.output
        assert len(shown) == len(figures.CELL_FIGURE_NAMES)
        assert all(str(cell_file) in f.get_suptitle() for f in shown)
        import matplotlib.pyplot as plt
        plt.close("all")

    def test_without_a_display_it_is_a_clear_error(self, cell_file, monkeypatch):
        monkeypatch.setattr(windows.sys, "platform", "linux")
        monkeypatch.delenv("DISPLAY", raising=False)
        monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
        r = CliRunner().invoke(main, ["inspect", str(cell_file), "--show"])
        assert r.exit_code == 1
        assert "Error:" in r.output and "no display" in r.output
        assert "Traceback" not in r.output


def test_sample_cell_figures_are_readable():
    """A simulated cell of sample_data/ (adapting cortical model), drawn as `measure` draws it:
    no text over text, no legend over a data point."""
    from pathlib import Path

    path = Path(__file__).resolve().parents[2] / "sample_data" / "region_a_cell_2.nix"
    results = measure_recording(read_recording(path, shown_as=path.name))
    for fig in figures.cell_figures(results).values():
        _assert_no_overlaps(fig)
        _assert_legends_cover_no_point(fig)


def _lines_under_legend(ax) -> list[str]:
    """Labels of the lines (data lines sampled along their segments, vertical lines by their
    x) that run under the axes' legend, in pixels."""
    fig = ax.figure
    fig.canvas.draw()
    box = ax.get_legend().get_window_extent()
    crossing = []
    for line in ax.get_lines():
        xy = np.asarray(line.get_xydata(), float)
        if line.get_transform() != ax.transData:  # axvline: x in data, y in axes fraction
            x = ax.transData.transform((xy[0, 0], 0.0))[0]
            if box.x0 <= x <= box.x1:
                crossing.append(line.get_label())
            continue
        t = np.linspace(0, 1, 50)[:, None]
        points = np.concatenate([xy] + [a + t * (b - a) for a, b in zip(xy[:-1], xy[1:])])
        px = ax.transData.transform(points)
        if ((px[:, 0] >= box.x0) & (px[:, 0] <= box.x1) & (px[:, 1] >= box.y0)
                & (px[:, 1] <= box.y1)).any():
            crossing.append(line.get_label())
    return crossing


def test_fi_legend_stands_where_no_line_runs_under_it():
    """On the sample cells: the f-I legend moves off the upper left when the rheobase line or
    the f-I lines would run under it there, to where none does; it stays upper left only when
    no candidate place is free."""
    from pathlib import Path

    moved = 0
    # the four step series of the sample data (the ramps have no f-I plot, the pair two cells)
    for path in sorted((Path(__file__).resolve().parents[2] / "sample_data").glob("*cell_[12].n*")):
        results = measure_recording(read_recording(path, shown_as=path.name))
        ax = figures.step_response_figure(results).axes[0]
        where = ax.get_legend()._loc  # matplotlib's location codes: 2 upper left
        if where != 2:
            moved += 1
            assert _lines_under_legend(ax) == [], path.name
        else:
            for loc in ("lower right", "center right"):  # it would have moved if it could
                ax.legend(loc=loc)
                assert _lines_under_legend(ax), (path.name, loc)
    assert moved >= 1


def test_title_of_a_name_not_utf8_is_drawn_as_text(cell):
    """Python holds a Latin-1 byte of a file name as the surrogate U+DCE9; Agg cannot draw it."""
    drawn = figures.cell_figures(cell["results"], cell["cell"], name="caf\udce9.nix")
    for fig in drawn.values():
        fig.canvas.draw()  # raised TypeError before
        assert fig.get_suptitle().startswith("caf\\xe9.nix: ")


def test_figure_folders_of_distinct_names_are_distinct():
    names = ["a/b.nix", "a__b.nix", "a_/b.nix", "a/_b.nix", "a:b.nix", "a_b.nix", "a?b.nix",
             "day 1/cell.nix", "day 1__cell.nix", "x" * 300 + "1.nix", "x" * 300 + "2.nix",
             "caf\\xe9.nix", "caf/xe9.nix"]
    folders = [figures.figure_folder_name(n) for n in names]
    assert len(set(folders)) == len(names)
    assert all(len(f.encode("utf-8")) <= 255 and "/" not in f for f in folders)
    # plain names keep their folder of before
    assert figures.figure_folder_name("day_1/cell 2.nwb") == "day_1__cell 2.nwb"
    assert figures.figure_folder_name("cell.nix") == "cell.nix"
