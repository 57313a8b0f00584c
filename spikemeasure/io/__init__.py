"""Read current-clamp recordings into :class:`~spikemeasure.io.sweep.Sweep` objects.

This is the only package that imports neo. One module per format, chosen by the file's suffix
(:mod:`~spikemeasure.io.suffixes`):

- NWB (``.nwb``, :mod:`~spikemeasure.io.nwb`): current-clamp series paired with their
  stimulus series by the intracellular tables or by sweep number, read straight from HDF5
  (:mod:`~spikemeasure.io.nwb_hdf5`) or, for what that path does not read, through pynwb and
  neo.
- NIX (``.nix``, :mod:`~spikemeasure.io.nix`): one sweep per neo segment, read straight from
  HDF5 as neo's NixIO writes it (:mod:`~spikemeasure.io.nix_hdf5`) or through neo.
- Plain text (``.txt``, ``.csv``, ``.tsv``, :mod:`~spikemeasure.io.text`): columns under a
  header row naming units, one sweep per file, parsed with numpy in float64.
- Other formats neo reads (:mod:`~spikemeasure.io.neo_formats`), each suffix by the one neo
  reader vetted for it (:data:`~spikemeasure.io.safety.VETTED_NEO_READERS`).

Units are converted by the units each channel declares, never assumed
(:mod:`~spikemeasure.io.units`). Files that would run code when loaded (pickles) are refused,
and so are neo readers that would unpickle or evaluate file content
(:mod:`~spikemeasure.io.safety`).

Messages never quote what a file holds (header lines, cell values, the text of a parser's
exception): they name the file, the sweep, and the line and column or the setting that is
wrong. Names a file gives its sweeps and channels are shown only when they are short plain
identifiers (:func:`~spikemeasure.io.messages.safe_name`). A sweep whose declared size exceeds
``max_sweep_samples``, or that would not fit in the available memory when read whole, is
refused before it is read (:mod:`~spikemeasure.io.limits`); long gap-free NWB and NIX sweeps
stay in the file and are read in pieces (:mod:`~spikemeasure.io.lazy`). With `hash_input`,
the file's SHA-256 is taken as it is read (:mod:`~spikemeasure.io.hashing`).
"""
from .limits import DEFAULT_MAX_SWEEP_SAMPLES, LONG_SWEEP_SAMPLES
from .read import read_recording
from .recording import ChannelInfo, Recording
from .suffixes import RECORDING_SUFFIXES, reader_for, suffix_table
from .sweep import LazyTrace, Sweep
from .text import TEXT_SUFFIXES

__all__ = ["read_recording", "Recording", "ChannelInfo", "Sweep", "LazyTrace", "TEXT_SUFFIXES",
           "RECORDING_SUFFIXES", "LONG_SWEEP_SAMPLES", "DEFAULT_MAX_SWEEP_SAMPLES", "reader_for",
           "suffix_table"]
