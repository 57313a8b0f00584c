"""Published single-compartment conductance models, numpy only.

Three Hodgkin-Huxley-type models and two passive membranes, each giving the steady states and relaxation rates of
its gates and its membrane conductances, for the integrator in
:mod:`spikemeasure.testing.integration`:

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
``"passive_rc"``
    A passive RC membrane (tau 20 ms, 200 MOhm, rest -70 mV): a step response with a
    closed form, for input resistance and time constant.
``"passive_sag"``
    The same membrane with an Ih-like hyperpolarization-activated current: a sag on
    hyperpolarizing steps, no spikes.

The behaviour described is as simulated here, with the default membrane areas.
Membrane currents in the models are densities (uA/cm^2); a command in pA is
converted with a membrane area per model (see :func:`default_membrane_area_cm2`).
"""
from __future__ import annotations

import math
from typing import Callable, Sequence

import numpy as np

__all__ = ["MODELS", "default_membrane_area_cm2"]


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


class _PassiveMembrane(_Model):
    """A passive RC membrane: capacitance and one leak, no voltage-gated current.

    C dV/dt = -g_leak (V - E_leak) + I.  The response to a current step I from rest is the
    closed form V(t) = E_leak + I R (1 - exp(-t / tau)) with R = 1 / (g_leak A) and
    tau = C / g_leak (the RC circuit; any text on passive membranes).  Here tau = 20 ms and,
    with the default area, R = 200 MOhm.
    """

    name = "passive_rc"
    capacitance_uf_cm2 = 1.0
    # 10 000 um^2 with g_leak 0.05 mS/cm^2: 1 / (5e-6 mS) = 200 MOhm.
    default_area_cm2 = 1.0e-4

    g_leak = 0.05
    e_leak = -70.0

    def kinetic_gates(self, v: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        return []

    def conductances(
        self, kinetic: Sequence[np.ndarray], instantaneous: Sequence[np.ndarray]
    ) -> tuple[np.ndarray, np.ndarray]:
        return np.full(1, self.g_leak), np.full(1, self.g_leak * self.e_leak)


class _PassiveWithSag(_PassiveMembrane):
    """The passive membrane plus an Ih-like hyperpolarization-activated cation current.

    I_h = g_h q (V - E_h), one gate q with first-order kinetics (Hodgkin & Huxley 1952 form):
    q_inf(V) = 1 / (1 + exp((V - V_half) / k)), relaxation time tau_q, constant.  V_half
    -80 mV, k 6 mV, tau_q 40 ms and E_h -30 mV lie in the range reported for HCN channel
    currents (from memory); g_h 0.05 mS/cm^2 gives a sag of about a third of the deflection
    for steps to -90 mV.  At steady state the model is a conductance g_leak + g_h q_inf(V), so
    its steady voltage under any current follows from the closed form of q_inf.
    """

    name = "passive_sag"
    g_h = 0.05
    e_h = -30.0
    v_half = -80.0
    slope_mv = 6.0
    tau_q_ms = 40.0

    def kinetic_gates(self, v: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        q_inf = 1.0 / (1.0 + np.exp((v - self.v_half) / self.slope_mv))
        return [(q_inf, np.full_like(q_inf, 1.0 / self.tau_q_ms))]

    def conductances(
        self, kinetic: Sequence[np.ndarray], instantaneous: Sequence[np.ndarray]
    ) -> tuple[np.ndarray, np.ndarray]:
        (q,) = kinetic
        g_h = self.g_h * q
        return g_h + self.g_leak, g_h * self.e_h + self.g_leak * self.e_leak


_MODEL_CLASSES: dict[str, Callable[[], _Model]] = {
    cls.name: cls
    for cls in (_HodgkinHuxley1952, _WangBuzsaki1996, _CorticalAdapting, _PassiveMembrane,
                _PassiveWithSag)
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
    ``passive_rc``          10 000      -70.0       200 MOhm  none
    ``passive_sag``         10 000      -66.5       ~125 MOhm none
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
