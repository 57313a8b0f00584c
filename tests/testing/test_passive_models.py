"""The passive membranes against their closed forms."""
import numpy as np
from scipy.optimize import brentq

from spikemeasure.testing import record_commands, resting_potential_mv

RATE_HZ = 100_000.0


def _step(size_pa: float, n: int = 30_000, onset: int = 5_000) -> np.ndarray:
    command = np.zeros(n)
    command[onset:] = size_pa
    return command


def test_passive_step_response_is_the_rc_exponential():
    # Closed form of the RC circuit: V(t) = E + I R (1 - exp(-t / tau)), R = 200 MOhm,
    # tau = C / g_leak = 1 uF/cm^2 / 0.05 mS/cm^2 = 20 ms.
    voltage = record_commands("passive_rc", _step(-50.0), simulation_rate_hz=RATE_HZ,
                              decimation=1, bessel_hz=0).membrane_mv[0]
    t_ms = (np.arange(voltage.size) - 5_000) / RATE_HZ * 1e3
    after = t_ms >= 0
    expected = -70.0 + (-50e-12 * 200e6 * 1e3) * (1.0 - np.exp(-t_ms[after] / 20.0))
    np.testing.assert_allclose(voltage[after], expected, atol=0.02)
    np.testing.assert_allclose(voltage[~after], -70.0, atol=1e-9)


def test_sag_membrane_settles_where_its_steady_currents_balance():
    # Steady state: g_leak (V - E_leak) + g_h q_inf(V) (V - E_h) = I / area, solved by
    # scipy's root finder from the published form of the gate; with a sag, the voltage
    # passes below that level first.
    area_cm2, size_pa = 1.0e-4, -100.0

    def net_current(v: float, injected: float) -> float:
        q_inf = 1.0 / (1.0 + np.exp((v + 80.0) / 6.0))
        return 0.05 * (v + 70.0) + 0.05 * q_inf * (v + 30.0) - injected

    rest = brentq(net_current, -100.0, -40.0, args=(0.0,))
    steady = brentq(net_current, -150.0, -40.0, args=(size_pa * 1e-6 / area_cm2,))
    assert abs(resting_potential_mv("passive_sag") - rest) < 0.01
    voltage = record_commands("passive_sag", _step(size_pa), simulation_rate_hz=RATE_HZ,
                              decimation=1, bessel_hz=0).membrane_mv[0]
    assert abs(voltage[-1] - steady) < 0.05
    assert voltage.min() < steady - 1.0
