"""The check report as JUnit XML.

Source: the structure of the common JUnit XML schemas (from memory): the XSD CI servers
validate against (junit-10.xsd, also pytest's format) allows name, tests, failures, errors and
time on <testsuites>, and tests, failures, errors, skipped, time, timestamp, hostname, id and
package on <testsuite>, whose children are properties (each with at least one property),
testcase*, system-out, system-err in that order; the stricter XSD of the Ant report format
requires name, tests, failures, errors, time, timestamp (YYYY-MM-DDTHH:MM:SS, no zone),
hostname, id and package on every suite, and properties, system-out and system-err present. A
<testcase> has name, classname and time and at most one <failure> with message and type.
(checks_support.validate_junit checks these.)
"""
from __future__ import annotations

from checks_support import (LIMITS, BROKEN, lab, sample_results, accepted, regression, edit_cell,
                            validate_junit)
from spikemeasure.checks.apply import check_run
from spikemeasure.checks.junit import junit_xml
from spikemeasure.checks.run_tables import read_tables
from spikemeasure.checks.settings import CheckSettings


class TestJunit:
    def test_junit_counts(self, lab):
        report = check_run(lab / "all", CheckSettings(quality=LIMITS, compare=False))
        root = validate_junit(junit_xml(report))
        files = len(read_tables(lab / "all").files())
        assert int(root.get("tests")) == files * (1 + len(LIMITS)) == len(report.cases)
        assert int(root.get("failures")) == len(BROKEN)
        failed = {(c.get("classname"), c.get("name")) for c in root.iter("testcase")
                  if c.find("failure") is not None}
        assert failed == set(BROKEN.items())

    def test_junit_with_regression_suite(self, accepted):
        accepted_dir, run_dir = accepted
        edit_cell(run_dir, "cells.csv", "resting_mv", lambda v: f"{float(v) + 3:.4f}")
        report = regression(run_dir, accepted_dir)
        root = validate_junit(junit_xml(report))
        suites = {s.get("name"): s for s in root}
        assert set(suites) == {"quality", "regression"}
        # one regression case per file of the sample data (sample_data/README.md: six files)
        assert suites["regression"].get("tests") == "6"
        assert suites["regression"].get("failures") == "1"
        failure = suites["regression"].find("testcase/failure")
        assert "resting_mv" in failure.get("message")
