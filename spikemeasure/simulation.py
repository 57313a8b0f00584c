"""Simulated whole-cell current-clamp sweeps from published conductance models.

The simulator produces families of current-step sweeps (and responses to arbitrary
current commands) from three single-compartment Hodgkin-Huxley-type models, so the
analysis code can be exercised on data whose ground truth is known:

``"hodgkin_huxley_1952"``
    The squid giant axon model at 6.3 degC, written in the modern sign convention
    (inside minus outside, rest near -65 mV).  First spikes peak near +34 to +42 mV
    (later spikes of fast trains lower, down to about +20 mV), with an undershoot to
    about -75 mV and a half-width of ~1.1-1.3 ms; one spike for weak
    steps, repetitive firing at 55-100 Hz above ~6.2 uA/cm^2, and a rebound
    (anode-break) spike after hyperpolarising steps of -3 uA/cm^2 or stronger.
``"wang_buzsaki_1996"``
    A fast-spiking hippocampal interneuron: spikes peak near +23 to +34 mV with a
    half-width of ~0.5 ms, no adaptation, and rates from a few Hz at rheobase to
    several hundred Hz.
``"cortical_adapting"``
    A regular-spiking cortical pyramidal cell whose slow M-type K+ current produces
    spike-frequency adaptation (last interspike interval 1.3-2 times the first);
    spikes peak near +48 mV with a half-width of ~0.7 ms.

The behaviour described is as simulated here, with the default membrane areas.
Membrane currents in the models are densities (uA/cm^2); the command, in pA, is
converted with a membrane area per model (see :func:`default_membrane_area_cm2`).

Only numpy is needed. Integration uses a staggered exponential scheme (see
:func:`simulate_current_waveform`) with all sweeps advanced together, one time loop
for the whole family.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

__all__ = [
    "MODELS",
    "SimulatedSweeps",
    "default_membrane_area_cm2",
    "resting_potential_mv",
    "simulate_current_steps",
    "simulate_current_waveform",
]

# Longest internal step, in ms.  The scheme is stable at any step; at this one, spike
# peaks stay within ~0.2 mV and spike times within ~0.1 ms (over a 0.2 s train) of a
# converged solution.
_MAX_INTERNAL_DT_MS = 0.01

_PA_TO_UA = 1e-6  # 1 pA = 1e-6 uA


# --------------------------------------------------------------------------- helpers


def _linoid(x: np.ndarray, k: float) -> np.ndarray:
    """Return ``x / (1 - exp(-x / k))``, finite through its removable singularity.

    Parameters
    ----------
    x : numpy.ndarray
        Distance from the half-activation voltage, mV.
    k : float
        Slope factor, mV (may be negative).

    Returns
    -------
    numpy.ndarray
        The rate shape; equals ``k`` (plus ``x / 2``) as ``x`` tends to 0.
    """
    u = x / k
    small = np.abs(u) < 1e-7
    # Substituting a harmless value keeps 0/0 out of the unused branch.
    safe_u = np.where(small, 1.0, u)
    return np.where(small, k + 0.5 * x, x / -np.expm1(-safe_u))


def _from_alpha_beta(alpha: np.ndarray, beta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Convert opening/closing rates to steady state and relaxation rate."""
    rate = alpha + beta
    return alpha / rate, rate


