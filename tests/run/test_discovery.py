"""Finding recordings in the files and folders given: each once, by a distinct name, and every
folder that cannot be searched named as a problem."""
import os
from pathlib import Path

import pytest

from conftest import gaussian_train, step_command, write_nwb, write_text
from spikemeasure.errors import InvalidSettingError, UnreadableInputError
from spikemeasure.io import read_recording
from spikemeasure.run.discovery import find_recordings, is_temporary, search_recordings

RATE = 20_000.0


def _search(*paths, **kw):
    return search_recordings(list(paths), **kw)


def _one_text_recording(path):
    _, v = gaussian_train(RATE, [], 100.0)
    return write_text(path, v, step_command(v.size, RATE, 10.0, 0.02, 0.08, -5.0))


def test_find_recordings_relative_names_and_skips(tmp_path):
    _, v = gaussian_train(RATE, [], 100.0)
    i = step_command(v.size, RATE, 10.0, 0.02, 0.08, -5.0)
    (tmp_path / "cells" / "a").mkdir(parents=True)
    write_text(tmp_path / "cells" / "a" / "one.txt", v, i)
    write_text(tmp_path / "cells" / "two.csv", v, i, delimiter=",")
    (tmp_path / "cells" / "README.txt").write_text("notes")
    (tmp_path / "cells" / "notes.md").write_text("notes")
    (tmp_path / "cells" / ".hidden.txt").write_text("x")
    (tmp_path / "cells" / "out").mkdir()
    write_text(tmp_path / "cells" / "out" / "old.txt", v, i)
    found = find_recordings([tmp_path / "cells"], exclude=tmp_path / "cells" / "out")
    assert [name for _, name in found] == ["a/one.txt", "two.csv"]
    single = find_recordings([tmp_path / "cells" / "two.csv"])
    assert [name for _, name in single] == ["two.csv"]



def test_editor_and_download_leftovers_are_not_recordings(tmp_path):
    """Leftover names as editors, office programs and browsers write them (common practice):
    a backup ``x~``, a lock ``~$x`` or ``.~x``, a partial download ``x.part``."""
    folder = tmp_path / "cells"
    folder.mkdir()
    _one_text_recording(folder / "cell.txt")
    for leftover in ("cell.txt~", "~$cell.txt", ".~lock.cell.txt", "cell.txt.part",
                     "cell.txt.crdownload", "cell.tmp"):
        (folder / leftover).write_text("leftover")
        assert is_temporary(leftover)
    assert not is_temporary("cell.txt")
    assert [name for _, name in find_recordings([folder])] == ["cell.txt"]
    with pytest.raises(InvalidSettingError, match="`name` must be a str"):
        is_temporary(folder / "cell.txt")


def test_name_not_utf8_is_shown_escaped_and_read_by_its_real_path(tmp_path):
    """A Latin-1 byte in a name (Python holds it as the surrogate U+DCE9): shown as \\xe9."""
    folder = tmp_path / "cells"
    folder.mkdir()
    raw = os.path.join(os.fsencode(folder), b"caf\xe9.txt")
    _one_text_recording(os.fsdecode(raw))
    (path, shown), = find_recordings([folder])
    assert shown == "caf\\xe9.txt"
    shown.encode("utf-8")  # valid text
    assert os.fsencode(path) == raw and path.is_file()
    rec = read_recording(path)  # named by default as printable text too
    assert rec.path == os.path.join(str(folder), "caf\\xe9.txt")


def test_control_characters_in_a_name_are_escaped(tmp_path):
    folder = tmp_path / "cells"
    folder.mkdir()
    _one_text_recording(folder / "two\nlines.txt")
    (_, shown), = find_recordings([folder])
    assert shown == "two\\x0alines.txt"


def _deny_listing(monkeypatch, denied):
    real = os.scandir

    def scandir(path="."):
        if os.path.abspath(os.fsdecode(path)) == os.path.abspath(denied):
            raise PermissionError(13, "Permission denied", os.fsdecode(path))
        return real(path)

    monkeypatch.setattr(os, "scandir", scandir)


def _folder_with_a_locked_subfolder(tmp_path):
    folder = tmp_path / "cells"
    (folder / "locked").mkdir(parents=True)
    _one_text_recording(folder / "good.txt")
    _one_text_recording(folder / "locked" / "hidden_from_us.txt")
    return folder


