"""Other formats neo reads, by the one vetted neo reader that each suffix names."""
from __future__ import annotations

import warnings
from pathlib import Path

from ..errors import UnreadableInputError
from . import limits
from .messages import safe_name
from .recording import Recording
from .signals import Segment, segments_to_recording, sweep_where

__all__ = ["read_with_neo"]


def _other_segments(io, lazy: bool, shown: str, max_sweep_samples: int) -> list:
    """The segments a neo reader gives; with `lazy`, each sweep's declared size is checked
    (:func:`~spikemeasure.io.limits.size_problem`) before its signals are loaded, and a sweep
    too large is refused."""
    blocks = io.read(lazy=lazy)
    if not lazy:
        return [seg for blk in blocks for seg in blk.segments]
    segments = []
    for block in blocks:
        for segment in block.segments:
            where = sweep_where(shown, len(segments), safe_name(segment.name))
            refused = next((problem for problem in (
                limits.size_problem(where, getattr(signal, "shape", (0,)), max_sweep_samples,
                                    whole=True) for signal in segment.analogsignals)
                            if problem), "")
            signals = [] if refused else [signal.load() if hasattr(signal, "load") else signal
                                          for signal in segment.analogsignals]
            segments.append(Segment(segment.name or "", signals, refused))
    return segments


def read_with_neo(reader_class: type, path: Path, shown: str, max_sweep_samples: int
                  ) -> Recording:
    """Read a file with one neo reader class, chosen by the file's suffix.

    Parameters
    ----------
    reader_class : type
        A neo reader class of :data:`~spikemeasure.io.safety.VETTED_NEO_READERS` (the suffix
        table gives no other).
    path : Path
        The file.
    shown : str
        How the file is named in sweeps and messages.
    max_sweep_samples : int
        Sweeps declaring more samples are refused before they are read (readers that load
        lazily only; the others read the file whole).

    Returns
    -------
    Recording

    Raises
    ------
    UnreadableInputError
        The reader fails (named by the reader and the type of its exception only, as a
        reader's text can quote the file), or the file holds no measurable sweep.
    """
    name = reader_class.__name__
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            io = reader_class(str(path))
            segments = _other_segments(io, bool(getattr(reader_class, "support_lazy", False)),
                                       shown, max_sweep_samples)
    except Exception as exc:  # each neo reader raises its own types; keep the cause
        raise UnreadableInputError(
            f"{shown}: no reader could open it ({name} failed with {type(exc).__name__}); "
            "the file may be damaged or of another format") from exc
    return segments_to_recording(segments, shown, f"neo {name}")
