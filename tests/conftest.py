"""Known-answer signals and file writers shared by the tests.

Every signal here has its answer from outside the code under test: a closed form, a
published model, or a general-purpose library.
"""
from __future__ import annotations

import datetime
import json
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from scipy.special import lambertw


@dataclass(frozen=True)
class GaussianSpike:
    """V(t) = base + A exp(-(t - tp)^2 / (2 sigma^2)), t in ms, V in mV (mV/ms = V/s).

    Closed forms, with u = (tp - t) / sigma on the rising side:
    - dV/dt = (A / sigma) u exp(-u^2 / 2); its maximum A / sigma * exp(-1/2) is at u = 1.
    - The upward crossing of rate r (before the maximum rate, u > 1) solves
      u exp(-u^2/2) = r sigma / A, i.e. u^2 = -W_{-1}(-(r sigma / A)^2) (Lambert W, lower branch).
    - d2V/dt2 = (A / sigma^2) (u^2 - 1) exp(-u^2 / 2) peaks at u = sqrt(3).
    - Half-width at level L above base: 2 sigma sqrt(2 ln(A / L)).
    """

    base_mv: float = -65.0
    amplitude_mv: float = 100.0
    sigma_ms: float = 0.4
    peak_ms: float = 10.0

    def voltage(self, t_ms: np.ndarray) -> np.ndarray:
        return self.base_mv + self.amplitude_mv * np.exp(
            -(t_ms - self.peak_ms) ** 2 / (2 * self.sigma_ms ** 2))

    def u_at_rate(self, rate_v_per_s: float) -> float:
        z = -(rate_v_per_s * self.sigma_ms / self.amplitude_mv) ** 2
        return float(np.sqrt(-lambertw(z, k=-1).real))

    def time_at_u(self, u: float) -> float:
        return self.peak_ms - u * self.sigma_ms

    def voltage_at_u(self, u: float) -> float:
        return self.base_mv + self.amplitude_mv * np.exp(-u * u / 2)

    def max_rate(self) -> float:
        return self.amplitude_mv / self.sigma_ms * np.exp(-0.5)

    def u_at_fraction_of_max_rate(self, fraction: float) -> float:
        # u exp(-u^2/2) = fraction * exp(-1/2)
        z = -(fraction * np.exp(-0.5)) ** 2
        return float(np.sqrt(-lambertw(z, k=-1).real))

    def half_width_ms(self, threshold_mv: float) -> float:
        peak = self.base_mv + self.amplitude_mv
        level = threshold_mv + (peak - threshold_mv) / 2 - self.base_mv
        return 2 * self.sigma_ms * np.sqrt(2 * np.log(self.amplitude_mv / level))


def sampled(spike: GaussianSpike, rate_hz: float, duration_ms: float = 20.0,
            offset_fraction: float = 0.37) -> tuple[np.ndarray, np.ndarray]:
    """(t_ms, v) on a grid that does not hit the peak sample exactly."""
    dt = 1e3 / rate_hz
    t = np.arange(0.0, duration_ms, dt) + offset_fraction * dt
    return t, spike.voltage(t)


def textbook_trace(rate_hz: float = 50_000.0) -> tuple[np.ndarray, dict]:
    """A spike with the round numbers of common practice: rest -70 mV, threshold -55 mV,
    peak +30 mV, AHP trough -90 mV.

    Construction (t in ms, V in mV):
    - a Gaussian of amplitude 100 mV on -70 mV; its 20 V/s crossing lies at -55 mV when
      exp(-u^2/2) = 0.15 and (100 / sigma) u 0.15 = 20, so u^2 = 2 ln(1/0.15) and
      sigma = 0.75 u ms;
    - minus an AHP bump 20 B(t) with B = (s^4) exp(4 (1 - s)), s = (t - tp) / 8 ms, for t > tp
      only: B and its first three derivatives vanish at the peak, and B reaches 1 at 8 ms
      after it, where the Gaussian has decayed below 1e-5 mV, so the trough is -90 mV.
    Answers: threshold -55 mV (onset rate 20 V/s), peak +30 mV, ahp_depth 35 mV.
    """
    u = np.sqrt(2 * np.log(1 / 0.15))
    sigma = 0.75 * u
    tp = 20.0
    dt = 1e3 / rate_hz
    t = np.arange(0.0, 60.0, dt) + 0.41 * dt
    v = -70.0 + 100.0 * np.exp(-(t - tp) ** 2 / (2 * sigma ** 2))
    s = np.clip((t - tp) / 8.0, 0.0, None)
    v -= 20.0 * s ** 4 * np.exp(4 * (1 - s))
    return v, {"threshold_mv": -55.0, "peak_mv": 30.0, "trough_mv": -90.0,
               "ahp_depth_mv": 35.0, "threshold_ms": tp - u * sigma, "t0_ms": t[0]}


