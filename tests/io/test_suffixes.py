"""The suffix table and the vetted neo readers: each suffix goes to one reader, every neo
reader used is on the vetted list, pickles are refused whatever they are named, and an
unknown suffix is an error that lists the suffixes read without trying any reader.

Sources: neo's own declarations (each reader class's ``extensions``, ``neo.io.iolist`` and
``neo.io.io_by_extension``) and the source files of the installed neo."""
import inspect
import pickle
import re
import shutil
import sys

import numpy as np
import pytest

from conftest import gaussian_train, step_command, write_nix, write_text
from spikemeasure.errors import UnreadableInputError
from spikemeasure.io import read_recording, suffix_table
from spikemeasure.io.safety import PICKLE_SUFFIXES, VETTED_NEO_READERS
from spikemeasure.io.suffixes import OWN_FORMATS

RATE = 20_000.0

#: Calls that unpickle or evaluate what they are given.
UNSAFE_CALLS = re.compile(r"\bpickle\.loads?\(|\bjoblib\.load\(|(?<![\w.])eval\(|\bexec\(")


def _one_sweep():
    _, v = gaussian_train(RATE, [25.0], 100.0)
    return [(v, step_command(v.size, RATE, 50.0, 0.02, 0.08))]


def _reader_modules(cls):
    """The source modules of a neo reader class and its raw-reading classes, without neo's
    shared base classes."""
    names = dict.fromkeys(k.__module__ for k in inspect.getmro(cls))
    return [sys.modules[n] for n in names if n.startswith("neo.")
            and not n.endswith(("baseio", "baserawio", "basefromrawio"))]


class TestVettedReaders:
    def test_every_suffix_routes_to_an_own_or_a_vetted_reader(self):
        import neo.io

        table = suffix_table()
        for suffix, reader in table.items():
            assert suffix == suffix.lower()
            if reader.neo_class is None:
                assert OWN_FORMATS[suffix] is reader, suffix
            else:
                name = reader.neo_class.__name__
                assert name in VETTED_NEO_READERS, (suffix, name)
                assert reader.neo_class is getattr(neo.io, name)
                assert reader.format_name == f"neo {name}"

    def test_each_neo_suffix_goes_to_the_first_vetted_reader_neo_lists_for_it(self):
        import neo.io

        vetted = {getattr(neo.io, name) for name in VETTED_NEO_READERS}
        expected = {}
        for extension, classes in neo.io.io_by_extension.items():
            suffix = f".{extension}" if extension else ""
            first = next((cls for cls in classes if cls in vetted), None)
            if first is not None and suffix not in OWN_FORMATS and suffix not in PICKLE_SUFFIXES:
                expected[suffix] = first
        table = suffix_table()
        assert {s: r.neo_class for s, r in table.items() if s not in OWN_FORMATS} == expected
        assert ".fake" not in table  # neo's example reader invents signals
        assert table[".mat"].neo_class is neo.io.NeoMatlabIO

    def test_own_formats_are_read_by_own_readers(self):
        table = suffix_table()
        for suffix in (".nwb", ".nix", ".txt", ".csv", ".tsv"):
            assert table[suffix].neo_class is None
        assert not PICKLE_SUFFIXES & set(table)

    def test_vetted_readers_read_files_and_neither_unpickle_nor_evaluate(self):
        import neo.io

        for name in VETTED_NEO_READERS:
            cls = getattr(neo.io, name)
            assert cls.mode == "file", name
            for module in _reader_modules(cls):
                source = inspect.getsource(module)
                assert not UNSAFE_CALLS.search(source), (name, module)
                # neo's optional cache (joblib files beside the recording) stays off
                assert "use_cache" not in source, (name, module)

    @pytest.mark.parametrize("name", ["PickleIO", "ElphyIO"])
    def test_the_source_check_finds_the_readers_left_out(self, name):
        # control: the check above can fail, on the readers the vetted list leaves out
        import neo.io

        cls = getattr(neo.io, name)
        assert name not in VETTED_NEO_READERS
        assert any(UNSAFE_CALLS.search(inspect.getsource(m)) for m in _reader_modules(cls))


