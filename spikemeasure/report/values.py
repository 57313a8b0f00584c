"""How the report shows the cells' values: rounded to what each measurement supports, with
its uncertainty and the flags that emptied or qualify it beside it.

The rule (also in docs/figures.md):

- A column with an SD column (``NAME`` and ``NAME_sd``, both in the cells table): the SD is
  shown with two significant digits and the value to the same decimal place (never more
  places than cells.csv keeps), as ``value ± SD``.
- Any other column: the decimals its declaration gives for reading
  (:attr:`~spikemeasure.columns.Column.report_decimals`: a tenth of a mV or pA, a
  hundredth of a ms for the time constant, three for fractions and slopes; cells.csv keeps
  more); counts as whole numbers.
- An empty value (not measured) is empty; the flags of the cell that say why
  (:data:`FLAG_COLUMNS`) are shown in its place, and the flags that qualify a value beside it.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

from ..columns import CELL_COLUMNS, Column
from ..tables.typed import ColumnTable, column_kind

__all__ = ["FLAG_COLUMNS", "SD_SUFFIX", "SD_DIGITS", "ShownValue", "cell_values",
           "shown_columns", "shown_number", "shown_rows"]

#: An uncertainty column is named as its value's column with this suffix.
SD_SUFFIX = "_sd"
#: Significant digits of an SD as shown (common practice: one or two).
SD_DIGITS = 2

_RHEOBASE_SPIKE = ("rheobase_threshold_mv", "rheobase_amplitude_mv", "rheobase_half_width_ms",
                   "rheobase_ahp_depth_mv")
_STEP_VALUES = ("rheobase_pa", "fi_slope_hz_per_pa", "input_resistance_mohm", "membrane_tau_ms",
                "sag_fraction")
_TAU = ("membrane_tau_ms", "membrane_tau_ms_sd", "membrane_tau_fit_r2",
        "membrane_tau_residual_to_noise")

#: Each cell flag (cells.csv's ``flags``) and the columns whose value it empties or qualifies
#: (from the flags' definitions in docs/measurements.md).
FLAG_COLUMNS: dict[str, tuple[str, ...]] = {
    "no_current_steps": ("resting_mv",) + _STEP_VALUES,
    "step_sizes_unknown": _STEP_VALUES,
    "holding_current_in_every_sweep": ("resting_mv",),
    "no_spiking_step": ("rheobase_pa", "fi_slope_hz_per_pa", "rheobase_resolution_pa")
                       + _RHEOBASE_SPIKE,
    "rheobase_is_first_step": ("rheobase_pa", "rheobase_resolution_pa"),
    "too_few_fi_points": ("fi_slope_hz_per_pa",),
    "too_few_passive_sweeps": ("input_resistance_mohm", "input_resistance_mohm_sd"),
    "no_hyperpolarizing_step": _TAU + ("sag_fraction",),
    "tau_fit_failed": _TAU,
    "spikes_not_counted_in_slow_sweeps": ("rheobase_pa", "fi_slope_hz_per_pa",
                                          "max_firing_rate_hz", "rheobase_resolution_pa")
                                         + _RHEOBASE_SPIKE,
    "slow_sweeps_taken_as_spike_free": ("input_resistance_mohm", "membrane_tau_ms",
                                        "sag_fraction"),
    "resting_skips_gap_sweeps": ("resting_mv",),
    "rheobase_skips_gap_sweeps": ("rheobase_pa", "rheobase_resolution_pa"),
    "fi_slope_skips_gap_sweeps": ("fi_slope_hz_per_pa",),
    "max_firing_rate_skips_gap_sweeps": ("max_firing_rate_hz",),
    "input_resistance_skips_gap_sweeps": ("input_resistance_mohm",),
    "membrane_tau_skips_gap_sweeps": ("membrane_tau_ms",),
    "sag_skips_gap_sweeps": ("sag_fraction",),
    "no_step_stimuli": _STEP_VALUES,
    "no_spiking_ramp": ("ramp_rheobase_pa",),
    "tau_fit_poor": _TAU,
    "tau_within_noise": _TAU,
    "bridge_error_not_separable": ("bridge_error_mohm",),
    "baseline_fluctuates": _TAU,
    "sag_within_noise": ("sag_fraction",),
}


@dataclass(frozen=True)
class ShownValue:
    """One value of the cells table as the report shows it.

    Attributes
    ----------
    text : str
        The value rounded (``value ± SD`` with an SD), "" when empty. Plain text.
    sort_key : float
        The unrounded value, for sorting (NaN when empty); for text columns NaN.
    flags : tuple of str
        The cell's flags that concern this column.
    """

    text: str
    sort_key: float
    flags: tuple[str, ...] = ()


def cell_values(cells: ColumnTable) -> list[dict]:
    """The cells table as one dict per cell: ``file``, ``flags`` and every numeric column as a
    float (NaN when not measured)."""
    names = [c.name for c in cells.columns]
    text = {c.name for c in cells.columns if column_kind(c) == "text"}
    columns = [cells.column(n) if n in text else cells.column(n).tolist() for n in names]
    return [{n: (v if n in text else float(v)) for n, v in zip(names, row)}
            for row in zip(*columns)]


def shown_columns(columns: Sequence[Column] = CELL_COLUMNS) -> list[Column]:
    """The columns the report's table shows: all but the SD columns (shown beside their
    values)."""
    names = {c.name for c in columns}
    return [c for c in columns
            if not (c.name.endswith(SD_SUFFIX) and c.name[:-len(SD_SUFFIX)] in names)]


def shown_number(value: float, decimals: int | None, sd: float = math.nan) -> str:
    """`value` rounded as the report shows it (see the module's rule).

    Parameters
    ----------
    value : float
        NaN when not measured.
    decimals : int or None
        Decimals shown without an SD (at most as many with one); None for a count.
    sd : float, optional
        The value's SD, when the table has one (NaN: none).

    Returns
    -------
    str
        "" for NaN; ``"346.42 ± 0.10"`` with a finite, positive SD.
    """
    if math.isnan(value):
        return ""
    if decimals is None:
        return str(int(round(value)))
    if math.isfinite(sd) and sd > 0:
        places = min(decimals, SD_DIGITS - 1 - math.floor(math.log10(sd)))
        if places >= 0:
            return f"{value:.{places}f} \u00b1 {sd:.{places}f}"
        step = 10.0 ** -places  # an SD of tens or more: round to its place
        return f"{round(value / step) * step:.0f} \u00b1 {round(sd / step) * step:.0f}"
    return f"{value:.{decimals}f}"


def shown_rows(cells: ColumnTable) -> list[list[ShownValue]]:
    """Each cell's values as :func:`shown_columns` lists them, rounded, with their flags."""
    columns = shown_columns(cells.columns)
    names = {c.name for c in cells.columns}
    flags = cells.column("flags") if "flags" in names else [""] * len(cells)
    rows = []
    for k in range(len(cells)):
        own = [f for f in str(flags[k]).split(";") if f]
        row = []
        for c in columns:
            concerned = tuple(f for f in own if c.name in FLAG_COLUMNS.get(f, ()))
            if column_kind(c) == "text":
                row.append(ShownValue(str(cells.column(c.name)[k]), math.nan,
                                      tuple(own) if c.name == "flags" else ()))
                continue
            value = float(cells.column(c.name)[k])
            sd_name = c.name + SD_SUFFIX
            sd = float(cells.column(sd_name)[k]) if sd_name in names else math.nan
            decimals = c.decimals if math.isfinite(sd) and sd > 0 else c.report_decimals
            row.append(ShownValue(shown_number(value, decimals, sd), value, concerned))
        rows.append(row)
    return rows
