"""Every parameter of a measurement, declared once.

Each :class:`Parameter` says its name (the field of
:class:`~spikemeasure.detection.DetectionSettings`, the key of the project file's
``[measure]`` table, of the Python API's keywords and of run.json's ``parameters``), its
command-line option, unit, default, allowed values, help text and an example. The command
line's options, the project file's validation, the API's setting types, run.json's parameter
record and the table in docs/batch.md (:func:`parameters_markdown`) are all made from
:data:`PARAMETERS`, and every value is checked by one function, :func:`check_value`, so a
value out of range gets the same message wherever it was given.

This module imports nothing but the standard library and :mod:`spikemeasure.errors`, so the
command line can build its options without loading numpy.
"""
from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

from .errors import InvalidSettingError

__all__ = ["Parameter", "PARAMETERS", "SETTING_PARAMETERS", "RUN_OPTION_PARAMETERS",
           "KINDS", "parameter", "default_of", "check_value", "parameters_record",
           "parameters_markdown", "REPORT_PARAMETER", "SELF_CONTAINED_MAX_CELLS"]

#: Kinds of value a parameter takes.
#: ``number``: a finite real number within the range; ``whole_number``: an integer within the
#: range (an integral float is taken as the integer); ``choice``: one of the choices (text);
#: ``time_span``: two numbers ``(start, end)`` with ``0 <= start < end``; ``step_series``:
#: text ``"FIRST:INCREMENT"`` or two finite numbers ``(first, increment)``.
KINDS = ("number", "whole_number", "choice", "time_span", "step_series")


