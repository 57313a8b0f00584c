"""A simulated acquisition chain: what an amplifier and digitizer make of a membrane.

:func:`record_commands` simulates a published model under arbitrary current commands at a
fine time step, then passes the voltage through what a rig does to it: an uncompensated
series (bridge) resistance, synaptic background acting on the membrane, mains hum and drift,
a 4-pole low-pass Bessel filter, white measurement noise and sampling at a lower rate. The
noise-free membrane voltage at the output rate is returned beside the recording, so a test
compares a measurement with the truth, never with the tool's own earlier output.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal

from spikemeasure.testing.integration import _PA_TO_UA, _integrate
from spikemeasure.testing.models import _area, _get_model, _positive_float

__all__ = ["RecordedSweeps", "ornstein_uhlenbeck", "bessel_lowpass", "record_commands"]

#: Unit bookkeeping: 1 MOhm x 1 pA = 1e-6 V = 1e-3 mV.
_MV_PER_MOHM_PA = 1e-3


@dataclass(frozen=True)
class RecordedSweeps:
    """Sweeps as the digitizer saw them, with the truth they came from.

    Attributes
    ----------
    sampling_rate_hz : float
        Output samples per second.
    time_s : ndarray, shape (n_samples,)
    voltage_mv : ndarray, shape (n_sweeps, n_samples)
        The recorded voltage: membrane + bridge error + hum + drift, filtered, noisy, sampled.
    command_pa : ndarray, shape (n_sweeps, n_samples)
        The command current as the amplifier reports it (without the synaptic background).
    membrane_mv : ndarray, shape (n_sweeps, n_samples)
        The noise-free membrane voltage at the output sampling instants (no bridge error,
        no filter, no hum, drift or noise; the synaptic background, which acts on the
        membrane, included).
    synaptic_pa : ndarray, shape (n_sweeps, n_samples)
        The synaptic background current at the output sampling instants (zeros without one).
    """

    sampling_rate_hz: float
    time_s: np.ndarray
    voltage_mv: np.ndarray
    command_pa: np.ndarray
    membrane_mv: np.ndarray
    synaptic_pa: np.ndarray


def ornstein_uhlenbeck(n_samples: int, sampling_rate_hz: float, sd: float, tau_ms: float,
                       rng: np.random.Generator, n_rows: int = 1) -> np.ndarray:
    """Stationary Ornstein-Uhlenbeck noise, exact discretization.

    x[k+1] = a x[k] + sd sqrt(1 - a^2) xi[k] with a = exp(-dt / tau), xi standard normal,
    started from the stationary distribution; mean 0, standard deviation `sd`, correlation
    time `tau_ms` (Uhlenbeck & Ornstein 1930; Gillespie 1996, Phys Rev E 54:2084, from memory).
    Shape (n_rows, n_samples).
    """
    dt_ms = 1e3 / _positive_float("sampling_rate_hz", sampling_rate_hz)
    tau = _positive_float("tau_ms", tau_ms)
    a = np.exp(-dt_ms / tau)
    kicks = rng.standard_normal((n_rows, int(n_samples))) * (float(sd) * np.sqrt(1 - a * a))
    kicks[:, 0] = rng.standard_normal(n_rows) * float(sd)
    # x[k] = a x[k-1] + kick[k]: a first-order recursive filter
    return signal.lfilter([1.0], [1.0, -a], kicks, axis=1)


def bessel_lowpass(x: np.ndarray, sampling_rate_hz: float, cutoff_hz: float,
                   order: int = 4) -> np.ndarray:
    """Causal low-pass Bessel filter along the last axis, -3 dB at `cutoff_hz`
    (scipy.signal.bessel with norm='mag'), started at rest on the first sample, as an
    amplifier's analog filter that has been running before the sweep."""
    sos = signal.bessel(order, cutoff_hz, btype="low", norm="mag", output="sos",
                        fs=sampling_rate_hz)
    x = np.asarray(x, dtype=float)
    zi = signal.sosfilt_zi(sos)  # (n_sections, 2), steady state for a unit input
    if x.ndim == 1:
        return signal.sosfilt(sos, x, zi=zi * x[0])[0]
    rows = x.reshape(-1, x.shape[-1])
    start = zi[:, None, :] * rows[:, 0][None, :, None]  # (n_sections, n_rows, 2)
    out = signal.sosfilt(sos, rows, axis=-1, zi=start)[0]
    return out.reshape(x.shape)


