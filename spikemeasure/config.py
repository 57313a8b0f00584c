"""A lab's project file, ``spikemeasure.toml``: the settings a team measures with.

The file holds one table, ``[measure]``, whose keys are named like the fields of
:class:`~spikemeasure.detection.DetectionSettings` plus four run options::

    [measure]
    onset_rate_v_per_s = 20.0
    threshold_method = "max_rate_fraction"
    threshold_fraction = 0.05
    step_s = [0.1, 0.7]          # current step start and end, s
    step_sizes_pa = "-100:20"    # FIRST:INCREMENT, pA
    sampling_rate_hz = 20000
    max_sweep_samples = 1000000000   # sweeps declaring more are refused unread

Values given on the command line win over the file, and the file wins over the defaults of
:class:`~spikemeasure.detection.DetectionSettings`. The file is only ever parsed as TOML;
nothing in it is executed.
"""
from __future__ import annotations

import difflib
import math
import os
import re
import sys
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

from .detection import THRESHOLD_METHODS, DetectionSettings
from .errors import InvalidSettingError, SpikemeasureError
from .checks.rules import QUALITY_KEYS, REGRESSION_KEYS
from .sweeps import parse_step_sizes

if sys.version_info >= (3, 11):
    import tomllib
else:  # Python 3.10: the same parser, packaged separately
    try:
        import tomli as tomllib
    except ImportError:  # reported when a file is read, so the rest of the tool still works
        tomllib = None

__all__ = ["CONFIG_FILE_NAME", "CONFIG_SECTION", "SETTING_KEYS", "RUN_KEYS", "KNOWN_KEYS",
           "QUALITY_SECTION", "REGRESSION_SECTION", "SECTIONS", "ConfigError", "RunParameters",
           "find_config_file", "find_project_file", "load_config", "merge_parameters"]

#: Name of the project file looked for in the first folder given.
CONFIG_FILE_NAME = "spikemeasure.toml"

#: The one table the file may hold.
CONFIG_SECTION = "measure"

#: Keys that set :class:`DetectionSettings` fields, in field order.
SETTING_KEYS: tuple[str, ...] = tuple(f.name for f in fields(DetectionSettings))

#: Keys for the run options outside :class:`DetectionSettings`.
RUN_KEYS: tuple[str, ...] = ("step_s", "step_sizes_pa", "sampling_rate_hz", "max_sweep_samples")

#: Every key ``[measure]`` accepts.
KNOWN_KEYS: tuple[str, ...] = SETTING_KEYS + RUN_KEYS

_INTEGER_KEYS = frozenset({"min_samples_across_width"})
_STRING_KEYS = frozenset({"threshold_method"})

_EXAMPLES = {"step_s": "[0.1, 0.7]", "step_sizes_pa": '"-100:20"',
             "sampling_rate_hz": "20000.0", "threshold_method": f'"{THRESHOLD_METHODS[0]}"',
             "min_samples_across_width": "3", "max_sweep_samples": "1000000000"}


#: The table of quality limits, read by ``spikemeasure check``.
QUALITY_SECTION = "quality"

#: The table of the comparison with accepted results, read by ``spikemeasure check``.
REGRESSION_SECTION = "regression"

#: Every table the file may hold.
SECTIONS: tuple[str, ...] = (CONFIG_SECTION, QUALITY_SECTION, REGRESSION_SECTION)


class ConfigError(SpikemeasureError):
    """The project file cannot be read, or holds an unknown key, a wrong type or a bad value."""


