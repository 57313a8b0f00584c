"""The report as a reviewer uses it: results first, values rounded with their flags, the batch
figure naming its points, sizes that scale (self-contained up to 10 cells, linked beyond), in a
real browser; built from simulated tables and small figure files, so nothing is measured."""
import html
import math
import re
import struct
import zlib
from html.parser import HTMLParser

import numpy as np
import pytest
from click.testing import CliRunner

from browser import find_chromium
from conftest import RC_RATE_HZ as RATE, rc_cell_sweeps, write_nix
from spikemeasure.analysis.cell_features import CELL_FLAG_TEXT
from spikemeasure.cli import main
from spikemeasure.columns import CELL_COLUMNS
from spikemeasure.errors import InvalidSettingError
from spikemeasure.figures import CELL_FIGURE_NAMES
from spikemeasure.figures.batch import BATCH_FEATURES, batch_features_svg, group_layout
from spikemeasure.report import SELF_CONTAINED_MAX_CELLS, report_html, write_report
from spikemeasure.report.values import FLAG_COLUMNS, shown_columns, shown_number
from spikemeasure.run import measure_paths
from spikemeasure.tables.typed import ColumnTable, column_kind

ODD = '<b>&"x\''


def tiny_png(width: int = 64, height: int = 48, shade: int = 0) -> bytes:
    """A grey PNG, written by the PNG specification (W3C, RFC 2083): signature, IHDR, one
    IDAT of zlib-compressed rows (filter byte 0), IEND, each chunk with its CRC-32."""
    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF))

    rows = b"".join(b"\x00" + bytes([(shade + x) % 256 for x in range(width)])
                    for _ in range(height))
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 0,
                                                                  0, 0, 0))
            + chunk(b"IDAT", zlib.compress(rows)) + chunk(b"IEND", b""))


def simulated_run(folder, n_cells: int, *, odd_names: bool = False,
                  shared_figures: bool = False):
    """A run folder of `n_cells` simulated cells: their record, cells table and a small PNG
    per figure (`shared_figures`: the same four files, named as a cell's are, for all).
    Cell 3 fired in no step (its rheobase values empty, flagged)."""
    rng = np.random.default_rng(n_cells)
    files = [f"day {k // 10}/cell_{k:03d}{ODD if odd_names and k == 1 else ''}.nwb"
             for k in range(n_cells)]
    table = {}
    for c in CELL_COLUMNS:
        if c.name == "file":
            table[c.name] = files
        elif column_kind(c) == "text":
            table[c.name] = [""] * n_cells
        elif c.decimals is None:
            table[c.name] = [11] * n_cells
        else:
            table[c.name] = list(rng.normal(50.0, 10.0, n_cells))
    table["input_resistance_mohm_sd"] = list(rng.uniform(0.05, 2.0, n_cells))
    if n_cells > 3:
        table["flags"][3] = "no_spiking_step"
        for name in FLAG_COLUMNS["no_spiking_step"]:
            table[name][3] = None
    cells = ColumnTable.from_lists(table, CELL_COLUMNS)
    figures = {}
    for k, file in enumerate(files):
        paths = [f"figures/cell {0 if shared_figures else k:03d}/{name}.png"
                 for name in CELL_FIGURE_NAMES]
        for p in paths if k == 0 or not shared_figures else ():
            (folder / p).parent.mkdir(parents=True, exist_ok=True)
            (folder / p).write_bytes(tiny_png(shade=k))
        figures[file] = paths
    group_names = {f: (f"region {'AB'[k % 2]}" if not odd_names else f"{ODD} {k % 2}")
                   for k, f in enumerate(files)}
    record = {"status": "complete", "inputs": [{"file": f, "status": "measured"} for f in files],
              "totals": {"files_measured": n_cells}, "failures": [],
              "figures": {"format": "png", "batch": None, "cells": figures},
              "groups": {"file": "x.groups.csv", "column": "region", "members": group_names},
              "parameters": {"onset_rate_v_per_s": 20.0}}
    return record, cells


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.attrs, self.text = [], []

    def handle_starttag(self, tag, attrs):
        self.attrs += [(tag, dict(attrs))]

    def handle_data(self, data):
        self.text.append(data)


