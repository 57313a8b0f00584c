"""What reading a file gives: its sweeps, its channels and the parts that were skipped."""
from __future__ import annotations

from dataclasses import dataclass, field

from .sweep import Sweep

__all__ = ["ChannelInfo", "Recording"]


@dataclass(frozen=True)
class ChannelInfo:
    """A channel as the file declares it, and the role spikemeasure gave it."""

    name: str
    units: str
    role: str  # "voltage", "command", or "ignored"


@dataclass(frozen=True)
class Recording:
    """The sweeps of one file and what the file said about itself.

    Attributes
    ----------
    path : str
        The path as given.
    format : str
        Which reader read it.
    sweeps : list of Sweep
        In file order. Their samples may wait in the file (long sweeps read in pieces,
        :class:`~spikemeasure.io.sweep.LazyTrace`; NIX sweeps read when measured,
        :class:`~spikemeasure.io.sweep.StoredTrace` and :meth:`Sweep.loaded`), so the file
        stays open until :meth:`close`.
    channels : list of ChannelInfo
        Channels of the first sweep of each electrode.
    problems : list of str
        Parts of the file that were skipped, each naming the sweep and why.
    problem_electrodes : list of str
        The electrode each problem belongs to ("" for the file as a whole), aligned with
        `problems`; empty when no problem names an electrode.
    sha256 : str or None
        The SHA-256 of the file's bytes (hex), when it was asked for while reading
        (:func:`~spikemeasure.io.read.read_recording`, `hash_input`).
    """

    path: str
    format: str
    sweeps: list[Sweep]
    channels: list[ChannelInfo] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    release: object = field(default=None, compare=False, repr=False)
    problem_electrodes: list[str] = field(default_factory=list)
    sha256: str | None = field(default=None, compare=False)

    def electrodes(self) -> list[str]:
        """The electrodes of the sweeps, in order of first appearance: one cell each."""
        return list(dict.fromkeys(sw.electrode for sw in self.sweeps))

    def sweeps_of(self, electrode: str) -> list[Sweep]:
        """The sweeps recorded by one electrode, in file order."""
        return [sw for sw in self.sweeps if sw.electrode == electrode]

    def electrode_of_problem(self, position: int) -> str:
        """The electrode problem number `position` belongs to ("" for the whole file)."""
        if position < len(self.problem_electrodes):
            return self.problem_electrodes[position]
        return ""

    def close(self) -> None:
        """Close the file that long sweeps (:attr:`Sweep.is_lazy`) and sweeps waiting to be
        measured (:attr:`Sweep.is_stored`) are read from."""
        if callable(self.release):
            self.release()

    def __enter__(self) -> "Recording":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
