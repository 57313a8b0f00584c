"""NWB files of several cells recorded at once, written with pynwb's intracellular API.

Each cell has its own intracellular electrode; every sweep of every electrode is a
CurrentClampSeries (the voltage) beside a CurrentClampStimulusSeries (its command), joined in
NWB's intracellular-recordings table; the recordings of one sweep, taken at once on every
electrode, form a row of the simultaneous-recordings table, and all sweeps one row of the
sequential-recordings table (the NWB 2.4+ intracellular tables). The sweeps come from the
simulations of this package (:func:`~spikemeasure.testing.record_commands`,
:func:`~spikemeasure.testing.simulate_current_steps`) or any arrays; the file's description
says it is simulated. pynwb is imported only when a file is written.
"""
from __future__ import annotations

import datetime
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

__all__ = ["ElectrodeSweeps", "write_electrodes_nwb"]

#: Stored units: data in mV and pA, with NWB's conversion factors to volts and amperes.
_VOLT_PER_MV = 1e-3
_AMPERE_PER_PA = 1e-12


@dataclass(frozen=True)
class ElectrodeSweeps:
    """The sweeps one electrode recorded.

    Attributes
    ----------
    name : str
        The electrode's name in the file (an NWB object name: no ``/``).
    voltage_mv : ndarray, shape (n_sweeps, n_samples)
        Recorded membrane voltage, mV.
    command_pa : ndarray, shape (n_sweeps, n_samples)
        Command current of each sweep, pA.
    sampling_rate_hz : float
        Samples per second.
    description : str
        What the electrode recorded (stored as the electrode's description).
    """

    name: str
    voltage_mv: np.ndarray
    command_pa: np.ndarray
    sampling_rate_hz: float
    description: str = "simulated cell"


def _checked(electrodes: Sequence[ElectrodeSweeps]) -> list[tuple[ElectrodeSweeps, np.ndarray,
                                                                  np.ndarray]]:
    """The electrodes with their arrays as 2-D float64, after checking that they fit."""
    if len(electrodes) == 0:
        raise ValueError("`electrodes` must hold at least one ElectrodeSweeps")
    names = [e.name for e in electrodes]
    if len(set(names)) != len(names) or any(not n or "/" in n for n in names):
        raise ValueError(f"`electrodes` must have distinct names without '/' (got {names})")
    out = []
    for e in electrodes:
        v = np.atleast_2d(np.asarray(e.voltage_mv, dtype=np.float64))
        c = np.atleast_2d(np.asarray(e.command_pa, dtype=np.float64))
        if v.ndim != 2 or v.shape != c.shape:
            raise ValueError(f"`voltage_mv` and `command_pa` of electrode {e.name!r} must be "
                             f"2-D arrays of one shape (got {v.shape} and {c.shape})")
        if not (np.isfinite(e.sampling_rate_hz) and e.sampling_rate_hz > 0):
            raise ValueError(f"`sampling_rate_hz` of electrode {e.name!r} must be positive")
        out.append((e, v, c))
    counts = {v.shape[0] for _, v, _ in out}
    if len(counts) != 1:
        raise ValueError("every electrode must hold the same number of sweeps (they are "
                         f"recorded at once); got {sorted(counts)}")
    return out


def write_electrodes_nwb(path: str | Path, electrodes: Sequence[ElectrodeSweeps], *,
                         session_description: str = "simulated recording: model cells under "
                         "current steps, one per electrode, recorded at once",
                         identifier: str = "simulated-electrodes",
                         sweep_gap_s: float = 1.0, stimulus_type: str = "current steps",
                         compact: bool = False) -> Path:
    """Write the sweeps of several electrodes, recorded at once, as one NWB file.

    Parameters
    ----------
    path : str or Path
        The file to write (overwritten).
    electrodes : sequence of ElectrodeSweeps
        One per electrode, all with the same number of sweeps (any number of samples and
        sampling rate each).
    session_description : str, optional
        The file's description; the default says it is simulated.
    identifier : str, optional
        The file's identifier.
    sweep_gap_s : float, optional
        Start of sweep k is ``k * sweep_gap_s`` seconds after the session start.
    stimulus_type : str, optional
        The sequential recording's stimulus type.
    compact : bool, optional
        Store float32, gzip-compressed with the shuffle filter (as an acquisition program
        would, for small files) instead of float64 as given.

    Returns
    -------
    Path
        `path`.

    Notes
    -----
    Sweep k of every electrode is one simultaneous recording (a row of
    ``icephys_simultaneous_recordings``), all of them one sequential recording. Each series
    carries ``sweep_number`` k as well, as files written before the tables do.

    References
    ----------
    NWB format specification 2.4+, intracellular electrophysiology tables
    (IntracellularRecordingsTable, SimultaneousRecordingsTable, SequentialRecordingsTable).
    """
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    checked = _checked(electrodes)

    def stored(data: np.ndarray):
        if not compact:
            return data
        from hdmf.backends.hdf5.h5_utils import H5DataIO

        return H5DataIO(data.astype(np.float32), compression="gzip", compression_opts=4,
                        shuffle=True)

    nwb = NWBFile(session_description=session_description, identifier=identifier,
                  session_start_time=datetime.datetime(2026, 1, 1,
                                                       tzinfo=datetime.timezone.utc))
    device = nwb.create_device(name="amplifier", description="simulated amplifier")
    made = [(nwb.create_icephys_electrode(name=e.name, description=e.description,
                                          device=device), e, v, c) for e, v, c in checked]
    simultaneous = []
    for sweep in range(checked[0][1].shape[0]):
        rows = []
        for electrode, e, v, c in made:
            start = sweep * float(sweep_gap_s)
            response = CurrentClampSeries(
                name=f"{e.name}_voltage_{sweep}", data=stored(v[sweep]), electrode=electrode,
                gain=1.0, rate=float(e.sampling_rate_hz), starting_time=start,
                sweep_number=sweep, conversion=_VOLT_PER_MV)
            stimulus = CurrentClampStimulusSeries(
                name=f"{e.name}_command_{sweep}", data=stored(c[sweep]), electrode=electrode,
                gain=1.0, rate=float(e.sampling_rate_hz), starting_time=start,
                sweep_number=sweep, conversion=_AMPERE_PER_PA)
            rows.append(nwb.add_intracellular_recording(electrode=electrode, stimulus=stimulus,
                                                        response=response))
        simultaneous.append(nwb.add_icephys_simultaneous_recording(recordings=rows))
    nwb.add_icephys_sequential_recording(simultaneous_recordings=simultaneous,
                                         stimulus_type=stimulus_type)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwb)
    return Path(path)
