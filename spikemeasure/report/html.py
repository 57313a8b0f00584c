"""The run's report, ``report.html``: where a person decides whether to believe a run.

Results first: the cells table (values rounded to what each measurement supports, flags and
uncertainties beside them, failed quality checks marked, sortable, each row linking to its
cell), then the batch figure (inline SVG: each point names its cell on hover and links to it),
then each cell's figures, then the run's record (parameters, versions, inputs, failures); a
run's failures are also summarised at the top.

Figures are embedded as ``data:`` URIs (``self-contained``: one file to mail or copy) or
linked by their paths relative to the page and loaded lazily (``linked``: the page stays
small, and the output folder must travel with it). By default a report of up to
:data:`SELF_CONTAINED_MAX_CELLS` cells is self-contained and a larger one linked. PDF figures,
which a page cannot show, are always linked.

The page has no external resources; its only script is a few inline lines that sort the
table and name the hovered point. Every text from a file, a parameter or a message is
escaped. This module reads only the figure files the run itself wrote.
"""
from __future__ import annotations

import base64
import math
import os
import struct
from pathlib import Path
from typing import Sequence

from ..params import REPORT_PARAMETER, SELF_CONTAINED_MAX_CELLS
from ..tables.typed import ColumnTable, column_kind
from ..tables.write import write_text_atomic
from .run_record import NUMERIC_TD, cell_name, escaped, record_section, top_summary
from .values import FLAG_COLUMNS, cell_values, shown_columns, shown_number, shown_rows

__all__ = ["REPORT_MODES", "SELF_CONTAINED_MAX_CELLS", "report_html", "write_report",
           "figure_embedding"]

#: How the report holds its figures: embedded, linked, or no report at all.
REPORT_MODES = REPORT_PARAMETER.choices
_MIME = {".png": "image/png", ".svg": "image/svg+xml"}

_CSS = """
body { font-family: system-ui, sans-serif; margin: 1.5em auto; max-width: 1400px;
       padding: 0 1em; color: #222; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { margin-top: 1.6em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5em 0; font-size: 0.85em; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.5em; text-align: left; vertical-align: top; }
th { background: #f2f2f2; } td.n { text-align: right; font-variant-numeric: tabular-nums; }
table.sortable th { cursor: pointer; white-space: nowrap; }
table.sortable td { white-space: nowrap; }
th[aria-sort=ascending]::after { content: " \\25B2"; }
th[aria-sort=descending]::after { content: " \\25BC"; }
.wide { overflow-x: auto; } .caution { background: #fff4e0; padding: 0.5em 0.8em; }
.problems { background: #fde8e8; padding: 0.3em 0.8em; } .failed { color: #a00000; }
td.check-failed { background: #fde8e8; } .flag { margin-left: 0.4em; font-size: 0.8em;
       color: #8a5a00; } .mark { color: #a00000; font-weight: bold; }
figure { margin: 0.8em 0; } img { max-width: 100%; height: auto; }
figcaption, .small { font-size: 0.85em; color: #555; }
svg.batch { max-width: 100%; height: auto; font-size: 11px; }
svg.batch .frame { fill: none; stroke: #999; } svg.batch .axis { stroke: #999; }
svg.batch .median { stroke: #222; stroke-width: 1.5; }
svg.batch .point { fill-opacity: 0.8; cursor: pointer; }
svg.batch .point:hover, svg.batch .point.lit { stroke: #000; stroke-width: 2; r: 6; }
svg.batch .panel-title { font-weight: bold; }
#hovered-cell { height: 1.4em; font-weight: bold; }
"""

# Sorting the table by a clicked header (numbers by their unrounded value, empty values
# last), and naming the hovered point of the batch figure (and lighting the cell's points).
_SCRIPT = """
function compareKeys(x, y) {
  if (x === "" || y === "") return (x === "") - (y === "");
  const a = Number(x), b = Number(y);
  return isNaN(a) || isNaN(b) ? x.localeCompare(y) : a - b;
}
for (const th of document.querySelectorAll("table.sortable th")) {
  th.addEventListener("click", () => {
    const body = th.closest("table").tBodies[0], k = th.cellIndex;
    const up = th.getAttribute("aria-sort") !== "ascending";
    for (const other of th.parentNode.cells) other.removeAttribute("aria-sort");
    th.setAttribute("aria-sort", up ? "ascending" : "descending");
    const key = row => row.cells[k].dataset.sort ?? row.cells[k].textContent.trim();
    const rows = [...body.rows].sort((a, b) => {
      const ka = key(a), kb = key(b), d = compareKeys(ka, kb);
      return ka === "" || kb === "" || up ? d : -d;
    });
    body.append(...rows);
  });
}
const hovered = document.getElementById("hovered-cell");
for (const point of document.querySelectorAll("svg.batch .point")) {
  const same = () => document.querySelectorAll(`.point[data-cell="${point.dataset.cell}"]`);
  point.addEventListener("mouseenter", () => {
    hovered.textContent = point.querySelector("title").textContent;
    for (const p of same()) p.classList.add("lit");
  });
  point.addEventListener("mouseleave", () => {
    for (const p of same()) p.classList.remove("lit");
  });
}
"""


