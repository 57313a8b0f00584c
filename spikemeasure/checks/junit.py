"""The report of ``spikemeasure check`` as JUnit XML, the test-report format CI services show.

Layout (the common JUnit schema): one ``<testsuites>`` holding a ``<testsuite>`` per kind of
check (``quality``, ``regression``); in each, ``<properties>`` (spikemeasure's version, the
folders and the project file), one ``<testcase>`` per file and check, its ``classname`` the
file and its ``name`` the check, with a ``<failure>`` element when it failed (the first
finding as ``message``, every finding, one per line, as text), then ``<system-out>`` (the
notes) and ``<system-err>``. The counts ``tests``, ``failures``, ``errors`` and ``skipped``
of each suite, and ``tests``, ``failures`` and ``errors`` of the whole, match the test
cases. Every suite carries the ``id``, ``package``, ``timestamp`` and ``hostname`` that the
stricter variant of the schema requires.
"""
from __future__ import annotations

import os
import socket
import time
import xml.etree.ElementTree as ET
from pathlib import Path

from .. import __version__
from ..tables.write import write_text_atomic
from .findings import CheckReport

__all__ = ["junit_xml", "write_junit"]

_SUITES = ("quality", "regression")


def _where(finding) -> str:
    parts = [finding.file]
    if finding.electrode:
        parts.append(f"electrode {finding.electrode}")
    if finding.sweep is not None:
        parts.append(f"sweep {finding.sweep}")
    if finding.spike is not None:
        parts.append(f"spike {finding.spike}")
    return ", ".join(parts)


def junit_xml(report: CheckReport, timestamp: float | None = None) -> str:
    """The report as JUnit XML text.

    Parameters
    ----------
    report : CheckReport
    timestamp : float, optional
        Seconds since the epoch for the suites' ``timestamp`` (default: now).

    Returns
    -------
    str
        An XML document (UTF-8 declaration included).
    """
    stamp = time.strftime("%Y-%m-%dT%H:%M:%S", time.localtime(timestamp or time.time()))
    host = socket.gethostname() or "localhost"
    root = ET.Element("testsuites", name="spikemeasure check")
    totals = {"tests": 0, "failures": 0}
    for k, suite_name in enumerate(_SUITES):
        cases = [c for c in report.cases if c.suite == suite_name]
        if not cases:
            continue
        failures = sum(not c.passed for c in cases)
        suite = ET.SubElement(root, "testsuite", name=suite_name, tests=str(len(cases)),
                              failures=str(failures), errors="0", skipped="0", time="0",
                              timestamp=stamp, hostname=host, id=str(k),
                              package="spikemeasure")
        properties = ET.SubElement(suite, "properties")
        for key, value in (("spikemeasure_version", __version__),
                           ("results", report.results_dir),
                           ("accepted", report.accepted_dir),
                           ("config_file", report.config_file)):
            if value is not None:
                ET.SubElement(properties, "property", name=key, value=str(value))
        for case in cases:
            element = ET.SubElement(suite, "testcase", name=case.check, classname=case.file,
                                    time="0")
            if case.findings:
                first = case.findings[0]
                failure = ET.SubElement(element, "failure", message=first.message,
                                        type=case.check)
                failure.text = "\n".join(f"{_where(f)}: {f.message}" for f in case.findings)
        out = ET.SubElement(suite, "system-out")
        out.text = "\n".join(report.notes) if report.notes else ""
        ET.SubElement(suite, "system-err").text = ""
        totals["tests"] += len(cases)
        totals["failures"] += failures
    root.set("tests", str(totals["tests"]))
    root.set("failures", str(totals["failures"]))
    root.set("errors", "0")
    root.set("time", "0")
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") \
        + "\n"


def write_junit(path: str | os.PathLike, report: CheckReport) -> Path:
    """Write :func:`junit_xml` of the report to `path`, atomically."""
    return write_text_atomic(path, junit_xml(report))
