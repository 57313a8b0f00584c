"""The run's report, ``report.html``.

The report is one static page: plain HTML with inline CSS, no scripts and no external
resources. PNG and SVG figures are embedded as ``data:`` URIs, so the page can be copied
anywhere or attached to an email; when the figures of a run together exceed
:data:`EMBED_LIMIT_BYTES` (or are PDF, which a page cannot show) they are linked by their
paths relative to the report, which hold as long as the output folder is copied whole.
Every text from a file, a parameter or a message is escaped with :func:`html.escape`.

The cells come as typed columns (:class:`~spikemeasure.run.outcome.ColumnTable`) and are
formatted here as cells.csv formats them. This module reads only the figure files the run
itself wrote.
"""
from __future__ import annotations

import base64
import html
import os
from pathlib import Path
from typing import Sequence

from ..columns import CELL_COLUMNS
from ..errors import valid_text
from ..tables.write import write_text_atomic
from ..tables.typed import ColumnTable, column_kind

__all__ = ["cell_values", "report_html", "write_report", "EMBED_LIMIT_BYTES"]

#: Figures of a run up to this many bytes in all are embedded in the page; beyond, linked.
EMBED_LIMIT_BYTES = 40_000_000
_MIME = {".png": "image/png", ".svg": "image/svg+xml"}


def cell_values(cells: ColumnTable) -> list[dict]:
    """The cells table as one dict per cell: ``file``, ``flags`` and every numeric column as a
    float (NaN when not measured)."""
    names = [c.name for c in cells.columns]
    text = {c.name for c in cells.columns if column_kind(c) == "text"}
    columns = [cells.column(n) if n in text else cells.column(n).tolist() for n in names]
    return [{n: (v if n in text else float(v)) for n, v in zip(names, row)}
            for row in zip(*columns)]


_CSS = """
body { font-family: system-ui, sans-serif; margin: 1.5em auto; max-width: 1200px;
       padding: 0 1em; color: #222; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; } h2 { margin-top: 1.6em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5em 0; font-size: 0.85em; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.5em; text-align: left; vertical-align: top; }
th { background: #f2f2f2; } td.n { text-align: right; font-variant-numeric: tabular-nums; }
.wide { overflow-x: auto; } .caution { background: #fff4e0; padding: 0.5em 0.8em; }
.failed { color: #a00000; } figure { margin: 0.8em 0; } img { max-width: 100%; height: auto; }
figcaption { font-size: 0.85em; color: #555; } .small { font-size: 0.85em; color: #555; }
"""


def _e(value) -> str:
    return html.escape(valid_text("" if value is None else str(value)), quote=True)