@dataclass(frozen=True)
class Parameter:
    """The declaration of one parameter.

    Attributes
    ----------
    name : str
        The name everywhere but on the command line (settings field, project-file key, API
        keyword, run.json key), with the unit as suffix.
    option : str
        The command-line option.
    unit : str
        The unit of the value ("" for counts, fractions and choices).
    default : Any
        The value without an option or key; None: not given (the step and sampling-rate
        options, the reader's own limit of samples).
    kind : str
        One of :data:`KINDS`.
    help : str
        One sentence without the unit (the command line adds it), for ``--help`` and the docs.
    example : str
        A value as written in the project file (TOML), for messages and the docs.
    low, high : float or None
        The range of a ``number`` or ``whole_number`` (None: unbounded on that side).
    low_open, high_open : bool
        Whether `low` and `high` themselves are excluded.
    choices : tuple of str
        The values of a ``choice``.
    metavar : str
        The placeholder of the value in ``--help``.
    in_settings : bool
        True for the fields of :class:`~spikemeasure.detection.DetectionSettings`; False for
        the run options (step, step sizes, sampling rate, samples limit).
    affects_tables : bool
        Whether the value can change what the tables say, so that a kept outcome measured
        with another value must not be reused.
    default_text : str
        What the default means, shown when `default` is None.
    """

    name: str
    option: str
    unit: str
    default: Any
    kind: str
    help: str
    example: str
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    choices: tuple[str, ...] = ()
    metavar: str = ""
    in_settings: bool = True
    affects_tables: bool = True
    default_text: str = ""

    @property
    def python_type(self) -> type:
        """The type of a checked value: float, int, str or tuple."""
        return {"number": float, "whole_number": int, "choice": str}.get(self.kind, tuple)

    @property
    def requirement(self) -> str:
        """What a valid value is, in words (the unit included), for messages and the docs."""
        unit = f", in {self.unit}" if self.unit else ""
        if self.kind == "choice":
            return "one of " + ", ".join(self.choices)
        if self.kind == "time_span":
            return f"two numbers START END{unit}, with 0 <= START < END"
        if self.kind == "step_series":
            return f'text "FIRST:INCREMENT"{unit}, such as "-100:20", or two numbers'
        noun = "a whole number" if self.kind == "whole_number" else "a number"
        if self.low == 0 and self.low_open and self.high is None:
            return noun.replace("a ", "a positive ", 1) + unit
        return noun + self._range_words() + unit

    def _range_words(self) -> str:
        low, high = self.low, self.high
        if low is not None and high is not None:
            ends = {(True, True): "both excluded", (False, False): "both included",
                    (True, False): f"{low:g} excluded", (False, True): f"{high:g} excluded"}
            return f" between {low:g} and {high:g}, {ends[self.low_open, self.high_open]}"
        if low is not None:
            return f" greater than {low:g}" if self.low_open else f", {low:g} or more"
        if high is not None:
            return f" less than {high:g}" if self.high_open else f", {high:g} or less"
        return ""

    def check(self, value: Any) -> Any:
        """`value` checked and converted to :attr:`python_type` (a tuple of floats for the
        pairs).

        Raises
        ------
        InvalidSettingError
            ``"`name` must be <requirement> (got <value>)"``, the one message for a bad value
            whether it came from the API, the command line or the project file.
        """
        checker = {"number": self._checked_number, "whole_number": self._checked_whole,
                   "choice": self._checked_choice, "time_span": self._checked_span,
                   "step_series": self._checked_series}[self.kind]
        checked = checker(value)
        if checked is None:
            raise InvalidSettingError(
                f"`{self.name}` must be {self.requirement} (got {_shown(value)})")
        return checked

    def _in_range(self, number: float) -> bool:
        if not math.isfinite(number):
            return False
        if self.low is not None and (number < self.low or (self.low_open and number == self.low)):
            return False
        return not (self.high is not None
                    and (number > self.high or (self.high_open and number == self.high)))

    def _checked_number(self, value: Any) -> float | None:
        if not _is_real(value) or not self._in_range(float(value)):
            return None
        return float(value)

    def _checked_whole(self, value: Any) -> int | None:
        if not _is_real(value) or not math.isfinite(float(value)) or value != int(value):
            return None
        return int(value) if self._in_range(float(value)) else None

    def _checked_choice(self, value: Any) -> str | None:
        return value if isinstance(value, str) and value in self.choices else None

    def _checked_span(self, value: Any) -> tuple[float, float] | None:
        pair = _finite_pair(value)
        if pair is None or not 0 <= pair[0] < pair[1]:
            return None
        return pair

    def _checked_series(self, value: Any) -> tuple[float, float] | None:
        if isinstance(value, str):
            parts = value.split(":")
            try:
                value = tuple(float(part) for part in parts) if len(parts) == 2 else ()
            except ValueError:
                return None
        return _finite_pair(value)


def _is_real(value: Any) -> bool:
    """A real number (also numpy's), not a bool."""
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def _finite_pair(value: Any) -> tuple[float, float] | None:
    if isinstance(value, (str, bytes)) or not isinstance(value, Sequence) or len(value) != 2:
        return None
    if not all(_is_real(v) and math.isfinite(float(v)) for v in value):
        return None
    return float(value[0]), float(value[1])


def _shown(value: Any) -> str:
    """A value in a message: numbers as written (without numpy's type), anything else by repr."""
    if isinstance(value, numbers.Integral) and not isinstance(value, bool):
        return str(int(value))
    if _is_real(value):  # 3.0 from a file, "3" from the command line: both shown as 3
        text = repr(float(value))
        return text[:-2] if text.endswith(".0") else text
    if isinstance(value, tuple):
        return "(" + ", ".join(_shown(v) for v in value) + ")"
    if isinstance(value, list):
        return "[" + ", ".join(_shown(v) for v in value) + "]"
    return repr(value)


#: The largest sweep, in samples, that a reader accepts when ``max_sweep_samples`` is not given
#: (see :mod:`spikemeasure.io.limits`).
DEFAULT_MAX_SWEEP_SAMPLES = 1_000_000_000