def test_folder_that_cannot_be_listed_is_a_problem_not_a_silent_skip(tmp_path, monkeypatch):
    folder = _folder_with_a_locked_subfolder(tmp_path)
    _deny_listing(monkeypatch, folder / "locked")
    search = _search(folder)
    assert [name for _, name in search.files] == ["good.txt"]
    (where, message), = search.problems
    assert where == str(folder / "locked")
    assert "cannot search this folder" in message and "permission denied" in message
    with pytest.raises(UnreadableInputError, match="permission denied"):
        find_recordings([folder])


@pytest.mark.skipif(os.geteuid() == 0, reason="as root, folder permissions do not apply "
                    "(the monkeypatched test covers the same path)")
def test_folder_without_permission_is_a_problem(tmp_path):
    folder = _folder_with_a_locked_subfolder(tmp_path)
    (folder / "locked").chmod(0)
    try:
        search = _search(folder)
    finally:
        (folder / "locked").chmod(0o755)
    assert [name for _, name in search.files] == ["good.txt"]
    assert [w for w, _ in search.problems] == [str(folder / "locked")]


def _too_deep(folder: Path) -> Path:
    """Nested folders whose path is longer than PATH_MAX (made relative to an open folder,
    which the system allows): the folder whose path is too long to list by name."""
    limit = os.pathconf(str(folder), "PC_PATH_MAX")
    name = "d" * 200
    fd = os.open(folder, os.O_RDONLY)
    depth = 0
    try:
        while len(str(folder)) + depth * (len(name) + 1) <= limit + 300:
            os.mkdir(name, dir_fd=fd)
            inner = os.open(name, os.O_RDONLY, dir_fd=fd)
            os.close(fd)
            fd, depth = inner, depth + 1
    finally:
        os.close(fd)
    return folder


def test_path_longer_than_the_system_allows_is_a_problem(tmp_path):
    folder = tmp_path / "cells"
    folder.mkdir()
    _one_text_recording(folder / "good.txt")
    _too_deep(folder)
    search = _search(folder)
    assert [name for _, name in search.files] == ["good.txt"]
    assert search.problems and all("longer than the system allows" in m
                                   for _, m in search.problems)


def test_given_name_longer_than_the_system_allows_is_a_problem(tmp_path):
    _one_text_recording(tmp_path / "good.txt")
    too_long = str(tmp_path / ("x" * 300 + ".nwb"))
    search = _search(too_long, tmp_path / "good.txt")
    assert [name for _, name in search.files] == ["good.txt"]
    (where, message), = search.problems
    assert where == too_long and "longer than the system allows" in message


def test_same_name_in_two_folders_keeps_two_names(tmp_path):
    for day in ("day1", "day2"):
        (tmp_path / day).mkdir()
        _one_text_recording(tmp_path / day / "cell.txt")
    _one_text_recording(tmp_path / "day1" / "other.txt")
    files = find_recordings([tmp_path / "day1" / "cell.txt", tmp_path / "day2" / "cell.txt"])
    assert [n for _, n in files] == ["day1/cell.txt", "day2/cell.txt"]
    folders = find_recordings([tmp_path / "day1", tmp_path / "day2"])
    # the files of a folder are named alike: all with the folder's name
    assert [n for _, n in folders] == ["day1/cell.txt", "day1/other.txt", "day2/cell.txt"]
    # when the folders' names are alike too, one more level
    for lab in ("a", "b"):
        (tmp_path / lab / "day1").mkdir(parents=True)
        _one_text_recording(tmp_path / lab / "day1" / "cell.txt")
    nested = find_recordings([tmp_path / "a" / "day1", tmp_path / "b" / "day1"])
    assert [n for _, n in nested] == ["a/day1/cell.txt", "b/day1/cell.txt"]
    # no clash, no change: a single folder's files keep their relative names
    assert [n for _, n in find_recordings([tmp_path / "day1"])] == ["cell.txt", "other.txt"]


