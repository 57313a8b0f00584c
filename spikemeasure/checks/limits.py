"""The quality limits of ``[quality]`` applied to a run's typed tables, file by file (each
cell of a file with several electrodes judged on its own rows)."""
from __future__ import annotations

import math

import numpy as np

from ..columns import Column
from .findings import MEASURED_CHECK, CaseResult, Finding
from .rules import QUALITY_RULES, QualityRule
from .run_tables import TABLE_FILES, RunTables, Table, cell_text

__all__ = ["quality_cases"]


def _limit_text(limit) -> str:
    if isinstance(limit, tuple):
        return f"{limit[0]:g} to {limit[1]:g}"
    return f"{limit:g}"


def _sweep_of(stage: str) -> int | None:
    """The sweep of an errors.csv ``stage`` (``sweep N``), or None."""
    if stage.startswith("sweep "):
        text = stage[len("sweep "):]
        return int(text) if text.isdigit() else None
    return None


def _declared(rule: QualityRule) -> Column:
    return next(c for c in TABLE_FILES[rule.table][1] if c.name == rule.column)


def _finding(rule: QualityRule, limit, file: str, where: tuple[int | None, int | None],
             value: float, electrode: str = "") -> Finding:
    """The finding of a value that fails the rule, or of a missing value (NaN)."""
    requirement = rule.text.format(limit=_limit_text(limit))
    text = cell_text(_declared(rule), value)
    if math.isnan(value):
        what = rule.missing_text.format(column=rule.column)
    else:
        what = rule.failure_text.format(column=rule.column, text=text, value=value,
                                        limit=_limit_text(limit))
    return Finding(rule.key, file, where[0], where[1], rule.column,
                   f"{what}; required: {requirement}", value=text, limit=_limit_text(limit),
                   electrode=electrode)


def _rule_findings(rule: QualityRule, limit, file: str, rows: dict[str, Table]
                   ) -> list[Finding]:
    """Findings of a rule on one file: each row that fails it or has no value, or, for a
    rule on a cell's highest value, that value (the first row of it) when it fails; each
    cell (electrode) of the file judged on its own rows."""
    table = rows[rule.table]
    electrodes = table["electrode"]
    findings = []
    for electrode in dict.fromkeys(electrodes.tolist()) or [""]:
        own = np.flatnonzero(electrodes == electrode)
        values = table[rule.column][own]
        sweeps = table["sweep"][own] if "sweep" in table else None
        spikes = table["spike"][own] if "spike" in table else None
        if rule.judges_highest:
            measured = np.flatnonzero(~np.isnan(values))
            if measured.size == 0:
                findings.append(_finding(rule, limit, file, (None, None), math.nan, electrode))
                continue
            candidates = [int(measured[np.argmax(values[measured])])]  # the first of equal ones
        else:
            candidates = range(len(values))
        for row in candidates:
            value = float(values[row])
            if math.isnan(value) or not rule.test(value, limit):
                where = (None if sweeps is None else int(sweeps[row]),
                         None if spikes is None else int(spikes[row]))
                findings.append(_finding(rule, limit, file, where, value, electrode))
    return findings


def _rows_of_file(tables: RunTables) -> dict[str, dict[str, Table]]:
    """Each file's rows of each table, in table order."""
    by_file: dict[str, dict[str, list[int]]] = {}
    for name in TABLE_FILES:
        for k, file in enumerate(tables.table(name)["file"]):
            by_file.setdefault(file, {n: [] for n in TABLE_FILES})[name].append(k)
    return {file: {name: {c: v[np.asarray(rows, dtype=np.intp)]
                          for c, v in tables.table(name).items()}
                   for name, rows in parts.items()}
            for file, parts in by_file.items()}


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
        order of :data:`~spikemeasure.checks.rules.QUALITY_RULES`. A file that could not be
        measured at all fails every limit, since none can be checked.

    Notes
    -----
    A rule of sweeps.csv or cells.csv is judged row by row: an empty (not measured) value
    fails, since the limit cannot be checked. ``min_highest_peak_mv`` is judged on each
    cell's highest measured spike peak (one cell per file, or per electrode of a file that
    holds several).
    """
    by_file = _rows_of_file(tables)
    errors: dict[str, list[tuple[str, str, str]]] = {}
    for file, electrode, stage, message in zip(tables.errors["file"],
                                               tables.errors["electrode"],
                                               tables.errors["stage"], tables.errors["message"]):
        errors.setdefault(file, []).append((electrode, stage, message))
    unfinished = {i["file"]: i["status"] for i in tables.record.get("inputs", [])
                  if str(i.get("status", "")).startswith("not measured")}
    cases = []
    for file in tables.files():
        failed = [Finding(MEASURED_CHECK, file, _sweep_of(stage), None, None, message,
                          electrode=electrode)
                  for electrode, stage, message in errors.get(file, [])]
        if file in unfinished:
            failed.append(Finding(MEASURED_CHECK, file, None, None, None,
                                  f"{file}: not measured ({unfinished[file]}); run the same "
                                  f"measure command again to finish the run"))
        cases.append(CaseResult("quality", MEASURED_CHECK, file, tuple(failed)))
        rows = by_file.get(file)
        for rule in QUALITY_RULES:
            if rule.key not in limits:
                continue
            if rows is None or len(rows["sweeps.csv"]["file"]) == 0:
                findings = [Finding(rule.key, file, None, None, rule.column,
                                    "the file has no measured sweep, so the limit cannot be "
                                    "checked")]
            else:
                findings = _rule_findings(rule, limits[rule.key], file, rows)
            cases.append(CaseResult("quality", rule.key, file, tuple(findings)))
    return cases