@pytest.fixture
def gaussian_spike() -> GaussianSpike:
    return GaussianSpike()


# --------------------------------------------------------------------------- file writers

def write_nwb(path, sweeps, *, rate_hz=20_000.0, voltage_unit_scale=1e-3, current_scale=1e-12,
              voltage_clamp=False, stimulus_offset_s=0.0):
    """Write sweeps [(voltage_mv, command_pa), ...] with pynwb's intracellular API.

    Data are stored in mV and pA with NWB's `conversion` factors to volts and amperes
    (`voltage_unit_scale`, `current_scale`), so readers must apply them.
    """
    from pynwb import NWBHDF5IO, NWBFile
    from pynwb.icephys import (CurrentClampSeries, CurrentClampStimulusSeries,
                               VoltageClampSeries, VoltageClampStimulusSeries)

    nwb = NWBFile(session_description="test cell", identifier="test-cell",
                  session_start_time=datetime.datetime(2026, 1, 1, tzinfo=datetime.timezone.utc))
    device = nwb.create_device(name="amplifier")
    electrode = nwb.create_icephys_electrode(name="electrode", description="test",
                                             device=device)
    v_factor = 1e-3 / voltage_unit_scale
    i_factor = 1e-12 / current_scale
    for number, (v_mv, i_pa) in enumerate(sweeps):
        if voltage_clamp:
            response = VoltageClampSeries(name=f"current_{number}", data=np.asarray(i_pa) * i_factor,
                                          electrode=electrode, gain=1.0, rate=rate_hz,
                                          starting_time=float(number), sweep_number=number,
                                          conversion=current_scale)
            stimulus = VoltageClampStimulusSeries(
                name=f"command_{number}", data=np.asarray(v_mv) * v_factor, electrode=electrode,
                gain=1.0, rate=rate_hz, starting_time=float(number), sweep_number=number,
                conversion=voltage_unit_scale)
        else:
            response = CurrentClampSeries(name=f"voltage_{number}", data=np.asarray(v_mv) * v_factor,
                                          electrode=electrode, gain=1.0, rate=rate_hz,
                                          starting_time=float(number), sweep_number=number,
                                          conversion=voltage_unit_scale)
            stimulus = CurrentClampStimulusSeries(
                name=f"command_{number}", data=np.asarray(i_pa) * i_factor, electrode=electrode,
                gain=1.0, rate=rate_hz, starting_time=float(number) + stimulus_offset_s,
                sweep_number=number, conversion=current_scale)
        nwb.add_intracellular_recording(electrode=electrode, stimulus=stimulus, response=response)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with NWBHDF5IO(str(path), "w") as io:
            io.write(nwb)
    return path


