"""report.html, and figures in batch runs (cache, formats, tables unchanged)."""
import base64
import csv
import hashlib
import json
import re
import shutil
from html.parser import HTMLParser

import numpy as np
import pytest
from click.testing import CliRunner

from browser import find_chromium
from conftest import RC_RATE_HZ as RATE, rc_cell_sweeps, step_command, write_nix
from spikemeasure.cli import main
from spikemeasure.columns import CELL_COLUMNS
from spikemeasure.figures import BATCH_FIGURE_NAME, CELL_FIGURE_NAMES
from spikemeasure.run import measure_paths

TABLES = ("spikes.csv", "sweeps.csv", "cells.csv")
ODD_NAME = 'cell <b>&"1".nix'


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    """Two cells (one with a name full of HTML), a no-spike cell and a truncated file."""
    d = tmp_path_factory.mktemp("report") / "cells"
    (d / "day 1").mkdir(parents=True)
    write_nix(d / "day 1" / ODD_NAME, rc_cell_sweeps(), rate_hz=RATE)
    write_nix(d / "plain.nix", rc_cell_sweeps()[::2], rate_hz=RATE)
    n = int(0.3 * RATE)
    write_nix(d / "quiet.nix", [(np.full(n, -70.0) + 0.01 * np.sin(np.arange(n)),
                                 step_command(n, RATE, 0.0))], rate_hz=RATE)
    data = (d / "plain.nix").read_bytes()
    (d / "broken.nix").write_bytes(data[: len(data) // 5])
    return d


@pytest.fixture(scope="module")
def run(folder, tmp_path_factory):
    out = tmp_path_factory.mktemp("out")
    groups = out.parent / "groups.csv"
    groups.write_text(f'file,condition\n"day 1/{ODD_NAME}",control\nplain.nix,treated\n'
                      "gone.nix,treated\n")
    r = CliRunner().invoke(main, ["measure", str(folder), "--out", str(out), "--jobs", "1",
                                  "--groups", str(groups)])
    return {"out": out, "result": r, "html": (out / "report.html").read_text()}


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.attrs, self.text = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += [(tag, k, v) for k, v in attrs]

    def handle_data(self, data):
        self.text.append(data)


def parsed(html_text):
    page = _Page()
    page.feed(html_text)
    return page


class TestReportContents:
    def test_run_summary_counts(self, run):
        assert run["result"].exit_code == 1  # the truncated file failed
        record = json.loads((run["out"] / "run.json").read_text())
        assert record["totals"]["files_measured"] == 3 and record["totals"]["files_failed"] == 1
        for label, value in (("files", 4), ("measured", 3), ("failed", 1)):
            assert re.search(rf"<b>{label}</b></td><td>{value}</td>", run["html"]), label

    def test_failures_are_listed_with_their_reasons(self, run):
        record = json.loads((run["out"] / "run.json").read_text())
        (failure,) = record["failures"]
        assert failure["file"] == "broken.nix"
        text = " ".join(parsed(run["html"]).text)
        assert failure["message"] in text

    def test_names_are_escaped(self, run):
        assert ODD_NAME not in run["html"]  # never raw
        assert "cell &lt;b&gt;&amp;&quot;1&quot;.nix" in run["html"]
        page = parsed(run["html"])
        assert f"day 1/{ODD_NAME}" in page.text  # the parser reads it back whole

    def test_cell_table_and_figures(self, run):
        page = parsed(run["html"])
        images = [v for t, k, v in page.attrs if t == "img" and k == "src"]
        # three measured cells, each four figures; the batch figure is inline SVG
        assert len(images) == 3 * len(CELL_FIGURE_NAMES)
        assert page.tags.count("svg") == 1
        for src in images:
            assert src.startswith("data:image/png;base64,")
            assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
        with open(run["out"] / "cells.csv", newline="") as fh:
            cells = list(csv.DictReader(fh))
        for row in cells:
            for name, value in row.items():
                if name in ("file", "flags") or f"{name}_sd" in row or name.endswith("_sd"):
                    continue
                # no SD: the CSV's value at the column's declared reading precision
                declared = next(c for c in CELL_COLUMNS if c.name == name)
                if value and declared.decimals is not None:
                    value = f"{float(value):.{declared.report_decimals}f}"
                assert f">{value}<" in run["html"] or f">{value}<span" in run["html"], name

    def test_no_external_resources_and_one_inline_script(self, run):
        page = parsed(run["html"])
        assert page.tags.count("script") == 1 and "link" not in page.tags
        for tag, key, value in page.attrs:
            if key in ("src", "href"):
                assert value.startswith(("data:", "#")), (tag, value)
        assert "url(" not in run["html"] and "@import" not in run["html"]
        assert "fetch(" not in run["html"] and "XMLHttpRequest" not in run["html"]

    def test_groups_notes_and_batch_figure(self, run):
        record = json.loads((run["out"] / "run.json").read_text())
        assert record["groups"]["column"] == "condition"
        assert "<th>condition</th>" in run["html"]
        assert re.search(r"plain\.nix</a></td><td>treated</td>", run["html"])
        notes = " ".join(record["notes"])
        assert "gone.nix" in notes and "quiet.nix" in notes
        assert "Note:" in run["result"].output and "gone.nix" in run["result"].output
        assert (run["out"] / "figures" / f"{BATCH_FIGURE_NAME}.png").is_file()
        assert record["figures"]["batch"] == f"figures/{BATCH_FIGURE_NAME}.png"

    def test_figures_live_under_safe_folder_names(self, run):
        record = json.loads((run["out"] / "run.json").read_text())
        paths = record["figures"]["cells"][f"day 1/{ODD_NAME}"]
        # one folder level; characters some file systems refuse (<>:"|?*) made "_", and then
        # (the name changed) the start of the name's SHA-256 (hashlib) keeps it distinct
        digest = hashlib.sha256(f"day 1/{ODD_NAME}".encode()).hexdigest()[:8]
        assert paths == [f'figures/day 1__cell _b_&_1_.nix-{digest}/{s}.png'
                         for s in CELL_FIGURE_NAMES]
        assert all((run["out"] / p).is_file() for p in paths)


def test_report_in_a_real_browser(run, tmp_path):
    """The page loads with no console errors, every image loads, the screenshot is not blank,
    also from a copy of the output folder elsewhere."""
    pytest.importorskip("websocket", reason="websocket-client (a test extra) is not installed")
    if find_chromium() is None:
        pytest.skip("no Chromium to load the report in: .ci/run installs Debian's chromium "
                    "package when it can (apt-get install chromium)")
    from matplotlib.image import imread
    import io

    from browser import load_page

    copy = tmp_path / "copied elsewhere"
    shutil.copytree(run["out"], copy)
    page = load_page((copy / "report.html").as_uri(), load_every_image=True)
    assert page["errors"] == []
    assert len(page["images"]) == 3 * len(CELL_FIGURE_NAMES)
    for image in page["images"]:
        assert image["complete"] and image["width"] > 100 and image["height"] > 100, image
    shot = imread(io.BytesIO(page["screenshot"]), format="png")
    assert shot.shape[0] > 500 and shot[..., :3].std() > 0.02  # not one flat colour


def test_the_browser_check_catches_a_broken_page(tmp_path):
    """The check above can fail: a missing image and a console error are both reported."""
    pytest.importorskip("websocket", reason="websocket-client (a test extra) is not installed")
    if find_chromium() is None:
        pytest.skip("no Chromium: .ci/run installs Debian's chromium package when it can")
    from browser import load_page

    page = tmp_path / "broken.html"
    page.write_text('<!DOCTYPE html><img src="absent.png" alt="x">'
                    "<script>console.error('deliberate')</script>")
    found = load_page(page.as_uri())
    assert any("deliberate" in e for e in found["errors"])
    assert found["images"] and found["images"][0]["width"] == 0


class TestFiguresInBatchRuns:
    def test_rerun_reads_nothing_and_figure_options_leave_the_tables_alone(self, folder,
                                                                          tmp_path):
        plain = tmp_path / "plain"
        measure_paths([str(folder)], plain, jobs=1)
        out = tmp_path / "out"
        first = measure_paths([str(folder)], out, jobs=1, figure_format="png")
        assert first.files_measured == 3
        for name in TABLES:
            assert (out / name).read_bytes() == (plain / name).read_bytes()
        figure = out / "figures" / "plain.nix" / "traces.png"
        stamp = figure.stat().st_mtime_ns
        again = measure_paths([str(folder)], out, jobs=1, figure_format="png")
        assert (again.files_reused, again.files_measured) == (3, 0)
        assert figure.stat().st_mtime_ns == stamp
        svg = measure_paths([str(folder)], out, jobs=1, figure_format="svg")
        assert svg.files_measured == 3  # another format: drawn again
        assert (out / "figures" / "plain.nix" / "traces.svg").read_text().lstrip().startswith(
            "<?xml")
        html = (out / "report.html").read_text()
        assert html.count("data:image/svg+xml;base64,") == 3 * len(CELL_FIGURE_NAMES)
        for name in TABLES:
            assert (out / name).read_bytes() == (plain / name).read_bytes()

    def test_two_jobs_with_figures_give_the_same_tables(self, folder, tmp_path):
        measure_paths([str(folder)], tmp_path / "one", jobs=1)
        two = measure_paths([str(folder)], tmp_path / "two", jobs=2, figure_format="png")
        assert two.files_measured == 3
        for name in TABLES + ("errors.csv",):
            assert (tmp_path / "one" / name).read_bytes() == (tmp_path / "two" / name).read_bytes()
        record = json.loads((tmp_path / "two" / "run.json").read_text())
        assert all((tmp_path / "two" / p).is_file()
                   for paths in record["figures"]["cells"].values() for p in paths)

    def test_figures_missing_after_a_run_without_them_are_drawn(self, folder, tmp_path):
        out = tmp_path / "out"
        first = measure_paths([str(folder)], out, jobs=1)
        assert not (out / "figures").exists()
        assert "not drawn in this run" in (out / "report.html").read_text()
        second = measure_paths([str(folder)], out, jobs=1, figure_format="png")
        assert second.files_measured == 3 and second.files_reused == 0
        (out / "figures" / "plain.nix" / "phase_plot.png").unlink()
        third = measure_paths([str(folder)], out, jobs=1, figure_format="png")
        assert (third.files_measured, third.files_reused) == (1, 2)
        assert (out / "figures" / "plain.nix" / "phase_plot.png").is_file()
        fourth = measure_paths([str(folder)], out, jobs=1)  # no figures asked: nothing redone
        assert fourth.files_reused == 3
        assert first.spikes == second.spikes == third.spikes

    def test_pdf_figures_are_linked(self, folder, tmp_path):
        out = tmp_path / "out"
        measure_paths([str(folder / "plain.nix")], out, jobs=1, figure_format="pdf")
        assert (out / "figures" / "plain.nix" / "traces.pdf").read_bytes()[:5] == b"%PDF-"
        page = parsed((out / "report.html").read_text())
        links = [v for t, k, v in page.attrs if t == "a" and k == "href" and v.endswith(".pdf")]
        assert "figures/plain.nix/traces.pdf" in links and len(links) == 5


def test_no_figures_never_imports_matplotlib(folder, tmp_path):
    """`--help` and runs without figures stay fast: matplotlib is imported only to draw."""
    import subprocess
    import sys

    code = ("import sys\nfrom spikemeasure.cli import main\n"
            "from spikemeasure.run import measure_paths\n"
            f"measure_paths([{str(folder / 'plain.nix')!r}], {str(tmp_path / 'out')!r})\n"
            "print(sorted(m for m in sys.modules if m.split('.')[0] == 'matplotlib'))\n")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            timeout=120)
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "[]"
    assert (tmp_path / "out" / "report.html").is_file()


def test_report_of_a_run_with_a_name_not_utf8_is_written(tmp_path):
    """Text from outside (a command line, a message) may hold surrogates; the page is UTF-8."""
    from spikemeasure.columns import CELL_COLUMNS
    from spikemeasure.report import write_report
    from spikemeasure.tables.typed import ColumnTable

    record = {"command": ["spikemeasure", "measure", "caf\udce9.nix"],
              "inputs": [{"file": "caf\\xe9.nix", "status": "failed"}],
              "failures": [{"file": "caf\\xe9.nix", "stage": "read",
                            "message": "caf\udce9.nix: damaged"}]}
    page = write_report(tmp_path / "report.html", record,
                        ColumnTable.empty(CELL_COLUMNS)).read_bytes().decode("utf-8")
    assert "measure caf\\xe9.nix" in page and "caf\\xe9.nix: damaged" in page
