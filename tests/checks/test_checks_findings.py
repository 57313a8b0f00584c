"""The reports of what the checks found: JSON data and the text table.
Source: the recordings built to break one rule each (checks_support.py)."""
from __future__ import annotations

import json


from checks_support import LIMITS, BROKEN, lab
from spikemeasure.checks.apply import check_run
from spikemeasure.checks.findings import report_dict
from spikemeasure.checks.settings import CheckSettings


class TestReports:
    def test_json_document(self, lab):
        report = check_run(lab / "all", CheckSettings(quality=LIMITS, compare=False))
        data = json.loads(json.dumps(report_dict(report)))
        assert data["passed"] is False
        assert data["checks"] == len(report.cases)
        assert data["checks_failed"] == len(BROKEN)
        assert {f["file"] for f in data["failures"]} == set(BROKEN)
        assert {"check", "file", "sweep", "spike", "column", "message", "accepted", "value",
                "limit", "electrode"} == set(data["failures"][0])