def parsed(text):
    page = _Page()
    page.feed(text)
    return page


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    """report.html of 4 cells and of 40 cells, as a run writes them (no mode given)."""
    out = {}
    for n in (4, 40):
        folder = tmp_path_factory.mktemp(f"run{n}")
        record, cells = simulated_run(folder, n)
        out[n] = {"path": write_report(folder / "report.html", record, cells),
                  "cells": cells, "folder": folder}
    return out


class TestShownValues:
    @pytest.mark.parametrize("value, decimals, sd, text", [
        # two significant digits of the SD (common practice), the value to the same place
        (346.418, 3, 0.0993, "346.418 \u00b1 0.099"),
        (107.828, 3, 1.054, "107.8 \u00b1 1.1"),
        (42.4876, 4, 0.0923, "42.488 \u00b1 0.092"),
        (12345.6, 2, 250.0, "12350 \u00b1 250"),
        # never more places than the column declares
        (1.23456789, 2, 1e-6, "1.23 \u00b1 0.00"),
        # without an SD: the declared decimals, as cells.csv writes them
        (0.00313, 5, math.nan, "0.00313"),
        (-71.91134, 4, math.nan, "-71.9113"),
        (11.0, None, math.nan, "11"),
        (math.nan, 4, 0.1, ""),
    ])
    def test_rounding_rule(self, value, decimals, sd, text):
        assert shown_number(value, decimals, sd) == text

    def test_every_cell_flag_names_the_columns_it_concerns(self):
        assert set(FLAG_COLUMNS) == set(CELL_FLAG_TEXT)
        names = {c.name for c in CELL_COLUMNS}
        for flag, columns in FLAG_COLUMNS.items():
            assert columns and set(columns) <= names, flag

    def test_sd_columns_are_shown_beside_their_values(self):
        shown = [c.name for c in shown_columns()]
        assert "input_resistance_mohm" in shown and "input_resistance_mohm_sd" not in shown
        assert shown[0] == "file" and shown[-1] == "flags"