def _table(header: Sequence[str], rows: Sequence[Sequence], numeric: Sequence[bool] = ()
           ) -> str:
    head = "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in header) + "</tr>" if header else ""
    body = []
    for row in rows:
        cells = []
        for k, v in enumerate(row):
            cls = ' class="n"' if k < len(numeric) and numeric[k] else ""
            cells.append(f"<td{cls}>{v}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f'<div class="wide"><table>{head}' + "".join(body) + "</table></div>"


def _image(folder: Path, relative: str, alt: str, embed: bool) -> str:
    """An <img> of a figure (embedded or linked), or a link to a PDF."""
    path = folder / relative
    suffix = Path(relative).suffix.lower()
    link = _e(Path(relative).as_posix())
    if not path.is_file():
        return f'<p class="failed">missing figure: {_e(relative)}</p>'
    if suffix not in _MIME:
        return f'<p><a href="{link}">{_e(alt)} ({_e(suffix[1:].upper())})</a></p>'
    if embed:
        data = base64.b64encode(path.read_bytes()).decode("ascii")
        src = f"data:{_MIME[suffix]};base64,{data}"
    else:
        src = link
    return (f'<figure><img src="{src}" alt="{_e(alt)}">'
            f'<figcaption>{_e(Path(relative).as_posix())}</figcaption></figure>')


#: What the report says of each run.json status.
_RUN_STATUS_TEXT = {
    "running": "in progress (or killed): this report does not hold the run's results yet; "
               "run.json and the tables are refreshed as files finish",
    "interrupted": "interrupted: the tables hold the files finished",
    "failed": "stopped by an error: the tables hold the files finished",
    "complete": "complete",
}


def report_html(record: dict, cells: ColumnTable, folder: str | os.PathLike) -> str:
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

    Returns
    -------
    str
        The page: the run (summary, failures, notes, files, parameters), the cells table,
        and the figures.
    """
    inputs = record.get("inputs", [])
    per_file = (record.get("figures") or {}).get("cells") or {}
    figured = _cell_figures(per_file, cells)
    anchors = {cell: f"cell-{k}" for k, cell in enumerate(figured)}
    title = f"spikemeasure report: {len(inputs)} file" + ("" if len(inputs) == 1 else "s")
    parts = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>",
        f"<h1>{_e(title)}</h1>",
        '<p class="caution">Research software: these results need review by a qualified '
        "person, who looks at the traces below; not for clinical decisions.</p>",
        '<h2 id="run">Run</h2>',
    ]
    parts += _run_section(record)
    parts += _cells_section(record, cells, anchors)
    parts += _figures_section(record, Path(folder), figured, anchors)
    parts += ["</body>", "</html>", ""]
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


def _cell_name(file: str, electrode: str) -> str:
    return f"{file}, electrode {electrode}" if electrode else file


def _run_section(record: dict) -> list[str]:
    """The run's summary, failures, notes, files and parameters."""
    totals = record.get("totals", {})
    inputs = record.get("inputs", [])
    failures = record.get("failures", [])
    versions = record.get("versions", {})
    status = _RUN_STATUS_TEXT.get(record.get("status") or (
        "interrupted" if record.get("interrupted") else "complete"), "unknown")
    summary_rows = [
        ("started", record.get("started")), ("duration", f"{record.get('seconds', 0):g} s"),
        ("status", status),
        ("command", " ".join(map(str, record.get("command") or []))),
        ("versions", ", ".join(f"{k} {v}" for k, v in versions.items())),
        ("project file", record.get("config_file") or "none"),
        ("files", len(inputs)),
        ("measured", totals.get("files_measured", 0)),
        ("kept from an earlier run", totals.get("files_reused", 0)),
        ("failed", totals.get("files_failed", 0)),
        ("not measured (interrupted)", sum(1 for i in inputs
                                           if str(i.get("status", "")).startswith("not"))),
        ("sweeps measured", totals.get("sweeps_measured", 0)),
        ("spikes", totals.get("spikes", 0)),
        ("problems", len(failures)),
    ]
    groups = record.get("groups")
    if groups:
        summary_rows.append(("groups", f"{groups['column']} from {groups['file']}"))
    parts = [_table([], [(f"<b>{_e(k)}</b>", _e(v)) for k, v in summary_rows])]
    parts.append(f'<h3 id="failures">Failures and problems ({len(failures)})</h3>')
    if failures:
        parts.append(_table(["file", "stage", "reason"],
                            [(_e(_cell_name(f.get("file"), f.get("electrode", ""))),
                              _e(f.get("stage")),
                              f'<span class="failed">{_e(f.get("message"))}</span>')
                             for f in failures]))
    else:
        parts.append("<p>None.</p>")
    if record.get("notes"):
        parts.append("<h3>Notes</h3><ul>" + "".join(f"<li>{_e(n)}</li>" for n in record["notes"])
                     + "</ul>")
    parts.append("<h3>Files</h3>")
    parts.append(_table(["file", "status", "format", "sweeps", "measured", "spikes", "SHA-256"],
                        [(_e(i.get("file")), _e(i.get("status")), _e(i.get("format") or ""),
                          _e(i.get("sweeps", "")), _e(i.get("sweeps_measured", "")),
                          _e(i.get("spikes", "")), f'<span class="small">{_e(i.get("sha256", ""))}'
                          "</span>") for i in inputs],
                        numeric=(False, False, False, True, True, True)))
    parts.append("<h3>Parameters</h3>")
    parts.append(_table(["parameter", "value"], [(_e(k), _e("not set" if v is None else v))
                                                 for k, v in record.get("parameters", {}).items()]))
    return parts


def _cells_section(record: dict, cells: ColumnTable, anchors: dict[str, str]) -> list[str]:
    """The cells table, formatted as cells.csv, with each file's group when there are groups."""
    cell_rows = cells.formatted_rows()
    parts = [f'<h2 id="cells">Cells ({len(cell_rows)})</h2>']
    groups = record.get("groups")
    header = [c.name for c in CELL_COLUMNS]
    members = (groups or {}).get("members")
    if members is not None:
        header.insert(1, groups["column"])
    rows = []
    for file, electrode, row in zip(cells.column("file"), cells.column("electrode"), cell_rows):
        cell = (file, electrode)
        name = (f'<a href="#{anchors[cell]}">{_e(row[0])}</a>' if cell in anchors
                else _e(row[0]))
        group = [_e(members.get(file, "(no group)"))] if members is not None else []
        rows.append([name] + group + [_e(v) for v in row[1:]])
    if rows:
        parts.append('<p class="small">Units are in the column names; every column is defined '
                     "in docs/measurements.md (<code>spikemeasure columns</code>).</p>")
        numeric = [c.decimals is not None or c.name == "sweeps" for c in CELL_COLUMNS[1:]]
        parts.append(_table(header, rows, numeric=[False] + [False] * (members is not None)
                            + numeric))
    else:
        parts.append("<p>No cell could be measured.</p>")
    return parts


def _figures_section(record: dict, folder: Path, per_cell: dict[tuple[str, str], list[str]],
                     anchors: dict[tuple[str, str], str]) -> list[str]:
    """The batch figure and each cell's figures, embedded up to EMBED_LIMIT_BYTES in all."""
    figures = record.get("figures") or {}
    if not figures.get("format"):
        return ["<p>Figures were not drawn in this run (<code>--no-figures</code>).</p>"]
    listed = [p for paths in per_cell.values() for p in paths]
    if figures.get("batch"):
        listed.append(figures["batch"])
    size = sum((folder / p).stat().st_size for p in listed if (folder / p).is_file())
    embed = size <= EMBED_LIMIT_BYTES
    parts = []
    if figures.get("batch"):
        parts.append('<h2 id="across-cells">Across cells</h2>')
        parts.append(_image(folder, figures["batch"], "cell features across cells", embed))
    if not embed:
        parts.append(f"<p>The figures ({size / 1e6:.0f} MB) are linked, not embedded: copy "
                     "the whole output folder with this page.</p>")
    for cell, paths in per_cell.items():
        name = _cell_name(*cell)
        parts.append(f'<h2 id="{anchors[cell]}">{_e(name)}</h2>')
        for p in paths:
            what = Path(p).stem.replace("_", " ")
            parts.append(_image(folder, p, f"{what} of {name}", embed))
    return parts


def write_report(path: str | os.PathLike, record: dict, cells: ColumnTable) -> Path:
    """Write :func:`report_html` to `path` atomically; figures are found beside it."""
    path = Path(path)
    return write_text_atomic(path, report_html(record, cells, path.parent))
