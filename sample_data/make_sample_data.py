"""Write the simulated sample cells of ``sample_data/``.

The cells belong to an invented scenario: a study comparing neurons from two imaginary
brain regions, "region A" and "region B".  Every trace is simulated with
:mod:`spikemeasure.testing` from a published conductance model; no animal, person or
laboratory is involved.  Each cell receives a family of square current steps (0.1 s
baseline, 0.5 s step, 0.2 s after the step) and white measurement noise.

Two cells are written as NWB with pynwb's intracellular API (one CurrentClampSeries and
one CurrentClampStimulusSeries per sweep, paired in the intracellular recordings table
and sharing a sweep number) and two as NIX with neo's NixIO (one segment per sweep).

Two more files show protocols of real rigs, recorded through a simulated acquisition chain
(:func:`spikemeasure.testing.record_commands`: 4-pole Bessel filter, noise, sampling at a lower
rate): a cell given current ramps of three slopes, and a pair of cells recorded at once on two
electrodes (one NWB file), each sweep a -50 pA test pulse and then a step, one electrode with an
uncompensated series resistance.

Run from anywhere with::

    python sample_data/make_sample_data.py [FILE ...]

The files (all, or only those named) are written next to this script.  Noise seeds are fixed, so the data are the
same on every run (the files' creation metadata aside).
"""
from __future__ import annotations

import datetime
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
# Use the package in this repository even when another copy is installed.
sys.path.insert(0, str(HERE.parent))

from spikemeasure.testing import (  # noqa: E402
    SimulatedSweeps,
    default_membrane_area_cm2,
    record_commands,
    simulate_current_steps,
)
from spikemeasure.testing.commands import ramps, steps_after_test_pulse  # noqa: E402
from spikemeasure.testing.nwb_files import ElectrodeSweeps, write_electrodes_nwb  # noqa: E402

DURATION_S = 0.8
STEP_START_S = 0.1
STEP_END_S = 0.6
# Sweeps start every 3 s, as with a pause between steps in a real protocol.
SWEEP_INTERVAL_S = 3.0
# An invented date; it only orders the sessions.
SESSION_START = datetime.datetime(2024, 3, 4, 10, 0, tzinfo=datetime.timezone.utc)
SCENARIO = (
    "Invented scenario: a study comparing neurons from two imaginary brain regions, "
    "region A and region B. Every trace is simulated from a published conductance "
    "model with white measurement noise; no animal or person was involved."
)


@dataclass(frozen=True)
class CellPlan:
    """How one sample cell is simulated and stored.

    Attributes
    ----------
    file_name : str
        Output file name, next to this script; ``.nwb`` or ``.nix``.
    cell_id : str
        Invented identifier of the cell.
    region : str
        Invented region the cell is said to come from.
    model : str
        Model name in :data:`spikemeasure.testing.MODELS`.
    membrane_area_cm2 : float or None
        Membrane area; None for the model's default.
    sampling_rate_hz : float
        Samples per second.
    noise_mv : float
        Standard deviation of the added measurement noise, mV.
    seed : int
        Seed of the noise.
    first_step_pa, step_increment_pa : float
        Amplitude of the first step and the increment between sweeps, pA.
    n_sweeps : int
        Number of sweeps (steps).
    """

    file_name: str
    cell_id: str
    region: str
    model: str
    membrane_area_cm2: float | None
    sampling_rate_hz: float
    noise_mv: float
    seed: int
    first_step_pa: float
    step_increment_pa: float
    n_sweeps: int

    @property
    def step_amplitudes_pa(self) -> np.ndarray:
        """Step amplitude of each sweep, pA."""
        return self.first_step_pa + self.step_increment_pa * np.arange(self.n_sweeps)

    @property
    def area_cm2(self) -> float:
        """Membrane area actually used, cm^2."""
        if self.membrane_area_cm2 is None:
            return default_membrane_area_cm2(self.model)
        return self.membrane_area_cm2


CELLS: tuple[CellPlan, ...] = (
    # Two adapting pyramidal-like cells of slightly different size.
    CellPlan("region_a_cell_1.nwb", "A1", "region A", "cortical_adapting", 1.4e-4,
             50_000.0, 0.2, 101, -100.0, 50.0, 11),
    CellPlan("region_a_cell_2.nix", "A2", "region A", "cortical_adapting", 1.7e-4,
             20_000.0, 0.15, 102, -100.0, 60.0, 11),
    # A fast-spiking cell and a cell with squid-axon kinetics.
    CellPlan("region_b_cell_1.nwb", "B1", "region B", "wang_buzsaki_1996", None,
             50_000.0, 0.25, 201, -100.0, 60.0, 11),
    CellPlan("region_b_cell_2.nix", "B2", "region B", "hodgkin_huxley_1952", None,
             40_000.0, 0.3, 202, -100.0, 30.0, 11),
)


