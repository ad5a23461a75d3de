"""Approximate continuum emission of a LIBS plasma: free-free plus free-bound.

Hydrogenic (Kramers) form with Gaunt factor G and Biberman factor xi taken as 1
unless given, as used for LIBS plasmas (Griem 1964, *Plasma Spectroscopy*,
ch. 5; Cremers & Radziemski, *Handbook of Laser-Induced Breakdown
Spectroscopy*, ch. 2)::

    eps_c(lambda) = C1 * n_e * sum_z z^2 n_z / (lambda^2 sqrt(T))
                    * [ xi (1 - exp(-h c/(lambda k T))) + G exp(-h c/(lambda k T)) ]

in W m^-3 sr^-1 m^-1 with densities in m^-3, lambda in m and T in K; z is the
charge of the ion (1 for stage II).  C1 is the Kramers free-free constant
(Rybicki & Lightman 1979, eq. 5.14b, written in SI, per steradian and per
wavelength)::

    C1 = (2^5 pi e'^6 / (3 m_e c^3)) * sqrt(2 pi / (3 k m_e)) * c / (4 pi)
       = 1.63e-43 W m^4 K^1/2 sr^-1,   e'^2 = e^2 / (4 pi eps0)

The first bracket term is the recombination (free-bound) continuum with the
Unsoeld merging of high levels, the second the bremsstrahlung.  This is an
approximation: it ignores the recombination edges of the real, non-hydrogenic
ions (xi != 1).  In LTE the continuum absorption follows from Kirchhoff's law,
kappa_c = eps_c / B_lambda.
"""

from __future__ import annotations

import math

import numpy as np

from compquant.plasma.constants import EPS0, KB, ME, QE, C, H

_E2 = QE * QE / (4.0 * math.pi * EPS0)  # e'^2, J m
#: Kramers continuum constant C1 in W m^4 K^1/2 sr^-1 (1.63e-43)
KRAMERS_C1 = (
    (2**5 * math.pi * _E2**3 / (3.0 * ME * C**3)) * math.sqrt(2.0 * math.pi / (3.0 * KB * ME)) * C / (4.0 * math.pi)
)


def continuum_emissivity(wavelength_nm, temperature_k, ne_cm3, ion_charge_density_cm3, *, gaunt=1.0, biberman=1.0):
    """Continuum emission coefficient in W m^-3 sr^-1 nm^-1 (see module docstring).

    ``ion_charge_density_cm3`` is ``sum_z z^2 n_z`` over the ions (cm^-3).
    Arguments broadcast (e.g. T of shape (n, 1) against wavelengths (m,)).
    """
    lam_m = np.asarray(wavelength_nm, float) * 1e-9
    t = np.asarray(temperature_k, float)
    x = H * C / (lam_m * KB * t)
    e = np.exp(-x)
    bracket = biberman * (1.0 - e) + gaunt * e
    ne = np.asarray(ne_cm3, float) * 1e6
    nz = np.asarray(ion_charge_density_cm3, float) * 1e6
    return KRAMERS_C1 * ne * nz / (lam_m**2 * np.sqrt(t)) * bracket * 1e-9


__all__ = ["KRAMERS_C1", "continuum_emissivity"]
