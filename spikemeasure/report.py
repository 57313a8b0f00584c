"""The run's report, ``report.html``, and the groups file that sorts cells for it.

The report is one static page: plain HTML with inline CSS, no scripts and no external
resources. PNG and SVG figures are embedded as ``data:`` URIs, so the page can be copied
anywhere or attached to an email; when the figures of a run together exceed
:data:`EMBED_LIMIT_BYTES` (or are PDF, which a page cannot show) they are linked by their
paths relative to the report, which hold as long as the output folder is copied whole.
Every text from a file, a parameter or a message is escaped with :func:`html.escape`.

This module reads only the figure files the run itself wrote, and the groups file.
"""
from __future__ import annotations

import base64
import csv
import html
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

from .columns import CELL_COLUMNS
from .errors import SpikemeasureError, valid_text
from .tables.write import unescape_csv_text, write_text_atomic

__all__ = ["Groups", "GroupsFileError", "read_groups", "cell_values", "report_html",
           "write_report", "EMBED_LIMIT_BYTES"]

#: Figures of a run up to this many bytes in all are embedded in the page; beyond, linked.
EMBED_LIMIT_BYTES = 40_000_000
_MIME = {".png": "image/png", ".svg": "image/svg+xml"}


class GroupsFileError(SpikemeasureError):
    """The groups file cannot be read or is not a table of files and groups."""


@dataclass(frozen=True)
class Groups:
    """Which group each file belongs to, from a groups file.

    Attributes
    ----------
    path : str
        The groups file.
    label : str
        The name of its group column (``genotype``, ``region``, ...).
    mapping : dict
        File (as the tables name it) -> group.
    """

    path: str
    label: str
    mapping: dict[str, str] = field(default_factory=dict)

    def notes(self, files: Sequence[str]) -> list[str]:
        """Messages about files of the run missing from the groups file, and the reverse."""
        run = set(files)
        missing = [f for f in files if f not in self.mapping]
        unknown = [f for f in self.mapping if f not in run]
        out = []
        if missing:
            out.append(f"{self.path}: {len(missing)} measured file(s) not listed, shown as "
                       f"'(no group)': {', '.join(missing[:10])}"
                       + (", ..." if len(missing) > 10 else ""))
        if unknown:
            out.append(f"{self.path}: {len(unknown)} listed file(s) not measured in this run "
                       f"(names must match the `file` column of cells.csv): "
                       f"{', '.join(unknown[:10])}" + (", ..." if len(unknown) > 10 else ""))
        return out


