"""The comparison of a run's typed tables with the accepted results, file by file."""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from ..columns import Column
from .findings import REGRESSION_CHECK, CaseResult, Finding
from .run_tables import OPTIONAL_KEY, TABLE_FILES, RunTables, Table, cell_text
from .settings import CheckSettings, Tolerance, default_tolerance, tolerance_for

__all__ = ["regression_cases"]


def _same(a, b) -> bool:
    """Equal values, two NaN (two empty cells) included."""
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    return a == b


def _agree(accepted, value, tolerance: Tolerance | None, floor: Tolerance | None) -> bool:
    """True when two values agree: both empty, equal, or numbers within `tolerance` (or
    within `floor`, the resolution the CSV is written with). Text agrees only when equal."""
    if _same(accepted, value):
        return True
    if tolerance is None or isinstance(accepted, str) or isinstance(value, str):
        return False
    a, b = float(accepted), float(value)
    if math.isnan(a) or math.isnan(b):  # empty against a number
        return False
    return tolerance.allows(a, b) or (floor is not None and floor.allows(a, b))


def _file_findings(accepted: RunTables, new: RunTables, allow_new_files: bool
                   ) -> dict[str, list[Finding]]:
    """Findings about whole files: removed, lost, gained, added."""
    findings: dict[str, list[Finding]] = {}
    new_files = new.files()
    measured_new, measured_old = set(new.sweeps["file"]), set(accepted.sweeps["file"])
    for file in accepted.files():
        findings[file] = []
        if file not in new_files:
            what = "file removed: in the accepted results but not in this run"
        elif file in measured_old and file not in measured_new:
            what = ("file lost: in the accepted results, but this run measured none of its "
                    "sweeps (see errors.csv)")
        elif file in measured_new and file not in measured_old:
            what = ("file gained: measured in this run, but not in the accepted run (accept "
                    "the run again to add it)")
        else:
            continue
        findings[file].append(Finding(REGRESSION_CHECK, file, None, None, None, what))
    for file in new_files:
        if file not in findings:
            findings[file] = []
            if not allow_new_files:
                findings[file].append(Finding(
                    REGRESSION_CHECK, file, None, None, None,
                    "file added: not in the accepted results (accept the run again to add "
                    "it, or set allow_new_files = true under [regression])"))
    return findings


def _column_notes(name: str, columns: tuple[Column, ...], keys: tuple[str, ...],
                  accepted: RunTables, new: RunTables) -> tuple[list[Column], list[str]]:
    """The columns of a table to compare, and notes on the columns left out."""
    notes = []
    old_header = set(accepted.headers.get(name) or [c.name for c in columns])
    compared = [c for c in columns if c.name not in keys]
    skipped = [c.name for c in compared if c.name not in old_header]
    if skipped:
        notes.append(f"{name}: column(s) {', '.join(skipped)} not in the accepted results "
                     f"(accepted with an older version?), not compared")
    declared = {c.name for c in columns}
    for side, tables in (("accepted results", accepted), ("this run", new)):
        extra = [c for c in (tables.headers.get(name) or []) if c not in declared]
        if extra:
            notes.append(f"{name}: column(s) {', '.join(extra)} in {side} are not columns "
                         f"this version writes, not compared")
    return [c for c in compared if c.name in old_header], notes


def _rows_by_key(table: Table, keys: tuple[str, ...], name: str, side: str,
                 findings: dict[str, list[Finding]]) -> dict[tuple, int]:
    """The row of each key, the first of each; a finding for each key found more than once
    (a duplicated row, or rows that share a key and differ)."""
    by_key: dict[tuple, list[int]] = {}
    for row, key in enumerate(zip(*(table[k].tolist() for k in keys))):
        by_key.setdefault(key, []).append(row)
    for key, rows in by_key.items():
        if len(rows) < 2:
            continue
        named = dict(zip(keys, key))
        sweep, spike = named.get("sweep"), named.get("spike")
        where = ", ".join(f"{k} {v}" for k, v in zip(keys[1:], key[1:])
                          if k != "electrode" or v) or "the cell's row"
        lines = ", ".join(str(row + 2) for row in rows)
        differ = [c for c, values in table.items()
                  if any(not _same(values[r], values[rows[0]]) for r in rows[1:])]
        what = ("the same row" if not differ else
                f"rows with the same key that differ in {', '.join(differ[:5])}")
        findings.setdefault(key[0], []).append(Finding(
            REGRESSION_CHECK, key[0], sweep, spike, None,
            f"{name}: {where} is in {side} {len(rows)} times ({what}, lines {lines}); "
            f"only the first is compared", electrode=named.get("electrode", "")))
    return {key: rows[0] for key, rows in by_key.items()}


def _spike_counts(old_keys: list[tuple], new_keys: list[tuple], common: set[str],
                  findings: dict[str, list[Finding]]) -> set[tuple[str, str, int]]:
    """Findings for sweeps whose spike count (distinct (file, electrode, sweep, spike) keys)
    changed; returns those (file, electrode, sweep) keys."""
    def counts(keys):
        out: dict[tuple[str, str, int], int] = {}
        for file, electrode, sweep, _ in keys:
            out[(file, electrode, sweep)] = out.get((file, electrode, sweep), 0) + 1
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
                REGRESSION_CHECK, key[0], key[2], None, "spike",
                f"{what}: accepted {a}, now {b} (the sweep's spikes are not compared one "
                f"by one)", accepted=str(a), value=str(b), limit="exact", electrode=key[1]))
    return changed