def simulate(cell: CellPlan) -> SimulatedSweeps:
    """Simulate the current-step family of one cell.

    Parameters
    ----------
    cell : CellPlan
        The cell to simulate.

    Returns
    -------
    SimulatedSweeps
        Voltage (mV, with noise) and command (pA) of every sweep.
    """
    return simulate_current_steps(
        cell.model,
        cell.step_amplitudes_pa,
        sampling_rate_hz=cell.sampling_rate_hz,
        duration_s=DURATION_S,
        step_start_s=STEP_START_S,
        step_end_s=STEP_END_S,
        noise_mv=cell.noise_mv,
        seed=cell.seed,
        membrane_area_cm2=cell.membrane_area_cm2,
    )


def _description(cell: CellPlan) -> str:
    return (
        f"Simulated cell {cell.cell_id} of {cell.region} (invented). Model "
        f"{cell.model}, membrane area {cell.area_cm2:.3g} cm^2, measurement noise "
        f"{cell.noise_mv:g} mV SD, {cell.sampling_rate_hz:g} Hz. {cell.n_sweeps} sweeps of "
        f"{DURATION_S:g} s, each with a square current step from {STEP_START_S:g} to "
        f"{STEP_END_S:g} s of {cell.first_step_pa:+g} pA, increasing by "
        f"{cell.step_increment_pa:g} pA per sweep."
    )


def write_nwb(cell: CellPlan, sweeps: SimulatedSweeps, path: Path) -> None:
    """Write one cell as NWB with the intracellular electrophysiology types.

    Parameters
    ----------
    cell : CellPlan
        The cell's plan, for metadata.
    sweeps : SimulatedSweeps
        The simulated sweeps.
    path : pathlib.Path
        Output file; overwritten.

    Notes
    -----
    The voltage is stored as float32 millivolts with ``conversion=1e-3`` (volts) and
    the command as float32 picoamperes with ``conversion=1e-12`` (amperes), so the
    step levels are exact.  Both are gzip-compressed with the shuffle filter, which
    shrinks the noisy voltage by about a third and the command to almost nothing.
    All sweeps form one sequential recording of stimulus type ``current_steps``.
    """
    from hdmf.backends.hdf5.h5_utils import H5DataIO
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.file import Subject
    from pynwb.icephys import CurrentClampSeries, CurrentClampStimulusSeries

    def compressed(data: np.ndarray) -> H5DataIO:
        return H5DataIO(data, compression="gzip", compression_opts=4, shuffle=True)

    nwbfile = NWBFile(
        session_description=f"Current-step family of simulated cell {cell.cell_id}",
        identifier=f"spikemeasure-sample-{cell.cell_id}",
        session_start_time=SESSION_START,
        file_create_date=SESSION_START,
        experiment_description=SCENARIO,
        session_id=cell.cell_id,
        notes=_description(cell),
        stimulus_notes="Square current steps from rest, one amplitude per sweep.",
    )
    nwbfile.subject = Subject(
        subject_id=f"virtual-{cell.cell_id}",
        description="Invented subject; the cell is a numerical simulation.",
    )
    device = nwbfile.create_device(
        name="simulated_amplifier", description="Numerical simulation; no hardware."
    )
    electrode = nwbfile.create_icephys_electrode(
        name="electrode_0",
        description="Simulated whole-cell electrode (no series resistance).",
        device=device,
        location=f"{cell.region} of an imaginary brain structure",
        cell_id=cell.cell_id,
    )
    simultaneous = []
    for i, amplitude in enumerate(sweeps.step_amplitudes_pa):
        start = i * SWEEP_INTERVAL_S
        step_text = (
            f"Square current step of {amplitude:+g} pA from {STEP_START_S:g} to "
            f"{STEP_END_S:g} s"
        )
        stimulus = CurrentClampStimulusSeries(
            name=f"command_sweep_{i:02d}",
            data=compressed(sweeps.command_pa[i].astype(np.float32)),
            electrode=electrode,
            gain=1.0,
            rate=sweeps.sampling_rate_hz,
            starting_time=start,
            sweep_number=np.uint32(i),
            conversion=1e-12,
            unit="amperes",
            stimulus_description="current_step",
            description=step_text,
        )
        response = CurrentClampSeries(
            name=f"voltage_sweep_{i:02d}",
            data=compressed(sweeps.voltage_mv[i].astype(np.float32)),
            electrode=electrode,
            gain=1.0,
            rate=sweeps.sampling_rate_hz,
            starting_time=start,
            sweep_number=np.uint32(i),
            conversion=1e-3,
            unit="volts",
            bias_current=0.0,
            bridge_balance=0.0,
            capacitance_compensation=0.0,
            stimulus_description="current_step",
            description=f"Membrane potential; {step_text}",
        )
        row = nwbfile.add_intracellular_recording(
            electrode=electrode, stimulus=stimulus, response=response
        )
        simultaneous.append(nwbfile.add_icephys_simultaneous_recording(recordings=[row]))
    nwbfile.add_icephys_sequential_recording(
        simultaneous_recordings=simultaneous, stimulus_type="current_steps"
    )
    with NWBHDF5IO(str(path), mode="w") as io:
        io.write(nwbfile)