class _Model:
    """A single-compartment conductance model, written for the staggered scheme.

    Subclasses supply ``kinetic_gates`` (steady state and relaxation rate, 1/ms, of
    each gating variable integrated in time), optionally ``instantaneous_gates``
    (steady states of gates taken to follow voltage at once) and ``conductances``
    (total conductance ``G`` and ``sum(g * E)``, so that the ionic current density
    is ``G * V - GE``).  Voltages are in mV, time in ms, conductances in mS/cm^2,
    currents in uA/cm^2 and capacitance in uF/cm^2.
    """

    name: str = ""
    capacitance_uf_cm2: float = 1.0
    default_area_cm2: float = 1e-5

    def kinetic_gates(self, v: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        raise NotImplementedError

    def instantaneous_gates(self, v: np.ndarray) -> list[np.ndarray]:
        return []

    def conductances(
        self, kinetic: Sequence[np.ndarray], instantaneous: Sequence[np.ndarray]
    ) -> tuple[np.ndarray, np.ndarray]:
        raise NotImplementedError

    def ionic_current(self, v: np.ndarray) -> np.ndarray:
        """Ionic current density with every gate at its steady state, uA/cm^2."""
        kinetic = [inf for inf, _ in self.kinetic_gates(v)]
        g_total, g_e = self.conductances(kinetic, self.instantaneous_gates(v))
        return g_total * v - g_e


class _HodgkinHuxley1952(_Model):
    """Squid giant axon at 6.3 degC (Hodgkin & Huxley 1952), rest near -65 mV.

    The original equations measure depolarisation from rest with the opposite sign;
    here they are written in absolute membrane potential with rest at -65 mV, so
    E_Na = rest + 115 mV, E_K = rest - 12 mV and E_leak = rest + 10.613 mV.  The
    rounded leak reversal puts the computed rest at -64.996 mV.  Conductances,
    reversal potentials and rate constants are the published ones (from memory).
    """

    name = "hodgkin_huxley_1952"
    capacitance_uf_cm2 = 1.0
    # 1 000 um^2, a small soma: the squid membrane is leaky (~1 kOhm cm^2 at rest),
    # so this gives input resistance ~90 MOhm and rheobase ~23 pA.
    default_area_cm2 = 1.0e-5

    g_na = 120.0
    g_k = 36.0
    g_leak = 0.3
    e_na = 50.0
    e_k = -77.0
    e_leak = -54.387

    def kinetic_gates(self, v: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        alpha_m = 0.1 * _linoid(v + 40.0, 10.0)
        beta_m = 4.0 * np.exp(-(v + 65.0) / 18.0)
        alpha_h = 0.07 * np.exp(-(v + 65.0) / 20.0)
        beta_h = 1.0 / (1.0 + np.exp(-(v + 35.0) / 10.0))
        alpha_n = 0.01 * _linoid(v + 55.0, 10.0)
        beta_n = 0.125 * np.exp(-(v + 65.0) / 80.0)
        return [
            _from_alpha_beta(alpha_m, beta_m),
            _from_alpha_beta(alpha_h, beta_h),
            _from_alpha_beta(alpha_n, beta_n),
        ]

    def conductances(
        self, kinetic: Sequence[np.ndarray], instantaneous: Sequence[np.ndarray]
    ) -> tuple[np.ndarray, np.ndarray]:
        m, h, n = kinetic
        n2 = n * n
        g_na = self.g_na * (m * m * m) * h
        g_k = self.g_k * (n2 * n2)
        g_total = g_na + g_k + self.g_leak
        g_e = g_na * self.e_na + g_k * self.e_k + self.g_leak * self.e_leak
        return g_total, g_e


class _WangBuzsaki1996(_Model):
    """Fast-spiking hippocampal interneuron (Wang & Buzsaki 1996).

    Sodium activation is instantaneous (``m = m_inf(V)``); ``h`` and ``n`` carry
    the temperature factor ``phi = 5``.  Conductances, reversal potentials and rate
    constants are the published ones (from memory).
    """

    name = "wang_buzsaki_1996"
    capacitance_uf_cm2 = 1.0
    # 15 000 um^2: input resistance ~100 MOhm, as in fast-spiking cells.  The model
    # fires from a very low current density (~0.16 uA/cm^2), so rheobase stays
    # modest (~25 pA) at any area that keeps input resistance realistic.
    default_area_cm2 = 1.5e-4

    g_na = 35.0
    g_k = 9.0
    g_leak = 0.1
    e_na = 55.0
    e_k = -90.0
    e_leak = -65.0
    phi = 5.0

    def kinetic_gates(self, v: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        alpha_h = 0.07 * np.exp(-(v + 58.0) / 20.0)
        beta_h = 1.0 / (1.0 + np.exp(-(v + 28.0) / 10.0))
        alpha_n = 0.01 * _linoid(v + 34.0, 10.0)
        beta_n = 0.125 * np.exp(-(v + 44.0) / 80.0)
        h_inf, h_rate = _from_alpha_beta(alpha_h, beta_h)
        n_inf, n_rate = _from_alpha_beta(alpha_n, beta_n)
        return [(h_inf, self.phi * h_rate), (n_inf, self.phi * n_rate)]

    def instantaneous_gates(self, v: np.ndarray) -> list[np.ndarray]:
        alpha_m = 0.1 * _linoid(v + 35.0, 10.0)
        beta_m = 4.0 * np.exp(-(v + 60.0) / 18.0)
        return [alpha_m / (alpha_m + beta_m)]

    def conductances(
        self, kinetic: Sequence[np.ndarray], instantaneous: Sequence[np.ndarray]
    ) -> tuple[np.ndarray, np.ndarray]:
        h, n = kinetic
        (m,) = instantaneous
        n2 = n * n
        g_na = self.g_na * (m * m * m) * h
        g_k = self.g_k * (n2 * n2)
        g_total = g_na + g_k + self.g_leak
        g_e = g_na * self.e_na + g_k * self.e_k + self.g_leak * self.e_leak
        return g_total, g_e


class _CorticalAdapting(_Model):
    """Regular-spiking cortical pyramidal cell with an M-current (Pospischil et al. 2008).

    Traub-Miles sodium and delayed-rectifier kinetics shifted by ``V_T`` and a slow
    non-inactivating K+ (M-type) current with the Yamada et al. (1989) kinetics and
    maximal time constant ``tau_max``.  Parameter values are those of the
    regular-spiking pyramidal cell of Pospischil et al. (2008) (from memory):
    g_leak 0.0205, g_Na 56, g_Kd 6, g_M 0.075 mS/cm^2; E_leak -70.3, E_Na 50,
    E_K -90, V_T -56.2 mV; tau_max 608 ms.
    """

    name = "cortical_adapting"
    capacitance_uf_cm2 = 1.0
    # 15 000 um^2, a little more than the published cylinder of L = d = 61.4 um
    # (~11 800 um^2, from memory), to bring input resistance to ~260 MOhm;
    # rheobase ~70 pA.
    default_area_cm2 = 1.5e-4

    g_leak = 0.0205
    e_leak = -70.3
    g_na = 56.0
    g_kd = 6.0
    g_m = 0.075
    e_na = 50.0
    e_k = -90.0
    v_t = -56.2
    tau_max = 608.0  # ms

    def kinetic_gates(self, v: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        u = v - self.v_t
        alpha_m = 0.32 * _linoid(u - 13.0, 4.0)
        beta_m = 0.28 * _linoid(40.0 - u, 5.0)
        alpha_h = 0.128 * np.exp(-(u - 17.0) / 18.0)
        beta_h = 4.0 / (1.0 + np.exp(-(u - 40.0) / 5.0))
        alpha_n = 0.032 * _linoid(u - 15.0, 5.0)
        beta_n = 0.5 * np.exp(-(u - 10.0) / 40.0)
        w = v + 35.0
        p_inf = 1.0 / (1.0 + np.exp(-w / 10.0))
        p_rate = (3.3 * np.exp(w / 20.0) + np.exp(-w / 20.0)) / self.tau_max
        return [
            _from_alpha_beta(alpha_m, beta_m),
            _from_alpha_beta(alpha_h, beta_h),
            _from_alpha_beta(alpha_n, beta_n),
            (p_inf, p_rate),
        ]

    def conductances(
        self, kinetic: Sequence[np.ndarray], instantaneous: Sequence[np.ndarray]
    ) -> tuple[np.ndarray, np.ndarray]:
        m, h, n, p = kinetic
        n2 = n * n
        g_na = self.g_na * (m * m * m) * h
        g_k = self.g_kd * (n2 * n2) + self.g_m * p
        g_total = g_na + g_k + self.g_leak
        g_e = g_na * self.e_na + g_k * self.e_k + self.g_leak * self.e_leak
        return g_total, g_e


_MODEL_CLASSES: dict[str, Callable[[], _Model]] = {
    cls.name: cls
    for cls in (_HodgkinHuxley1952, _WangBuzsaki1996, _CorticalAdapting)
}

#: Names accepted by :func:`simulate_current_steps` and :func:`simulate_current_waveform`.
MODELS: tuple[str, ...] = tuple(_MODEL_CLASSES)


# ------------------------------------------------------------------------ validation


def _get_model(model: object) -> _Model:
    if not isinstance(model, str) or model not in _MODEL_CLASSES:
        raise ValueError(
            f"model must be one of {', '.join(repr(m) for m in MODELS)}; got {model!r}"
        )
    return _MODEL_CLASSES[model]()


def _finite_float(name: str, value: object) -> float:
    try:
        out = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a real number; got {value!r}") from None
    if not math.isfinite(out):
        raise ValueError(f"{name} must be finite; got {value!r}")
    return out


def _positive_float(name: str, value: object) -> float:
    out = _finite_float(name, value)
    if out <= 0.0:
        raise ValueError(f"{name} must be > 0; got {value!r}")
    return out


def _area(model: _Model, membrane_area_cm2: object) -> float:
    if membrane_area_cm2 is None:
        return model.default_area_cm2
    return _positive_float("membrane_area_cm2", membrane_area_cm2)


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
    gate_table = _VoltageTable(rows)
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


# ------------------------------------------------------------------------ public API


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


def default_membrane_area_cm2(model: str) -> float:
    """Return the membrane area used to convert pA into current density for a model.

    Parameters
    ----------
    model : str
        One of :data:`MODELS`.

    Returns
    -------
    float
        Membrane area, cm^2.

    Notes
    -----
    The areas put input resistance and rheobase near the ranges of whole-cell
    recordings from neuronal somata.  Values measured with this module (0.5 s
    steps from rest; input resistance from the steady response to -10 pA):

    ======================= =========== =========== ========= ==========
    model                   area (um^2) rest (mV)   R_in      rheobase
    ======================= =========== =========== ========= ==========
    ``hodgkin_huxley_1952`` 1 000       -65.0       ~90 MOhm  ~23 pA
    ``wang_buzsaki_1996``   15 000      -64.0       ~90 MOhm  ~25 pA
    ``cortical_adapting``   15 000      -71.9       ~270 MOhm ~70 pA
    ======================= =========== =========== ========= ==========

    The squid membrane is leaky (about 1 kOhm cm^2 at rest), hence its small
    area.  The fast-spiking model starts firing at a very low current density
    (~0.16 uA/cm^2), so its rheobase stays modest at any area that keeps input
    resistance realistic.  The cortical area is a little larger than the
    published cylinder (L = d = 61.4 um, ~11 800 um^2, from memory).

    References
    ----------
    .. [1] Hodgkin AL, Huxley AF (1952) J Physiol 117:500-544.
    .. [2] Wang X-J, Buzsaki G (1996) J Neurosci 16:6402-6413.
    .. [3] Pospischil M et al. (2008) Biol Cybern 99:427-441.
    """

    return _get_model(model).default_area_cm2


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
        One of :data:`MODELS`: ``"hodgkin_huxley_1952"``, ``"wang_buzsaki_1996"``
        or ``"cortical_adapting"``.
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
