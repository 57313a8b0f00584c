"""Write the simulated recordings of this example lab repository.

Two invented cells, each a family of four square current steps simulated from a published
conductance model with :mod:`spikemeasure.testing` and white measurement noise, stored
as NWB (float32, gzip-compressed) so that the folder stays small. No animal, person or
laboratory is involved.

Run from this folder with::

    python make_recordings.py

``write_cell(path, noise_mv=...)`` writes one cell again with more noise: the test suite
uses it to break a recording on purpose. After writing the recordings again, accept them
again (``spikemeasure check recordings/ --out results/``, then ``spikemeasure accept
results/``): the files' bytes, and so the accepted inputs, change.
"""
from __future__ import annotations

import datetime
from pathlib import Path

import numpy as np

from spikemeasure.testing import simulate_current_steps

HERE = Path(__file__).resolve().parent
RATE_HZ = 20_000.0
DURATION_S = 0.5
STEP_START_S = 0.1
STEP_END_S = 0.35
SESSION_START = datetime.datetime(2024, 5, 6, 9, 0, tzinfo=datetime.timezone.utc)

#: file name -> (model, step sizes in pA, noise SD in mV, noise seed)
CELLS = {
    "cell_1.nwb": ("wang_buzsaki_1996", [-50.0, -20.0, 50.0, 150.0], 0.2, 11),
    "cell_2.nwb": ("hodgkin_huxley_1952", [-20.0, -10.0, 40.0, 80.0], 0.2, 12),
}


def write_cell(path: str | Path, noise_mv: float | None = None) -> Path:
    """Simulate the cell named like `path` and write it there as NWB.

    Parameters
    ----------
    path : str or Path
        Output file; its name must be one of :data:`CELLS`.
    noise_mv : float, optional
        Noise SD in mV instead of the cell's own.

    Returns
    -------
    Path
    """
    from hdmf.backends.hdf5.h5_utils import H5DataIO
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    path = Path(path)
    model, steps, noise, seed = CELLS[path.name]
    sweeps = simulate_current_steps(model, steps, sampling_rate_hz=RATE_HZ,
                                    duration_s=DURATION_S, step_start_s=STEP_START_S,
                                    step_end_s=STEP_END_S,
                                    noise_mv=noise if noise_mv is None else noise_mv, seed=seed)
    nwb = NWBFile(session_description=f"Simulated cell {path.stem} (invented)",
                  identifier=f"example-lab-{path.stem}", session_start_time=SESSION_START,
                  file_create_date=SESSION_START)
    device = nwb.create_device(name="simulated_amplifier", description="Numerical simulation.")
    electrode = nwb.create_icephys_electrode(name="electrode_0", device=device,
                                             description="Simulated whole-cell electrode.")

    def packed(data: np.ndarray) -> H5DataIO:
        return H5DataIO(data.astype(np.float32), compression="gzip", compression_opts=4,
                        shuffle=True)

    for i in range(len(steps)):
        stimulus = CurrentClampStimulusSeries(
            name=f"command_sweep_{i:02d}", data=packed(sweeps.command_pa[i]), electrode=electrode,
            gain=1.0, rate=RATE_HZ, starting_time=2.0 * i, sweep_number=np.uint32(i),
            conversion=1e-12, unit="amperes")
        response = CurrentClampSeries(
            name=f"voltage_sweep_{i:02d}", data=packed(sweeps.voltage_mv[i]), electrode=electrode,
            gain=1.0, rate=RATE_HZ, starting_time=2.0 * i, sweep_number=np.uint32(i),
            conversion=1e-3, unit="volts")
        nwb.add_intracellular_recording(electrode=electrode, stimulus=stimulus,
                                        response=response)
    with NWBHDF5IO(str(path), mode="w") as io:
        io.write(nwb, cache_spec=False)  # the schema would triple the size
    return path


if __name__ == "__main__":
    for name in CELLS:
        print(write_cell(HERE / "recordings" / name))
