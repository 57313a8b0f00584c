"""Plain text (``.txt``, ``.csv``, ``.tsv``): columns under a header row naming their units.

One sweep per file (one per voltage column: a file with several holds several cells, each
with the current column of the same rank as its command), parsed with numpy in float64. (neo's text reader parses as float32, which
rounds a voltage of -70.1 mV to -70.09999847, and gives every column one unit, so a file
holding mV and pA columns cannot be read with it.) Messages say what is wrong (the encoding,
the separator, the line and column) without quoting the file.
"""
from __future__ import annotations

import io
import re
import warnings
from pathlib import Path

import numpy as np

from ..errors import UnreadableInputError
from .sweep import Sweep
from . import limits
from .hashing import HashingStream
from .messages import safe_name
from .recording import ChannelInfo, Recording
from .signals import looks_like_command
from .units import AMP_TO_PA, SECOND_TO_S, VOLT_TO_MV, split_unit

__all__ = ["TEXT_SUFFIXES", "read_text"]

TEXT_SUFFIXES = (".txt", ".csv", ".tsv")

_TEXT_BOMS = ((b"\xff\xfe\x00\x00", "UTF-32"), (b"\x00\x00\xfe\xff", "UTF-32"),
              (b"\xff\xfe", "UTF-16"), (b"\xfe\xff", "UTF-16"))
_UTF8_BOM = b"\xef\xbb\xbf"
_HEAD_BYTES = 1 << 16
_DECIMAL_COMMA = re.compile(r"[-+]?\d*,\d+(?:[eE][-+]?\d+)?")
_THOUSANDS = re.compile(r"[-+]?\d{1,3}(?:[,'\u00a0\u202f ]\d{3})+(?:\.\d*)?(?:[eE][-+]?\d+)?")
_SEPARATOR_NAMES = {"\t": "tabs", ",": "commas", ";": "semicolons", None: "spaces"}
_TEXT_RULES = ("spikemeasure reads text with columns separated by tabs, commas or spaces and "
               "numbers written with '.' as the decimal mark and no thousands separator")


def _separator_of(line: str) -> str | None:
    """The separator a line seems to use: tab, comma, semicolon, or None (spaces)."""
    for candidate in ("\t", ",", ";"):
        if candidate in line:
            return candidate
    return None


