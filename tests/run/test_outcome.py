"""Typed outcomes: CSV text made only when written, JSON kept data exact and checked.

Sources of truth: Python's format specification (fixed decimals, round-half-even of the
binary value), IEEE-754 bit patterns (numpy views) for exact round trips, and the JSON
standard (RFC 8259: no NaN or infinity literals)."""
import json
import pickle

import numpy as np
import pytest

from spikemeasure.columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS
from spikemeasure.run import CACHE_FOLDER, FileOutcome, OutcomeCache
from spikemeasure.tables.typed import ColumnTable


def _sweeps(values: dict) -> ColumnTable:
    table = {c.name: [] for c in SWEEP_COLUMNS}
    n = len(next(iter(values.values())))
    for c in SWEEP_COLUMNS:
        table[c.name] = values.get(c.name, ["" if c.name in ("file", "electrode", "flags") else float("nan")]
                                   * n)
    return ColumnTable.from_lists(table, SWEEP_COLUMNS)


class TestFormattedRows:
    def test_numbers_text_and_counts_as_the_csv_writes_them(self):
        table = _sweeps({"file": ["a.nix", "a.nix"], "sweep": [0, 1],
                         "baseline_mv": [-65.123449, -0.00001], "spike_count": [3, float("nan")],
                         "flags": ["x;y", ""]})
        rows = table.formatted_rows()
        names = [c.name for c in SWEEP_COLUMNS]
        decimals = dict((c.name, c.decimals) for c in SWEEP_COLUMNS)
        first, second = (dict(zip(names, r)) for r in rows)
        # Python's format spec gives the digits; a negative zero is written as zero
        assert first["baseline_mv"] == format(-65.123449, f".{decimals['baseline_mv']}f")
        assert second["baseline_mv"] == format(0.0, f".{decimals['baseline_mv']}f")
        assert (first["sweep"], second["sweep"]) == ("0", "1")  # whole numbers, no point
        assert (first["spike_count"], second["spike_count"]) == ("3", "")  # unmeasured: empty
        assert (first["flags"], first["file"]) == ("x;y", "a.nix")
        assert first["holding_pa"] == ""  # NaN is an empty cell

    def test_no_rows_gives_no_rows(self):
        assert ColumnTable.empty(SPIKE_COLUMNS).formatted_rows() == []
        assert len(ColumnTable.concatenate([], CELL_COLUMNS)) == 0

    def test_concatenate_keeps_file_order_and_renamed_sets_the_file(self):
        a = _sweeps({"file": ["a"], "sweep": [0]})
        b = _sweeps({"file": ["b", "b"], "sweep": [0, 1]})
        both = ColumnTable.concatenate([b, a], SWEEP_COLUMNS)
        assert both.column("file") == ["b", "b", "a"]
        assert both.column("sweep").tolist() == [0.0, 1.0, 0.0]
        assert b.renamed("c").column("file") == ["c", "c"]

    def test_columns_of_unequal_length_are_refused(self):
        table = {c.name: [] for c in CELL_COLUMNS}
        table["file"] = ["a"]
        with pytest.raises(ValueError, match="differ in length"):
            ColumnTable.from_lists(table, CELL_COLUMNS)


class TestKeptData:
    def test_json_round_trip_is_bit_exact(self):
        values = [0.1 + 0.2, -0.0, 5e-324, 1.7976931348623157e308, float("nan"), float("inf"),
                  float("-inf"), -65.12345678901234]
        table = _sweeps({"file": ["a"] * len(values), "sweep": list(range(len(values))),
                         "baseline_mv": values})
        text = json.dumps(table.to_data(), allow_nan=False)  # standard JSON (RFC 8259)
        back = ColumnTable.from_data(json.loads(text), SWEEP_COLUMNS)
        expected = np.array(values).view(np.int64)
        got = back.column("baseline_mv").view(np.int64)
        finite = np.isfinite(values)
        assert (got[finite] == expected[finite]).all()
        assert np.isnan(back.column("baseline_mv")[~finite][0])
        assert back.column("baseline_mv")[5] == np.inf and back.column("baseline_mv")[6] == -np.inf
        assert back.formatted_rows() == table.formatted_rows()

    @pytest.mark.parametrize("edit", [
        lambda d: d["sweep"].update(values=[1.5]),          # a count that is not whole
        lambda d: d["sweep"].update(values=[True]),         # a boolean is not a number
        lambda d: d["baseline_mv"].update(values=["-65"]),  # text where a number belongs
        lambda d: d["baseline_mv"].update(kind="text"),     # another kind of column
        lambda d: d["file"].update(values=[3]),             # a number where text belongs
        lambda d: d.pop("flags"),                           # a column missing
    ])
    def test_data_of_another_shape_is_refused(self, edit):
        data = _sweeps({"file": ["a"], "sweep": [0], "baseline_mv": [-65.0]}).to_data()
        edit(data)
        with pytest.raises(ValueError):
            ColumnTable.from_data(data, SWEEP_COLUMNS)

    def test_a_file_outcome_round_trips(self):
        outcome = FileOutcome("a.nix", sweeps=_sweeps({"file": ["a.nix"], "sweep": [0]}),
                              failures=[{"file": "a.nix", "electrode": "", "stage": "sweep 1",
                                         "message": "a.nix, sweep 1: too short"}],
                              sweep_count=2, sweeps_measured=1, spike_flags={"clipped_peak": 2},
                              format="NIX")
        back = FileOutcome.from_data(json.loads(json.dumps(outcome.to_data())))
        assert back.to_data() == outcome.to_data()
        moved = back.renamed("b.nix")
        assert moved.sweeps.column("file") == ["b.nix"]
        assert moved.failures[0]["message"] == "b.nix, sweep 1: too short"