def test_escaped_name_alike_to_a_typed_name_stays_distinct(tmp_path):
    folder = tmp_path / "cells"
    folder.mkdir()
    _one_text_recording(os.fsdecode(os.path.join(os.fsencode(folder), b"caf\xe9.txt")))
    _one_text_recording(folder / "caf\\xe9.txt")  # a backslash typed in the name
    found = find_recordings([folder])
    names = [n for _, n in found]
    # sorted by the real names: the typed backslash (0x5c) before the byte 0xe9
    assert names == ["caf\\xe9.txt", "caf\\xe9.txt (2)"]
    assert os.fsencode(found[1][0]).endswith(b"caf\xe9.txt")


def test_same_file_given_twice_is_found_once_with_a_note(tmp_path):
    folder = tmp_path / "cells"
    folder.mkdir()
    _one_text_recording(folder / "cell.txt")
    (tmp_path / "link.txt").symlink_to(folder / "cell.txt")
    search = _search(folder, folder / "cell.txt", tmp_path / "link.txt")
    assert [n for _, n in search.files] == ["cell.txt"]
    assert len(search.notes) == 2
    assert all("the same file as cell.txt; measured once" in n for n in search.notes)
    assert not search.problems


def test_links_in_a_folder_followed_only_inside_it(tmp_path):
    folder = tmp_path / "cells"
    (folder / "sub").mkdir(parents=True)
    _one_text_recording(folder / "sub" / "cell.txt")
    outside = tmp_path / "private"
    outside.mkdir()
    (outside / "secret.txt").write_text("not a recording of this folder\n")
    (folder / "x.txt").symlink_to(outside / "secret.txt")
    (folder / "elsewhere").symlink_to(outside, target_is_directory=True)
    (folder / "inner.txt").symlink_to(folder / "sub" / "cell.txt")
    (folder / "loop").symlink_to(folder, target_is_directory=True)
    (folder / "broken.txt").symlink_to(folder / "gone.txt")
    search = _search(folder)
    assert [n for _, n in search.files] == ["sub/cell.txt"]  # the inner link: the same file
    assert any("inner.txt: the same file as sub/cell.txt" in n for n in search.notes)
    problems = dict(search.problems)
    assert set(problems) == {str(folder / "x.txt"), str(folder / "elsewhere"),
                             str(folder / "broken.txt")}
    assert "symbolic link to outside the folder searched; not followed" in \
        problems[str(folder / "x.txt")]
    assert "does not exist" in problems[str(folder / "broken.txt")]
    # named on the command line, a link is read as given
    given = _search(folder / "x.txt")
    assert [n for _, n in given.files] == ["x.txt"] and not given.problems


def test_pipe_in_a_folder_is_a_problem_not_read(tmp_path):
    folder = tmp_path / "cells"
    folder.mkdir()
    os.mkfifo(folder / "pipe.nwb")
    _one_text_recording(folder / "good.txt")
    search = _search(folder)
    assert [n for _, n in search.files] == ["good.txt"]
    assert [w for w, _ in search.problems] == [str(folder / "pipe.nwb")]
    assert "not a regular file" in search.problems[0][1]


def test_results_and_accepted_folders_inside_a_recording_folder_are_not_recordings(tmp_path):
    """Tables this tool wrote (told by their run.json, whatever the folder's name) are not
    text recordings: a later run over the recording folder skips them, with a note; a folder
    whose run.json is not this tool's, or not JSON, is searched as any other."""
    import json

    _, v = gaussian_train(20000.0, [30.0], 100.0)
    rec = tmp_path / "recordings"
    rec.mkdir()
    write_nwb(rec / "cell.nwb", [(v, step_command(v.size, 20000.0, 50.0))], rate_hz=20000.0)
    for folder, record in (("old results", {"tool": "spikemeasure", "status": "complete"}),
                           ("accepted", {"tool": "spikemeasure", "accepted": "2026-01-01"})):
        (rec / folder).mkdir()
        (rec / folder / "spikes.csv").write_text("file,sweep\ncell.nwb,0\n")
        (rec / folder / "run.json").write_text(json.dumps(record))
    (rec / "exported").mkdir()
    write_text(rec / "exported" / "trace.txt", v, rate_hz=20000.0)
    (rec / "exported" / "run.json").write_text("not json at all")
    search = _search(rec)
    assert [shown for _, shown in search.files] == ["cell.nwb", "exported/trace.txt"]
    assert not search.problems
    assert sorted(n.split(":")[0] for n in search.notes) == [
        str(rec / "accepted"), str(rec / "old results")]
    assert all("not searched for recordings" in n for n in search.notes)