def write_nix(cell: CellPlan, sweeps: SimulatedSweeps, path: Path) -> None:
    """Write one cell as NIX through neo, one segment per sweep.

    Parameters
    ----------
    cell : CellPlan
        The cell's plan, for metadata.
    sweeps : SimulatedSweeps
        The simulated sweeps.
    path : pathlib.Path
        Output file; overwritten.

    Notes
    -----
    Each segment holds the voltage (float32, mV, named ``membrane_potential``) and the
    command (float32, pA, named ``command_current``).  Segments and signals carry the
    sweep number under ``nwb:sweep_number``, the key neo uses for NWB files, so both
    formats can be paired the same way.  Fixed ``nix_name`` annotations replace the
    random names neo would otherwise generate.
    """
    import neo
    import quantities as pq

    block = neo.Block(
        name=f"cell {cell.cell_id}",
        description=f"{SCENARIO} {_description(cell)}",
        rec_datetime=SESSION_START.replace(tzinfo=None),
    )
    block.annotate(
        nix_name=f"neo.block.cell_{cell.cell_id}",
        cell_id=cell.cell_id,
        region=cell.region,
        simulated=True,
        model=cell.model,
        membrane_area_cm2=cell.area_cm2,
        noise_sd_mv=cell.noise_mv,
    )
    rate = sweeps.sampling_rate_hz * pq.Hz
    for i, amplitude in enumerate(sweeps.step_amplitudes_pa):
        t_start = i * SWEEP_INTERVAL_S * pq.s
        segment = neo.Segment(
            name=f"sweep {i}",
            description=(
                f"Square current step of {amplitude:+g} pA from {STEP_START_S:g} to "
                f"{STEP_END_S:g} s"
            ),
            index=i,
        )
        segment.annotate(**{"nix_name": f"neo.segment.sweep_{i:02d}", "nwb:sweep_number": i})
        voltage = neo.AnalogSignal(
            sweeps.voltage_mv[i].astype(np.float32)[:, np.newaxis],
            units="mV",
            sampling_rate=rate,
            t_start=t_start,
            name="membrane_potential",
        )
        command = neo.AnalogSignal(
            sweeps.command_pa[i].astype(np.float32)[:, np.newaxis],
            units="pA",
            sampling_rate=rate,
            t_start=t_start,
            name="command_current",
        )
        for signal, kind in ((voltage, "voltage"), (command, "command")):
            signal.annotate(
                **{"nix_name": f"neo.analogsignal.{kind}_{i:02d}", "nwb:sweep_number": i}
            )
            segment.analogsignals.append(signal)
            signal.segment = segment
        segment.block = block
        block.segments.append(segment)
    with neo.io.NixIO(str(path), mode="ow") as io:
        io.write_block(block)


#: The acquisition chain of the two protocol files: simulated at 100 kHz, filtered by a
#: 4-pole Bessel at 10 kHz, sampled at 20 kHz.
SIMULATION_RATE_HZ = 100_000.0
DECIMATION = 5
BESSEL_HZ = 10_000.0

RAMP_FILE = "region_a_cell_3_ramps.nwb"
#: Ramps from 0 pA at 0.5 s to slope x 2 s at 2.5 s, in sweeps of 3 s.
RAMP_SLOPES_PA_PER_S = (100.0, 150.0, 200.0)
RAMP_S = (0.5, 2.5)
RAMP_SWEEP_S = 3.0

