"""Checks of a run's tables: quality limits a lab sets, and regression against accepted results.

The job behind ``spikemeasure check`` and ``spikemeasure accept``:

- :func:`read_tables` reads spikes.csv, sweeps.csv, cells.csv (and errors.csv, run.json) of a
  run's folder back as rows of text;
- :func:`quality_cases` applies the limits of ``[quality]`` (:data:`QUALITY_RULES`), one case
  per file and rule;
- :func:`regression_cases` compares the tables with the accepted ones, one case per file;
- :func:`accept_results` saves a run's tables as the accepted results.

Results are :class:`Finding` (one thing that failed) grouped in :class:`CaseResult` (one
file and one check), collected in a :class:`CheckReport`. Nothing here prints or exits.
"""
from __future__ import annotations

import csv
import json
import math
import os
import tempfile
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable, Sequence

from .columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS, Column
from .config import CheckSettings, Tolerance
from .errors import SpikemeasureError
from .output import TEXT_COLUMN_NAMES, unescape_csv_text
from .quality_rules import QUALITY_RULES, QualityRule

__all__ = ["CheckInputError", "Finding", "CaseResult", "CheckReport", "RunTables",
           "QualityRule", "QUALITY_RULES", "MEASURED_CHECK", "REGRESSION_CHECK",
           "TABLE_FILES", "read_tables", "quality_cases", "regression_cases", "check_run",
           "accept_results", "accepted_folder_problem", "check_finished",
           "ACCEPTED_FILES", "COMPLETE_STATUS", "default_tolerance", "report_text", "report_dict"]

#: The tables a run's folder must hold, with their key columns and declarations.
TABLE_FILES: dict[str, tuple[tuple[str, ...], tuple[Column, ...]]] = {
    "spikes.csv": (("file", "sweep", "spike"), SPIKE_COLUMNS),
    "sweeps.csv": (("file", "sweep"), SWEEP_COLUMNS),
    "cells.csv": (("file",), CELL_COLUMNS),
}
ERRORS_FILE = "errors.csv"
RUN_RECORD_FILE = "run.json"

#: Name of the check that every file and sweep of the run was measured (always applied).
MEASURED_CHECK = "measured"
#: Name of the comparison with the accepted results.
REGRESSION_CHECK = "regression"


class CheckInputError(SpikemeasureError):
    """The tables or the accepted results are missing, unreadable or not spikemeasure's."""


@dataclass(frozen=True)
class Finding:
    """One thing that failed.

    Attributes
    ----------
    check : str
        The rule (a ``[quality]`` key), ``measured`` or ``regression``.
    file : str
        The recording, as in the tables.
    sweep, spike : int or None
        Where in the file, when the finding concerns a sweep or a spike.
    column : str or None
        The column concerned.
    message : str
        What is wrong, in a sentence naming the values.
    accepted, value, limit : str or None
        The accepted value, the value of this run, and the limit or tolerance, as text.
    """

    check: str
    file: str
    sweep: int | None
    spike: int | None
    column: str | None
    message: str
    accepted: str | None = None
    value: str | None = None
    limit: str | None = None


@dataclass(frozen=True)
class CaseResult:
    """One file under one check (a JUnit test case): passed when it has no findings."""

    suite: str
    check: str
    file: str
    findings: tuple[Finding, ...] = ()

    @property
    def passed(self) -> bool:
        return not self.findings


@dataclass
class CheckReport:
    """Everything ``check`` found."""

    results_dir: str
    accepted_dir: str | None
    config_file: str | None
    cases: list[CaseResult] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def findings(self) -> list[Finding]:
        return [f for c in self.cases for f in c.findings]

    @property
    def failed_cases(self) -> list[CaseResult]:
        return [c for c in self.cases if not c.passed]

    @property
    def passed(self) -> bool:
        return not self.failed_cases


@dataclass(frozen=True)
class RunTables:
    """A run's tables read back: rows of text by column name, in file order."""

    folder: Path
    spikes: list[dict]
    sweeps: list[dict]
    cells: list[dict]
    errors: list[dict]
    record: dict
    headers: dict = field(default_factory=dict)

    def table(self, file_name: str) -> list[dict]:
        return {"spikes.csv": self.spikes, "sweeps.csv": self.sweeps,
                "cells.csv": self.cells}[file_name]

    def files(self) -> list[str]:
        """Every recording the run names (measured or failed), in order of first mention."""
        names = [r["file"] for r in self.cells + self.sweeps + self.errors]
        names += [i["file"] for i in self.record.get("inputs", []) if "file" in i]
        return list(dict.fromkeys(names))


def _read_csv(path: Path, what: str, required: tuple[str, ...]) -> tuple[list[str], list[dict]]:
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            reader = csv.DictReader(fh)
            rows = list(reader)
            header = list(reader.fieldnames or [])
    except FileNotFoundError:
        raise CheckInputError(f"{path}: no such file; {what}") from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise CheckInputError(f"{path}: cannot be read as CSV ({exc})") from exc
    missing = [c for c in required if c not in header]
    if missing:
        raise CheckInputError(
            f"{path}: no column {', '.join(missing)}; it was not written by this version of "
            f"spikemeasure (measure again, or accept the results again)")
    for k, row in enumerate(rows, start=2):
        if None in row or any(v is None for v in row.values()):
            raise CheckInputError(f"{path}, line {k}: the number of cells differs from the "
                                  f"header; the file is damaged (measure again)")
        for name in TEXT_COLUMN_NAMES.intersection(row):  # '=cell.nwb back to =cell.nwb
            row[name] = unescape_csv_text(row[name])
    return header, rows