@dataclass(frozen=True)
class RunParameters:
    """The settings of one run, after the command line, the project file and the defaults.

    Attributes
    ----------
    settings : DetectionSettings
        Detection and measurement settings.
    step_times : (float, float) or None
        Start and end of the current step in s, for files without a command channel.
    step_sizes : (float, float) or None
        First step size and increment in pA (sweep k gets first + k * increment).
    sampling_rate_hz : float or None
        Sampling rate for text files without a time column.
    config_file : str or None
        The project file the values came from, or None when none was used.
    max_sweep_samples : int or None
        Sweeps declaring more samples are refused before they are read; None: the reader's
        default (:data:`spikemeasure.io.DEFAULT_MAX_SWEEP_SAMPLES`).
    """

    settings: DetectionSettings
    step_times: tuple[float, float] | None
    step_sizes: tuple[float, float] | None
    sampling_rate_hz: float | None
    config_file: str | None
    max_sweep_samples: int | None = None

    def as_dict(self) -> dict:
        """The parameters as one flat, JSON-ready dictionary, keyed as in the project file.

        Returns
        -------
        dict
            Every :class:`DetectionSettings` field, ``step_s`` and ``step_sizes_pa`` (lists of
            two numbers, or None), ``sampling_rate_hz``, ``max_sweep_samples`` and
            ``config_file``.

        Notes
        -----
        :meth:`from_dict` turns the result (also after a JSON round trip) back into an equal
        :class:`RunParameters`.
        """
        return {**self.settings.as_dict(),
                "step_s": list(self.step_times) if self.step_times is not None else None,
                "step_sizes_pa": list(self.step_sizes) if self.step_sizes is not None else None,
                "sampling_rate_hz": self.sampling_rate_hz,
                "max_sweep_samples": self.max_sweep_samples,
                "config_file": self.config_file}

    @classmethod
    def from_dict(cls, values: Mapping[str, Any]) -> "RunParameters":
        """Rebuild parameters from the output of :meth:`as_dict`.

        Parameters
        ----------
        values : mapping
            As written by :meth:`as_dict`, for example the parameters of a run record.
            Missing setting keys take their defaults.

        Returns
        -------
        RunParameters

        Raises
        ------
        InvalidSettingError
            For a key :meth:`as_dict` does not write, or a value out of range.
        """
        unknown = sorted(set(values) - set(KNOWN_KEYS) - {"config_file"})
        if unknown:
            raise InvalidSettingError(
                f"unknown parameter key(s) {', '.join(map(repr, unknown))}; expected the keys "
                f"RunParameters.as_dict writes: {', '.join(KNOWN_KEYS + ('config_file',))}")
        settings = DetectionSettings(**{k: values[k] for k in SETTING_KEYS if k in values})
        pair = lambda v: None if v is None else (float(v[0]), float(v[1]))  # noqa: E731
        rate = values.get("sampling_rate_hz")
        limit = values.get("max_sweep_samples")
        if limit is not None:
            limit = _checked("max_sweep_samples", limit, "`max_sweep_samples`", from_file=False,
                             error=InvalidSettingError)
        return cls(settings=settings, step_times=pair(values.get("step_s")),
                   step_sizes=pair(values.get("step_sizes_pa")),
                   sampling_rate_hz=None if rate is None else float(rate),
                   config_file=values.get("config_file"), max_sweep_samples=limit)


def find_config_file(paths: Sequence[str | os.PathLike]) -> Path | None:
    """``spikemeasure.toml`` in the first folder given (the commands look in the current folder
    first: :func:`find_project_file`).

    Parameters
    ----------
    paths : sequence of str or path-like
        The files and folders named on the command line, in order.

    Returns
    -------
    Path or None
        ``<first folder>/spikemeasure.toml`` if that file exists, else None.

    Notes
    -----
    Only the first argument that is a folder is looked in, and only at its top level:
    subfolders are not searched, later folders are not tried, and file arguments are passed
    over (their parent folder is not looked in). Arguments that do not exist are passed over
    too; reporting them is the reader's job.
    """
    for p in paths:
        folder = Path(p)
        if folder.is_dir():
            candidate = folder / CONFIG_FILE_NAME
            return candidate if candidate.is_file() else None
    return None


