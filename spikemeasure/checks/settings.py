"""The ``[quality]`` and ``[regression]`` tables of the project file: what ``check`` applies.

:func:`load_check_settings` reads and validates them into :class:`CheckSettings`; the kind of
each quality limit comes from its rule (:data:`~spikemeasure.checks.rules.QUALITY_RULES`), the
built-in tolerance of each column from its declaration (:func:`default_tolerance`).
"""
from __future__ import annotations

import difflib
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

from ..columns import CELL_COLUMNS, SPIKE_COLUMNS, SWEEP_COLUMNS, Column
from ..config import (QUALITY_SECTION, REGRESSION_SECTION, ConfigError, _check_sections,
                      _describe, _is_number, _read_document)
from ..tables.write import TEXT_COLUMN_NAMES
from .rules import QUALITY_KEYS, QUALITY_RULES, REGRESSION_KEYS

__all__ = ["DEFAULT_ACCEPTED_FOLDER", "UNTOLERATED_COLUMNS", "Tolerance", "CheckSettings",
           "load_check_settings", "parse_tolerance", "default_tolerance", "tolerance_for"]

#: Folder of the accepted results, relative to the project file (or the current folder).
DEFAULT_ACCEPTED_FOLDER = "accepted"

#: Columns that identify rows or hold text: compared exactly, never with a tolerance.
UNTOLERATED_COLUMNS = frozenset({"file", "sweep", "spike", "flags"})

_QUALITY_EXAMPLES = {rule.key: rule.example for rule in QUALITY_RULES}


@dataclass(frozen=True)
class Tolerance:
    """How far a value may move from its accepted value.

    Attributes
    ----------
    amount : float
        In the column's unit (absolute), or as a fraction of the accepted value (relative).
    relative : bool
    """

    amount: float
    relative: bool = False

    def allows(self, accepted: float, value: float) -> bool:
        """True when ``|value - accepted|`` is within the tolerance.

        A relative tolerance is taken of ``|accepted|``; a tiny slack of 1e-9 of the larger
        magnitude absorbs the rounding of the difference itself.
        """
        limit = self.amount * abs(accepted) if self.relative else self.amount
        slack = 1e-9 * max(abs(accepted), abs(value))
        return abs(value - accepted) <= limit + slack

    def __str__(self) -> str:
        return f"{self.amount * 100:g}%" if self.relative else f"{self.amount:g}"


@dataclass(frozen=True)
class CheckSettings:
    """What ``spikemeasure check`` applies, from ``[quality]`` and ``[regression]``.

    Attributes
    ----------
    quality : dict
        The limits the file sets, by key of :data:`QUALITY_KEYS` (floats; a (low, high) pair
        for ``resting_range_mv``; an int for ``max_clipped_spikes``). Empty: no quality rules.
    compare : bool
        Whether to compare with the accepted results (``enabled``).
    accepted_dir : Path
        The folder of accepted results.
    allow_new_files : bool
        Whether files absent from the accepted results pass.
    default_tolerance : Tolerance or None
        Replaces the built-in tolerance of every numeric column not in `tolerances`.
    tolerances : dict of str to Tolerance
        By column name, in every table that has the column.
    config_file : str or None
        The project file, or None when the defaults apply.
    """

    quality: dict = field(default_factory=dict)
    compare: bool = True
    accepted_dir: Path = Path(DEFAULT_ACCEPTED_FOLDER)
    allow_new_files: bool = False
    default_tolerance: Tolerance | None = None
    tolerances: dict = field(default_factory=dict)
    config_file: str | None = None


