"""Showing a cell's figures in windows (``inspect --show``)."""
from __future__ import annotations

import os
import sys
from typing import Sequence

from ..cell_features import CellFeatures
from ..detection import DetectionSettings
from ..errors import SpikemeasureError
from ..tables import SweepResult
from .cell import cell_figures
from .common import matplotlib

__all__ = ["DisplayUnavailableError", "show_figures"]


class DisplayUnavailableError(SpikemeasureError):
    """Figures were to be shown in a window, but there is no display to show them on."""


def _has_display() -> bool:
    if sys.platform.startswith(("win", "darwin")):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def _window_backend(where: str) -> None:
    """Switch matplotlib to a window toolkit, unless it already uses one."""
    import matplotlib.pyplot as plt

    backend = matplotlib().get_backend().lower()
    if backend not in ("agg", "pdf", "svg", "ps", "cairo", "template"):
        return
    for candidate in ("QtAgg", "TkAgg", "GTK4Agg", "GTK3Agg", "WXAgg"):
        try:
            plt.switch_backend(candidate)
            return
        except (ImportError, RuntimeError):
            continue
    raise DisplayUnavailableError(
        f"{where}cannot show figures: matplotlib finds no window toolkit (Tk, Qt, GTK or wx) "
        "to use; install one (e.g. Debian's python3-tk) or write the figures to files with "
        "`spikemeasure measure FILE --out FOLDER`")


def _open_window(figures: list) -> None:
    import matplotlib.pyplot as plt

    plt.show()


def show_figures(results: Sequence[SweepResult], cell: CellFeatures | None = None,
                 settings: DetectionSettings = DetectionSettings(), *, file: str = "") -> None:
    """Show a cell's figures (those written by :func:`write_cell_figures`) in windows.

    Raises
    ------
    DisplayUnavailableError
        When there is no display, or matplotlib has no window toolkit to use.
    """
    where = f"{file}: " if file else ""
    if not _has_display():
        raise DisplayUnavailableError(
            f"{where}cannot show figures: there is no display (DISPLAY is not set). Run "
            "`spikemeasure measure FILE --out FOLDER` to write them to files instead")
    _window_backend(where)
    import matplotlib.pyplot as plt

    figures = list(cell_figures(results, cell, settings, name=file or None,
                                new_figure=plt.figure).values())
    _open_window(figures)