def _text_head(path: Path, shown: str) -> tuple[str, str]:
    """The header line and the first data line, decoded as UTF-8 (a UTF-8 byte-order mark is
    dropped), or an error saying why the file is not such text."""
    with open(path, "rb") as fh:
        head = fh.read(_HEAD_BYTES)
    for bom, encoding in _TEXT_BOMS:
        if head.startswith(bom):
            raise UnreadableInputError(
                f"{shown}: the file is {encoding} text (it starts with a {encoding} byte-order "
                "mark); save it as UTF-8 text")
    if b"\x00" in head:
        pairs = head[:len(head) // 2 * 2]
        if len(pairs) >= 8 and (pairs[1::2].count(0) > 0.9 * len(pairs) // 2
                                or pairs[0::2].count(0) > 0.9 * len(pairs) // 2):
            raise UnreadableInputError(
                f"{shown}: the file looks like UTF-16 text without a byte-order mark (every "
                "other byte is zero); save it as UTF-8 text")
        raise UnreadableInputError(
            f"{shown}: not a text file (it holds zero bytes, as binary files do); "
            f"{_TEXT_RULES}, under a header row")
    if head.startswith(_UTF8_BOM):
        head = head[len(_UTF8_BOM):]
    if not head.strip():
        raise UnreadableInputError(f"{shown}: the file holds only blank lines")
    lines = head.split(b"\n", 2)
    if len(lines) == 1 and len(head) >= _HEAD_BYTES - len(_UTF8_BOM):
        raise UnreadableInputError(
            f"{shown}: the first line is longer than {_HEAD_BYTES // 1024} KiB, so it is not a "
            "header row; the file may be binary or damaged")
    decoded = []
    for number, raw in enumerate(lines[:2], start=1):
        try:
            decoded.append(raw.decode("utf-8"))
        except UnicodeDecodeError:
            raise UnreadableInputError(
                f"{shown}: not UTF-8 text (line {number} holds bytes that are not UTF-8); the "
                "file may be binary, or text in another encoding: save it as UTF-8") from None
    return decoded[0], decoded[1] if len(decoded) > 1 else ""


def _cell_problem(cell: str) -> str | None:
    """Why a data cell is not a number, or None when it is one."""
    text = cell.strip()
    try:
        float(text)
        return None
    except ValueError:
        pass
    if not text:
        return "is empty"
    if len(text) >= 2 and text[0] == text[-1] and text[0] in "\"'" and _cell_problem(
            text[1:-1]) is None:
        return "is a number in quotes; write numbers without quotes"
    if _THOUSANDS.fullmatch(text):
        return "is not a number: it seems to hold a thousands separator"
    if _DECIMAL_COMMA.fullmatch(text):
        return "is not a number: it seems to use ',' as the decimal mark"
    return "is not a number"


def _diagnose_rows(path: Path, shown: str, delimiter: str | None, n_columns: int) -> str:
    """Find the first data line numpy could not parse and say what is wrong with it (never
    quoting it): its encoding, its number of fields, its separator, or the cell that is not a
    number."""
    with open(path, "rb") as fh:
        for number, raw in enumerate(fh, start=1):
            if number == 1:
                continue
            try:
                line = raw.decode("utf-8")
            except UnicodeDecodeError:
                return (f"{shown}: line {number} holds bytes that are not UTF-8 text; the file "
                        "may be damaged, or text in another encoding: save it as UTF-8")
            line = line.split("#", 1)[0].strip("\r\n")
            if not line.strip():
                continue
            cells = line.split(delimiter) if delimiter else line.split()
            if len(cells) != n_columns:
                used = _separator_of(line)
                if used != delimiter and len(line.split(used) if used else line.split()) == n_columns:
                    return (f"{shown}: line {number} is separated by "
                            f"{_SEPARATOR_NAMES[used]} but the header by "
                            f"{_SEPARATOR_NAMES[delimiter]}; use one separator throughout")
                hint = ""
                if delimiter == "," and len(cells) > n_columns:
                    hint = (" (a ',' used as the decimal mark or as a thousands separator in a "
                            "comma-separated file does this)")
                return (f"{shown}: line {number} has {len(cells)} field"
                        f"{'s' if len(cells) != 1 else ''} but the header names {n_columns} "
                        f"columns{hint}; the file may be truncated, or {_TEXT_RULES}")
            for column, cell in enumerate(cells, start=1):
                why = _cell_problem(cell)
                if why:
                    return (f"{shown}: line {number}, column {column} {why}; {_TEXT_RULES}")
    return (f"{shown}: the data rows cannot be read as numbers; {_TEXT_RULES}")


def _text_size_problem(path: Path, shown: str, header: str, first_row: str, n_columns: int,
                       max_sweep_samples: int) -> str | None:
    """Why a text file is not read, judged from its size before it is read: its rows (at
    least its size over twice the longer of the header and the first data line, as numeric
    rows vary in length by less than that) beyond `max_sweep_samples`, or their float64 values
    beyond the memory available."""
    longest = max(len(first_row.encode("utf-8")), len(header.encode("utf-8"))) + 1
    rows = (path.stat().st_size - len(header.encode("utf-8"))) // (2 * longest)
    if rows > max_sweep_samples:
        return (f"{shown}, sweep 0: the file is at least {rows:,} rows long (from its size), "
                f"more than max_sweep_samples ({max_sweep_samples:,}); it was not read. Raise "
                "--max-sweep-samples if the recording really is that long")
    available = limits.available_memory_bytes()
    if available is not None and 8 * rows * n_columns > available:
        return (f"{shown}, sweep 0: the file is at least {rows:,} rows of {n_columns} columns "
                f"long (from its size), {8 * rows * n_columns / 2 ** 30:.1f} GiB as float64, "
                f"more than the {available / 2 ** 30:.1f} GiB of memory available; it was not "
                "read")
    return None


def _header_roles(shown: str, header: str, second: str
                  ) -> tuple[str | None, list[str], dict[str, tuple[int, float]],
                             list[ChannelInfo], list[tuple[int, float]]]:
    """Read the header row: the separator, the column names, the column and scale of the
    time, voltage and command columns (the first column of each kind of unit), every
    column's channel, and every voltage and current column as (column, scale), in order."""
    if not header.strip():
        raise UnreadableInputError(
            f"{shown}: the first line is blank; it must be the header row naming each column "
            "with its unit, e.g. time_s, voltage_mV, current_pA")
    delimiter = _separator_of(header)
    if delimiter == ";":
        comma = " and numbers use ',' as the decimal mark" if re.search(r"\d,\d", second) else ""
        raise UnreadableInputError(
            f"{shown}: the columns are separated by semicolons{comma}; {_TEXT_RULES}. Export "
            "the file again with '.' as decimal mark and tabs or commas between columns")
    names = [n.strip() for n in (header.split(delimiter) if delimiter else header.split())]
    if all(re.fullmatch(r"[-+0-9.,eE]+", n or "x") for n in names):
        raise UnreadableInputError(
            f"{shown}: no header row; the first line must name each column with its unit, "
            "e.g. time_s, voltage_mV, current_pA")
    roles: dict[str, tuple[int, float]] = {}
    channels = []
    voltages, currents = [], []
    for col, raw in enumerate(names):
        _, unit = split_unit(raw)
        role = "ignored"
        for kind, table in (("time", SECOND_TO_S), ("voltage", VOLT_TO_MV),
                            ("command", AMP_TO_PA)):
            if unit in table and kind not in roles:
                roles[kind] = (col, table[unit])
                role = kind
                break
        name = safe_name(raw.strip('"').strip("'"), f"column {col + 1}")
        if unit in VOLT_TO_MV:
            voltages.append((col, VOLT_TO_MV[unit]))
        elif unit in AMP_TO_PA:
            currents.append((col, AMP_TO_PA[unit]))
        known = unit in SECOND_TO_S or unit in VOLT_TO_MV or unit in AMP_TO_PA
        channels.append(ChannelInfo(name, unit if known else "?", role))
    # the k-th voltage column is a cell of its own, with the k-th current column as command
    for k, (col, _) in enumerate(voltages):
        if k < len(currents):
            c = channels[currents[k][0]]
            channels[currents[k][0]] = ChannelInfo(c.name, c.units, "command")
        channels[col] = ChannelInfo(channels[col].name, channels[col].units, "voltage")
    pairs = [(v, currents[k] if k < len(currents) else None) for k, v in enumerate(voltages)]
    if "voltage" not in roles:
        raise UnreadableInputError(
            f"{shown}: no voltage column: none of the {len(names)} column names of the header "
            "row ends in a voltage unit; name one such as voltage_mV or voltage_V")
    return delimiter, names, roles, channels, pairs


def _load_rows(path: Path, shown: str, delimiter: str | None, n_columns: int,
               max_sweep_samples: int, stream: HashingStream | None = None) -> np.ndarray:
    """The data rows as float64, one column per header name, after the checks of their
    number and shape; parsed from `stream` (which hashes what it reads) when given."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # numpy warns of an empty file; said below
            if stream is None:
                data = np.loadtxt(path, delimiter=delimiter, skiprows=1, dtype=np.float64,
                                  ndmin=2, comments="#", encoding="utf-8-sig")
            else:  # the same parse, of a text stream decoded as numpy decodes the path
                text = io.TextIOWrapper(io.BufferedReader(stream), encoding="utf-8-sig")
                data = np.loadtxt(text, delimiter=delimiter, skiprows=1, dtype=np.float64,
                                  ndmin=2, comments="#")
    except (ValueError, UnicodeDecodeError) as exc:
        raise UnreadableInputError(
            _diagnose_rows(path, shown, delimiter, n_columns)) from exc
    if data.size == 0:
        raise UnreadableInputError(f"{shown}: a header row but no data rows")
    if data.shape[1] != n_columns:
        raise UnreadableInputError(
            f"{shown}: the header names {n_columns} columns but rows have {data.shape[1]}")
    if data.shape[0] < 3:
        raise UnreadableInputError(
            f"{shown}: only {data.shape[0]} data row{'s' if data.shape[0] != 1 else ''}; a "
            "sweep needs at least 3")
    if data.shape[0] > max_sweep_samples:
        raise UnreadableInputError(
            f"{shown}, sweep 0: {data.shape[0]:,} samples, more than max_sweep_samples "
            f"({max_sweep_samples:,}); raise --max-sweep-samples if the recording really is "
            "that long")
    return data


def _sampling_rate(shown: str, data: np.ndarray, roles: dict[str, tuple[int, float]],
                   sampling_rate_hz: float | None) -> float:
    """The sampling rate in Hz: from the time column, which must increase evenly (and agree
    with `sampling_rate_hz` when both are given), else `sampling_rate_hz`."""
    if "time" in roles:
        col, scale = roles["time"]
        t = data[:, col] * scale
        if not np.isfinite(t).all():
            row = int(np.argmin(np.isfinite(t))) + 1
            raise UnreadableInputError(
                f"{shown}: the time column is not a finite number at data row {row}; "
                "spikemeasure needs a constant sampling rate")
        steps = np.diff(t)
        if (steps <= 0).any():
            row = int(np.argmax(steps <= 0)) + 2
            raise UnreadableInputError(
                f"{shown}: the time column does not increase at data row {row} (a step of "
                "zero or less); spikemeasure needs increasing times at a constant sampling rate")
        dt = float(np.median(steps))
        if np.max(np.abs(steps - dt)) > 0.01 * dt:
            row = int(np.argmax(np.abs(steps - dt))) + 2
            raise UnreadableInputError(
                f"{shown}: the time column is not evenly spaced (around data row {row}); "
                "spikemeasure needs a constant sampling rate")
        rate = 1.0 / dt
        if sampling_rate_hz is not None and abs(rate - sampling_rate_hz) > 1e-3 * rate:
            raise UnreadableInputError(
                f"{shown}: the time column gives {rate:g} Hz but --sampling-rate says "
                f"{sampling_rate_hz:g} Hz; drop the option or fix the file")
        return rate
    if sampling_rate_hz is not None:
        return float(sampling_rate_hz)
    raise UnreadableInputError(
        f"{shown}: no time column (such as time_s or time_ms), so the sampling rate is "
        "unknown; give it with --sampling-rate HZ")


def read_text(path: Path, shown: str, sampling_rate_hz: float | None,
              max_sweep_samples: int, *, hash_input: bool = False) -> Recording:
    """Read a text file of columns under a header row naming their units: one sweep per
    voltage column (one cell each).

    Parameters
    ----------
    path : Path
        The file.
    shown : str
        How the file is named in the sweep and in messages.
    sampling_rate_hz : float or None
        The sampling rate, needed when the file has no time column.
    max_sweep_samples : int
        Files longer than this (judged from their size before they are parsed) are refused.
    hash_input : bool, optional
        Take the file's SHA-256 from the bytes parsed (:attr:`Recording.sha256`).

    Returns
    -------
    Recording

    Raises
    ------
    UnreadableInputError
        The file is not UTF-8 text of that layout, has no voltage column, no sampling rate,
        or an uneven time column; the message says where, without quoting the file.
    """
    header, second = _text_head(path, shown)
    delimiter, names, roles, channels, pairs = _header_roles(shown, header, second)
    problem = _text_size_problem(path, shown, header, second, len(names), max_sweep_samples)
    if problem:
        raise UnreadableInputError(problem)
    if hash_input:
        with HashingStream(path) as stream:
            data = _load_rows(path, shown, delimiter, len(names), max_sweep_samples, stream)
            sha256 = stream.hexdigest()
    else:
        data, sha256 = _load_rows(path, shown, delimiter, len(names), max_sweep_samples), None
    rate = _sampling_rate(shown, data, roles, sampling_rate_hz)
    electrodes = _column_electrodes(names, [v[0] for v, _ in pairs])
    sweeps, problems, problem_electrodes = [], [], []
    for ((v_col, v_scale), current), electrode in zip(pairs, electrodes):
        voltage = data[:, v_col] * v_scale
        command = None if current is None else data[:, current[0]] * current[1]
        if command is not None and looks_like_command(voltage) and not looks_like_command(
                command):
            message = (f"{shown}: this looks like a voltage-clamp recording (the voltage column "
                       "is a few flat command levels); spikemeasure measures current clamp")
            if len(pairs) == 1:
                raise UnreadableInputError(message)
            problems.append(message.replace(f"{shown}: ", f"{shown}, electrode {electrode}, "
                                            "sweep 0: ", 1))
            problem_electrodes.append(electrode)
            continue
        sweeps.append(Sweep(voltage_mv=voltage, sampling_rate_hz=rate, command_pa=command,
                            file=shown, index=0, label="", channel_info=tuple(channels),
                            electrode=electrode, cells_in_file=len(pairs)))
    if not sweeps:
        raise UnreadableInputError(f"{problems[0]} (and {len(problems) - 1} more problems)")
    return Recording(shown, "plain text (numpy, float64)", sweeps, channels, problems,
                     problem_electrodes=problem_electrodes, sha256=sha256)


def _column_electrodes(names: list[str], voltage_columns: list[int]) -> list[str]:
    """Each voltage column's electrode: "" when there is one; else the column's name without
    its unit when those are distinct, else its position among the voltage columns."""
    if len(voltage_columns) <= 1:
        return [""] * len(voltage_columns)
    bases = [safe_name(split_unit(names[c].strip('"').strip("'"))[0].rstrip("_ "), "")
             for c in voltage_columns]
    if all(bases) and len(set(bases)) == len(bases):
        return bases
    return [str(k) for k in range(len(voltage_columns))]