def _row_missing(name: str, file: str, electrode: str, sweep: int | None,
                 in_accepted: bool) -> Finding:
    """A sweep's or a cell's row found on one side only."""
    if name == "sweeps.csv":
        what = ("sweep removed: in the accepted results but not in this run" if in_accepted
                else "sweep added: not in the accepted results")
        return Finding(REGRESSION_CHECK, file, sweep, None, None, what, electrode=electrode)
    whose = f"the row of electrode {electrode}" if electrode else "the file's row"
    return Finding(REGRESSION_CHECK, file, None, None, None,
                   f"cells.csv: {whose} is {'' if in_accepted else 'not '}in the "
                   f"accepted results but {'not' if in_accepted else 'is'} in this run",
                   electrode=electrode)


def _compare_table(name: str, accepted: RunTables, new: RunTables, settings: CheckSettings,
                   common: set[str], findings: dict[str, list[Finding]]) -> list[str]:
    """Compare one table row by row (rows matched by key); returns the notes on its columns."""
    keys, columns = TABLE_FILES[name]
    compared, notes = _column_notes(name, columns, keys, accepted, new)
    old_table, new_table = accepted.table(name), new.table(name)
    old_by_key = _rows_by_key(old_table, keys, name, "the accepted results", findings)
    new_by_key = _rows_by_key(new_table, keys, name, "this run", findings)
    changed_count: set[tuple[str, str, int]] = set()
    if name == "spikes.csv":
        changed_count = _spike_counts(list(old_by_key), list(new_by_key), common, findings)
    old_values = {c.name: old_table[c.name].tolist() for c in compared}
    new_values = {c.name: new_table[c.name].tolist() for c in compared}
    for key in dict.fromkeys(list(old_by_key) + list(new_by_key)):
        file = key[0]
        if file not in common or (name == "spikes.csv" and key[:3] in changed_count):
            continue
        named = dict(zip(keys, key))
        electrode, sweep, spike = named["electrode"], named.get("sweep"), named.get("spike")
        old, now = old_by_key.get(key), new_by_key.get(key)
        if old is None or now is None:
            if name != "spikes.csv":  # spikes: counted above
                findings[file].append(_row_missing(name, file, electrode, sweep,
                                                   in_accepted=now is None))
            continue
        for column in compared:
            tolerance = tolerance_for(column, settings)
            a, b = old_values[column.name][old], new_values[column.name][now]
            if not _agree(a, b, tolerance, default_tolerance(column)):
                limit = "exact" if tolerance is None else str(tolerance)
                a_text, b_text = cell_text(column, a), cell_text(column, b)
                findings[file].append(Finding(
                    REGRESSION_CHECK, file, sweep, spike, column.name,
                    f"{name} {column.name}: accepted {a_text or 'empty'}, now "
                    f"{b_text or 'empty'} (tolerance {limit})", accepted=a_text,
                    value=b_text, limit=limit, electrode=electrode))
    return notes


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


def _one_cell_per_file(new: RunTables, accepted: RunTables) -> RunTables:
    """This run as accepted results without the electrode column (an older version: one cell
    per file) compare it: the electrode of a file of one cell taken as "" (a file of several
    cells keeps its electrodes, and the cells the accepted results lack are found)."""
    if not accepted.headers or any(OPTIONAL_KEY in (accepted.headers.get(name) or ())
                                   for name in TABLE_FILES):
        return new
    cells: dict[str, set] = {}
    for name in TABLE_FILES:
        for file, electrode in zip(new.table(name)["file"], new.table(name)[OPTIONAL_KEY]):
            cells.setdefault(file, set()).add(electrode)
    single = {f for f, electrodes in cells.items() if len(electrodes) == 1}

    def plain(table: Table) -> Table:
        keep = np.array([f not in single for f in table["file"]], dtype=bool)
        blank = np.where(keep, table[OPTIONAL_KEY], "").astype(object)
        return dict(table, **{OPTIONAL_KEY: blank})

    return replace(new, spikes=plain(new.spikes), sweeps=plain(new.sweeps),
                   cells=plain(new.cells))


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
    Rows are matched by their key columns: (file, electrode, sweep, spike) in spikes.csv,
    (file, electrode, sweep) in sweeps.csv, (file, electrode) in cells.csv; the order of the
    rows does not matter. Accepted results without the electrode column (an older version,
    one cell per file) compare with a file of one cell as if its electrode were "". A file, a
    sweep or a cell row present in one run only fails. A key found more than once in a table
    (a duplicated row, or rows sharing a key) fails, naming the key, the side and the lines;
    only its first row is compared. When a sweep's spike count (distinct spike keys) changed,
    the spikes added or lost fail and that sweep's spikes are not compared value by value
    (their indices no longer pair the same spikes). Columns that this version does not write
    are not compared, and a note names them. Every other value is compared: equal values
    pass (two empty ones too); two numbers pass within the column's tolerance
    (:func:`~spikemeasure.checks.settings.default_tolerance` unless the project file sets
    one), and never fail by less than that default, the resolution the CSV is written with
    (so a relative tolerance still passes rounding of a value near zero); an empty value
    against a number fails; text passes only when equal.
    """
    new = _one_cell_per_file(new, accepted)
    findings = _file_findings(accepted, new, settings.allow_new_files)
    # rows are compared only for files measured in both runs; the rest failed above
    common = (set(accepted.files()) & set(new.files()) & set(new.sweeps["file"])
              & set(accepted.sweeps["file"]))
    notes: list[str] = []
    for name in TABLE_FILES:
        notes += _compare_table(name, accepted, new, settings, common, findings)
    notes += _record_notes(accepted.record, new.record)
    accepted_files = accepted.files()
    order = accepted_files + [f for f in new.files() if f not in accepted_files]
    cases = [CaseResult("regression", REGRESSION_CHECK, f, tuple(findings[f])) for f in order]
    return cases, notes

