"""The run's record in the report: the summary at the top (status, counts, failures) and the
full record at the end (parameters, versions, inputs, failures, notes)."""
from __future__ import annotations

import html
from typing import Sequence

from ..errors import valid_text

__all__ = ["escaped", "html_table", "run_status", "top_summary", "record_section", "cell_name"]

#: What the report says of each run.json status.
_RUN_STATUS_TEXT = {
    "running": "in progress (or killed): this report does not hold the run's results yet; "
               "run.json and the tables are refreshed as files finish",
    "interrupted": "interrupted: the tables hold the files finished",
    "failed": "stopped by an error: the tables hold the files finished",
    "complete": "complete",
}
NUMERIC_TD = '<td class="n">'
#: Failures listed at the top of the page; the rest are in the run record at the end.
TOP_FAILURES = 5


def escaped(value) -> str:
    """Any value as HTML text: escaped (quotes too), lone surrogates written out."""
    return html.escape(valid_text("" if value is None else str(value)), quote=True)


def html_table(header: Sequence[str], rows: Sequence[Sequence[str]],
               numeric: Sequence[bool] = ()) -> str:
    """A plain table of HTML cells (already escaped) under an escaped header."""
    head = ("<thead><tr>" + "".join(f"<th>{escaped(h)}</th>" for h in header)
            + "</tr></thead>") if header else ""
    body = []
    for row in rows:
        cells = [(NUMERIC_TD if k < len(numeric) and numeric[k] else "<td>") + f"{v}</td>"
                 for k, v in enumerate(row)]
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f'<div class="wide"><table>{head}<tbody>' + "".join(body) + "</tbody></table></div>"


def cell_name(file: str, electrode: str) -> str:
    return f"{file}, electrode {electrode}" if electrode else file


def run_status(record: dict) -> str:
    return _RUN_STATUS_TEXT.get(record.get("status") or (
        "interrupted" if record.get("interrupted") else "complete"), "unknown")


def top_summary(record: dict, n_cells: int) -> list[str]:
    """One line on the run, and its failures (the first few) when there are any."""
    totals = record.get("totals", {})
    failures = record.get("failures", [])
    inputs = record.get("inputs", [])
    counts = (f"{len(inputs)} file{'' if len(inputs) == 1 else 's'}, "
              f"{totals.get('files_measured', 0) + totals.get('files_reused', 0)} measured "
              f"({totals.get('files_reused', 0)} kept from an earlier run), "
              f"{totals.get('files_failed', 0)} failed; {n_cells} cell"
              f"{'' if n_cells == 1 else 's'}, {totals.get('sweeps_measured', 0)} sweeps, "
              f"{totals.get('spikes', 0)} spikes")
    parts = [f'<p class="status">Run {escaped(run_status(record))}: {escaped(counts)}. '
             f'Started {escaped(record.get("started"))}; parameters, versions and inputs are '
             'in the <a href="#run">run record</a> at the end.</p>']
    if failures:
        shown = failures[:TOP_FAILURES]
        more = len(failures) - len(shown)
        parts.append(f'<div class="problems"><b>{len(failures)} problem'
                     f'{"" if len(failures) == 1 else "s"}</b> (all in '
                     '<a href="#failures">failures</a>):<ul>'
                     + "".join(f'<li>{escaped(f.get("message"))}</li>' for f in shown)
                     + (f"<li>... and {more} more</li>" if more else "") + "</ul></div>")
    return parts


def record_section(record: dict) -> list[str]:
    """The run record: summary, failures, notes, files, parameters."""
    totals = record.get("totals", {})
    inputs = record.get("inputs", [])
    failures = record.get("failures", [])
    versions = record.get("versions", {})
    summary_rows = [
        ("started", record.get("started")), ("duration", f"{record.get('seconds', 0):g} s"),
        ("status", run_status(record)),
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
    parts = ['<h2 id="run">Run record</h2>',
             html_table([], [(f"<b>{escaped(k)}</b>", escaped(v)) for k, v in summary_rows])]
    parts.append(f'<h3 id="failures">Failures and problems ({len(failures)})</h3>')
    if failures:
        parts.append(html_table(["file", "stage", "reason"],
                                [(escaped(cell_name(f.get("file"), f.get("electrode", ""))),
                                  escaped(f.get("stage")),
                                  f'<span class="failed">{escaped(f.get("message"))}</span>')
                                 for f in failures]))
    else:
        parts.append("<p>None.</p>")
    if record.get("notes"):
        parts.append("<h3>Notes</h3><ul>"
                     + "".join(f"<li>{escaped(n)}</li>" for n in record["notes"]) + "</ul>")
    parts.append("<h3>Files</h3>")
    parts.append(html_table(
        ["file", "status", "format", "sweeps", "measured", "spikes", "SHA-256"],
        [(escaped(i.get("file")), escaped(i.get("status")), escaped(i.get("format") or ""),
          escaped(i.get("sweeps", "")), escaped(i.get("sweeps_measured", "")),
          escaped(i.get("spikes", "")), f'<span class="small">{escaped(i.get("sha256", ""))}'
          "</span>") for i in inputs],
        numeric=(False, False, False, True, True, True)))
    parts.append("<h3>Parameters</h3>")
    parts.append(html_table(["parameter", "value"],
                            [(escaped(k), escaped("not set" if v is None else v))
                             for k, v in record.get("parameters", {}).items()]))
    return parts