def read_tables(folder: str | os.PathLike, what: str = "results", *,
                suggest_out: bool = True) -> RunTables:
    """Read a run's tables back from its folder.

    Parameters
    ----------
    folder : str or path-like
        A folder written by ``spikemeasure measure`` (or by :func:`accept_results`).
    what : str, optional
        ``"results"`` or ``"accepted results"``, for messages. Accepted results may come
        from an older version: only their key columns must be there.
    suggest_out : bool, optional
        Whether messages suggest ``check``'s ``--out`` (measure recordings first).

    Returns
    -------
    RunTables

    Raises
    ------
    CheckInputError
        If the folder or a table is missing or unreadable, or a table lacks a column of this
        version's declaration (naming the file and the column).
    """
    base = Path(folder)
    if not base.is_dir():
        hint = ("run `spikemeasure accept RESULTS_DIR` to save a run as the accepted results, "
                "or set enabled = false under [regression] in the project file"
                if what == "accepted results" else
                "give a folder written by `spikemeasure measure --out`"
                + (", or recordings with --out DIR to measure them first" if suggest_out
                   else ""))
        raise CheckInputError(f"{base}: no such folder of {what}; {hint}")
    tables, headers = {}, {}
    for name, (keys, columns) in TABLE_FILES.items():
        if what == "accepted results":
            hint = ("the folder does not hold accepted results (`spikemeasure accept "
                    "RESULTS_DIR` writes them)")
        else:
            hint = (f"the folder does not hold {what} (give the folder `spikemeasure measure "
                    f"--out` wrote" + (", or recordings with --out DIR to measure them first)"
                                       if suggest_out else ")"))
        # accepted results may come from an older version: only their keys must be there
        required = keys if what == "accepted results" else tuple(c.name for c in columns)
        headers[name], tables[name] = _read_csv(base / name, hint, required)
    errors: list[dict] = []
    if (base / ERRORS_FILE).exists():
        _, errors = _read_csv(base / ERRORS_FILE, "", ("file", "stage", "message"))
    record: dict = {}
    if (base / RUN_RECORD_FILE).exists():
        try:
            record = json.loads((base / RUN_RECORD_FILE).read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise CheckInputError(f"{base / RUN_RECORD_FILE}: not a readable run record "
                                  f"({exc})") from exc
        if not isinstance(record, dict):
            raise CheckInputError(f"{base / RUN_RECORD_FILE}: not a run record (a JSON object)")
    return RunTables(base, tables["spikes.csv"], tables["sweeps.csv"], tables["cells.csv"],
                     errors, record, headers)


# --------------------------------------------------------------------------- quality


def _number(text: str | None) -> float:
    """A CSV cell as a float: NaN for an empty (unmeasured) cell."""
    if text is None or text.strip() == "":
        return math.nan
    try:
        return float(text)
    except ValueError:
        return math.nan


def _limit_text(limit) -> str:
    if isinstance(limit, tuple):
        return f"{limit[0]:g} to {limit[1]:g}"
    return f"{limit:g}"


def _int_or_none(text: str | None) -> int | None:
    try:
        return int(text) if text not in (None, "") else None
    except ValueError:
        return None


def _apply_rule(rule: QualityRule, limit, file: str, rows: dict[str, list[dict]]
                ) -> list[Finding]:
    requirement = rule.text.format(limit=_limit_text(limit))
    limit_text = _limit_text(limit)
    if rule.key == "min_highest_peak_mv":
        spikes = rows["spikes.csv"]
        peaks = [(_number(r["peak_mv"]), r) for r in spikes]
        peaks = [(v, r) for v, r in peaks if not math.isnan(v)]
        if not peaks:
            return [Finding(rule.key, file, None, None, rule.column,
                            f"no spike with a measured peak in the file; required: "
                            f"{requirement}", value="", limit=limit_text)]
        value, row = max(peaks, key=lambda p: p[0])
        if rule.test(value, limit):
            return []
        return [Finding(rule.key, file, _int_or_none(row["sweep"]), _int_or_none(row["spike"]),
                        rule.column, f"highest spike peak {value:g} mV is below {limit_text} mV; "
                        f"required: {requirement}", value=row["peak_mv"], limit=limit_text)]
    findings = []
    for row in rows[rule.table]:
        text = row[rule.column]
        value = _number(text)
        sweep = _int_or_none(row.get("sweep"))
        if math.isnan(value):
            findings.append(Finding(rule.key, file, sweep, None, rule.column,
                                    f"{rule.column} is empty (not measured), so the limit "
                                    f"cannot be checked; required: {requirement}",
                                    value=text, limit=limit_text))
        elif not rule.test(value, limit):
            findings.append(Finding(rule.key, file, sweep, None, rule.column,
                                    f"{rule.column} = {text}; required: {requirement}",
                                    value=text, limit=limit_text))
    return findings


def quality_cases(tables: RunTables, limits: dict) -> list[CaseResult]:
    """Apply the measured check and every configured quality limit, file by file.

    Parameters
    ----------
    tables : RunTables
    limits : dict
        ``CheckSettings.quality``: limit by ``[quality]`` key.

    Returns
    -------
    list of CaseResult
        Per file (in the order of the run): first ``measured`` (every sweep of the file was
        read and measured: no row for it in errors.csv, and run.json does not list it as
        not measured, as after an interrupted run), then one case per limit, in the
        order of :data:`QUALITY_RULES`. A file that could not be measured at all fails every
        limit, since none can be checked.
    """
    by_file: dict[str, dict[str, list[dict]]] = {}
    for name in TABLE_FILES:
        for row in tables.table(name):
            by_file.setdefault(row["file"], {n: [] for n in TABLE_FILES})[name].append(row)
    errors: dict[str, list[dict]] = {}
    for row in tables.errors:
        errors.setdefault(row["file"], []).append(row)
    unfinished = {i["file"]: i["status"] for i in tables.record.get("inputs", [])
                  if str(i.get("status", "")).startswith("not measured")}
    cases = []
    for file in tables.files():
        rows = by_file.get(file, {n: [] for n in TABLE_FILES})
        failed = [Finding(MEASURED_CHECK, file, _stage_sweep(e["stage"]), None, None,
                          e["message"]) for e in errors.get(file, [])]
        if file in unfinished:
            failed.append(Finding(MEASURED_CHECK, file, None, None, None,
                                  f"{file}: not measured ({unfinished[file]}); run the same "
                                  f"measure command again to finish the run"))
        cases.append(CaseResult("quality", MEASURED_CHECK, file, tuple(failed)))
        for rule in QUALITY_RULES:
            if rule.key not in limits:
                continue
            if not rows["sweeps.csv"]:
                findings = [Finding(rule.key, file, None, None, rule.column,
                                    "the file has no measured sweep, so the limit cannot be "
                                    "checked")]
            else:
                findings = _apply_rule(rule, limits[rule.key], file, rows)
            cases.append(CaseResult("quality", rule.key, file, tuple(findings)))
    return cases


def _stage_sweep(stage: str) -> int | None:
    if stage.startswith("sweep "):
        return _int_or_none(stage[len("sweep "):])
    return None


# --------------------------------------------------------------------------- regression


def default_tolerance(column: Column) -> Tolerance | None:
    """The built-in tolerance of a column: one unit in the last digit written.

    Parameters
    ----------
    column : Column

    Returns
    -------
    Tolerance or None
        ``10 ** -decimals`` (absolute) for a column written with decimals, so a value that
        rounds the other way on another machine passes; 0 for a whole-number column; None
        for text, which is compared exactly.
    """
    if column.name in ("file", "flags"):
        return None
    if column.decimals is None:
        return Tolerance(0.0)
    return Tolerance(10.0 ** -column.decimals)


def _tolerance_for(column: Column, settings: CheckSettings) -> Tolerance | None:
    if column.name in settings.tolerances:
        return settings.tolerances[column.name]
    builtin = default_tolerance(column)
    if builtin is not None and settings.default_tolerance is not None:
        return settings.default_tolerance
    return builtin


def _compare_value(accepted: str, value: str, tolerance: Tolerance | None,
                   floor: Tolerance | None = None) -> bool:
    """True when the two cells agree: both empty, equal text, or numbers within tolerance
    (or within `floor`, the resolution the CSV is written with)."""
    if accepted.strip() == value.strip():
        return True
    if tolerance is None:
        return False
    a, b = _number(accepted), _number(value)
    if math.isnan(a) or math.isnan(b):  # empty against a number, or text
        return False
    return tolerance.allows(a, b) or (floor is not None and floor.allows(a, b))


def regression_cases(new: RunTables, accepted: RunTables, settings: CheckSettings
                     ) -> tuple[list[CaseResult], list[str]]:
    """Compare a run's tables with the accepted ones, file by file.

    Parameters
    ----------
    new, accepted : RunTables
    settings : CheckSettings
        Tolerances and whether new files pass.

    Returns
    -------
    cases : list of CaseResult
        One ``regression`` case per file of either run (accepted files first, in their
        order, then new ones).
    notes : list of str
        Differences that fail nothing: columns not in the accepted tables, and parameters
        or versions that changed since the results were accepted.

    Notes
    -----
    Rows are matched by their key columns: (file, sweep, spike) in spikes.csv, (file, sweep)
    in sweeps.csv, (file) in cells.csv; the order of the rows does not matter. A file, a
    sweep or a cell row present in one run only fails. A key found more than once in a table
    (a duplicated row, or rows sharing a key) fails, naming the key, the side and the lines;
    only its first row is compared. When a sweep's spike count (distinct spike keys) changed,
    the spikes added or lost fail and that sweep's spikes are not compared value by value
    (their indices no longer pair the same spikes). Columns that this version does not write
    are not compared, and a note names them. Every other
    cell is compared: equal text passes (two empty cells too); two numbers pass within the
    column's tolerance (:func:`default_tolerance` unless the project file sets one), and
    never fail by less than :func:`default_tolerance`, the resolution the CSV is written with
    (so a relative tolerance still passes rounding of a value near zero); an empty cell
    against a number fails.
    """
    notes: list[str] = []
    findings: dict[str, list[Finding]] = {}
    accepted_files = accepted.files()
    new_files = new.files()
    measured_new = {r["file"] for r in new.sweeps}
    measured_old = {r["file"] for r in accepted.sweeps}
    for file in accepted_files:
        findings[file] = []
        if file not in new_files:
            findings[file].append(Finding(REGRESSION_CHECK, file, None, None, None,
                                          "file removed: in the accepted results but not in "
                                          "this run"))
        elif file in measured_old and file not in measured_new:
            findings[file].append(Finding(REGRESSION_CHECK, file, None, None, None,
                                          "file lost: in the accepted results, but this run "
                                          "measured none of its sweeps (see errors.csv)"))
        elif file in measured_new and file not in measured_old:
            findings[file].append(Finding(REGRESSION_CHECK, file, None, None, None,
                                          "file gained: measured in this run, but not in the "
                                          "accepted run (accept the run again to add it)"))
    for file in new_files:
        if file not in findings:
            findings[file] = []
            if not settings.allow_new_files:
                findings[file].append(Finding(
                    REGRESSION_CHECK, file, None, None, None,
                    "file added: not in the accepted results (accept the run again to add "
                    "it, or set allow_new_files = true under [regression])"))
    # rows are compared only for files measured in both runs; the rest failed above
    common = set(accepted_files) & set(new_files) & measured_new & measured_old

    for name, (keys, columns) in TABLE_FILES.items():
        old_rows, new_rows = accepted.table(name), new.table(name)
        old_header = set(accepted.headers.get(name) or [c.name for c in columns])
        compared = [c for c in columns if c.name not in keys]
        skipped = [c.name for c in compared if c.name not in old_header]
        if skipped:
            notes.append(f"{name}: column(s) {', '.join(skipped)} not in the accepted results "
                         f"(accepted with an older version?), not compared")
        compared = [c for c in compared if c.name in old_header]
        declared = {c.name for c in columns}
        for side, tables in (("accepted results", accepted), ("this run", new)):
            extra = [c for c in (tables.headers.get(name) or []) if c not in declared]
            if extra:
                notes.append(f"{name}: column(s) {', '.join(extra)} in {side} are not columns "
                             f"this version writes, not compared")
        old_by_key = _rows_by_key(old_rows, keys, name, "the accepted results", findings)
        new_by_key = _rows_by_key(new_rows, keys, name, "this run", findings)
        changed_count: set[tuple[str, str]] = set()
        if name == "spikes.csv":
            changed_count = _spike_counts(list(old_by_key), list(new_by_key), common, findings)
        for key in dict.fromkeys(list(old_by_key) + list(new_by_key)):
            file = key[0]
            if file not in common:
                continue
            sweep = _int_or_none(key[1]) if len(key) > 1 else None
            spike = _int_or_none(key[2]) if len(key) > 2 else None
            if name == "spikes.csv" and (key[0], key[1]) in changed_count:
                continue
            old, now = old_by_key.get(key), new_by_key.get(key)
            if name == "sweeps.csv" and (old is None or now is None):
                what = "sweep added" if old is None else "sweep removed"
                findings[file].append(Finding(REGRESSION_CHECK, file, sweep, None, None,
                                              f"{what}: {'not ' if old is None else ''}in the "
                                              f"accepted results"
                                              + ("" if old is None else " but not in this run")))
                continue
            if name == "cells.csv" and (old is None or now is None):
                findings[file].append(Finding(
                    REGRESSION_CHECK, file, None, None, None,
                    f"cells.csv: the file's row is {'not ' if old is None else ''}in the "
                    f"accepted results but {'is' if old is None else 'not'} in this run"))
                continue
            if old is None or now is None:
                continue  # spikes: counted above
            for column in compared:
                tolerance = _tolerance_for(column, settings)
                a, b = old[column.name], now[column.name]
                if not _compare_value(a, b, tolerance, default_tolerance(column)):
                    limit = "exact" if tolerance is None else str(tolerance)
                    findings[file].append(Finding(
                        REGRESSION_CHECK, file, sweep, spike, column.name,
                        f"{name} {column.name}: accepted {a or 'empty'}, now {b or 'empty'} "
                        f"(tolerance {limit})", accepted=a, value=b, limit=limit))
    notes += _record_notes(accepted.record, new.record)
    order = accepted_files + [f for f in new_files if f not in accepted_files]
    cases = [CaseResult("regression", REGRESSION_CHECK, f, tuple(findings[f])) for f in order]
    return cases, notes


def _rows_by_key(rows: list[dict], keys: tuple[str, ...], name: str, side: str,
                 findings: dict[str, list[Finding]]) -> dict[tuple, dict]:
    """Rows by their key, the first of each key; a finding for each key found more than
    once (a duplicated row, or rows that share a key and differ)."""
    by_key: dict[tuple, list[tuple[int, dict]]] = {}
    for line, row in enumerate(rows, start=2):
        by_key.setdefault(tuple(row[k] for k in keys), []).append((line, row))
    for key, found in by_key.items():
        if len(found) < 2:
            continue
        sweep = _int_or_none(key[1]) if len(key) > 1 else None
        spike = _int_or_none(key[2]) if len(key) > 2 else None
        where = ", ".join(f"{k} {v}" for k, v in zip(keys[1:], key[1:])) or "the file's row"
        lines = ", ".join(str(line) for line, _ in found)
        first = found[0][1]
        differ = [c for c in first if any(r.get(c) != first.get(c) for _, r in found[1:])]
        what = ("the same row" if not differ else
                f"rows with the same key that differ in {', '.join(differ[:5])}")
        findings.setdefault(key[0], []).append(Finding(
            REGRESSION_CHECK, key[0], sweep, spike, None,
            f"{name}: {where} is in {side} {len(found)} times ({what}, lines {lines}); "
            f"only the first is compared"))
    return {key: found[0][1] for key, found in by_key.items()}


def _spike_counts(old_keys: list[tuple], new_keys: list[tuple], common: set[str],
                  findings: dict[str, list[Finding]]) -> set[tuple[str, str]]:
    """Findings for sweeps whose spike count (distinct (file, sweep, spike) keys) changed;
    returns those (file, sweep) keys."""
    def counts(keys):
        out: dict[tuple[str, str], int] = {}
        for file, sweep, _ in keys:
            out[(file, sweep)] = out.get((file, sweep), 0) + 1
        return out

    old, new = counts(old_keys), counts(new_keys)
    changed = set()
    for key in dict.fromkeys(list(old) + list(new)):
        if key[0] not in common:
            continue
        a, b = old.get(key, 0), new.get(key, 0)
        if a != b:
            changed.add(key)
            what = f"{b - a} spike{'s' if abs(b - a) > 1 else ''} added" if b > a else \
                f"{a - b} spike{'s' if abs(b - a) > 1 else ''} lost"
            findings[key[0]].append(Finding(
                REGRESSION_CHECK, key[0], _int_or_none(key[1]), None, "spike",
                f"{what}: accepted {a}, now {b} (the sweep's spikes are not compared one "
                f"by one)", accepted=str(a), value=str(b), limit="exact"))
    return changed


def _record_notes(old: dict, new: dict) -> list[str]:
    notes = []
    for part in ("parameters", "versions"):
        a, b = old.get(part) or {}, new.get(part) or {}
        if not a or not b:
            continue
        changed = [f"{k} {a.get(k)!r} -> {b.get(k)!r}" for k in dict.fromkeys(list(a) + list(b))
                   if a.get(k) != b.get(k) and k != "python"]
        if changed:
            notes.append(f"{part} changed since the results were accepted: "
                         + "; ".join(changed))
    return notes


# --------------------------------------------------------------------------- the whole check


def check_run(results_dir: str | os.PathLike, settings: CheckSettings) -> CheckReport:
    """Apply the quality limits and the regression comparison to a run's folder.

    Parameters
    ----------
    results_dir : str or path-like
        A folder holding a run's tables.
    settings : CheckSettings

    Returns
    -------
    CheckReport

    Raises
    ------
    CheckInputError
        When the tables, or (with ``settings.compare``) the accepted results, are missing or
        unreadable, the run names no file at all, or it did not finish or its tables and
        run.json disagree (:func:`check_finished`).
    """
    tables = read_tables(results_dir)
    if not tables.files():
        raise CheckInputError(f"{results_dir}: the run's tables name no file, so there is "
                              f"nothing to check; measure the recordings into it first")
    check_finished(tables)
    accepted = read_tables(settings.accepted_dir, "accepted results") if settings.compare \
        else None
    report = CheckReport(str(results_dir), str(settings.accepted_dir) if settings.compare
                         else None, settings.config_file)
    report.cases = quality_cases(tables, settings.quality)
    if accepted is not None:
        cases, notes = regression_cases(tables, accepted, settings)
        report.cases += cases
        report.notes += notes
    return report


#: The files ``accept`` writes in the accepted folder, and the only ones it ever replaces.
ACCEPTED_FILES: tuple[str, ...] = tuple(TABLE_FILES) + (RUN_RECORD_FILE,)

#: The ``status`` of a run record whose run finished (``running`` and ``interrupted`` did not).
COMPLETE_STATUS = "complete"


def check_finished(tables: RunTables) -> None:
    """Refuse a run that did not finish, or whose tables and run.json disagree.

    Parameters
    ----------
    tables : RunTables
        A run's tables, read by :func:`read_tables`.

    Raises
    ------
    CheckInputError
        When the folder has no run.json; its ``status`` is not ``complete`` (``running``:
        the run is still going or was killed; ``interrupted``), or, in a record without
        ``status``, ``interrupted`` is true; or the tables and run.json disagree: a file in
        the tables that run.json does not list, a file run.json lists as measured without
        rows, or a number of sweeps or spikes of a file that differs from run.json's.

    Notes
    -----
    The checks of a file's counts use the ``sweeps_measured`` and ``spikes`` of its entry in
    ``inputs``, when the entry has them.
    """
    if not isinstance(tables, RunTables):
        raise TypeError(f"tables must be RunTables (got {type(tables).__name__})")
    path = tables.folder / RUN_RECORD_FILE
    again = "run the same measure command again to finish the run, then check or accept it"
    if not tables.record:
        raise CheckInputError(f"{path}: no run record, so there is no telling whether the "
                              f"run finished; {again}")
    status = tables.record.get("status")
    if status is not None and status != COMPLETE_STATUS:
        raise CheckInputError(f"{path}: the run did not finish (status {str(status)[:40]!r}, "
                              f"not {COMPLETE_STATUS!r}); {again}")
    if status is None and tables.record.get("interrupted"):
        raise CheckInputError(f"{path}: the run was interrupted before every file was "
                              f"measured; {again}")
    inputs = [i for i in tables.record.get("inputs", []) if isinstance(i, dict) and "file" in i]
    listed = {i["file"]: i for i in inputs}
    rows: dict[str, dict[str, int]] = {}
    for name in TABLE_FILES:
        for row in tables.table(name):
            rows.setdefault(row["file"], dict.fromkeys(TABLE_FILES, 0))[name] += 1
    problems = []
    unlisted = [f for f in rows if f not in listed]
    if unlisted:
        problems.append(f"the tables hold {_count_of(len(unlisted), 'file')} that run.json "
                        f"does not list ({_some(unlisted)})")
    missing = [f for f, i in listed.items() if _whole(i.get("sweeps_measured")) != 0
               and str(i.get("status", "")).startswith(("measured", "reused"))
               and str(i.get("status")) != "reused (failed)" and f not in rows]
    if missing:
        problems.append(f"run.json lists {_count_of(len(missing), 'file')} as measured that "
                        f"the tables do not hold ({_some(missing)})")
    for file, entry in listed.items():
        have = rows.get(file, dict.fromkeys(TABLE_FILES, 0))
        if file in rows and have["sweeps.csv"] and have["cells.csv"] != 1:
            problems.append(f"{file}: cells.csv holds {have['cells.csv']} rows of it, "
                            f"not 1")
        for key, name, what in (("sweeps_measured", "sweeps.csv", "sweep"),
                                ("spikes", "spikes.csv", "spike")):
            expected = _whole(entry.get(key))
            if expected is not None and file not in missing and expected != have[name]:
                problems.append(f"{file}: run.json counts {_count_of(expected, what)}, "
                                f"{name} holds {have[name]}")
    if problems:
        shown = "; ".join(problems[:5]) + (f"; and {len(problems) - 5} more"
                                           if len(problems) > 5 else "")
        raise CheckInputError(f"{tables.folder}: the tables and {RUN_RECORD_FILE} disagree: "
                              f"{shown}. The folder was changed after the run or written by "
                              f"two runs at once; {again}")


def _whole(value) -> int | None:
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def _count_of(n: int, what: str) -> str:
    return f"{n} {what}{'' if n == 1 else 's'}"


def _some(names: list[str], limit: int = 3) -> str:
    more = f" and {len(names) - limit} more" if len(names) > limit else ""
    return ", ".join(names[:limit]) + more


def _inside(path: Path, folder: Path) -> bool:
    """True when `path` lies strictly inside `folder` (both resolved)."""
    return folder in path.parents


def _is_accept_record(path: Path) -> bool:
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(record, dict) and record.get("tool") == "spikemeasure" \
        and "accepted" in record


def accepted_folder_problem(accepted_dir: str | os.PathLike, results_dir: str | os.PathLike,
                            project_dir: str | os.PathLike, *,
                            inputs: Sequence[str] = (),
                            extra_patterns: tuple[str, ...] = ()) -> str | None:
    """Why `accepted_dir` must not receive accepted results, or None when it may.

    Parameters
    ----------
    accepted_dir : str or path-like
        The accepted folder (need not exist).
    results_dir : str or path-like
        The run's folder being accepted.
    project_dir : str or path-like
        The project folder: the folder of the project file, or the current folder.
    inputs : list of str, optional
        Paths of the run's recordings (``path`` of run.json's ``inputs``).
    extra_patterns : tuple of str, optional
        Patterns the run's discovery used for other formats (``measure --glob``).

    Returns
    -------
    str or None
        A sentence naming the folder (as given, and resolved when that differs) and the
        reason; None when the folder is safe to write the accepted files in.

    Notes
    -----
    Paths are compared after resolving symlinks and ``..``: an accepted folder that is a
    symlink is judged, and written, as the folder it points to. The folder is refused when it
    is an existing file; is, contains or lies inside the results folder; is the project
    folder or contains it; lies outside the project folder; holds a recording of the run, or
    a file of a binary recording format (NWB, NIX, a ``--glob`` pattern) at any depth (text
    files that are not the run's recordings are taken for notes); or holds a file named like an accepted file that is not one (a
    folder or symlink, or tables without the run.json ``accept`` writes).
    """
    from .io import TEXT_SUFFIXES
    from .run.discovery import find_recordings

    given = Path(accepted_dir)
    target = given.resolve()
    name = str(given) if target == given.absolute() else f"{given} (that is {target})"
    results = Path(results_dir).resolve()
    project = Path(project_dir).resolve()
    if target.exists() and not target.is_dir():
        return f"{name}: is a file, not a folder; set accepted_folder to a folder"
    if target == project:
        return (f"{name}: is the project folder itself, which holds the lab's files; set "
                f"accepted_folder to a subfolder of its own, such as \"accepted\"")
    if _inside(project, target):
        return (f"{name}: contains the project folder {project}; set accepted_folder to a "
                f"subfolder of the project folder, such as \"accepted\"")
    if not _inside(target, project):
        return (f"{name}: lies outside the project folder {project} (the folder of "
                f"spikemeasure.toml, or the current folder without one); set accepted_folder "
                f"to a subfolder of the project folder")
    if target == results:
        return f"{name}: is the results folder being accepted; accept into a folder of its own"
    if _inside(target, results):
        return (f"{name}: lies inside the results folder being accepted ({results}), which "
                f"the next run rewrites; accept into a folder of its own")
    if _inside(results, target):
        return (f"{name}: contains the results folder being accepted ({results}); accept "
                f"into a folder of its own")
    for path in inputs:
        recording = Path(path).resolve()
        if _inside(recording, target):
            return (f"{name}: holds recordings of this run ({recording.relative_to(target)}); "
                    f"set accepted_folder to a folder of its own")
    if not target.is_dir():
        return None
    for own in ACCEPTED_FILES:
        entry = target / own
        if entry.is_symlink() or (entry.exists() and not entry.is_file()):
            return (f"{name}: {own} there is not a file accept wrote (a folder or a link); "
                    f"move it away or choose another accepted_folder")
    has_tables = any((target / own).exists() for own in TABLE_FILES)
    if has_tables and not _is_accept_record(target / RUN_RECORD_FILE):
        return (f"{name}: holds tables without the {RUN_RECORD_FILE} `spikemeasure accept` "
                f"writes, so they were not written by accept and would be overwritten; "
                f"choose another accepted_folder, or move them away")
    # Text files of the run were caught above by path; any other .txt or .csv is taken for a
    # note (a lab's notes.txt beside the accepted tables), not for a recording.
    found = [shown for path, shown in find_recordings([target], extra_patterns=extra_patterns)
             if shown not in TABLE_FILES and path.suffix.lower() not in TEXT_SUFFIXES]
    if found:
        return (f"{name}: holds {_count_of(len(found), 'file')} that would be taken as "
                f"recordings ({_some(found)}); set accepted_folder to a folder of its own")
    return None


def accept_results(results_dir: str | os.PathLike, accepted_dir: str | os.PathLike, *,
                   project_dir: str | os.PathLike | None = None,
                   extra_patterns: tuple[str, ...] = ()) -> dict:
    """Save a run's tables as the accepted results, replacing only accept's own files.

    Parameters
    ----------
    results_dir : str or path-like
        A folder holding a finished run's tables.
    accepted_dir : str or path-like
        The accepted folder (created if missing). It must be a folder of its own inside the
        project folder (see :func:`accepted_folder_problem`).
    project_dir : str or path-like, optional
        The project folder (the folder of the project file); default: the current folder.
    extra_patterns : tuple of str, optional
        Patterns the run's discovery used for other formats, for the recordings check.

    Returns
    -------
    dict
        ``files``, ``sweeps``, ``spikes`` (counts), ``failures`` (rows of errors.csv, which
        are not part of the accepted results), ``accepted_dir`` (the folder written, resolved)
        and ``replaced`` (the names written).

    Raises
    ------
    CheckInputError
        When the tables are missing or unreadable, the run did not finish or its tables and
        run.json disagree (:func:`check_finished`), it names no file, the accepted folder is
        refused (:func:`accepted_folder_problem`), or it cannot be written; the message says
        which files were replaced already, if any.

    Notes
    -----
    Only spikes.csv, sweeps.csv, cells.csv and run.json (the run's versions, parameters and
    inputs, with path and SHA-256) are written, each through a temporary file in the
    accepted folder, flushed to disk; only when all four are written do they replace the
    earlier ones, one by one (``os.replace``). Nothing else in the folder is removed, renamed
    or moved, and nothing outside it is touched.
    """
    for label, value in (("results_dir", results_dir), ("accepted_dir", accepted_dir)):
        if not isinstance(value, (str, os.PathLike)):
            raise TypeError(f"{label} must be a path (got {type(value).__name__})")
    tables = read_tables(results_dir, suggest_out=False)
    check_finished(tables)
    if not tables.files():
        raise CheckInputError(f"{results_dir}: the run's tables name no file; there is "
                              f"nothing to accept")
    inputs = [str(i["path"]) for i in tables.record.get("inputs", [])
              if isinstance(i, dict) and isinstance(i.get("path"), str)]
    problem = accepted_folder_problem(accepted_dir, results_dir,
                                      project_dir if project_dir is not None else Path.cwd(),
                                      inputs=inputs, extra_patterns=tuple(extra_patterns))
    if problem:
        raise CheckInputError(f"{problem}; nothing was written")
    source = Path(results_dir)
    target = Path(accepted_dir).resolve()
    record = {
        "tool": "spikemeasure",
        "accepted": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "versions": tables.record.get("versions"),
        "config_file": tables.record.get("config_file"),
        "parameters": tables.record.get("parameters"),
        "inputs": [{k: i.get(k) for k in ("file", "sha256", "size_bytes", "status")}
                   for i in tables.record.get("inputs", [])],
    }
    contents = []
    for name in TABLE_FILES:
        try:
            contents.append((name, (source / name).read_bytes()))
        except OSError as exc:
            raise CheckInputError(f"{source / name}: cannot be read ({exc.strerror or exc})"
                                  ) from exc
    contents.append((RUN_RECORD_FILE,
                     (json.dumps(record, indent=2, default=str) + "\n").encode("utf-8")))
    try:
        target.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise CheckInputError(f"{target}: cannot create the accepted folder "
                              f"({exc.strerror or exc}); nothing was written") from exc
    replaced = _replace_files(target, contents)
    return {"files": len({r["file"] for r in tables.cells}), "sweeps": len(tables.sweeps),
            "spikes": len(tables.spikes), "failures": tables.errors,
            "accepted_dir": str(target), "replaced": replaced}


def _replace_files(folder: Path, contents: list[tuple[str, bytes]]) -> list[str]:
    """Write every file to a temporary file in `folder` (fsync), then replace them one by one.

    On failure, removes the temporary files it made and raises CheckInputError saying which
    files were replaced already."""
    umask = os.umask(0)
    os.umask(umask)
    staged: list[tuple[str, str]] = []
    replaced: list[str] = []
    try:
        for name, data in contents:
            fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".part", dir=folder)
            staged.append((name, tmp))
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.chmod(tmp, 0o666 & ~umask)  # as an ordinary new file: mkstemp's is private
        for name, tmp in staged:
            os.replace(tmp, folder / name)
            replaced.append(name)
    except OSError as exc:
        for name, tmp in staged:
            if name not in replaced:
                try:
                    os.unlink(tmp)
                except OSError:
                    pass
        if replaced:
            done = (f"{', '.join(replaced)} {'was' if len(replaced) == 1 else 'were'} replaced "
                    f"already, the other files keep their earlier content; fix the cause and "
                    f"accept again")
        else:
            done = "nothing was replaced"
        raise CheckInputError(f"{folder}: cannot write the accepted results "
                              f"({exc.strerror or exc}); {done}") from exc
    try:  # the renames themselves reach the disk
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
    except OSError:
        pass
    return replaced



