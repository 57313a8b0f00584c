"""The groups file: which group each file of a run belongs to."""
import re

import pytest
from click.testing import CliRunner

from conftest import RC_RATE_HZ as RATE, rc_cell_sweeps, write_nix
from spikemeasure.cli import main
from spikemeasure.report import GroupsFileError, read_groups


class TestGroupsFile:
    def test_reads_files_and_groups(self, tmp_path):
        p = tmp_path / "g.csv"
        p.write_text("genotype,file\nwt,a.nix\nko,./day 1\\b.nwb\n")
        groups = read_groups(p)
        assert groups.label == "genotype"
        assert groups.mapping == {"a.nix": "wt", "day 1/b.nwb": "ko"}

    @pytest.mark.parametrize("text, message", [
        ("", "empty"),
        ("name,group\na.nix,wt\n", "no `file` column"),
        ("file,group,age\na.nix,wt,3\n", "exactly one group column"),
        ("file,group\na.nix\n", "line 2: 1 cells"),
        ("file,group\na.nix,\n", "line 2"),
        ("file,group\na.nix,wt\na.nix,ko\n", "line 3: a.nix is in 'wt' already"),
    ])
    def test_bad_files_are_named_with_what_is_wrong(self, tmp_path, text, message):
        p = tmp_path / "groups.csv"
        p.write_text(text)
        with pytest.raises(GroupsFileError, match=re.escape(message)) as info:
            read_groups(p)
        assert str(p) in str(info.value)

    def test_a_bad_groups_file_is_a_usage_error(self, tmp_path):
        cell = write_nix(tmp_path / "plain.nix", rc_cell_sweeps()[:1], rate_hz=RATE)
        p = tmp_path / "groups.csv"
        p.write_text("cell,group\na.nix,wt\n")
        r = CliRunner().invoke(main, ["measure", str(cell), "--out",
                                      str(tmp_path / "out"), "--groups", str(p)])
        assert r.exit_code == 2
        assert "--groups" in r.output and str(p) in r.output and "no `file` column" in r.output
        assert "Traceback" not in r.output
        assert not (tmp_path / "out").exists()  # nothing measured


def test_groups_file_names_copied_from_cells_csv_match(tmp_path):
    """A name cells.csv writes escaped ('=cell.nix) names the file =cell.nix."""
    path = tmp_path / "groups.csv"
    path.write_text("file,genotype\n\"'=cell.nix\",mutant\n'plain.nix,control\n")
    assert read_groups(path).mapping == {"=cell.nix": "mutant", "'plain.nix": "control"}
