"""What is never opened: files that would run code when loaded, and unvetted neo readers.

Pickles are refused by suffix and by content before any reader sees the file. Other formats
neo reads are read only by the neo reader classes of :data:`VETTED_NEO_READERS`, each checked
by reading its source; the suffix table (:mod:`spikemeasure.io.suffixes`) routes to no other.
"""
from __future__ import annotations

from pathlib import Path

from ..errors import UnreadableInputError

__all__ = ["PICKLE_SUFFIXES", "HDF5_SIGNATURE", "VETTED_NEO_READERS", "refuse_code_formats"]

PICKLE_SUFFIXES = frozenset({".pkl", ".pickle", ".pck", ".joblib"})

#: The first bytes of every HDF5 file (NWB and NIX files are HDF5).
HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"

#: neo reader classes (names in ``neo.io``) that may read a file, in neo's own order; a suffix
#: claimed by several of them goes to the first. Each was checked in the source of neo 0.14:
#: the reader's module and its raw-reading module hold no ``pickle``, ``joblib``, ``marshal``,
#: ``shelve``, ``yaml``, ``eval``, ``exec``, ``ast``, ``numpy.load``, ``ctypes``, ``importlib``
#: or ``subprocess``, and import nothing beyond the standard library, numpy, quantities and
#: neo, except ``h5py`` (BiocamIO), ``scipy.io.loadmat`` (NeoMatlabIO: arrays only),
#: ``urllib.parse.unquote`` (BCI2000IO: text decoding, no network) and an optional progress
#: bar (PlexonIO). neo's shared base classes touch ``joblib`` only for an optional cache that
#: is off unless asked for (``use_cache``), and it is never asked for here.
#:
#: Left out: PickleIO (unpickles), ElphyIO (calls ``eval`` on text of the file), ExampleIO
#: (it reads nothing: it makes up signals, so a stray ``.fake`` file would give invented
#: sweeps); readers that
#: hand the file to a compiled or third-party library that could not be checked the same way
#: (CedIO, EDFIO, IgorIO, KwikIO, MEArecIO, StimfitIO), load a system library (Plexon2IO,
#: NeurosharectypesIO) or may download one (MaxwellIO); readers of folders rather than files
#: (their ``mode`` is ``"dir"``); readers of spike times or images only (AsciiSpikeTrainIO,
#: AsciiImageIO, BlkIO, TiffIO); and NixIO, NixIOFr and NWBIO, which spikemeasure's own NIX
#: and NWB readers call directly.
VETTED_NEO_READERS = (
    "AlphaOmegaIO", "AsciiSignalIO", "AxographIO", "AxonaIO", "AxonIO", "BCI2000IO",
    "BiocamIO", "BlackrockIO", "BrainVisionIO", "BrainwareDamIO", "BrainwareF32IO",
    "BrainwareSrcIO", "ElanIO", "IntanIO", "MicromedIO", "NeoMatlabIO", "NestIO",
    "NeuroExplorerIO", "NeuroNexusIO", "NeuroScopeIO", "PlexonIO", "RawBinarySignalIO",
    "RawMCSIO", "Spike2IO", "SpikeGadgetsIO", "WinEdrIO", "WinWcpIO",
)


def refuse_code_formats(path: Path, shown: str) -> None:
    """Refuse a pickle, by its suffix (:data:`PICKLE_SUFFIXES`) or by its first two bytes
    (the protocol 2-5 marker), whatever its suffix.

    Parameters
    ----------
    path : Path
        The file.
    shown : str
        How the file is named in the message.

    Raises
    ------
    UnreadableInputError
        The file is, or is named as, a pickle.
    OSError
        The file cannot be opened.
    """
    if path.suffix.lower() in PICKLE_SUFFIXES:
        raise UnreadableInputError(
            f"{shown}: pickle files can run code when loaded, so spikemeasure does not open "
            "them; export the recording to NWB, NIX or text")
    with open(path, "rb") as fh:
        head = fh.read(2)
    if len(head) == 2 and head[0] == 0x80 and 2 <= head[1] <= 5:
        raise UnreadableInputError(
            f"{shown}: the file is a Python pickle, which can run code when loaded; "
            "spikemeasure does not open it. Export the recording to NWB, NIX or text")