# --------------------------------------------------------------------------- reports


def report_dict(report: CheckReport) -> dict:
    """The report as JSON-ready data (``check --json``)."""
    return {
        "passed": report.passed,
        "results": report.results_dir,
        "accepted": report.accepted_dir,
        "config_file": report.config_file,
        "checks": len(report.cases),
        "checks_failed": len(report.failed_cases),
        "cases": [{"suite": c.suite, "check": c.check, "file": c.file, "passed": c.passed,
                   "findings": len(c.findings)} for c in report.cases],
        "failures": [asdict(f) for f in report.findings],
        "notes": list(report.notes),
    }


def report_text(report: CheckReport, max_rows: int | None = None) -> str:
    """A short aligned table of what failed, the notes, and a summary line.

    Parameters
    ----------
    report : CheckReport
    max_rows : int, optional
        Show at most this many findings (and say how many were left out).
    """
    lines: list[str] = []
    findings = report.findings
    shown = findings if max_rows is None else findings[:max_rows]
    if shown:
        header = ("check", "file", "sweep", "spike", "column", "what")
        rows = [(f.check, f.file, "" if f.sweep is None else str(f.sweep),
                 "" if f.spike is None else str(f.spike), f.column or "", f.message)
                for f in shown]
        widths = [max(len(r[k]) for r in rows + [header]) for k in range(5)]
        for r in [header] + rows:
            lines.append("  ".join(r[k].ljust(widths[k]) for k in range(5)) + "  " + r[5])
        if len(findings) > len(shown):
            lines.append(f"... and {len(findings) - len(shown)} more (see --json or --junit)")
        lines.append("")
        counts: dict[tuple[str, str], set] = {}
        for f in findings:
            counts.setdefault((f.check, f.column or "-"), set()).add(
                (f.file, f.sweep, f.spike))
        if len(findings) > len(shown) or len(counts) > 1:
            lines.append("findings by check and column:")
            for (check, column), where in counts.items():
                files = len({w[0] for w in where})
                lines.append(f"  {check:<22} {column:<26} {len(where):>6} rows in {files} "
                             f"file{'s' if files != 1 else ''}")
            lines.append("")
    for note in report.notes:
        lines.append(f"note: {note}")
    files = len({c.file for c in report.cases})
    failed = report.failed_cases
    if failed:
        kinds = sorted({c.check for c in failed})
        lines.append(f"FAILED: {len(failed)} of {len(report.cases)} checks on {files} files "
                     f"({', '.join(kinds)}); {len(findings)} findings")
    else:
        lines.append(f"passed: {len(report.cases)} checks on {files} files")
    return "\n".join(lines)
