"""Constants of the calibration-free analysis, taken from :mod:`compquant.plasma.constants`
(CODATA via scipy.constants) so the forward model and the inversion share one set."""

from __future__ import annotations

import math

from compquant.plasma.constants import KB_EV, SAHA_PREFACTOR_CM3

#: Boltzmann constant in eV/K
K_B_EV: float = KB_EV
#: ln of the Saha prefactor 2·(2π mₑ k/h²)^{3/2} (cm⁻³ K^{-3/2}), used in log-space Saha terms
LN_SAHA_PREFACTOR: float = math.log(SAHA_PREFACTOR_CM3)

__all__ = ["K_B_EV", "LN_SAHA_PREFACTOR", "SAHA_PREFACTOR_CM3"]