def write_nix(path, sweeps, *, rate_hz=20_000.0, voltage_units="mV", current_units="pA",
              include_current=True):
    """Write sweeps [(voltage_mv, command_pa), ...] as NIX through neo, in the given units."""
    import neo
    import quantities as pq

    v_scale = float((1 * pq.mV).rescale(voltage_units).magnitude)
    i_scale = float((1 * pq.pA).rescale(current_units).magnitude)
    block = neo.Block(name="cell")
    for number, (v_mv, i_pa) in enumerate(sweeps):
        segment = neo.Segment(name=f"sweep {number}")
        segment.analogsignals.append(neo.AnalogSignal(
            np.asarray(v_mv)[:, None] * v_scale, units=voltage_units,
            sampling_rate=rate_hz * pq.Hz, name="membrane voltage"))
        if include_current:
            segment.analogsignals.append(neo.AnalogSignal(
                np.asarray(i_pa)[:, None] * i_scale, units=current_units,
                sampling_rate=rate_hz * pq.Hz, name="command current"))
        block.segments.append(segment)
    with neo.io.NixIO(str(path), mode="ow") as io:
        io.write_block(block)
    return path


def write_text(path, voltage_mv, command_pa=None, *, rate_hz=20_000.0, delimiter="\t",
               time_unit="s", voltage_unit="mV", current_unit="pA", with_time=True):
    """Write one sweep as delimited text with unit-suffixed headers."""
    to_unit = {"s": 1.0, "ms": 1e3, "mV": 1.0, "V": 1e-3, "pA": 1.0, "nA": 1e-3}
    cols, names = [], []
    if with_time:
        names.append(f"time_{time_unit}")
        cols.append(np.arange(len(voltage_mv)) / rate_hz * to_unit[time_unit])
    names.append(f"voltage_{voltage_unit}")
    cols.append(np.asarray(voltage_mv) * to_unit[voltage_unit])
    if command_pa is not None:
        names.append(f"current_{current_unit}")
        cols.append(np.asarray(command_pa) * to_unit[current_unit])
    np.savetxt(path, np.column_stack(cols), delimiter=delimiter, header=delimiter.join(names),
               comments="", fmt="%.10g")
    return path


def step_command(n_samples: int, rate_hz: float, amplitude_pa: float, start_s: float = 0.02,
                 end_s: float = 0.07, holding_pa: float = 0.0) -> np.ndarray:
    cmd = np.full(n_samples, holding_pa, dtype=float)
    cmd[int(round(start_s * rate_hz)):int(round(end_s * rate_hz))] += amplitude_pa
    return cmd


def gaussian_train(rate_hz: float, peaks_ms, duration_ms: float, spike: GaussianSpike = GaussianSpike()):
    """Several Gaussian spikes on a flat base (each far enough from the others)."""
    t = np.arange(0.0, duration_ms, 1e3 / rate_hz)
    v = np.full(t.size, spike.base_mv)
    for p in peaks_ms:
        v += spike.amplitude_mv * np.exp(-(t - p) ** 2 / (2 * spike.sigma_ms ** 2))
    return t, v


# --------------------------------------------------------------------------- an analytic cell

RC_RATE_HZ = 20_000.0
RC_STEP_S = (0.05, 0.25)  # step onset and offset; sweeps of 0.3 s
RC_R_GOHM, RC_TAU_MS, RC_REST_MV = 0.2, 10.0, -70.0  # 200 MOhm, 10 ms
RC_STEPS_PA = (-40.0, -20.0, 0.0, 20.0, 40.0, 60.0)
RC_SPIKES_PER_STEP = (0, 0, 0, 1, 3, 5)


def rc_cell_sweeps(steps=RC_STEPS_PA, spikes=RC_SPIKES_PER_STEP, duration_s: float = 0.3):
    """Sweeps [(voltage_mv, command_pa), ...] of a passive RC membrane, by its closed form
    V = rest + R I (1 - exp(-t / tau)) during the step and an exponential return after it,
    with Gaussian spikes (95 mV, sigma 0.35 ms, 30 ms apart from 30 ms into the step) added
    on the depolarizing steps, and 0.05 mV of white noise (fixed seed)."""
    onset, offset = RC_STEP_S
    n = int(duration_s * RC_RATE_HZ)
    t = np.arange(n) / RC_RATE_HZ
    shape = GaussianSpike(base_mv=0.0, amplitude_mv=95.0, sigma_ms=0.35)
    noise = np.random.default_rng(7)
    out = []
    for size, count in zip(steps, spikes):
        v = np.full(n, RC_REST_MV)
        on = (t >= onset) & (t < offset)
        v[on] += RC_R_GOHM * size * (1 - np.exp(-(t[on] - onset) * 1e3 / RC_TAU_MS))
        end_dv = RC_R_GOHM * size * (1 - np.exp(-(offset - onset) * 1e3 / RC_TAU_MS))
        after = t >= offset
        v[after] += end_dv * np.exp(-(t[after] - offset) * 1e3 / RC_TAU_MS)
        for peak_s in onset + 0.03 + np.arange(count) * 0.03:
            v += shape.voltage((t - peak_s) * 1e3 + shape.peak_ms)
        v += noise.normal(0.0, 0.05, n)
        out.append((v, step_command(n, RC_RATE_HZ, size, onset, offset)))
    return out


