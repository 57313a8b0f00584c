"""The keys of the project file's check tables: each ``[quality]`` limit declared once, and
the keys of ``[regression]``.

A rule carries its key, the kind of limit it takes (validated by
:mod:`spikemeasure.checks.settings`), an example value for messages, the table and column it
reads, and when a value passes; the project-file validation, ``spikemeasure check``
(:mod:`spikemeasure.checks.limits`) and the table in docs/ci.md
(:func:`quality_rules_markdown`) all read :data:`QUALITY_RULES`.

This module imports nothing else of spikemeasure, so that the reading of the project file
(:mod:`spikemeasure.config`) can name every key of every table it may hold.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

__all__ = ["QualityRule", "QUALITY_RULES", "QUALITY_KEYS", "REGRESSION_KEYS", "LIMIT_KINDS",
           "quality_rules_markdown"]

#: Kinds of limit: a positive number, a whole number 0 or more, a [low, high] pair, any number.
LIMIT_KINDS = ("positive", "count", "range", "number")


@dataclass(frozen=True)
class QualityRule:
    """One quality limit of ``[quality]``.

    Attributes
    ----------
    key : str
        The key in the project file.
    kind : str
        The kind of limit (:data:`LIMIT_KINDS`).
    example : str
        A valid value as written in the project file, for messages and docs.
    table : str
        ``sweeps.csv`` (checked sweep by sweep), ``cells.csv`` or ``spikes.csv`` (file by file).
    column : str
        The column compared with the limit.
    text : str
        What the rule requires, for messages (``{limit}`` is filled in).
    passes_when : str
        What the rule requires, for the docs (Markdown).
    test : callable
        (value, limit) -> True when the value passes.
    judges_highest : bool, optional
        True: the rule judges a cell's highest measured value of the column; False (the
        default): each row of the table.
    failure_text : str, optional
        What failed, for messages (``{column}``, ``{text}`` (the cell as written), ``{value}``
        and ``{limit}`` are filled in).
    missing_text : str, optional
        What failed when there is no value to judge, for messages (``{column}`` is filled in).
    """

    key: str
    kind: str
    example: str
    table: str
    column: str
    text: str
    passes_when: str
    test: Callable[[float, object], bool]
    judges_highest: bool = False
    failure_text: str = "{column} = {text}"
    missing_text: str = "{column} is empty (not measured), so the limit cannot be checked"

    def __post_init__(self) -> None:
        if self.kind not in LIMIT_KINDS:
            raise ValueError(f"quality rule {self.key}: kind must be one of {LIMIT_KINDS}")

    @property
    def scope(self) -> str:
        """``each sweep`` or ``each file``: what one test case covers."""
        return "each sweep" if self.table == "sweeps.csv" else "each file"


QUALITY_RULES: tuple[QualityRule, ...] = (
    QualityRule("max_baseline_noise_mv", "positive", "0.5", "sweeps.csv", "baseline_noise_mv",
                "baseline noise (SD before the step) at most {limit} mV",
                "`baseline_noise_mv` (SD of the 100 ms before the step) is at most the limit",
                lambda v, lim: v <= lim),
    QualityRule("max_baseline_drift_mv", "positive", "3.0", "sweeps.csv", "baseline_drift_mv",
                "baseline drift over the sweep at most {limit} mV either way",
                "`baseline_drift_mv` (mean of the last 100 ms after the step minus the "
                "baseline) is within the limit either way",
                lambda v, lim: abs(v) <= lim),
    QualityRule("min_sampling_rate_hz", "positive", "10000", "sweeps.csv", "sampling_rate_hz",
                "sampling rate at least {limit} Hz",
                "`sampling_rate_hz` is at least the limit", lambda v, lim: v >= lim),
    QualityRule("max_clipped_spikes", "count", "0", "sweeps.csv", "clipped_spike_count",
                "at most {limit} clipped spikes per sweep",
                "`clipped_spike_count` (spikes whose largest sample repeats over 3 or more "
                "samples, as when the recording range was exceeded) is at most the limit",
                lambda v, lim: v <= lim),
    QualityRule("resting_range_mv", "range", "[-85.0, -55.0]", "cells.csv", "resting_mv",
                "resting potential within {limit} mV",
                "`resting_mv` of cells.csv lies within [low, high]",
                lambda v, lim: lim[0] <= v <= lim[1]),
    QualityRule("max_bridge_error_mohm", "positive", "20.0", "cells.csv", "bridge_error_mohm",
                "bridge error (uncompensated electrode resistance) at most {limit} MOhm "
                "either way",
                "`bridge_error_mohm` of cells.csv (the voltage jump at the step onset over "
                "the step) is within the limit either way",
                lambda v, lim: abs(v) <= lim),
    QualityRule("min_highest_peak_mv", "number", "0.0", "spikes.csv", "peak_mv",
                "at least one spike peaking at {limit} mV or above",
                "at least one spike's `peak_mv` of each cell reaches the limit (0 mV: an "
                "overshooting spike)",
                lambda v, lim: v >= lim, judges_highest=True,
                failure_text="highest spike peak {value:g} mV is below {limit} mV",
                missing_text="no spike with a measured peak in the file"),
)

#: Keys of ``[quality]``, each with the kind of limit it takes (from :data:`QUALITY_RULES`).
QUALITY_KEYS: dict[str, str] = {rule.key: rule.kind for rule in QUALITY_RULES}

#: Keys of ``[regression]``.
REGRESSION_KEYS: tuple[str, ...] = ("enabled", "accepted_folder", "allow_new_files",
                                    "default_tolerance", "tolerances")


def quality_rules_markdown() -> str:
    """The table of quality limits in docs/ci.md, from :data:`QUALITY_RULES`."""
    lines = ["| key | applies to | passes when | example |", "| --- | --- | --- | --- |",
             "| (always) `measured` | each file | the file and each of its sweeps could be read "
             "and measured (no row in errors.csv) | |"]
    lines += [f"| `{r.key}` | {r.scope} | {r.passes_when} | `{r.key} = {r.example}` |"
              for r in QUALITY_RULES]
    return "\n".join(lines) + "\n"