def load_config(path: str | os.PathLike) -> dict:
    """Read and check the ``[measure]`` table of a project file.

    Parameters
    ----------
    path : str or path-like
        The TOML file.

    Returns
    -------
    dict
        The keys the file sets, named as in the file, with checked values: floats for the
        numeric settings and ``sampling_rate_hz``, an int for ``min_samples_across_width`` and
        ``max_sweep_samples``, a
        str for ``threshold_method``, ``(start_s, end_s)`` for ``step_s`` and
        ``(first_pa, increment_pa)`` for ``step_sizes_pa``. A file without ``[measure]``
        gives an empty dict.

    Raises
    ------
    ConfigError
        If the file cannot be read or is not valid TOML (the message gives the line), holds a
        top-level key other than ``[measure]`` or an unknown key in it (the message lists the
        known keys and suggests the closest), a value of the wrong type, or a value the
        settings reject.

    Notes
    -----
    The settings the file gives are checked together against the defaults of the rest, so a
    file must be consistent on its own (for example ``smoothing_ms`` shorter than the
    effective ``peak_window_ms``).
    """
    name = str(path)
    document = _read_document(path)

    _check_sections(document, name)
    table = document.get(CONFIG_SECTION, {})
    if not isinstance(table, dict):
        raise ConfigError(
            f"{name}: `{CONFIG_SECTION}` must be a table, written as a [{CONFIG_SECTION}] "
            f"header line followed by `key = value` lines (got {_describe(table)})")
    for key in table:
        if key not in KNOWN_KEYS:
            raise ConfigError(f"{name}: {_unknown_key_message(key, f'[{CONFIG_SECTION}]')}")

    where = {key: f"{name}: key `{key}` in [{CONFIG_SECTION}]" for key in table}
    values = {key: _checked(key, value, where[key], from_file=True)
              for key, value in table.items()}
    _settings_from(values, lambda keys, exc: ConfigError(
        f"{name}: [{CONFIG_SECTION}] {_keys_phrase(keys)}: {exc}; change "
        f"{'it' if len(keys) == 1 else 'one of them'} in {name}"))
    return values


def _read_document(path: str | os.PathLike) -> dict:
    """The project file parsed as TOML, or a ConfigError naming the file and the problem."""
    name = str(path)
    if tomllib is None:
        raise ConfigError(
            f"{name}: reading a project file on Python 3.10 needs the 'tomli' package; "
            f"install it (pip install tomli) or use Python 3.11 or newer")
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except OSError as exc:
        raise ConfigError(f"{name}: cannot read the project file ({exc.strerror or exc}); "
                          f"check that it exists and is readable") from exc
    except UnicodeDecodeError as exc:
        raise ConfigError(f"{name}: the project file is not UTF-8 text; save it as UTF-8") from exc
    except tomllib.TOMLDecodeError as exc:
        found = re.search(r"line (\d+)", str(exc))
        where = f" at line {found.group(1)}" if found else ""
        raise ConfigError(
            f"{name}: not valid TOML{where}: {exc}. Check that line: keys are written "
            f"`name = value`, text values need quotes and lists square brackets") from exc


def _check_sections(document: dict, name: str) -> None:
    """Every top-level entry must be one of the known tables."""
    extra = [k for k in document if k not in SECTIONS]
    if extra:
        close = difflib.get_close_matches(extra[0], SECTIONS, n=1)
        hint = f"did you mean [{close[0]}]? " if close else ""
        raise ConfigError(
            f"{name}: unknown top-level key or table {_quote(extra[0])}; {hint}the file may "
            f"hold the tables [{CONFIG_SECTION}] (keys {', '.join(KNOWN_KEYS)}), "
            f"[{QUALITY_SECTION}] (keys {', '.join(QUALITY_KEYS)}) and [{REGRESSION_SECTION}] "
            f"(keys {', '.join(REGRESSION_KEYS)}). Move the setting under "
            f"[{CONFIG_SECTION}] or the table it belongs to, or remove it")
    for section in SECTIONS:
        if section in document and not isinstance(document[section], dict):
            raise ConfigError(
                f"{name}: `{section}` must be a table, written as a [{section}] header line "
                f"followed by `key = value` lines (got {_describe(document[section])})")