PASSIVE_RATE_HZ = 20_000.0
PASSIVE_R_MOHM, PASSIVE_TAU_MS, PASSIVE_REST_MV = 200.0, 20.0, -70.0


def rc_recording(noise_mv=0.0, steps_pa=(-100.0, -75.0, -50.0, -25.0), seed=0,
                 rate=PASSIVE_RATE_HZ):
    """A passive RC membrane: V(t) = rest + R I (1 - exp(-t / RC)) during the step, relaxing
    back after it (analytic; R in MOhm times I in pA is 1e-3 mV)."""
    from spikemeasure.io import Sweep
    from spikemeasure.io import Recording
    rng = np.random.default_rng(seed)
    n = int(0.8 * rate)
    t = np.arange(n) / rate
    sweeps = []
    for k, amp in enumerate(steps_pa):
        cmd = step_command(n, rate, amp, 0.1, 0.6)
        dv_inf = PASSIVE_R_MOHM * amp * 1e-3
        on = (t - 0.1) * 1e3
        v = np.where(t < 0.1, 0.0, dv_inf * (1 - np.exp(-np.clip(on, 0, None) / PASSIVE_TAU_MS)))
        at_off = dv_inf * (1 - np.exp(-500.0 / PASSIVE_TAU_MS))
        v = np.where(t >= 0.6, at_off * np.exp(-(t - 0.6) * 1e3 / PASSIVE_TAU_MS), v)
        v = v + PASSIVE_REST_MV
        v = v + rng.normal(0, noise_mv, n) if noise_mv else v
        sweeps.append(Sweep(v, rate, cmd, file="rc.nwb", index=k))
    return Recording("rc.nwb", "test", sweeps)


# --------------------------------------------------------------------------- damaged files

def set_hdf5_values(path, name_ends, *, attribute=None, value, within=""):
    """Overwrite, with h5py, what a writer would refuse to write: the attribute `attribute`
    (or, without one, the scalar value) of every object whose name ends with `name_ends`
    (and contains `within`). Returns how many objects were changed."""
    import h5py

    changed = []

    def visit(name, obj):
        if name.endswith(name_ends) and within in name:
            if attribute is None:
                obj[()] = value
            else:
                obj.attrs[attribute] = value
            changed.append(name)

    with h5py.File(path, "r+") as fh:
        fh.visititems(visit)
    assert changed, f"nothing named *{name_ends} in the file"
    return len(changed)


def write_nix_sampling_interval(path, sweeps, interval_s):
    """A NIX file written by neo, then given the sampling interval `interval_s` (0, NaN,
    negative, infinite) in every signal's time dimension, as a damaged file would hold."""
    write_nix(path, sweeps)
    set_hdf5_values(path, "dimensions/1", attribute="sampling_interval", value=interval_s)
    return path