PAIR_FILE = "region_b_pair_1.nwb"
#: Steps from 0.3 to 0.8 s after a -50 pA test pulse from 0.02 to 0.07 s, in sweeps of 1 s.
PAIR_STEPS_PA = tuple(float(x) for x in np.arange(-100.0, 301.0, 50.0))
PAIR_STEP_S = (0.3, 0.8)
PAIR_PULSE_S = (0.02, 0.07)
PAIR_PULSE_PA = -50.0
PAIR_SWEEP_S = 1.0
#: (electrode name, model, membrane area cm^2 or None, noise SD mV, series resistance MOhm, seed)
PAIR_CELLS = (
    ("electrode_b3", "wang_buzsaki_1996", None, 0.25, 12.0, 401),
    ("electrode_b4", "cortical_adapting", 1.6e-4, 0.2, 0.0, 402),
)


def write_ramp_file(path: Path) -> None:
    """Cell A3 (invented): the adapting cortical model under three current ramps."""
    commands = ramps(RAMP_SLOPES_PA_PER_S, sampling_rate_hz=SIMULATION_RATE_HZ,
                     duration_s=RAMP_SWEEP_S, ramp_s=RAMP_S)
    rec = record_commands("cortical_adapting", commands, simulation_rate_hz=SIMULATION_RATE_HZ,
                          decimation=DECIMATION, bessel_hz=BESSEL_HZ, noise_mv=0.2,
                          membrane_area_cm2=1.4e-4, seed=301)
    cell = ElectrodeSweeps(
        "electrode_a3", rec.voltage_mv, rec.command_pa, rec.sampling_rate_hz,
        description="Simulated cell A3 of region A (invented): model cortical_adapting, "
        "membrane area 1.4e-4 cm^2, ramps of 100, 150 and 200 pA/s from 0.5 to 2.5 s, "
        "4-pole Bessel 10 kHz, 20 kHz, noise 0.2 mV SD.")
    write_electrodes_nwb(path, [cell], session_description=SCENARIO + " Cell A3: current "
                         "ramps.", identifier="sample-region-a-cell-3", sweep_gap_s=5.0,
                         stimulus_type="current ramps", compact=True)


def write_pair_file(path: Path) -> None:
    """Cells B3 and B4 (invented), recorded at once: a test pulse, then a step, each sweep."""
    commands = steps_after_test_pulse(PAIR_STEPS_PA, sampling_rate_hz=SIMULATION_RATE_HZ,
                                      duration_s=PAIR_SWEEP_S, step_s=PAIR_STEP_S,
                                      pulse_pa=PAIR_PULSE_PA, pulse_s=PAIR_PULSE_S)
    electrodes = []
    for name, model, area, noise, series, seed in PAIR_CELLS:
        rec = record_commands(model, commands, simulation_rate_hz=SIMULATION_RATE_HZ,
                              decimation=DECIMATION, bessel_hz=BESSEL_HZ, noise_mv=noise,
                              series_resistance_mohm=series, membrane_area_cm2=area, seed=seed)
        electrodes.append(ElectrodeSweeps(
            name, rec.voltage_mv, rec.command_pa, rec.sampling_rate_hz,
            description=f"Simulated cell (invented): model {model}, noise {noise:g} mV SD, "
            f"uncompensated series resistance {series:g} MOhm, 4-pole Bessel 10 kHz, 20 kHz."))
    write_electrodes_nwb(path, electrodes, session_description=SCENARIO + " Cells B3 and B4, "
                         "recorded at once on two electrodes.", identifier="sample-region-b-pair-1",
                         sweep_gap_s=3.0, stimulus_type="test pulse and current steps", compact=True)


def main(names: list[str] | None = None) -> int:
    """Simulate and write the sample files next to this script (all, or those named).

    Returns
    -------
    int
        Exit status, 0 on success; 2 for a name that is not a sample file.
    """
    known = [c.file_name for c in CELLS] + [RAMP_FILE, PAIR_FILE]
    wanted = set(names or known)
    if wanted - set(known):
        print(f"not a sample file: {', '.join(sorted(wanted - set(known)))}; "
              f"the files are {', '.join(known)}", file=sys.stderr)
        return 2
    for name, write in ((RAMP_FILE, write_ramp_file), (PAIR_FILE, write_pair_file)):
        if name in wanted:
            write(HERE / name)
            print(f"{name}: {(HERE / name).stat().st_size / 1e6:.2f} MB")
    for cell in CELLS:
        if cell.file_name not in wanted:
            continue
        sweeps = simulate(cell)
        path = HERE / cell.file_name
        if path.suffix == ".nwb":
            write_nwb(cell, sweeps, path)
        else:
            write_nix(cell, sweeps, path)
        size_mb = path.stat().st_size / 1e6
        print(f"{cell.file_name}: {cell.model}, {cell.n_sweeps} sweeps at "
              f"{cell.sampling_rate_hz:g} Hz, {size_mb:.2f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