PARAMETERS: tuple[Parameter, ...] = (
    Parameter("onset_rate_v_per_s", "--onset-rate", "V/s", 20.0, "number",
              "dV/dt whose upward crossing starts a spike (and defines threshold by default)",
              "20.0", low=0, low_open=True, metavar="V/S"),
    Parameter("min_rise_mv", "--min-rise", "mV", 20.0, "number",
              "The peak must be at least this far above the onset voltage", "20.0",
              low=0, low_open=True, metavar="MV"),
    Parameter("lowest_peak_mv", "--lowest-peak", "mV", -20.0, "number",
              "The peak must be above this voltage", "-20.0", metavar="MV"),
    Parameter("peak_window_ms", "--peak-window", "ms", 5.0, "number",
              "The peak must come within this time of the onset", "5.0",
              low=0, low_open=True, metavar="MS"),
    Parameter("smoothing_ms", "--smoothing", "ms", 0.3, "number",
              "Savitzky-Golay window for the dV/dt of detection and threshold and for the "
              "smoothed voltage (shorter than the peak window)", "0.3",
              low=0, low_open=True, metavar="MS"),
    Parameter("rate_smoothing_ms", "--rate-smoothing", "ms", 0.4, "number",
              "Longest smoothing window for each spike's maximum and minimum dV/dt (the "
              "window used is the shortest that the measured noise allows)", "0.4",
              low=0, low_open=True, metavar="MS"),
    Parameter("threshold_method", "--threshold-method", "", "onset_rate", "choice",
              "Threshold definition (see docs/measurements.md)", '"max_rate_fraction"',
              choices=("onset_rate", "max_rate_fraction", "second_derivative_peak"),
              metavar="[onset_rate|max_rate_fraction|second_derivative_peak]"),
    Parameter("threshold_fraction", "--threshold-fraction", "", 0.05, "number",
              "Fraction of the maximum dV/dt that defines threshold with the max_rate_fraction "
              "method", "0.05",
              low=0, high=1, low_open=True, high_open=True, metavar="FRACTION"),
    Parameter("min_samples_across_width", "--min-samples-across-width", "", 3, "whole_number",
              "Leave the half-width empty when fewer samples lie above half amplitude", "3",
              low=1, metavar="N"),
    Parameter("search_window_ms", "--search-window", "ms", 200.0, "number",
              "How far each spike's searches reach: back from onset for the threshold, forward "
              "from the peak for repolarization and trough (at least the peak window)",
              "200.0", low=0, low_open=True, metavar="MS"),
    Parameter("step_s", "--step", "s", None, "time_span",
              "The current step's start and end, for files without a command-current channel",
              "[0.1, 0.7]", metavar="START END", in_settings=False, default_text="none"),
    Parameter("step_sizes_pa", "--step-sizes", "pA", None, "step_series",
              "With the step's start and end: the step of sweep k is FIRST + k * INCREMENT "
              "(for files without a command-current channel)", '"-100:20"',
              metavar="FIRST:INCREMENT", in_settings=False, default_text="none"),
    Parameter("sampling_rate_hz", "--sampling-rate", "Hz", None, "number",
              "Sampling rate for text files without a time column", "20000.0",
              low=0, low_open=True, metavar="HZ", in_settings=False, default_text="none"),
    Parameter("max_sweep_samples", "--max-sweep-samples", "", None, "whole_number",
              "Refuse, unread, any sweep whose file declares more samples than this",
              "1000000000", low=1, metavar="N", in_settings=False,
              default_text=str(DEFAULT_MAX_SWEEP_SAMPLES)),
)

#: Without ``report_mode``, a report of up to this many cells embeds its figures; beyond, it
#: links them (about 450 kB of PNG a cell: 10 cells make a page of about 5 MB).
SELF_CONTAINED_MAX_CELLS = 10

