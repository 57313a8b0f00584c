"""Simulated current-step protocols: families of square steps with measurement noise.

The membrane is integrated by :mod:`spikemeasure.testing.integration`; white Gaussian
measurement noise, if asked for, is added to the returned voltage and does not act on
the membrane.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from spikemeasure.testing.integration import _PA_TO_UA, _integrate
from spikemeasure.testing.models import _area, _finite_float, _get_model, _positive_float

__all__ = ["SimulatedSweeps", "simulate_current_steps"]


@dataclass(frozen=True)
class SimulatedSweeps:
    """A family of simulated current-clamp sweeps.

    Attributes
    ----------
    time_s : numpy.ndarray
        Sample times from the start of each sweep, s, shape (n_samples,).
    voltage_mv : numpy.ndarray
        Membrane potential, mV, float64, shape (n_sweeps, n_samples); measurement
        noise included when requested.
    command_pa : numpy.ndarray
        Injected current, pA, shape (n_sweeps, n_samples).
    sampling_rate_hz : float
        Samples per second.
    step_start_s, step_end_s : float
        Step onset and offset, s.  Sample ``k`` carries the step when
        ``step_start_s <= time_s[k] < step_end_s``.
    step_amplitudes_pa : numpy.ndarray
        Step amplitude of each sweep relative to the holding current, pA.
    model : str
        Name of the model that produced the sweeps (one of :data:`MODELS`).
    """

    time_s: np.ndarray
    voltage_mv: np.ndarray
    command_pa: np.ndarray
    sampling_rate_hz: float
    step_start_s: float
    step_end_s: float
    step_amplitudes_pa: np.ndarray
    model: str


def simulate_current_steps(
    model: str,
    step_amplitudes_pa: Sequence[float] | np.ndarray,
    *,
    sampling_rate_hz: float = 50_000.0,
    duration_s: float = 0.8,
    step_start_s: float = 0.1,
    step_end_s: float = 0.6,
    holding_pa: float = 0.0,
    noise_mv: float = 0.0,
    seed: int | np.random.Generator | None = None,
    membrane_area_cm2: float | None = None,
) -> SimulatedSweeps:
    """Simulate a family of square current steps, one sweep per amplitude.

    Parameters
    ----------
    model : str
        One of :data:`MODELS`: ``"hodgkin_huxley_1952"``, ``"wang_buzsaki_1996"``,
        ``"cortical_adapting"``, ``"passive_rc"`` or ``"passive_sag"``.
    step_amplitudes_pa : sequence of float
        Step amplitude of each sweep, pA, added to ``holding_pa`` during the step.
    sampling_rate_hz : float, optional
        Samples per second.  Default 50 kHz.
    duration_s : float, optional
        Sweep length, s.  Default 0.8 s.
    step_start_s, step_end_s : float, optional
        Step onset and offset from the start of the sweep, s; ``0 <= step_start_s <
        step_end_s <= duration_s``.  Defaults 0.1 s and 0.6 s.
    holding_pa : float, optional
        Constant current outside (and beneath) the step, pA.  Default 0.
    noise_mv : float, optional
        Standard deviation of white Gaussian measurement noise added to the returned
        voltage, mV; it does not act on the membrane.  Default 0 (no noise).
    seed : int or numpy.random.Generator, optional
        Seed or generator for the noise, for reproducible sweeps.
    membrane_area_cm2 : float, optional
        Membrane area used to turn pA into uA/cm^2; default
        :func:`default_membrane_area_cm2`.

    Returns
    -------
    SimulatedSweeps
        Time base, voltage (mV), command (pA) and protocol of every sweep.

    Notes
    -----
    Every sweep starts at the model's steady state under ``holding_pa``, computed as
    a fixed point, so there is no start-up transient.  The number of samples is
    ``round(duration_s * sampling_rate_hz)``.  See :func:`simulate_current_waveform`
    for the integration scheme.  Simulating 10 sweeps of 0.8 s at 50 kHz takes a few
    seconds, since all sweeps share one time loop.

    References
    ----------
    .. [1] Hodgkin AL, Huxley AF (1952) A quantitative description of membrane
       current and its application to conduction and excitation in nerve.
       J Physiol 117:500-544.
    .. [2] Wang X-J, Buzsaki G (1996) Gamma oscillation by synaptic inhibition in a
       hippocampal interneuronal network model. J Neurosci 16:6402-6413.
    .. [3] Pospischil M, Toledo-Rodriguez M, Monier C, Piwkowska Z, Bal T,
       Fregnac Y, Markram H, Destexhe A (2008) Minimal Hodgkin-Huxley type models
       for different classes of cortical and thalamic neurons. Biol Cybern
       99:427-441.
    .. [4] Yamada WM, Koch C, Adams PR (1989) Multiple channels and calcium
       dynamics. In: Koch C, Segev I (eds) Methods in neuronal modeling. MIT Press,
       Cambridge, pp 97-133 (from memory).
    """
    mod = _get_model(model)
    fs = _positive_float("sampling_rate_hz", sampling_rate_hz)
    duration = _positive_float("duration_s", duration_s)
    start = _finite_float("step_start_s", step_start_s)
    end = _finite_float("step_end_s", step_end_s)
    holding = _finite_float("holding_pa", holding_pa)
    noise = _finite_float("noise_mv", noise_mv)
    area = _area(mod, membrane_area_cm2)
    if start < 0.0:
        raise ValueError(f"step_start_s must be >= 0; got {step_start_s!r}")
    if end <= start:
        raise ValueError(
            f"step_end_s must be greater than step_start_s ({start:g} s); got {step_end_s!r}"
        )
    if end > duration:
        raise ValueError(
            f"step_end_s must not exceed duration_s ({duration:g} s); got {step_end_s!r}"
        )
    if noise < 0.0:
        raise ValueError(f"noise_mv must be >= 0; got {noise_mv!r}")
    if seed is not None and not isinstance(seed, np.random.Generator):
        if isinstance(seed, (bool, np.bool_)) or not isinstance(seed, (int, np.integer)):
            raise ValueError(
                f"seed must be None, a non-negative integer or a numpy Generator; got {seed!r}"
            )
        if seed < 0:
            raise ValueError(f"seed must be non-negative; got {seed!r}")
    try:
        amplitudes = np.atleast_1d(np.asarray(step_amplitudes_pa, dtype=float))
    except (TypeError, ValueError):
        raise ValueError("step_amplitudes_pa must be a sequence of numbers") from None
    if amplitudes.ndim != 1 or amplitudes.size == 0:
        raise ValueError(
            "step_amplitudes_pa must be a non-empty 1-D sequence; "
            f"got shape {amplitudes.shape}"
        )
    if not np.all(np.isfinite(amplitudes)):
        raise ValueError("step_amplitudes_pa must contain only finite values")

    n_samples = int(round(duration * fs))
    if n_samples < 2:
        raise ValueError(
            f"duration_s * sampling_rate_hz must give at least 2 samples; got {n_samples}"
        )
    time_s = np.arange(n_samples) / fs
    # Compare sample indices rather than float times so the step edges fall on the
    # samples a recording system would use.
    k = np.arange(n_samples)
    in_step = (k >= round(start * fs)) & (k < round(end * fs))
    if not np.any(in_step):
        raise ValueError(
            "the step between step_start_s and step_end_s is shorter than one sample"
        )
    command = holding + amplitudes[:, np.newaxis] * in_step[np.newaxis, :]

    scale = _PA_TO_UA / area
    voltage = _integrate(
        mod, command * scale, np.full(amplitudes.size, holding * scale), fs
    )
    if noise > 0.0:
        rng = np.random.default_rng(seed)
        voltage = voltage + rng.normal(0.0, noise, size=voltage.shape)

    return SimulatedSweeps(
        time_s=time_s,
        voltage_mv=voltage,
        command_pa=command,
        sampling_rate_hz=fs,
        step_start_s=start,
        step_end_s=end,
        step_amplitudes_pa=amplitudes.copy(),
        model=mod.name,
    )
