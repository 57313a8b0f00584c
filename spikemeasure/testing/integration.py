"""Time integration of the conductance models under a current command, numpy only.

All sweeps of a family are advanced together, one time loop for the whole family, with
a staggered exponential scheme (see :func:`simulate_current_waveform`).  Every sweep
starts at the model's steady state, computed as a fixed point.
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from spikemeasure.testing.models import (
    _area,
    _finite_float,
    _get_model,
    _Model,
    _positive_float,
)

__all__ = ["resting_potential_mv", "simulate_current_waveform"]

# Longest internal step, in ms.  The scheme is stable at any step; at this one, spike
# peaks stay within ~0.2 mV and spike times within ~0.1 ms (over a 0.2 s train) of a
# converged solution.
_MAX_INTERNAL_DT_MS = 0.01

_PA_TO_UA = 1e-6  # 1 pA = 1e-6 uA


# ---------------------------------------------------------------- steady state & core


def _steady_voltage(model: _Model, current_density: float, source: str = "holding_pa") -> float:
    """Most hyperpolarised voltage at which the steady-state current balances the input.

    A dense scan brackets the roots of ``I_inj - I_ion(V)`` and bisection refines the
    lowest one that crosses from depolarising to hyperpolarising; that is the resting
    state for subthreshold input.  Above a repetitive-firing threshold the fixed point
    is unstable, and starting there simply lets firing begin at once.
    """
    # The scan spans the rate tables, so the start lies where rates are tabulated.
    grid = np.arange(_VoltageTable.v_min, _VoltageTable.v_max, 0.05)
    with np.errstate(over="ignore", invalid="ignore"):
        net = current_density - model.ionic_current(grid)
    down = np.nonzero((net[:-1] > 0.0) & (net[1:] <= 0.0))[0]
    if down.size == 0:
        raise ValueError(
            f"{source} is too large in magnitude: model {model.name!r} has no steady "
            f"state between {_VoltageTable.v_min:g} and {_VoltageTable.v_max:g} mV at "
            f"{current_density:g} uA/cm^2"
        )
    lo, hi = float(grid[down[0]]), float(grid[down[0] + 1])
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if current_density - float(model.ionic_current(np.array([mid]))[0]) > 0.0:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


class _VoltageTable:
    """Functions of voltage tabulated on a fine grid, read by linear interpolation.

    Evaluating the rate expressions at every step dominates the cost of a numpy time
    loop; one interpolation serves all of them at once.  With a 0.01 mV grid the
    interpolation error is below 1e-5 relative (the steepest rate has a 4 mV slope
    factor), far below the integration error.  Voltages beyond the grid use the
    end values, where every gate is saturated.
    """

    v_min = -250.0
    v_max = 150.0
    step = 0.01

    def __init__(self, rows: Sequence[np.ndarray]) -> None:
        values = np.array(rows, dtype=float)
        self.lower = np.ascontiguousarray(values[:, :-1])
        self.slope = np.ascontiguousarray(np.diff(values, axis=1))
        self.top = float(self.lower.shape[1]) - 1e-9
        self.scale = 1.0 / self.step

    @classmethod
    def grid(cls) -> np.ndarray:
        n = int(round((cls.v_max - cls.v_min) / cls.step)) + 1
        return cls.v_min + cls.step * np.arange(n)

    def __call__(self, v: np.ndarray) -> np.ndarray:
        """Return the tabulated rows at ``v``, shape (n_rows, len(v))."""
        # minimum/maximum and take are several times cheaper than clip and fancy
        # indexing on the short arrays of a time loop.
        x = np.minimum(np.maximum((v - self.v_min) * self.scale, 0.0), self.top)
        i = x.astype(np.intp)
        return self.lower.take(i, axis=1) + self.slope.take(i, axis=1) * (x - i)


def _integrate(
    model: _Model,
    command_density: np.ndarray,
    initial_density: np.ndarray,
    sampling_rate_hz: float,
    initial_source: str = "holding_pa",
) -> np.ndarray:
    """Integrate all sweeps together; return voltage (mV) at the sampling instants.

    ``command_density`` has shape (n_sweeps, n_samples) in uA/cm^2 and is held
    constant over each sample interval; ``initial_density`` (n_sweeps,) is the
    current before time zero, which sets each sweep's starting steady state.
    """
    n_sweeps, n_samples = command_density.shape
    sample_dt_ms = 1e3 / sampling_rate_hz
    n_sub = max(1, math.ceil(sample_dt_ms / _MAX_INTERNAL_DT_MS - 1e-9))
    dt = sample_dt_ms / n_sub
    c_m = model.capacitance_uf_cm2

    # Per gate, the exact update at fixed V is x_new = decay * x + drive with
    # decay = exp(-dt * rate) and drive = x_inf * (1 - decay); tabulate both.
    grid = _VoltageTable.grid()
    rows: list[np.ndarray] = []
    for inf, rate in model.kinetic_gates(grid):
        decay = np.exp(-dt * rate)
        rows.extend([decay, inf * (1.0 - decay)])
    # A passive membrane has no gate: no table, no gate update.
    gate_table = _VoltageTable(rows) if rows else None
    instantaneous_rows = model.instantaneous_gates(grid)
    instant_table = _VoltageTable(instantaneous_rows) if instantaneous_rows else None

    # Start exactly at the fixed point, so there is no start-up transient.
    v0 = {
        float(i): _steady_voltage(model, float(i), initial_source)
        for i in np.unique(initial_density)
    }
    v = np.array([v0[float(i)] for i in initial_density], dtype=float)
    gates = np.array([inf for inf, _ in model.kinetic_gates(v)], dtype=float)
    no_instant: list[np.ndarray] = []

    v_prev = v.copy()
    out = np.empty((n_sweeps, n_samples), dtype=float)
    out[:, 0] = v
    with np.errstate(over="ignore", invalid="ignore"):
        for k in range(n_samples - 1):
            i_inj = command_density[:, k]
            for _ in range(n_sub):
                # Gates advance from t - dt/2 to t + dt/2 by the exact solution of
                # their linear equations at fixed V(t): a Rush-Larsen step centred on t.
                if gate_table is not None:
                    coef = gate_table(v)
                    gates *= coef[0::2]
                    gates += coef[1::2]
                if instant_table is None:
                    instant = no_instant
                else:
                    # Instantaneous gates are read at the extrapolated midpoint
                    # voltage so the scheme stays second order.
                    instant = list(instant_table(1.5 * v - 0.5 * v_prev))
                g_total, g_e = model.conductances(gates, instant)
                # With conductances frozen at t + dt/2, V relaxes exponentially to
                # v_inf: exact for the linear problem, stable for any dt.
                v_inf = (g_e + i_inj) / g_total
                v_prev = v
                v = v_inf + (v - v_inf) * np.exp(-dt / c_m * g_total)
            out[:, k + 1] = v
    if not np.all(np.isfinite(out)):
        raise ValueError(
            "the simulation diverged (non-finite voltage); the command current is far "
            "outside the range the model can represent"
        )
    return out


def resting_potential_mv(model: str, holding_pa: float = 0.0, *,
                         membrane_area_cm2: float | None = None) -> float:
    """Return the steady-state membrane potential of a model under a holding current.

    Parameters
    ----------
    model : str
        One of :data:`MODELS`.
    holding_pa : float, optional
        Constant injected current, pA.  Default 0.
    membrane_area_cm2 : float, optional
        Membrane area, cm^2; default :func:`default_membrane_area_cm2`.

    Returns
    -------
    float
        The fixed point, mV, at which every sweep starts.

    Notes
    -----
    The most hyperpolarised fixed point is returned.  Above the holding current at
    which the model fires repetitively it is unstable.

    References
    ----------
    .. [1] Hodgkin AL, Huxley AF (1952) J Physiol 117:500-544.
    .. [2] Wang X-J, Buzsaki G (1996) J Neurosci 16:6402-6413.
    .. [3] Pospischil M et al. (2008) Biol Cybern 99:427-441.
    """
    mod = _get_model(model)
    area = _area(mod, membrane_area_cm2)
    density = _finite_float("holding_pa", holding_pa) * _PA_TO_UA / area
    return _steady_voltage(mod, density)


def simulate_current_waveform(
    model: str,
    command_pa: np.ndarray,
    sampling_rate_hz: float,
    *,
    membrane_area_cm2: float | None = None,
) -> np.ndarray:
    """Simulate the noise-free voltage response to an arbitrary current command.

    Parameters
    ----------
    model : str
        One of :data:`MODELS`.
    command_pa : numpy.ndarray
        Injected current, pA, 1-D; sample ``k`` is applied from ``k / fs`` to
        ``(k + 1) / fs``.
    sampling_rate_hz : float
        Samples per second of ``command_pa`` and of the result.
    membrane_area_cm2 : float, optional
        Membrane area used to turn pA into uA/cm^2; default
        :func:`default_membrane_area_cm2`.

    Returns
    -------
    numpy.ndarray
        Membrane potential, mV, float64, same length as ``command_pa``; element
        ``k`` is the voltage at time ``k / fs``.

    Notes
    -----
    The cell starts at the steady state for a constant current ``command_pa[0]``,
    as if that current had been applied for ever before time zero.

    Integration is a staggered exponential scheme: gating variables live at half
    steps and are advanced by the exact solution of their linear equations at fixed
    voltage (Rush & Larsen 1978); the voltage is then advanced by the exact solution
    of the membrane equation with conductances frozen at the half step.  Both
    updates are unconditionally stable and the staggering makes the scheme second
    order.  When the sampling interval exceeds 10 us it is split into equal
    sub-steps; values are returned at the sampling instants only.

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
    .. [4] Rush S, Larsen H (1978) A practical algorithm for solving dynamic
       membrane equations. IEEE Trans Biomed Eng 25:389-392 (from memory).
    """
    mod = _get_model(model)
    fs = _positive_float("sampling_rate_hz", sampling_rate_hz)
    area = _area(mod, membrane_area_cm2)
    try:
        command = np.asarray(command_pa, dtype=float)
    except (TypeError, ValueError):
        raise ValueError("command_pa must be a 1-D array of numbers") from None
    if command.ndim != 1 or command.size == 0:
        raise ValueError(
            f"command_pa must be a non-empty 1-D array; got shape {command.shape}"
        )
    if not np.all(np.isfinite(command)):
        raise ValueError("command_pa must contain only finite values")
    density = command[np.newaxis, :] * (_PA_TO_UA / area)
    return _integrate(mod, density, density[:, 0].copy(), fs, "command_pa[0]")[0]