class TestPage:
    def test_results_come_first_and_the_record_last(self, reports):
        text = reports[4]["path"].read_text()
        order = [text.index(f'id="{a}"') for a in ("cells-table", "across-cells", "cell-0",
                                                   "cell-3", "run", "failures")]
        assert order == sorted(order)

    def test_values_are_rounded_with_their_sd_and_flags_beside_the_empty_ones(self, reports):
        cells = reports[4]["cells"]
        text = reports[4]["path"].read_text()
        r, sd = (float(cells.column("input_resistance_mohm")[0]),
                 float(cells.column("input_resistance_mohm_sd")[0]))
        places = 1 - math.floor(math.log10(sd))  # two significant digits of the SD
        assert f">{r:.{places}f} \u00b1 {sd:.{places}f}<" in text
        row = re.search(r'<tr id="row-3">(.*?)</tr>', text).group(1)
        emptied = re.findall(r'data-sort="">(?:<span class="flag"[^>]*>([a-z_]+)</span>)', row)
        assert emptied == ["no_spiking_step"] * len(
            [n for n in FLAG_COLUMNS["no_spiking_step"] if not n.endswith("_sd")])

    def test_every_row_links_to_its_cell_and_every_point_too(self, reports):
        page = parsed(reports[40]["path"].read_text())
        ids = {a["id"] for _, a in page.attrs if "id" in a}
        row_links = [a["href"] for t, a in page.attrs if t == "a" and a.get("href", "")
                     .startswith("#cell-")]
        assert {f"#cell-{k}" for k in range(40)} <= set(row_links)
        assert all(link[1:] in ids for link in row_links)
        cells = reports[40]["cells"]
        finite = sum(int(np.isfinite(cells.column(c)).sum()) for c, _, _ in BATCH_FEATURES)
        assert sum(1 for t, a in page.attrs if t == "circle" and "data-cell" in a) == finite

    def test_sizes_self_contained_up_to_ten_cells_linked_beyond(self, reports):
        small = parsed(reports[4]["path"].read_text())
        sources = [a["src"] for t, a in small.attrs if t == "img"]
        assert len(sources) == 4 * len(CELL_FIGURE_NAMES)
        assert all(s.startswith("data:image/png;base64,") for s in sources)
        assert SELF_CONTAINED_MAX_CELLS == 10
        big = reports[40]
        assert big["path"].stat().st_size < 3_000_000
        text = big["path"].read_text()
        images = [a for t, a in parsed(text).attrs if t == "img"]
        assert len(images) == 40 * len(CELL_FIGURE_NAMES)
        for image in images:  # relative, resolving beside the page, loaded as one scrolls
            assert not image["src"].startswith(("data:", "/", "file:"))
            assert (big["folder"] / image["src"]).is_file()
            assert image["loading"] == "lazy" and image["width"] == "64"
        assert "copy or move the whole output folder" in text

    def test_the_mode_overrides_the_number_of_cells(self, reports, tmp_path):
        record, cells = simulated_run(tmp_path, 12)
        embedded = report_html(record, cells, tmp_path, mode="self-contained")
        linked = report_html(record, cells, tmp_path, mode="linked")
        assert embedded.count("data:image/png;base64,") == 12 * len(CELL_FIGURE_NAMES)
        assert linked.count('loading="lazy"') == 12 * len(CELL_FIGURE_NAMES)
        with pytest.raises(ValueError, match="`mode`"):
            report_html(record, cells, tmp_path, mode="none")

    def test_500_cells_stay_a_page_a_browser_opens(self, tmp_path):
        record, cells = simulated_run(tmp_path, 500, shared_figures=True)
        assert len(report_html(record, cells, tmp_path).encode()) < 30_000_000

    def test_every_text_from_a_file_is_escaped(self, tmp_path):
        record, cells = simulated_run(tmp_path, 4, odd_names=True)
        text = report_html(record, cells, tmp_path)
        assert ODD not in text
        assert html.escape(ODD, quote=True) in text
        page = parsed(text)
        titles = "".join(page.text)
        assert f"cell_001{ODD}.nwb" in titles and f"{ODD} 1" in titles

    def test_failed_quality_checks_are_marked(self, reports, tmp_path):
        record, cells = simulated_run(tmp_path, 4)
        finding = {"check": "max_input_resistance_mohm", "file": cells.column("file")[2],
                   "electrode": "", "column": "input_resistance_mohm",
                   "message": "input_resistance_mohm is 60 > 50"}
        text = report_html(record, cells, tmp_path, findings=[finding])
        row = re.search(r'<tr id="row-2">(.*?)</tr>', text).group(1)
        assert "\u2717" in row and row.count("check-failed") == 1
        assert "max_input_resistance_mohm: input_resistance_mohm is 60 &gt; 50" in row
        others = re.findall(r'<tr id="row-[013]">(.*?)</tr>', text)
        assert len(others) == 3 and not any("\u2717" in r for r in others)


def test_batch_figure_layout_is_the_golden_ratio_spread():
    """Within a group, member j sits at group + ((0.618034 j) mod 1 - 0.5) 0.4: a fixed
    (low-discrepancy) spread, so that reruns draw the same figure."""
    cells = [{"file": f"c{k}"} for k in range(5)]
    names, order, x = group_layout(cells, {"c0": "b", "c1": "a", "c2": "b", "c3": "b"})
    assert order == ["a", "b", "(no group)"]
    j = np.arange(3)
    np.testing.assert_allclose(x[[0, 2, 3]], 1 + (((j * 0.618034) % 1.0) - 0.5) * 0.4)
    assert x[1] == pytest.approx(-0.2) and x[4] == pytest.approx(2 - 0.2)


def test_batch_svg_names_each_point():
    cells = [{"file": "a.nwb", "rheobase_pa": 50.0}, {"file": "b.nwb", "rheobase_pa": math.nan}]
    svg = batch_features_svg(cells, labels=["a.nwb", "b.nwb"], links=["x", "y"])
    assert svg.count('class="point"') == 1 and 'href="#x"' in svg and "a.nwb: rheobase 50 pA" in svg
    with pytest.raises(ValueError, match="`labels`"):
        batch_features_svg(cells, labels=["a.nwb"])