def read_groups(path: str | os.PathLike) -> Groups:
    """Read a groups file: a CSV table with a ``file`` column and one group column.

    Parameters
    ----------
    path : str or path-like
        Comma-separated, UTF-8, a header row naming the two columns, e.g.
        ``file,genotype``; each further row a file, named as in the ``file`` column of
        cells.csv (its path relative to the folder measured), and its group.

    Returns
    -------
    Groups

    Raises
    ------
    GroupsFileError
        If the file cannot be read, is not UTF-8, has no ``file`` column, has not exactly one
        other column, or a row has an empty file or group, the wrong number of cells, or names
        a file already given a different group. The message names the file and the line.
    """
    name = str(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            rows = list(csv.reader(fh))
    except OSError as exc:
        raise GroupsFileError(f"{name}: cannot read the groups file "
                              f"({exc.strerror or exc})") from exc
    except UnicodeDecodeError as exc:
        raise GroupsFileError(f"{name}: the groups file is not UTF-8 text; save it as UTF-8 "
                              "CSV") from exc
    except csv.Error as exc:
        raise GroupsFileError(f"{name}: not a CSV table ({exc})") from exc
    rows = [r for r in rows if any(cell.strip() for cell in r)]
    if not rows:
        raise GroupsFileError(f"{name}: the groups file is empty; it needs a header row "
                              "`file,GROUP` and a row per file")
    header = [h.strip() for h in rows[0]]
    if "file" not in header:
        raise GroupsFileError(f"{name}: no `file` column in the header row ({', '.join(header)});"
                              " the first row must name the columns, e.g. `file,genotype`")
    others = [h for h in header if h != "file"]
    if len(others) != 1 or header.count("file") != 1 or not others[0]:
        raise GroupsFileError(f"{name}: the header must name `file` and exactly one group "
                              f"column (got {', '.join(header)})")
    fi, gi = header.index("file"), header.index(others[0])
    mapping: dict[str, str] = {}
    for line, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise GroupsFileError(f"{name}, line {line}: {len(row)} cells, the header has "
                                  f"{len(header)}")
        file = row[fi].strip().replace("\\", "/")
        file = file[2:] if file.startswith("./") else file
        file = unescape_csv_text(file)  # copied from cells.csv: '=cell.nwb is =cell.nwb
        group = row[gi].strip()
        if not file or not group:
            raise GroupsFileError(f"{name}, line {line}: the file and its {others[0]} must "
                                  "both be given")
        if mapping.get(file, group) != group:
            raise GroupsFileError(f"{name}, line {line}: {file} is in {mapping[file]!r} "
                                  f"already, now in {group!r}")
        mapping[file] = group
    return Groups(name, others[0], mapping)


def _float(text: str) -> float:
    try:
        return float(text) if text != "" else float("nan")
    except ValueError:
        return float("nan")


def cell_values(cell_rows: Sequence[Sequence[str]]) -> list[dict]:
    """Rows of cells.csv (as formatted text) as dicts: ``file`` and every numeric column as a
    float (NaN when empty)."""
    names = [c.name for c in CELL_COLUMNS]
    out = []
    for row in cell_rows:
        values = dict(zip(names, row))
        out.append({k: (v if k in ("file", "flags") else _float(v)) for k, v in values.items()})
    return out


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


def report_html(record: dict, cell_rows: Sequence[Sequence[str]],
                folder: str | os.PathLike) -> str:
    """The text of ``report.html``.

    Parameters
    ----------
    record : dict
        The run record, as written to run.json (inputs, failures, parameters, totals,
        figures, groups, notes).
    cell_rows : sequence of sequence of str
        The rows of cells.csv, formatted as in the file.
    folder : str or path-like
        The output folder; figure paths in `record` are relative to it.
    """
    folder = Path(folder)
    totals = record.get("totals", {})
    inputs = record.get("inputs", [])
    failures = record.get("failures", [])
    figures = record.get("figures") or {}
    per_cell = figures.get("cells") or {}
    listed = [p for paths in per_cell.values() for p in paths]
    if figures.get("batch"):
        listed.append(figures["batch"])
    size = sum((folder / p).stat().st_size for p in listed if (folder / p).is_file())
    embed = size <= EMBED_LIMIT_BYTES
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
    parts.append(_table([], [(f"<b>{_e(k)}</b>", _e(v)) for k, v in summary_rows]))
    parts.append(f'<h3 id="failures">Failures and problems ({len(failures)})</h3>')
    if failures:
        parts.append(_table(["file", "stage", "reason"],
                            [(_e(f.get("file")), _e(f.get("stage")),
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
    parts.append(f'<h2 id="cells">Cells ({len(cell_rows)})</h2>')
    anchors = {f: f"cell-{k}" for k, f in enumerate(per_cell)}
    header = [c.name for c in CELL_COLUMNS]
    members = (groups or {}).get("members")
    if members is not None:
        header.insert(1, groups["column"])
    rows = []
    for row in cell_rows:
        file = row[0]
        name = (f'<a href="#{anchors[file]}">{_e(file)}</a>' if file in anchors else _e(file))
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
    if not figures.get("format"):
        parts.append("<p>Figures were not drawn in this run (<code>--no-figures</code>).</p>")
    else:
        if figures.get("batch"):
            parts.append('<h2 id="across-cells">Across cells</h2>')
            parts.append(_image(folder, figures["batch"], "cell features across cells", embed))
        if not embed:
            parts.append(f"<p>The figures ({size / 1e6:.0f} MB) are linked, not embedded: copy "
                         "the whole output folder with this page.</p>")
        for file, paths in per_cell.items():
            parts.append(f'<h2 id="{anchors[file]}">{_e(file)}</h2>')
            for p in paths:
                what = Path(p).stem.replace("_", " ")
                parts.append(_image(folder, p, f"{what} of {file}", embed))
    parts += ["</body>", "</html>", ""]
    return "\n".join(parts)


def write_report(path: str | os.PathLike, record: dict,
                 cell_rows: Sequence[Sequence[str]]) -> Path:
    """Write :func:`report_html` to `path` atomically; figures are found beside it."""
    path = Path(path)
    return write_text_atomic(path, report_html(record, cell_rows, path.parent))