class TestUnknownSuffix:
    def test_the_message_names_the_file_and_lists_the_suffixes(self, tmp_path):
        import neo.io

        path = tmp_path / "cell.unknownformat"
        path.write_text("x")
        with pytest.raises(UnreadableInputError) as caught:
            read_recording(path, shown_as="cells/cell.unknownformat")
        message = str(caught.value)
        assert message.startswith(
            "cells/cell.unknownformat: no reader for files with this suffix (.unknownformat); "
            "spikemeasure reads NWB (.nwb), NIX (.nix), text (.txt, .csv, .tsv) and, through "
            "neo, ")
        listed = set(message.split("through neo, ", 1)[1].split(", "))
        for name in VETTED_NEO_READERS:
            for extension in getattr(neo.io, name).extensions:
                suffix = f".{extension.lower()}" if extension else "no suffix"
                if suffix[1:].isdigit():  # numbered parts are named once
                    suffix = "numbered parts (.1"
                assert suffix in listed or suffix in OWN_FORMATS, suffix

    def test_no_reader_is_tried(self, tmp_path, monkeypatch):
        import neo.io

        tried = []
        for name in VETTED_NEO_READERS:
            cls = getattr(neo.io, name)
            monkeypatch.setattr(cls, "__init__", lambda self, *a, _n=name, **k: tried.append(_n))
        monkeypatch.setattr(neo.io, "list_candidate_ios", lambda *a, **k: tried.append("list"))
        path = tmp_path / "cell.odd"
        path.write_text("x")
        with pytest.raises(UnreadableInputError, match="no reader for files with this suffix"):
            read_recording(path)
        assert tried == []

    def test_suffix_case_is_ignored(self, tmp_path):
        sweeps = _one_sweep()
        path = write_nix(tmp_path / "cell.nix", sweeps, rate_hz=RATE)
        upper = path.rename(tmp_path / "CELL.NIX")
        rec = read_recording(upper)
        assert rec.format == "NIX (one sweep per segment)"
        np.testing.assert_allclose(rec.sweeps[0].voltage_mv, sweeps[0][0], rtol=1e-12)


class TestPickles:
    MESSAGE = ("cells/data{suffix}: pickle files can run code when loaded, so spikemeasure does "
               "not open them; export the recording to NWB, NIX or text")

    @pytest.mark.parametrize("suffix", sorted(PICKLE_SUFFIXES) + [".PKL"])
    def test_a_recording_renamed_to_a_pickle_suffix_is_refused(self, tmp_path, suffix):
        good = write_nix(tmp_path / "cell.nix", _one_sweep(), rate_hz=RATE)
        assert read_recording(good).sweeps  # readable under its own name
        renamed = tmp_path / f"data{suffix}"
        shutil.copyfile(good, renamed)
        with pytest.raises(UnreadableInputError) as caught:
            read_recording(renamed, shown_as=f"cells/data{suffix}")
        assert str(caught.value) == self.MESSAGE.format(suffix=suffix)

    @pytest.mark.parametrize("suffix", [".nix", ".txt", ".fake", ".unknownformat"])
    def test_a_pickle_under_any_suffix_is_refused_by_content(self, tmp_path, suffix):
        # protocols 2-5 start with 0x80 and the protocol number (Python's pickle module)
        for protocol in range(2, pickle.HIGHEST_PROTOCOL + 1):
            path = tmp_path / f"data{suffix}"
            path.write_bytes(pickle.dumps({"voltage": [1.0, 2.0]}, protocol=protocol))
            with pytest.raises(UnreadableInputError) as caught:
                read_recording(path, shown_as=f"data{suffix}")
            assert str(caught.value) == (
                f"data{suffix}: the file is a Python pickle, which can run code when loaded; "
                "spikemeasure does not open it. Export the recording to NWB, NIX or text")

    def test_text_still_read_beside_the_refusals(self, tmp_path):
        (v, i), = _one_sweep()
        rec = read_recording(write_text(tmp_path / "cell.txt", v, i, rate_hz=RATE))
        np.testing.assert_allclose(rec.sweeps[0].voltage_mv, v, rtol=1e-8)