@pytest.mark.parametrize("n", [4, 40])
def test_in_a_real_browser(reports, n):
    """No console error, every image loads; hovering a point of the batch figure names its
    cell (read from the page); clicking a column's name sorts the rows by its values."""
    pytest.importorskip("websocket", reason="websocket-client (a test extra) is not installed")
    if find_chromium() is None:
        pytest.skip("no Chromium to load the report in: .ci/run installs Debian's chromium "
                    "package when it can (apt-get install chromium)")
    from browser import load_page

    cells = reports[n]["cells"]
    column = "rheobase_pa"
    k = [c.name for c in shown_columns()].index(column) + 1  # the group column after file
    read_column = ("Array.from(document.querySelectorAll('#cells-table tbody tr'))"
                   f".map(r => [r.cells[0].textContent.trim(), r.cells[{k}].dataset.sort])")
    page = load_page(reports[n]["path"].as_uri(), load_every_image=True, steps=[
        ("hover", '.point[data-cell="cell-2"]', "document.getElementById('hovered-cell')"
                                                ".textContent"),
        ("click", f"#cells-table th:nth-child({k + 1})", read_column),
        ("click", f"#cells-table th:nth-child({k + 1})", read_column)])
    assert page["errors"] == []
    assert len(page["images"]) == n * len(CELL_FIGURE_NAMES)
    assert all(i["complete"] and i["width"] == 64 for i in page["images"])
    hovered, ascending, descending = page["steps"]
    assert hovered.startswith(cells.column("file")[2] + " [region A]: ")
    values = cells.column(column)
    files = list(cells.column("file"))
    up = np.argsort(values, kind="stable")  # numpy sorts NaN (empty values) last
    down = np.concatenate([up[np.isfinite(values[up])][::-1], up[~np.isfinite(values[up])]])
    assert [f for f, _ in ascending] == [files[i] for i in up]
    assert [f for f, _ in descending] == [files[i] for i in down]


class TestReportMode:
    @pytest.fixture(scope="class")
    def folder(self, tmp_path_factory):
        d = tmp_path_factory.mktemp("mode")
        write_nix(d / "one.nix", rc_cell_sweeps()[:3], rate_hz=RATE)
        (d / "regions.groups.csv").write_text("file,region\none.nix,A\n")
        return d

    def test_groups_files_beside_the_recordings_are_not_measured(self, folder, tmp_path):
        summary = measure_paths([str(folder)], tmp_path / "out")
        assert [i["file"] for i in summary.inputs] == ["one.nix"] and not summary.failures

    def test_none_writes_no_report_and_removes_an_earlier_one(self, folder, tmp_path):
        out = tmp_path / "out"
        measure_paths([str(folder)], out)
        assert (out / "report.html").is_file()
        r = CliRunner().invoke(main, ["measure", str(folder), "--out", str(out),
                                      "--report", "none"])
        assert r.exit_code == 0, r.output
        assert not (out / "report.html").exists() and "Report:" not in r.output
        assert (out / "cells.csv").is_file()

    def test_a_bad_mode_is_named(self, folder, tmp_path):
        r = CliRunner().invoke(main, ["measure", str(folder), "--out", str(tmp_path / "o"),
                                      "--report", "zip"])
        assert r.exit_code == 2 and "report_mode" in r.output and "linked" in r.output
        assert "Traceback" not in r.output
        with pytest.raises(InvalidSettingError, match="`report_mode` must be one of"):
            measure_paths([str(folder)], tmp_path / "p", report_mode="zip")
        assert not (tmp_path / "p").exists()


def test_check_marks_the_cells_that_failed_in_the_report(tmp_path):
    """`check` writes report.html again with a failed quality rule marked on its cell, and a
    check that passes clears the mark."""
    recordings = tmp_path / "recordings"
    recordings.mkdir()
    write_nix(recordings / "one.nix", rc_cell_sweeps()[:3], rate_hz=RATE)
    out = tmp_path / "results"
    measure_paths([str(recordings)], out)
    failing, passing = tmp_path / "failing.toml", tmp_path / "passing.toml"
    for path, limits in ((failing, "[-10.0, 0.0]"), (passing, "[-100.0, 0.0]")):
        path.write_text(f"[quality]\nresting_range_mv = {limits}\n"
                        "[regression]\nenabled = false\n")
    r = CliRunner().invoke(main, ["check", str(out), "--config", str(failing)])
    assert r.exit_code == 1, r.output
    row = re.search(r'<tr id="row-0">(.*?)</tr>', (out / "report.html").read_text()).group(1)
    assert "\u2717" in row and "resting_range_mv" in row and "check-failed" in row
    r = CliRunner().invoke(main, ["check", str(out), "--config", str(passing)])
    assert r.exit_code == 0, r.output
    assert "\u2717" not in (out / "report.html").read_text()