def merge_parameters(file_values: Mapping[str, Any], cli_values: Mapping[str, Any],
                     config_file: str | None) -> RunParameters:
    """Combine command-line options, project-file values and defaults into run parameters.

    Parameters
    ----------
    file_values : mapping
        Values from :func:`load_config` (empty when there is no project file).
    cli_values : mapping
        Only the options the user gave on the command line, keyed like the project file: the
        :class:`DetectionSettings` field names, ``step_s`` (start, end), ``step_sizes_pa``
        (``"FIRST:INCREMENT"`` or (first, increment)), ``sampling_rate_hz`` and
        ``max_sweep_samples``.
    config_file : str or None
        The project file `file_values` came from, for messages and the run record.

    Returns
    -------
    RunParameters
        Each value from the command line if given there, else from the file, else the
        :class:`DetectionSettings` default (None for the run options).

    Raises
    ------
    ConfigError
        If a value from the file is of the wrong type, or the combined settings are
        inconsistent and a value from the file takes part (the message says which value
        came from where), or the file gives ``step_sizes_pa`` and no step times are given
        anywhere.
    InvalidSettingError
        For the same problems when only command-line values take part, or for a key that is
        not a known parameter.

    Notes
    -----
    A None value counts as not given. Keys are merged one by one: command-line ``step_s``
    with file ``step_sizes_pa`` gives both.
    """
    source_name = config_file or CONFIG_FILE_NAME
    for label, given in (("project-file", file_values), ("command-line", cli_values)):
        for key in given:
            if key not in KNOWN_KEYS:
                raise InvalidSettingError(_unknown_key_message(key, f"the {label} values"))
    origin: dict[str, str] = {}
    values: dict[str, Any] = {}
    for key, value in file_values.items():
        if value is not None:
            values[key] = _checked(key, value, f"{source_name}: key `{key}` in "
                                   f"[{CONFIG_SECTION}]", from_file=False,
                                   error=ConfigError)
            origin[key] = "file"
    for key, value in cli_values.items():
        if value is not None:
            values[key] = _checked(key, value, f"the command-line value for `{key}`",
                                   from_file=False, error=InvalidSettingError)
            origin[key] = "command line"

    def error_for(keys: list[str]) -> type[SpikemeasureError]:
        return ConfigError if any(origin.get(k) == "file" for k in keys) else InvalidSettingError

    def blame(keys: list[str], exc: InvalidSettingError) -> SpikemeasureError:
        parts = [f"`{k}` from " + (source_name if origin[k] == "file" else "the command line")
                 for k in keys]
        places = sorted({source_name if origin[k] == "file" else "the command line"
                         for k in keys})
        return error_for(keys)(f"the settings ({', '.join(parts)}): {exc}; change "
                               f"{'it' if len(keys) == 1 else 'one of them'} in "
                               f"{' or '.join(places)}")

    settings = _settings_from(values, blame)

    if "step_sizes_pa" in values and "step_s" not in values:
        where = (source_name if origin["step_sizes_pa"] == "file" else "the command line")
        raise error_for(["step_sizes_pa"])(
            f"`step_sizes_pa` (from {where}) needs the step times `step_s`: add "
            f"step_s = {_EXAMPLES['step_s']} (start and end in s) under [{CONFIG_SECTION}] in "
            f"{source_name}, or give the step's start and end on the command line")
    return RunParameters(settings=settings, step_times=values.get("step_s"),
                         step_sizes=values.get("step_sizes_pa"),
                         sampling_rate_hz=values.get("sampling_rate_hz"),
                         config_file=config_file,
                         max_sweep_samples=values.get("max_sweep_samples"))


def _settings_from(values: Mapping[str, Any],
                   blame: Callable[[list[str], InvalidSettingError], SpikemeasureError]
                   ) -> DetectionSettings:
    """DetectionSettings from the setting keys of `values`.

    A rejection is passed to `blame` with the keys of `values` its message names (the
    settings name fields in backquotes), or all setting keys given if it names none of them.
    The defaults are consistent, so a rejection always involves a given key.
    """
    given = {k: values[k] for k in SETTING_KEYS if k in values}
    try:
        return DetectionSettings(**given)
    except InvalidSettingError as exc:
        named = [k for k in dict.fromkeys(re.findall(r"`(\w+)`", str(exc))) if k in given]
        raise blame(named or list(given), exc) from exc