def record_commands(model: str, command_pa: np.ndarray, *, simulation_rate_hz: float = 100_000.0,
                    decimation: int = 5, bessel_hz: float = 10_000.0, noise_mv: float = 0.0,
                    synaptic_sd_pa: float = 0.0, synaptic_tau_ms: float = 3.0,
                    series_resistance_mohm: float = 0.0, hum_mv: float = 0.0,
                    hum_hz: float = 50.0, drift_mv_per_s: float = 0.0,
                    membrane_area_cm2: float | None = None,
                    seed: int | np.random.Generator | None = 0) -> RecordedSweeps:
    """Simulate sweeps under given commands and record them through the acquisition chain.

    Parameters
    ----------
    model : str
        One of :data:`spikemeasure.testing.MODELS`.
    command_pa : ndarray, shape (n_sweeps, n_sim) or (n_sim,)
        Command current at `simulation_rate_hz`, pA (holding included).
    simulation_rate_hz : float, optional
        Rate of the command and of the simulated membrane (default 100 kHz).
    decimation : int, optional
        The digitizer keeps every `decimation`-th sample (default 5: 20 kHz out).
    bessel_hz : float, optional
        -3 dB frequency of the 4-pole low-pass Bessel filter (default 10 kHz); 0 or None for
        no filter.
    noise_mv : float, optional
        SD of white measurement noise added after the filter, mV.
    synaptic_sd_pa, synaptic_tau_ms : float, optional
        Ornstein-Uhlenbeck synaptic background current (SD in pA, correlation time) injected
        into the membrane with the command; it is not in the recorded command.
    series_resistance_mohm : float, optional
        Uncompensated series resistance: R_s x I (command current) is added to the recorded
        voltage, the bridge error.
    hum_mv, hum_hz : float, optional
        Amplitude and frequency of a mains hum sine added to the recorded voltage.
    drift_mv_per_s : float, optional
        Linear drift of the recorded voltage.
    membrane_area_cm2 : float, optional
    seed : int or Generator, optional

    Returns
    -------
    RecordedSweeps
    """
    mod = _get_model(model)
    area = _area(mod, membrane_area_cm2)
    fs = _positive_float("simulation_rate_hz", simulation_rate_hz)
    cmd = np.atleast_2d(np.asarray(command_pa, dtype=float))
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    n_sweeps, n_sim = cmd.shape
    synaptic = (ornstein_uhlenbeck(n_sim, fs, synaptic_sd_pa, synaptic_tau_ms, rng, n_sweeps)
                if synaptic_sd_pa > 0 else np.zeros_like(cmd))
    injected = (cmd + synaptic) * (_PA_TO_UA / area)
    membrane = _integrate(mod, injected, injected[:, 0].copy(), fs, "command_pa[0]")
    t = np.arange(n_sim) / fs
    seen = membrane + series_resistance_mohm * cmd * _MV_PER_MOHM_PA
    if hum_mv:
        seen = seen + hum_mv * np.sin(2 * np.pi * hum_hz * t)
    if drift_mv_per_s:
        seen = seen + drift_mv_per_s * t
    if bessel_hz:
        seen = bessel_lowpass(seen, fs, bessel_hz)
    step = int(decimation)
    if step < 1:
        raise ValueError(f"decimation must be a positive whole number (got {decimation})")
    recorded = seen[:, ::step]
    if noise_mv:
        recorded = recorded + rng.standard_normal(recorded.shape) * noise_mv
    return RecordedSweeps(sampling_rate_hz=fs / step, time_s=t[::step], voltage_mv=recorded,
                          command_pa=cmd[:, ::step].copy(), membrane_mv=membrane[:, ::step],
                          synaptic_pa=synaptic[:, ::step])