def write_nwb_huge_declared(path, n_samples=10 ** 10, rate_hz=20_000.0):
    """An NWB file whose current-clamp response and stimulus declare `n_samples` samples in a
    chunked, compressed dataset of fill values: a few kB on disk, 80 GB as float64."""
    import h5py

    short = np.full(1000, -70.0)
    write_nwb(path, [(short, np.zeros(1000))], rate_hz=rate_hz)
    with h5py.File(path, "r+") as fh:
        for group in ("acquisition/voltage_0", "stimulus/presentation/command_0"):
            old = fh[group]["data"]
            attrs = dict(old.attrs)
            del fh[group]["data"]
            new = fh[group].create_dataset("data", shape=(n_samples,), dtype="f8",
                                           chunks=(1 << 20,), compression="gzip",
                                           fillvalue=0.0)
            for key, val in attrs.items():
                new.attrs[key] = val
    return path


def write_nix_huge_declared(path, n_samples=10 ** 10, rate_hz=20_000.0):
    """A two-sweep NIX file (neo's NixIO) whose first data array is replaced, with h5py, by a
    chunked, compressed dataset of fill values declaring `n_samples` samples."""
    import h5py

    short = np.full(1000, -70.0)
    write_nix(path, [(short, np.zeros(1000))] * 2, rate_hz=rate_hz)
    with h5py.File(path, "r+") as fh:
        arrays = []
        fh.visititems(lambda name, obj: arrays.append(name) if isinstance(obj, h5py.Dataset)
                      and name.endswith("/data") else None)
        name = sorted(arrays)[0]
        attrs = dict(fh[name].attrs)
        del fh[name]
        new = fh.create_dataset(name, shape=(n_samples, 1), dtype="f8", chunks=(1 << 20, 1),
                                compression="gzip", fillvalue=0.0)
        for key, val in attrs.items():
            new.attrs[key] = val
    return path


# --------------------------------------------------------------------------- measured runs

REPOSITORY = Path(__file__).resolve().parents[1]
ACCEPTED = REPOSITORY / "tests" / "accepted"
#: Each set the suite measures once per session: its recordings folder and the project file
#: whose [measure] parameters its runs use (None: the defaults). tests/accepted/<name>/
#: holds its accepted tables, tests/accepted/<name>.toml points `accept` and `check` there.
MEASURED_SETS = {
    "sample_data": (REPOSITORY / "sample_data", None),
    "example_lab": (REPOSITORY / "docs" / "example-lab" / "recordings",
                    REPOSITORY / "docs" / "example-lab" / "spikemeasure.toml"),
}


@pytest.fixture(scope="session")
def measured_runs(tmp_path_factory) -> dict[str, Path]:
    """The result folder of each of `MEASURED_SETS`, by name, measured once per test session
    (once per worker process under pytest-xdist) as `spikemeasure measure --no-figures` does.

    Files are named relative to the recordings folder, as in the accepted tables, wherever the
    checkout lies. The folders are shared: read them, or copy one before changing it.
    """
    from spikemeasure.config import load_config, merge_parameters
    from spikemeasure.run import measure_paths

    base = tmp_path_factory.mktemp("measured_runs")
    runs = {}
    for name, (recordings, project_file) in MEASURED_SETS.items():
        # the run record names the project file as `measure` run from the lab's top does
        params = merge_parameters(load_config(project_file) if project_file else {}, {},
                                  project_file.name if project_file else None)
        summary = measure_paths([str(recordings)], base / name, params.settings,
                                step_s=params.step_s, step_sizes_pa=params.step_sizes_pa,
                                sampling_rate_hz=params.sampling_rate_hz,
                                max_sweep_samples=params.max_sweep_samples,
                                config_file=params.config_file, jobs=1, figure_format=None)
        assert not summary.failures, summary.failures
        runs[name] = base / name
    return runs


# -- imports in a fresh interpreter ---------------------------------------------------

def loaded_spikemeasure_modules(imports: tuple[str, ...]) -> list[str]:
    """Import ``imports`` in a new interpreter; return the spikemeasure modules then loaded
    (Python's own record, ``sys.modules``: modules imported by other tests in this process
    cannot hide or fake an import)."""
    program = (
        "import importlib, json, sys\n"
        f"for name in {list(imports)!r}:\n"
        "    importlib.import_module(name)\n"
        "print(json.dumps(sorted(m for m in sys.modules if m.startswith('spikemeasure'))))\n"
    )
    done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])
