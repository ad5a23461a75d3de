"""Physical constants used by the calibration-free analysis (CODATA via scipy.constants)."""

from __future__ import annotations

import math

from scipy import constants as _c

#: Boltzmann constant in eV/K (CODATA, scipy.constants)
K_B_EV: float = _c.k / _c.e

#: Saha prefactor 2·(2π mₑ k / h²)^{3/2} in cm⁻³ K^{-3/2} (≈ 4.83×10¹⁵).
#: The factor 2 is the statistical weight of the free electron.
SAHA_PREFACTOR_CM3: float = 2.0 * (2.0 * math.pi * _c.m_e * _c.k / _c.h**2) ** 1.5 * 1e-6

#: ln of the Saha prefactor, used in log-space Saha terms
LN_SAHA_PREFACTOR: float = math.log(SAHA_PREFACTOR_CM3)

#: speed of light (m/s), electron mass (kg), atomic mass unit (kg), elementary charge (C)
C_LIGHT: float = _c.c
M_E: float = _c.m_e
AMU: float = _c.atomic_mass
E_CHARGE: float = _c.e
EPS0: float = _c.epsilon_0
H_PLANCK: float = _c.h
K_B: float = _c.k

__all__ = [
    "K_B_EV",
    "SAHA_PREFACTOR_CM3",
    "LN_SAHA_PREFACTOR",
    "C_LIGHT",
    "M_E",
    "AMU",
    "E_CHARGE",
    "EPS0",
    "H_PLANCK",
    "K_B",
]