def figure_embedding(mode: str | None, n_cells: int) -> bool:
    """Whether the figures are embedded: `mode` ``self-contained`` or ``linked``, or None
    (self-contained up to :data:`SELF_CONTAINED_MAX_CELLS` cells)."""
    if mode is None:
        return n_cells <= SELF_CONTAINED_MAX_CELLS
    if mode not in REPORT_MODES[:2]:
        raise ValueError(f"`mode` must be one of {', '.join(REPORT_MODES[:2])} or None "
                         f"(got {mode!r})")
    return mode == "self-contained"


def report_html(record: dict, cells: ColumnTable, folder: str | os.PathLike, *,
                mode: str | None = None, findings: Sequence[dict] = ()) -> str:
    """The text of ``report.html``.

    Parameters
    ----------
    record : dict
        The run record, as written to run.json (inputs, failures, parameters, totals,
        figures, groups, notes).
    cells : ColumnTable
        The run's cells table (typed columns of :data:`~spikemeasure.columns.CELL_COLUMNS`).
    folder : str or path-like
        The output folder; figure paths in `record` are relative to it.
    mode : {'self-contained', 'linked'} or None, optional
        Embed the figures or link them; None: by the number of cells
        (:func:`figure_embedding`).
    findings : sequence of dict, optional
        Failed quality checks, each with ``check``, ``file``, ``electrode``, ``column`` and
        ``message`` (as ``spikemeasure check --json`` lists them); their cells are marked.

    Returns
    -------
    str
        The page: a summary of the run, the cells table, the batch figure, each cell's
        figures, the run record.

    Raises
    ------
    ValueError
        For a `mode` not listed.
    """
    embed = figure_embedding(mode, len(cells))
    folder = Path(folder)
    inputs = record.get("inputs", [])
    figures = record.get("figures") or {}
    per_cell = _cell_figures(figures.get("cells") or {}, cells)
    keys = list(zip(cells.column("file"), cells.column("electrode")))
    marks = _findings_by_cell(findings, keys)
    title = f"spikemeasure report: {len(inputs)} file" + ("" if len(inputs) == 1 else "s")
    parts = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{escaped(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>",
        f"<h1>{escaped(title)}</h1>",
        '<p class="caution">Research software: these results need review by a qualified '
        "person, who looks at the traces below; not for clinical decisions.</p>",
    ]
    parts += top_summary(record, len(cells))
    if not embed and figures.get("format"):
        parts.append('<p class="caution">This page links the figures in the '
                     "<code>figures</code> folder beside it (loaded as you scroll): copy or "
                     "move the whole output folder with it, or the figures will be missing.</p>")
    parts += _cells_section(record, cells, marks)
    parts += _batch_section(record, cells, keys, embed)
    parts += _cell_sections(record, cells, keys, per_cell, marks, folder, embed)
    parts += record_section(record)
    parts += [f"<script>{_SCRIPT}</script>", "</body>", "</html>", ""]
    return "\n".join(parts)


def _cell_figures(per_file: dict, cells: ColumnTable) -> dict[tuple[str, str], list[str]]:
    """Each cell's figures, by (file, electrode): run.json lists them by file; a file of
    several cells has a figure folder per cell
    (:func:`~spikemeasure.run.task.cell_figure_folder`)."""
    from ..run.task import cell_folders

    electrodes: dict[str, list[str]] = {}
    for file, electrode in zip(cells.column("file"), cells.column("electrode")):
        electrodes.setdefault(file, []).append(electrode)
    out: dict[tuple[str, str], list[str]] = {}
    for file, paths in per_file.items():
        names = electrodes.get(file) or [""]
        if len(names) == 1:
            out[(file, names[0])] = list(paths)
            continue
        for electrode, folder in zip(names, cell_folders(file, names)):
            out[(file, electrode)] = [p for p in paths if p.startswith(folder + "/")]
    return out


def _findings_by_cell(findings: Sequence[dict], keys: list[tuple[str, str]]
                      ) -> list[list[dict]]:
    """Each cell's failed checks: those of its file and electrode, and those of its whole
    file (no electrode)."""
    marks: list[list[dict]] = [[] for _ in keys]
    for finding in findings:
        for k, (file, electrode) in enumerate(keys):
            if finding.get("file") == file and finding.get("electrode", "") in ("", electrode):
                marks[k].append(finding)
    return marks


def _anchor(k: int) -> str:
    return f"cell-{k}"


def _cells_section(record: dict, cells: ColumnTable, marks: list[list[dict]]) -> list[str]:
    """The cells table: rounded values with their flags, sortable, each row linked."""
    parts = [f'<h2 id="cells">Cells ({len(cells)})</h2>']
    if not len(cells):
        return parts + ["<p>No cell could be measured.</p>"]
    groups = record.get("groups") or {}
    members = groups.get("members")
    columns = shown_columns(cells.columns)
    header = ["file"] + ([groups["column"]] if members is not None else []) + [
        c.name for c in columns[1:]]
    parts.append('<p class="small">Click a column\'s name to sort by it. Units are in the '
                 "column names; every column is defined in docs/measurements.md "
                 "(<code>spikemeasure columns</code>). Values are rounded to what the "
                 "measurement supports: to two significant digits of the SD where the table "
                 "has one (shown as value \u00b1 SD), else to the reading precision its "
                 "column declares; cells.csv holds them all. Flags in a value's place say why it is empty or "
                 "what qualifies it. " + ("Cells marked \u2717 failed a quality check."
                                         if any(marks) else "") + "</p>")
    rows = []
    for k, (row, failed) in enumerate(zip(shown_rows(cells), marks)):
        file = row[0].text
        failed_columns = {f.get("column") for f in failed}
        mark = (f' <span class="mark" title="{escaped(_checks_text(failed))}">\u2717</span>'
                if failed else "")
        html_cells = [f'<td><a href="#{_anchor(k)}">{escaped(file)}</a>{mark}</td>']
        if members is not None:
            html_cells.append(f"<td>{escaped(members.get(file, '(no group)'))}</td>")
        for column, value in zip(columns[1:], row[1:]):
            html_cells.append(_value_cell(column, value, column.name in failed_columns))
        rows.append(f'<tr id="row-{k}">' + "".join(html_cells) + "</tr>")
    head = "".join(f"<th>{escaped(h)}</th>" for h in header)
    parts.append(f'<div class="wide"><table class="sortable" id="cells-table"><thead><tr>'
                 f"{head}</tr></thead><tbody>" + "\n".join(rows) + "</tbody></table></div>")
    return parts


def _value_cell(column, value, failed: bool) -> str:
    """One value of the cells table: its rounded text, the flags concerning it, the
    unrounded value as the sort key, marked when a quality check failed on it."""
    if column_kind(column) == "text":
        if column.name == "flags":
            return "<td>" + "; ".join(
                f'<span title="{escaped(_flag_meaning(f))}">{escaped(f)}</span>'
                for f in value.flags) + "</td>"
        return f"<td>{escaped(value.text)}</td>"
    sort = "" if math.isnan(value.sort_key) else repr(value.sort_key)
    flags = "".join(f'<span class="flag" title="{escaped(_flag_meaning(f))}">{escaped(f)}'
                    "</span>" for f in value.flags)
    td = NUMERIC_TD[:-1] if not failed else '<td class="n check-failed"'
    return f'{td} data-sort="{sort}">{escaped(value.text)}{flags}</td>'


def _flag_meaning(flag: str) -> str:
    from ..analysis.cell_features import CELL_FLAG_TEXT

    return CELL_FLAG_TEXT.get(flag, "")


def _checks_text(failed: list[dict]) -> str:
    return "; ".join(f"{f.get('check')}: {f.get('message')}" for f in failed)


def _shown_value(column_name: str, value: float) -> str:
    from ..columns import CELL_COLUMNS

    declared = next((c for c in CELL_COLUMNS if c.name == column_name), None)
    return shown_number(value, declared.report_decimals if declared else 4)


def _batch_section(record: dict, cells: ColumnTable, keys: list[tuple[str, str]],
                   embed: bool) -> list[str]:
    """The batch figure, inline: every point names its cell on hover and links to it; and
    its file, linked when the page links its figures (or they are PDF)."""
    if not len(cells):
        return []
    from ..figures.batch import batch_features_svg

    groups = record.get("groups") or {}
    svg = batch_features_svg(cell_values(cells), groups.get("members"),
                             groups.get("column", "group"),
                             labels=[cell_name(*key) for key in keys],
                             links=[_anchor(k) for k in range(len(keys))],
                             value_text=_shown_value)
    parts = ['<h2 id="across-cells">Across cells</h2>',
             '<p class="small">Each point is a cell: hover over it to see which, click it to '
             "go to its figures. The short black lines are the group medians.</p>",
             '<p id="hovered-cell" aria-live="polite"></p>', f"<figure>{svg}</figure>"]
    batch = (record.get("figures") or {}).get("batch")
    if batch and (not embed or Path(batch).suffix.lower() not in _MIME):
        link = escaped(Path(batch).as_posix())
        parts.append(f'<p class="small">The same figure as a file: <a href="{link}">{link}</a>'
                     "</p>")
    return parts


def _cell_sections(record: dict, cells: ColumnTable, keys: list[tuple[str, str]],
                   per_cell: dict[tuple[str, str], list[str]], marks: list[list[dict]],
                   folder: Path, embed: bool) -> list[str]:
    """Each cell: its name and group, its flags and failed checks, its figures."""
    figures = record.get("figures") or {}
    members = (record.get("groups") or {}).get("members")
    flags = cells.column("flags") if "flags" in [c.name for c in cells.columns] else []
    parts = []
    if len(cells) and not figures.get("format"):
        parts.append("<p>Figures were not drawn in this run (<code>--no-figures</code>).</p>")
    for k, key in enumerate(keys):
        name = cell_name(*key)
        group = f" ({escaped(members.get(key[0], '(no group)'))})" if members is not None else ""
        parts.append(f'<h2 id="{_anchor(k)}">{escaped(name)}{group}</h2>')
        parts.append(f'<p class="small"><a href="#row-{k}">its row in the table</a></p>')
        own = [f for f in str(flags[k]).split(";") if f] if len(flags) else []
        if own:
            parts.append("<ul>" + "".join(
                f"<li><b>{escaped(f)}</b>: {escaped(_flag_meaning(f))}"
                + (f" ({', '.join(FLAG_COLUMNS[f])})" if f in FLAG_COLUMNS else "") + "</li>"
                for f in own) + "</ul>")
        if marks[k]:
            parts.append('<ul class="failed">' + "".join(
                f"<li>failed check {escaped(f.get('check'))}: {escaped(f.get('message'))}</li>"
                for f in marks[k]) + "</ul>")
        for p in per_cell.get(key, []):
            what = Path(p).stem.replace("_", " ")
            parts.append(_image(folder, p, f"{what} of {name}", embed))
    return parts


def _png_size(path: Path) -> tuple[int, int] | None:
    """Width and height from a PNG's header (its first chunk, IHDR), or None."""
    with open(path, "rb") as fh:
        head = fh.read(24)
    if len(head) < 24 or head[:8] != b"\x89PNG\r\n\x1a\n" or head[12:16] != b"IHDR":
        return None
    return struct.unpack(">II", head[16:24])


def _image(folder: Path, relative: str, alt: str, embed: bool) -> str:
    """An <img> of a figure (embedded, or linked and lazy-loaded), or a link to a PDF."""
    path = folder / relative
    suffix = Path(relative).suffix.lower()
    link = escaped(Path(relative).as_posix())
    if not path.is_file():
        return f'<p class="failed">missing figure: {escaped(relative)}</p>'
    if suffix not in _MIME:
        return f'<p><a href="{link}">{escaped(alt)} ({escaped(suffix[1:].upper())})</a></p>'
    size = _png_size(path) if suffix == ".png" else None
    box = f' width="{size[0]}" height="{size[1]}"' if size else ""
    if embed:
        data = base64.b64encode(path.read_bytes()).decode("ascii")
        src = f'src="data:{_MIME[suffix]};base64,{data}"'
    else:
        src = f'src="{link}" loading="lazy"'
    return (f'<figure><img {src}{box} alt="{escaped(alt)}">'
            f"<figcaption>{link}</figcaption></figure>")


def write_report(path: str | os.PathLike, record: dict, cells: ColumnTable, *,
                 mode: str | None = None, findings: Sequence[dict] = ()) -> Path:
    """Write :func:`report_html` to `path` atomically; figures are found beside it."""
    path = Path(path)
    return write_text_atomic(path, report_html(record, cells, path.parent, mode=mode,
                                               findings=findings))