def _checked(key: str, value: Any, where: str, *, from_file: bool,
             error: type[SpikemeasureError] = ConfigError) -> Any:
    """`value` for `key` with its type checked and converted; `where` starts any message.

    With `from_file`, ``step_sizes_pa`` must be the text the file format asks for; otherwise
    (values already read, or from the command line) a (first, increment) pair is accepted too.
    """
    def fail(expected: str) -> None:
        example = _EXAMPLES.get(key, "20.0")
        raise error(f"{where} must be {expected} (got {_describe(value)}); write for example "
                    f"{key} = {example}")

    if key in _STRING_KEYS:
        if not isinstance(value, str):
            fail(f"a quoted text value, one of {', '.join(map(repr, THRESHOLD_METHODS))}")
        return value
    if key in _INTEGER_KEYS:
        if isinstance(value, bool) or not isinstance(value, int):
            fail("a whole number without a decimal point")
        return int(value)
    if key == "step_s":
        if (isinstance(value, (str, bytes)) or not isinstance(value, Sequence)
                or len(value) != 2 or not all(_is_number(v) for v in value)):
            fail("a list of two numbers, the step's start and end in s")
        start, end = float(value[0]), float(value[1])
        if not (math.isfinite(start) and math.isfinite(end) and 0 <= start < end):
            raise error(f"{where} must satisfy 0 <= START < END, in s (got {start} to {end}); "
                        f"give the start and end of the current step")
        return start, end
    if key == "step_sizes_pa":
        if isinstance(value, str):
            try:
                return parse_step_sizes(value)
            except InvalidSettingError as exc:
                raise error(f"{where}: {exc}") from exc
        if (not from_file and isinstance(value, Sequence) and len(value) == 2
                and all(_is_number(v) for v in value)):
            first, increment = float(value[0]), float(value[1])
            if math.isfinite(first) and math.isfinite(increment):
                return first, increment
        fail('text "FIRST:INCREMENT" in pA (quoted)')
    if key == "max_sweep_samples":
        if (not _is_number(value) or not math.isfinite(float(value)) or float(value) < 1
                or float(value) != int(value)):
            fail("a positive whole number of samples")
        return int(value)
    if not _is_number(value):
        fail("a number")
    number = float(value)
    if key == "sampling_rate_hz" and not (math.isfinite(number) and number > 0):
        raise error(f"{where} must be a positive number of samples per second (got {value}); "
                    f"write for example sampling_rate_hz = {_EXAMPLES['sampling_rate_hz']}")
    return number


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _describe(value: Any) -> str:
    kind = {bool: "a true/false value", str: "text", int: "a whole number",
            float: "a decimal number", list: "a list", tuple: "a list",
            dict: "a table"}.get(type(value), type(value).__name__)
    shown = str(value).lower() if isinstance(value, bool) else repr(value)
    return f"{shown}, {kind}"


def _quote(key: str) -> str:
    return f"`{key}`"


def _keys_phrase(keys: list[str]) -> str:
    return ("key " if len(keys) == 1 else "keys ") + ", ".join(map(_quote, keys))


def _unknown_key_message(key: str, where: str) -> str:
    close = difflib.get_close_matches(key, KNOWN_KEYS, n=1)
    hint = f"did you mean `{close[0]}`? " if close else ""
    return (f"unknown key `{key}` in {where}; {hint}The known keys are "
            f"{', '.join(KNOWN_KEYS)}")


def find_project_file(paths: Sequence[str | os.PathLike] = (),
                      cwd: str | os.PathLike | None = None) -> Path | None:
    """The project file of a command: in the current folder, else in the first folder given.

    Parameters
    ----------
    paths : sequence of str or path-like, optional
        The paths named on the command line.
    cwd : str or path-like, optional
        The current folder (default: the process's).

    Returns
    -------
    Path or None
        ``spikemeasure.toml`` of the current folder (the top of a lab's repository, where CI
        runs) if it exists, else that of the first folder given (:func:`find_config_file`).
    """
    here = Path(cwd) if cwd is not None else Path(".")
    candidate = here / CONFIG_FILE_NAME
    if candidate.is_file():
        return candidate
    return find_config_file(paths)
