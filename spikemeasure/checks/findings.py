"""What the checks found, and the reports of it: :class:`Finding` (one thing that failed)
grouped in :class:`CaseResult` (one file under one check), collected in a
:class:`CheckReport`; :func:`report_text` and :func:`report_dict` show it.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, field

__all__ = ["Finding", "CaseResult", "CheckReport", "MEASURED_CHECK", "REGRESSION_CHECK",
           "report_text", "report_dict"]

#: Name of the check that every file and sweep of the run was measured (always applied).
MEASURED_CHECK = "measured"
#: Name of the comparison with the accepted results.
REGRESSION_CHECK = "regression"


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
    electrode : str
        The cell within the file (the ``electrode`` column), "" for a file of one cell or a
        finding about the whole file.
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
    electrode: str = ""


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
        rows = [(f.check, f.file + (f", electrode {f.electrode}" if f.electrode else ""),
                 "" if f.sweep is None else str(f.sweep),
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
                (f.file, f.sweep, f.spike, f.electrode))
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