def parse_tolerance(value: Any, where: str) -> Tolerance:
    """A tolerance from the file: a number (absolute) or text ``"N%"`` (relative).

    Parameters
    ----------
    value : Any
        As read from TOML.
    where : str
        Start of any message (file and key).

    Returns
    -------
    Tolerance

    Raises
    ------
    ConfigError
        For anything else, or a negative or non-finite amount.
    """
    example = 'write for example 0.5 (in the column\'s unit) or "2%" (of the accepted value)'
    if _is_number(value):
        amount = float(value)
        if not (math.isfinite(amount) and amount >= 0):
            raise ConfigError(f"{where} must be zero or positive (got {value}); {example}")
        return Tolerance(amount, relative=False)
    if isinstance(value, str):
        found = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*%\s*", value)
        if found:
            return Tolerance(float(found.group(1)) / 100.0, relative=True)
    raise ConfigError(f"{where} must be a number or a percentage in quotes (got "
                      f"{_describe(value)}); {example}")


def load_check_settings(path: str | os.PathLike | None,
                        base_dir: str | os.PathLike | None = None) -> CheckSettings:
    """Read and check the ``[quality]`` and ``[regression]`` tables of a project file.

    Parameters
    ----------
    path : str, path-like or None
        The project file; None for the defaults (no quality rules, accepted results in
        ``accepted/`` of `base_dir`, the built-in tolerances).
    base_dir : str or path-like, optional
        Where the accepted folder is looked for without a project file (default: the current
        folder). With a project file, ``accepted_folder`` is relative to the file's folder.

    Returns
    -------
    CheckSettings

    Raises
    ------
    ConfigError
        If the file cannot be read, holds an unknown table or key (the closest known one is
        suggested), or a value of the wrong type or out of range; the message names the file
        and the key.

    Notes
    -----
    ``[regression.tolerances]`` maps column names to tolerances; a name applies in every table
    that has the column (``sag_fraction`` in sweeps.csv and cells.csv). The columns that
    identify rows, and ``flags``, are compared exactly and take no tolerance.
    """
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    if path is None:
        return CheckSettings(accepted_dir=base / DEFAULT_ACCEPTED_FOLDER)
    name = str(path)
    document = _read_document(path)
    _check_sections(document, name)
    quality_table = document.get(QUALITY_SECTION, {})
    quality: dict[str, Any] = {}
    for key, value in quality_table.items():
        if key not in QUALITY_KEYS:
            raise ConfigError(f"{name}: {_unknown_in(key, QUALITY_KEYS, QUALITY_SECTION)}")
        quality[key] = _quality_value(key, value, f"{name}: key `{key}` in [{QUALITY_SECTION}]")

    table = document.get(REGRESSION_SECTION, {})
    for key in table:
        if key not in REGRESSION_KEYS:
            raise ConfigError(f"{name}: {_unknown_in(key, REGRESSION_KEYS, REGRESSION_SECTION)}")
    where = lambda key: f"{name}: key `{key}` in [{REGRESSION_SECTION}]"  # noqa: E731
    for key in ("enabled", "allow_new_files"):
        if key in table and not isinstance(table[key], bool):
            raise ConfigError(f"{where(key)} must be true or false (got "
                              f"{_describe(table[key])}); write for example {key} = true")
    folder = table.get("accepted_folder", DEFAULT_ACCEPTED_FOLDER)
    if not isinstance(folder, str) or not folder.strip():
        raise ConfigError(f"{where('accepted_folder')} must be a folder name in quotes (got "
                          f"{_describe(folder)}); write for example accepted_folder = "
                          f'"{DEFAULT_ACCEPTED_FOLDER}"')
    default = table.get("default_tolerance")
    default_tolerance = None if default is None else parse_tolerance(
        default, where("default_tolerance"))
    given = table.get("tolerances", {})
    if not isinstance(given, dict):
        raise ConfigError(
            f"{where('tolerances')} must be a table of column = tolerance, written as a "
            f"[{REGRESSION_SECTION}.tolerances] header line followed by lines such as "
            f'threshold_mv = 0.5 or half_width_ms = "2%" (got {_describe(given)})')
    known = _compared_columns()
    tolerances: dict[str, Tolerance] = {}
    for column, value in given.items():
        place = f"{name}: column `{column}` in [{REGRESSION_SECTION}.tolerances]"
        if column in UNTOLERATED_COLUMNS:
            raise ConfigError(f"{place}: `{column}` identifies rows or holds text and is "
                              f"compared exactly; remove it")
        if column not in known:
            close = difflib.get_close_matches(column, known, n=1)
            hint = f"did you mean `{close[0]}`? " if close else ""
            raise ConfigError(f"{place}: no table has this column; {hint}`spikemeasure "
                              f"columns` lists them")
        tolerances[column] = parse_tolerance(value, place)
    folder_path = Path(folder)
    if not folder_path.is_absolute():
        folder_path = Path(path).resolve().parent / folder_path
    return CheckSettings(quality=quality, compare=table.get("enabled", True),
                         accepted_dir=folder_path,
                         allow_new_files=table.get("allow_new_files", False),
                         default_tolerance=default_tolerance, tolerances=tolerances,
                         config_file=name)


