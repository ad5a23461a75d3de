"""Physical constants used by the plasma physics, all from CODATA via :mod:`scipy.constants`.

``SAHA_PREFACTOR_CM3`` is the constant of the Saha equation,
``2 (2 pi m_e k / h^2)^(3/2)`` = 4.829e15 cm^-3 K^-3/2 (CODATA 2018 values through
scipy.constants); ``LN_SAHA_PREFACTOR`` its natural log (for the log form of the Saha
equation); ``KB_EV`` is the Boltzmann constant in eV/K, ``HC_EV_NM`` h c in eV nm and
``CM1_TO_EV`` one wavenumber (cm^-1) in eV (for level energies tabulated in cm^-1).  This
module is the one home of these constants: the forward model (:mod:`compquant.plasma`), the
calibration-free inversion (:mod:`compquant.cflibs`) and the atomic-data importers
(:mod:`compquant.atomic.overlay`) import them from here.
"""

from __future__ import annotations

import math

from scipy import constants as _sc

H = _sc.h  #: Planck constant, J s
C = _sc.c  #: speed of light in vacuum, m/s
KB = _sc.k  #: Boltzmann constant, J/K
ME = _sc.m_e  #: electron mass, kg
QE = _sc.e  #: elementary charge, C
EPS0 = _sc.epsilon_0  #: vacuum permittivity, F/m
AMU = _sc.atomic_mass  #: atomic mass constant, kg
EV = _sc.eV  #: one electronvolt, J
KB_EV = _sc.k / _sc.e  #: Boltzmann constant, eV/K
HC_EV_NM = _sc.h * _sc.c / _sc.e * 1e9  #: h c in eV nm (1239.84...)
CM1_TO_EV = _sc.h * _sc.c * 100.0 / _sc.e  #: 1 cm^-1 in eV: h c (100 cm/m) / e (1.23984e-4)

#: 2 (2 pi m_e k / h^2)^(3/2) in m^-3 K^-3/2 (Saha equation constant)
SAHA_PREFACTOR_M3 = 2.0 * (2.0 * math.pi * ME * KB / H**2) ** 1.5
#: the same in cm^-3 K^-3/2 (the trade's unit for densities): 4.83e15
SAHA_PREFACTOR_CM3 = SAHA_PREFACTOR_M3 * 1e-6
#: ln of SAHA_PREFACTOR_CM3, used in log-space Saha terms (cm^-3 K^-3/2 inside the log)
LN_SAHA_PREFACTOR = math.log(SAHA_PREFACTOR_CM3)

__all__ = [
    "AMU",
    "C",
    "CM1_TO_EV",
    "EPS0",
    "EV",
    "H",
    "HC_EV_NM",
    "KB",
    "KB_EV",
    "LN_SAHA_PREFACTOR",
    "ME",
    "QE",
    "SAHA_PREFACTOR_CM3",
    "SAHA_PREFACTOR_M3",
]
