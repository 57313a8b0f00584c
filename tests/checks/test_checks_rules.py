"""The quality rules, each declared once: the keys of [quality], the columns they read, the
table of docs/ci.md. Sources: the column registry (spikemeasure.columns) and docs/ci.md."""
from __future__ import annotations

from pathlib import Path


from spikemeasure.checks.rules import QUALITY_KEYS, QUALITY_RULES, quality_rules_markdown
from spikemeasure.checks.settings import load_check_settings
from spikemeasure.columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS


class TestQualityRuleDeclarations:
    def test_every_key_has_a_rule(self):
        assert [r.key for r in QUALITY_RULES] == list(QUALITY_KEYS)

    def test_each_rule_reads_a_declared_column_and_its_example_is_valid(self, tmp_path):
        tables = {"spikes.csv": SPIKE_COLUMNS, "sweeps.csv": SWEEP_COLUMNS,
                  "cells.csv": CELL_COLUMNS}
        for rule in QUALITY_RULES:
            assert rule.column in [c.name for c in tables[rule.table]], rule.key
        project = tmp_path / "spikemeasure.toml"
        project.write_text("[quality]\n" + "".join(f"{r.key} = {r.example}\n"
                                                   for r in QUALITY_RULES))
        assert set(load_check_settings(project).quality) == set(QUALITY_KEYS)

    def test_docs_table_is_generated_from_the_rules(self):
        docs = (Path(__file__).resolve().parents[2] / "docs" / "ci.md").read_text()
        assert quality_rules_markdown() in docs, \
            "regenerate the table in docs/ci.md from quality_rules_markdown()"