def _compared_columns() -> list[str]:
    """Names of the columns a tolerance can apply to, in table order."""
    names = [c.name for cols in (SPIKE_COLUMNS, SWEEP_COLUMNS, CELL_COLUMNS) for c in cols
             if c.name not in UNTOLERATED_COLUMNS]
    return list(dict.fromkeys(names))


def _quality_value(key: str, value: Any, where: str) -> Any:
    kind = QUALITY_KEYS[key]
    example = f"write for example {key} = {_QUALITY_EXAMPLES[key]}"
    if kind == "count":
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            raise ConfigError(f"{where} must be a whole number, 0 or more (got "
                              f"{_describe(value)}); {example}")
        return int(value)
    if kind == "range":
        if (isinstance(value, (str, bytes)) or not isinstance(value, Sequence)
                or len(value) != 2 or not all(_is_number(v) for v in value)):
            raise ConfigError(f"{where} must be a list of two numbers, the lowest and highest "
                              f"allowed value (got {_describe(value)}); {example}")
        low, high = float(value[0]), float(value[1])
        if not (math.isfinite(low) and math.isfinite(high) and low < high):
            raise ConfigError(f"{where} must have LOW < HIGH (got {low:g} and {high:g}); "
                              f"{example}")
        return low, high
    if not _is_number(value) or not math.isfinite(float(value)):
        raise ConfigError(f"{where} must be a number (got {_describe(value)}); {example}")
    if kind == "positive" and not float(value) > 0:
        raise ConfigError(f"{where} must be positive (got {value}); {example}")
    return float(value)


def _unknown_in(key: str, known: Sequence[str], section: str) -> str:
    close = difflib.get_close_matches(key, list(known), n=1)
    hint = f"did you mean `{close[0]}`? " if close else ""
    return (f"unknown key `{key}` in [{section}]; {hint}The known keys are "
            f"{', '.join(known)}")


def default_tolerance(column: Column) -> Tolerance | None:
    """The built-in tolerance of a column: one unit in the last digit written.

    Parameters
    ----------
    column : Column

    Returns
    -------
    Tolerance or None
        ``10 ** -decimals`` (absolute) for a column written with decimals, so a value that
        rounds the other way on another machine passes; 0 for a whole-number column; None
        for text, which is compared exactly.
    """
    if column.name in TEXT_COLUMN_NAMES:
        return None
    if column.decimals is None:
        return Tolerance(0.0)
    return Tolerance(10.0 ** -column.decimals)


def tolerance_for(column: Column, settings: CheckSettings) -> Tolerance | None:
    """The tolerance a column is compared with: the project file's for that column, else its
    ``default_tolerance`` for a numeric column, else the built-in one
    (:func:`default_tolerance`)."""
    if column.name in settings.tolerances:
        return settings.tolerances[column.name]
    builtin = default_tolerance(column)
    if builtin is not None and settings.default_tolerance is not None:
        return settings.default_tolerance
    return builtin
