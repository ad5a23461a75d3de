"""Constants of the calibration-free analysis, taken from :mod:`compquant.plasma.constants`
(CODATA via scipy.constants) so the forward model and the inversion share one set."""

from __future__ import annotations

import math

from compquant.plasma.constants import AMU, EPS0, KB, KB_EV, ME, QE, SAHA_PREFACTOR_CM3, C, H

#: Boltzmann constant in eV/K
K_B_EV: float = KB_EV
#: ln of the Saha prefactor 2·(2π mₑ k/h²)^{3/2} (cm⁻³ K^{-3/2}), used in log-space Saha terms
LN_SAHA_PREFACTOR: float = math.log(SAHA_PREFACTOR_CM3)
C_LIGHT, M_E, E_CHARGE, H_PLANCK, K_B = C, ME, QE, H, KB

__all__ = ["AMU", "C_LIGHT", "EPS0", "E_CHARGE", "H_PLANCK", "K_B", "K_B_EV", "LN_SAHA_PREFACTOR", "M_E",
           "SAHA_PREFACTOR_CM3"]