class TestOutcomeCache:
    PARAMETERS = {"settings": {"onset_rate_v_per_s": 20.0}, "step_s": None,
                  "step_sizes_pa": None, "sampling_rate_hz": 10_000.0, "max_sweep_samples": None}

    def test_key_follows_the_parameters_that_apply(self, tmp_path):
        cache = OutcomeCache(tmp_path, self.PARAMETERS)
        other_rate = OutcomeCache(tmp_path, dict(self.PARAMETERS, sampling_rate_hz=20_000.0))
        other_onset = OutcomeCache(tmp_path, dict(self.PARAMETERS,
                                                  settings={"onset_rate_v_per_s": 25.0}))
        sha = "ab" * 32
        # the sampling rate option applies to text files only
        assert cache.path(sha, is_text=False) == other_rate.path(sha, is_text=False)
        assert cache.path(sha, is_text=True) != other_rate.path(sha, is_text=True)
        assert cache.path(sha, is_text=False) != other_onset.path(sha, is_text=False)
        assert cache.path(sha, False).parent == tmp_path / CACHE_FOLDER

    def test_kept_text_is_json_checked_by_its_sha256(self, tmp_path):
        import hashlib

        outcome = FileOutcome("a.nix", sweeps=_sweeps({"file": ["a.nix"], "sweep": [0]}))
        path = tmp_path / "kept.json"
        OutcomeCache.store(path, OutcomeCache.text(outcome))
        kept = json.loads(path.read_text())
        canonical = json.dumps(kept["outcome"], sort_keys=True, separators=(",", ":"))
        assert kept["content_sha256"] == hashlib.sha256(canonical.encode()).hexdigest()
        back, note = OutcomeCache.load(path, "renamed.nix")
        assert note is None and back.file == "renamed.nix"
        assert back.sweeps.column("file") == ["renamed.nix"]

    def test_a_pickle_is_never_loaded(self, tmp_path):
        class Marker:
            def __reduce__(self):
                return (print, ("unpickled",))

        path = tmp_path / "kept.json"
        path.write_bytes(pickle.dumps({"content_sha256": "x", "outcome": Marker()}))
        outcome, note = OutcomeCache.load(path, "a.nix")
        assert outcome is None and "damaged" in note

    def test_missing_is_no_note_and_damaged_is_a_note(self, tmp_path):
        assert OutcomeCache.load(tmp_path / "none.json", "a.nix") == (None, None)
        (tmp_path / "bad.json").write_text('{"content_sha256": "0", "outcome": {}}')
        outcome, note = OutcomeCache.load(tmp_path / "bad.json", "a.nix")
        assert outcome is None and "does not match its checksum" in note


class TestRowsText:
    def test_rows_formatted_in_blocks_are_the_csv_of_the_whole(self, monkeypatch, tmp_path):
        """A file's rows are made into CSV text a block at a time (``ROWS_PER_BLOCK``): the
        text is that of the whole table at once, and Python's csv module reads back the
        formatted cells (with a spreadsheet formula's leading quote, as escaped)."""
        import csv
        import io

        from spikemeasure.run import record
        from spikemeasure.run.record import RunRecord, RunSummary
        from spikemeasure.tables.write import rows_csv_text

        n = 25
        rng = np.random.default_rng(2)
        baseline = rng.normal(-65.0, 5.0, n)
        baseline[::7] = np.nan
        table = _sweeps({"file": ["=a.nix"] * n, "sweep": list(range(n)),
                         "baseline_mv": list(baseline), "flags": ["x;y", ""] * 12 + ["z"]})
        outcome = FileOutcome("=a.nix", sweeps=table)
        monkeypatch.setattr(record, "ROWS_PER_BLOCK", 4)
        run = RunRecord(RunSummary(out_dir=tmp_path), {}, 0.0, None, None, None)
        text = run._rows_text(outcome)["sweeps"]
        whole = rows_csv_text(SWEEP_COLUMNS, table.formatted_rows())
        assert text == whole[len(rows_csv_text(SWEEP_COLUMNS, [])):]
        back = list(csv.reader(io.StringIO(text)))
        assert [row[1:] for row in back] == [row[1:] for row in table.formatted_rows()]
        assert {row[0] for row in back} == {"'=a.nix"}
