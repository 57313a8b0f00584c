"""accept writes only its own four files, in a folder of its own; every other file of the lab
survives byte for byte. Source: snapshots of every file's bytes before and after."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from checks_support import SAMPLE, run, lab, sample_results, read_rows, keep_files, accepted
from spikemeasure.checks.accept import accept_results
from spikemeasure.run import measure_paths


class TestAccept:
    def test_accept_replaces_the_tables_and_keeps_other_files(self, accepted):
        accepted_dir, run_dir = accepted
        (accepted_dir / "README.md").write_text("reviewed results\n")
        keep_files(run_dir, read_rows(run_dir / "cells.csv")[:1])
        accept_results(run_dir, accepted_dir, project_dir=accepted_dir.parent)
        assert len(read_rows(accepted_dir / "cells.csv")) == 1
        assert (accepted_dir / "README.md").read_text() == "reviewed results\n"
        assert sorted(p.name for p in accepted_dir.parent.iterdir()
                      if p.name.startswith(".accepted")) == []   # no temporary folders left


# --------------------------------------------------------------------------- accept's safety


@pytest.fixture(scope="module")
def measured_lab(tmp_path_factory):
    """A lab repository: recordings (two sample cells, one of them in a subfolder), a .git
    folder, notes, spikemeasure.toml, and results/ measured from the lab's top (so run.json
    lists the recordings by paths relative to it), all without accepted results."""
    import os

    lab = tmp_path_factory.mktemp("labrepo") / "lab"
    (lab / "recordings" / "day_2").mkdir(parents=True)
    shutil.copy(SAMPLE / "region_a_cell_1.nwb", lab / "recordings" / "region_a_cell_1.nwb")
    shutil.copy(SAMPLE / "region_b_cell_1.nwb", lab / "recordings" / "day_2" / "b1.nwb")
    (lab / ".git" / "objects").mkdir(parents=True)
    (lab / ".git" / "HEAD").write_text("ref: refs/heads/main\n")
    (lab / ".git" / "objects" / "ab12").write_bytes(bytes(range(256)))
    (lab / "notes").mkdir()
    (lab / "notes" / "plan.md").write_text("# what to record next\n")
    (lab / "spikemeasure.toml").write_text("[measure]\nonset_rate_v_per_s = 20.0\n")
    here = os.getcwd()
    os.chdir(lab)
    try:
        summary = measure_paths(["recordings"], "results", jobs=1, figure_format=None)
    finally:
        os.chdir(here)
    assert not summary.failures, summary.failures
    return lab


def snapshot(folder: Path) -> dict[str, bytes | None]:
    """Every file (its bytes) and folder (None) under `folder`, by relative path; links by
    their target text."""
    out: dict[str, bytes | None] = {}
    for p in sorted(folder.rglob("*")):
        rel = p.relative_to(folder).as_posix()
        if p.is_symlink():
            out[rel] = ("link " + str(p.readlink())).encode()
        else:
            out[rel] = None if p.is_dir() else p.read_bytes()
    return out


class TestAcceptKeepsTheLabsFiles:
    """accept writes only its four files in a folder of its own; every other file of the
    lab survives byte for byte, and a folder that is not one of its own is refused."""

    @pytest.fixture
    def lab_copy(self, measured_lab, tmp_path, monkeypatch):
        lab = tmp_path / "lab"
        shutil.copytree(measured_lab, lab, symlinks=True)
        (tmp_path / "elsewhere").mkdir()
        (tmp_path / "elsewhere" / "keep.txt").write_text("outside the lab\n")
        (lab / "archive" / "2025").mkdir(parents=True)   # recordings not measured in this run
        shutil.copy(SAMPLE / "region_a_cell_2.nix", lab / "archive" / "2025" / "old.nix")
        monkeypatch.chdir(lab)
        return lab

    def accept_with(self, lab: Path, folder: str, *extra: str):
        (lab / "spikemeasure.toml").write_text(
            f'[measure]\nonset_rate_v_per_s = 20.0\n[regression]\naccepted_folder = '
            f'"{folder}"\n')
        return run(["accept", "results", *extra])

    def test_other_files_and_subfolders_of_the_accepted_folder_survive(self, lab_copy):
        lab = lab_copy
        assert self.accept_with(lab, "accepted").exit_code == 0
        (lab / "accepted" / "notes").mkdir()
        (lab / "accepted" / "notes" / "review.md").write_text("looked at by hand\n")
        (lab / "accepted" / "figures").mkdir()
        (lab / "accepted" / "figures" / "fi.png").write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(64))
        (lab / "accepted" / "README.md").write_text("reviewed results\n")
        (lab / "accepted" / "notes.txt").write_text("a note kept as plain text\n")
        before = snapshot(lab.parent)
        r = self.accept_with(lab, "accepted")
        assert r.exit_code == 0, r.output
        after = snapshot(lab.parent)
        written = {f"lab/accepted/{n}" for n in ("spikes.csv", "sweeps.csv", "cells.csv",
                                                 "run.json")}
        assert set(after) == set(before)            # nothing added, nothing removed
        changed = {k for k in before if before[k] != after[k]}
        assert changed <= written | {"lab/spikemeasure.toml"}
        for name in ("spikes.csv", "sweeps.csv", "cells.csv"):
            assert (lab / "accepted" / name).read_bytes() == (lab / "results" / name).read_bytes()

    @pytest.mark.parametrize("folder, reason", [
        (".", "is the project folder itself"),
        ("{lab}", "is the project folder itself"),
        ("../lab", "is the project folder itself"),
        ("./recordings/..", "is the project folder itself"),
        ("..", "contains the project folder"),
        ("../elsewhere", "lies outside the project folder"),
        ("{elsewhere}", "lies outside the project folder"),
        ("recordings", "holds recordings of this run"),
        ("archive", "holds 1 file that would be taken as recordings (2025/old.nix)"),
        ("recordings/day_2", "holds recordings of this run"),
        ("results", "is the results folder being accepted"),
        ("results/accepted", "lies inside the results folder"),
        ("notes/plan.md", "is a file, not a folder"),
    ])
    def test_refused_folders_leave_every_file_as_it_was(self, lab_copy, folder, reason):
        lab = lab_copy
        folder = folder.format(lab=lab.as_posix(), elsewhere=(lab.parent / "elsewhere").as_posix())
        (lab / "spikemeasure.toml").write_text(
            f'[regression]\naccepted_folder = "{folder}"\n')
        before = snapshot(lab.parent)
        r = run(["accept", "results"])
        assert r.exit_code == 2, r.output
        assert reason in r.output and "nothing was written" in r.output
        assert r.output.startswith("Error: ") and str(lab.parent) in r.output
        assert "Traceback" not in r.output
        assert snapshot(lab.parent) == before

    def test_a_folder_that_contains_the_results(self, lab_copy):
        lab = lab_copy
        (lab / "out").mkdir()
        shutil.move(lab / "results", lab / "out" / "results")
        before = snapshot(lab.parent)
        (lab / "spikemeasure.toml").write_text('[regression]\naccepted_folder = "out"\n')
        before = snapshot(lab.parent)
        r = run(["accept", "out/results"])
        assert r.exit_code == 2 and "contains the results folder" in r.output, r.output
        assert snapshot(lab.parent) == before

    def test_a_recording_of_another_format_given_by_pattern(self, lab_copy):
        """A file discovery takes only with --glob: refused as a recording of the run."""
        lab = lab_copy
        (lab / "raw").mkdir()
        shutil.copy(SAMPLE / "region_a_cell_1.nwb", lab / "raw" / "cell.dat")
        record = json.loads((lab / "results" / "run.json").read_text())
        record["inputs"][0]["path"] = "raw/cell.dat"
        (lab / "results" / "run.json").write_text(json.dumps(record))
        before = snapshot(lab.parent)
        r = self.accept_with(lab, "raw")
        assert r.exit_code == 2 and "holds recordings of this run (cell.dat)" in r.output
        assert snapshot(lab.parent) == before | {"lab/spikemeasure.toml":
                                                 (lab / "spikemeasure.toml").read_bytes()}

    def test_tables_accept_did_not_write_are_not_overwritten(self, lab_copy):
        lab = lab_copy
        (lab / "old").mkdir()
        (lab / "old" / "spikes.csv").write_text("file,sweep,spike\nmine.nwb,0,0\n")
        r = self.accept_with(lab, "old")
        assert r.exit_code == 2 and "not written by accept" in r.output, r.output
        assert (lab / "old" / "spikes.csv").read_text() == "file,sweep,spike\nmine.nwb,0,0\n"
        assert sorted(p.name for p in (lab / "old").iterdir()) == ["spikes.csv"]

    def test_a_folder_named_like_an_accepted_file_is_refused(self, lab_copy):
        lab = lab_copy
        (lab / "accepted" / "run.json").mkdir(parents=True)
        (lab / "accepted" / "run.json" / "kept.md").write_text("x\n")
        r = self.accept_with(lab, "accepted")
        assert r.exit_code == 2 and "run.json there is not a file accept wrote" in r.output
        assert (lab / "accepted" / "run.json" / "kept.md").read_text() == "x\n"

    def test_a_symlinked_folder_is_judged_by_its_target(self, lab_copy):
        lab = lab_copy
        (lab / "reference").mkdir()
        (lab / "accepted").symlink_to("reference", target_is_directory=True)
        r = self.accept_with(lab, "accepted")
        assert r.exit_code == 0, r.output
        assert (lab / "accepted").is_symlink()                       # the link is kept
        assert sorted(p.name for p in (lab / "reference").iterdir()) == [
            "cells.csv", "run.json", "spikes.csv", "sweeps.csv"]
        (lab / "to_recordings").symlink_to("recordings", target_is_directory=True)
        before = snapshot(lab.parent)
        r = self.accept_with(lab, "to_recordings")
        assert r.exit_code == 2 and "that is" in r.output and "recordings" in r.output
        (lab / "to_outside").symlink_to(lab.parent / "elsewhere", target_is_directory=True)
        r = self.accept_with(lab, "to_outside")
        assert r.exit_code == 2 and "lies outside the project folder" in r.output
        assert snapshot(lab.parent / "elsewhere") == {"keep.txt": b"outside the lab\n"}
        assert {k: v for k, v in snapshot(lab.parent).items()
                if "spikemeasure.toml" not in k and "to_outside" not in k} == \
            {k: v for k, v in before.items() if "spikemeasure.toml" not in k}

    def test_a_failure_midway_says_which_files_were_replaced(self, lab_copy, monkeypatch):
        import os

        lab = lab_copy
        assert self.accept_with(lab, "accepted").exit_code == 0
        (lab / "accepted" / "notes.md").write_text("kept\n")
        before = snapshot(lab / "accepted")
        rows = read_rows(lab / "results" / "cells.csv")
        keep_files(lab / "results", rows[:1])
        real_replace = os.replace
        calls = []

        def failing_replace(src, dst):
            calls.append(dst)
            if len(calls) == 2:
                raise OSError(28, "No space left on device")
            return real_replace(src, dst)

        monkeypatch.setattr(os, "replace", failing_replace)
        r = run(["accept", "results"])
        assert r.exit_code == 2, r.output
        assert "spikes.csv was replaced already" in r.output
        assert "No space left on device" in r.output and "accept again" in r.output
        after = snapshot(lab / "accepted")
        assert set(after) == set(before)                  # no temporary file left behind
        assert after["spikes.csv"] == (lab / "results" / "spikes.csv").read_bytes()
        for name in ("sweeps.csv", "cells.csv", "run.json", "notes.md"):
            assert after[name] == before[name]

    def test_an_unwritable_folder_replaces_nothing(self, lab_copy, monkeypatch):
        """As a read-only folder does (the tests may run as a user who can write anywhere)."""
        import tempfile

        lab = lab_copy
        assert self.accept_with(lab, "accepted").exit_code == 0
        before = snapshot(lab.parent)

        def refuse(*args, **kw):
            raise PermissionError(13, "Permission denied")

        monkeypatch.setattr(tempfile, "mkstemp", refuse)
        r = run(["accept", "results"])
        assert r.exit_code == 2, r.output
        assert "Permission denied" in r.output and "nothing was replaced" in r.output
        assert snapshot(lab.parent) == before
