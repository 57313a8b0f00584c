"""Simulated recordings with a known answer, for the sample data, examples, benchmarks and tests.

Published single-compartment conductance models and two passive membranes (:mod:`.models`), their time integration
under a current command (:mod:`.integration`) and square current-step protocols with
measurement noise (:mod:`.protocols`), and an acquisition chain (bridge error, synaptic
background, hum, drift, Bessel filter, noise, sampling: :mod:`.acquisition`).  numpy only.  The measuring pipeline never
imports this package; a simulated recording reaches it only as a file.
"""
from spikemeasure.testing.acquisition import RecordedSweeps, record_commands
from spikemeasure.testing.integration import resting_potential_mv, simulate_current_waveform
from spikemeasure.testing.models import MODELS, default_membrane_area_cm2
from spikemeasure.testing.protocols import SimulatedSweeps, simulate_current_steps

__all__ = [
    "MODELS",
    "RecordedSweeps",
    "record_commands",
    "SimulatedSweeps",
    "default_membrane_area_cm2",
    "resting_potential_mv",
    "simulate_current_steps",
    "simulate_current_waveform",
]