#: How report.html holds the figures: an option of a run's output, not of the measurement, so
#: not in :data:`PARAMETERS` (nor the project file's ``[measure]``, nor run.json's
#: ``parameters``) and never a reason to measure a file again.
REPORT_PARAMETER = Parameter(
    "report_mode", "--report", "", None, "choice",
    "How report.html holds the figures: self-contained embeds them in the page, linked links "
    "the files beside it (lazy-loaded; the output folder must travel with the page), none "
    "writes no report", '"linked"', choices=("self-contained", "linked", "none"),
    metavar="[self-contained|linked|none]", in_settings=False, affects_tables=False,
    default_text=f"self-contained up to {SELF_CONTAINED_MAX_CELLS} cells, linked beyond")

#: The fields of :class:`~spikemeasure.detection.DetectionSettings`, in order.
SETTING_PARAMETERS: tuple[Parameter, ...] = tuple(p for p in PARAMETERS if p.in_settings)

#: The run options outside the detection settings, in order.
RUN_OPTION_PARAMETERS: tuple[Parameter, ...] = tuple(p for p in PARAMETERS if not p.in_settings)

_BY_NAME: dict[str, Parameter] = {p.name: p for p in PARAMETERS}


def parameter(name: str) -> Parameter:
    """The declaration of the parameter `name`.

    Parameters
    ----------
    name : str
        A parameter's name, e.g. ``"onset_rate_v_per_s"``.

    Returns
    -------
    Parameter

    Raises
    ------
    InvalidSettingError
        For a name that is not a parameter; the message lists the parameters.
    """
    try:
        return _BY_NAME[name]
    except (KeyError, TypeError):
        raise InvalidSettingError(f"`{name}` is not a parameter; parameters are: "
                                  f"{', '.join(_BY_NAME)}") from None


def default_of(name: str) -> Any:
    """The declared default of the parameter `name` (see :func:`parameter`)."""
    return parameter(name).default


def check_value(name: str, value: Any) -> Any:
    """Check one value of a parameter and convert it to the parameter's type.

    Parameters
    ----------
    name : str
        The parameter's name.
    value : Any
        As given to the API, read from the project file, or parsed from the command line.

    Returns
    -------
    float, int, str or (float, float)
        The value as the parameter's :attr:`Parameter.python_type`.

    Raises
    ------
    InvalidSettingError
        ``"`name` must be <requirement> (got <value>)"``, for an unknown name or a value of
        the wrong type or out of range.

    Notes
    -----
    One value at a time: how parameters must relate to each other (the smoothing window
    shorter than the peak window) is checked by
    :class:`~spikemeasure.detection.DetectionSettings`.
    """
    return parameter(name).check(value)


def parameters_record(settings: Any, run_options: Mapping[str, Any]) -> dict:
    """The ``parameters`` of run.json: every parameter by name, in declaration order.

    Parameters
    ----------
    settings : DetectionSettings or mapping
        The detection settings (an object with ``as_dict()``, or its dictionary).
    run_options : mapping
        The run options by name (``step_s``, ``step_sizes_pa``, ``sampling_rate_hz``,
        ``max_sweep_samples``); other keys are passed over, a missing one is recorded as
        None.

    Returns
    -------
    dict
        JSON-ready: pairs as lists of two numbers, None for an option not given. These keys
        can be written back into the project file's ``[measure]`` table.
    """
    values = dict(settings.as_dict() if hasattr(settings, "as_dict") else settings)
    record = {}
    for p in PARAMETERS:
        value = values.get(p.name) if p.in_settings else run_options.get(p.name)
        record[p.name] = list(value) if isinstance(value, (tuple, list)) else value
    return record


def parameters_markdown() -> str:
    """The table of parameters in docs/batch.md, from :data:`PARAMETERS`."""
    lines = ["| key | option | unit | default | allowed values | what it does | example |",
             "| --- | --- | --- | --- | --- | --- | --- |"]
    for p in PARAMETERS:
        default = p.default_text if p.default is None else str(p.default)
        lines.append(f"| `{p.name}` | `{p.option}` | {p.unit or '-'} | {default} | "
                     f"{p.requirement} | {p.help}. | `{p.name} = {p.example}` |")
    return "\n".join(lines) + "\n"
