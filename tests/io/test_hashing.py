"""SHA-256 taken while a file is read, against hashlib over the file's bytes (Python's
standard library implementation of FIPS 180-4)."""
from __future__ import annotations

import hashlib
import io
from pathlib import Path

import numpy as np
import pytest

from spikemeasure.errors import UnreadableInputError
from spikemeasure.io import read_recording
from spikemeasure.io.hashing import HashingStream, sha256_of_file

from conftest import REPOSITORY, write_text

RATE = 20_000.0


def _expected(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


class TestHashingStream:
    def test_a_partly_read_stream_hashes_the_whole_file(self, tmp_path):
        path = tmp_path / "bytes.bin"
        path.write_bytes(bytes(range(256)) * 5000)
        with HashingStream(path) as stream:
            reader = io.BufferedReader(stream)
            assert reader.read(1000) == path.read_bytes()[:1000]
            assert stream.hexdigest() == _expected(path)

    def test_closed_by_its_wrapper_the_digest_is_whole(self, tmp_path):
        path = tmp_path / "lines.txt"
        path.write_text("a\nb\n" * 40_000, encoding="utf-8")
        stream = HashingStream(path)
        text = io.TextIOWrapper(io.BufferedReader(stream), encoding="utf-8")
        text.readline()
        text.close()
        assert stream.hexdigest() == _expected(path)

    def test_an_empty_file(self, tmp_path):
        path = tmp_path / "empty.bin"
        path.write_bytes(b"")
        with HashingStream(path) as stream:
            assert stream.hexdigest() == hashlib.sha256(b"").hexdigest()
        assert sha256_of_file(path, chunk=7) == hashlib.sha256(b"").hexdigest()


def test_text_is_hashed_from_the_bytes_parsed(tmp_path):
    """The sweep parsed from the hashing stream is the one parsed from the path (numpy's
    loadtxt either way), and the digest is hashlib's."""
    t = np.arange(3000) / RATE
    path = write_text(tmp_path / "cell.csv", -65.0 + np.sin(40 * t), 10.0 * (t > 0.05),
                      rate_hz=RATE, delimiter=",")
    plain = read_recording(path)
    hashed = read_recording(path, hash_input=True)
    assert plain.sha256 is None and hashed.sha256 == _expected(path)
    assert hashed.sweeps[0].voltage_mv.tobytes() == plain.sweeps[0].voltage_mv.tobytes()
    assert hashed.sweeps[0].command_pa.tobytes() == plain.sweeps[0].command_pa.tobytes()


@pytest.mark.parametrize("name", ["region_a_cell_1.nwb", "region_a_cell_2.nix"])
def test_hdf5_files_are_hashed_as_they_are_read(name):
    path = REPOSITORY / "sample_data" / name
    assert read_recording(path, hash_input=True).sha256 == _expected(path)


@pytest.mark.parametrize("prefix, newline", [(b"", b"\n"), (b"\xef\xbb\xbf", b"\r\n")])
def test_text_with_a_byte_order_mark_or_crlf_reads_alike_hashed(tmp_path, prefix, newline):
    rows = [b"time_s\tvoltage_mV\tcurrent_pA"] + [
        f"{k / RATE:.6f}\t{-65 + 0.01 * k:.3f}\t{10.0 * (k > 50):.1f}".encode()
        for k in range(200)]
    path = tmp_path / "cell.txt"
    path.write_bytes(prefix + newline.join(rows) + newline)
    plain, hashed = read_recording(path), read_recording(path, hash_input=True)
    assert hashed.sha256 == _expected(path)
    assert hashed.sweeps[0].voltage_mv.tobytes() == plain.sweeps[0].voltage_mv.tobytes()
    assert hashed.sweeps[0].command_pa.tobytes() == plain.sweeps[0].command_pa.tobytes()


def test_a_text_row_that_is_not_numbers_gives_the_same_error_hashed(tmp_path):
    path = tmp_path / "cell.txt"
    path.write_text("time_s,voltage_mV\n0.0,-65\n0.00005,-65\n0.0001,abc\n0.00015,-65\n")
    with pytest.raises(UnreadableInputError) as plain:
        read_recording(path)
    with pytest.raises(UnreadableInputError) as hashed:
        read_recording(path, hash_input=True)
    assert str(hashed.value) == str(plain.value)
    assert "line 4" in str(plain.value)
