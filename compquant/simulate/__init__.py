"""``compquant simulate``: scenario (TOML) -> simulated run file.

* :mod:`~compquant.simulate.scenario` - scenario format and validation;
* :mod:`~compquant.simulate.detector` - detector model (response, noise, saturation);
* :mod:`~compquant.simulate.engine` - forward model + detector -> run file.
"""

from __future__ import annotations

from compquant.simulate.detector import Detector
from compquant.simulate.engine import (
    SimulationResult,
    simulate_arrays,
    simulate_run,
    stored_response,
    true_response,
    truth_table,
)
from compquant.simulate.scenario import Scenario, draw_true_composition, load_scenario, load_standards_csv

__all__ = [
    "Detector",
    "Scenario",
    "SimulationResult",
    "draw_true_composition",
    "load_scenario",
    "load_standards_csv",
    "simulate_arrays",
    "simulate_run",
    "stored_response",
    "true_response",
    "truth_table",
]
