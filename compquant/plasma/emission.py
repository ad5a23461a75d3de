"""Line emissivity, line absorption and the Planck function.

Emission coefficient of a line integrated over its profile (e.g. Thorne,
*Spectrophysics*, ch. 9; Griem 1964)::

    eps = (h c / lambda) / (4 pi) * A_ki * n_k                (W m^-3 sr^-1)

With the Boltzmann population n_k = n_s g_k exp(-E_k/kT)/U_s this is the
project's intensity convention (docs/architecture.md)::

    eps = h c A_ki g_k exp(-E_k/kT) n_s / (4 pi lambda U_s)

Absorption coefficient of the same transition, corrected for stimulated
emission and integrated over wavelength (from the Einstein relations; e.g.
Rybicki & Lightman 1979, *Radiative Processes in Astrophysics*, eq. 1.74)::

    int kappa dlambda = lambda^4 / (8 pi c) * (g_k/g_i) * A_ki * n_i
                        * (1 - exp(-h c / (lambda k T)))      (m^-1 m)

so that in LTE eps_lambda / kappa_lambda = B_lambda(T) (Kirchhoff's law), with
the Planck function::

    B_lambda(T) = 2 h c^2 / lambda^5 / (exp(h c/(lambda k T)) - 1)
                  (W m^-2 sr^-1 m^-1; returned per nm)

Densities are in cm^-3 as everywhere in compquant and converted to m^-3 here.
"""

from __future__ import annotations

import math

import numpy as np

from compquant.plasma.constants import KB, KB_EV, C, H

# photon-energy terms are computed in SI with lambda in metres


def line_emissivity(wavelength_nm, aki_s, n_upper_cm3):
    """``eps = (h c / lambda)/(4 pi) A_ki n_k`` in W m^-3 sr^-1 (line-integrated)."""
    lam_m = np.asarray(wavelength_nm, float) * 1e-9
    return (H * C / lam_m) / (4.0 * math.pi) * np.asarray(aki_s, float) * np.asarray(n_upper_cm3, float) * 1e6


def line_emissivity_lte(wavelength_nm, aki_s, gk, ek_ev, n_species_cm3, partition, temperature_k):
    """LTE line emissivity ``h c A g_k exp(-E_k/kT) n_s / (4 pi lambda U)`` (W m^-3 sr^-1)."""
    nk = (
        np.asarray(n_species_cm3, float)
        * np.asarray(gk, float)
        * np.exp(-np.asarray(ek_ev, float) / (KB_EV * np.asarray(temperature_k, float)))
        / np.asarray(partition, float)
    )
    return line_emissivity(wavelength_nm, aki_s, nk)


def line_absorption_integrated(wavelength_nm, aki_s, gi, gk, n_lower_cm3, temperature_k):
    """Wavelength-integrated absorption coefficient with stimulated emission, in m^-1 nm.

    ``lambda^4/(8 pi c) (g_k/g_i) A_ki n_i (1 - exp(-hc/(lambda k T)))`` (Rybicki &
    Lightman 1979, eq. 1.74 written per wavelength); multiply by a profile in
    nm^-1 to get kappa(lambda) in m^-1.
    """
    lam_m = np.asarray(wavelength_nm, float) * 1e-9
    x = H * C / (lam_m * KB * np.asarray(temperature_k, float))
    k_si = (
        (lam_m**4 / (8.0 * math.pi * C))
        * (np.asarray(gk, float) / np.asarray(gi, float))
        * np.asarray(aki_s, float)
        * np.asarray(n_lower_cm3, float)
        * 1e6
        * (-np.expm1(-x))
    )
    return k_si * 1e9


def planck_radiance(wavelength_nm, temperature_k):
    """Planck spectral radiance ``B_lambda(T)`` in W m^-2 sr^-1 nm^-1."""
    lam_m = np.asarray(wavelength_nm, float) * 1e-9
    x = H * C / (lam_m * KB * np.asarray(temperature_k, float))
    return 2.0 * H * C * C / lam_m**5 / np.expm1(x) * 1e-9


__all__ = ["line_absorption_integrated", "line_emissivity", "line_emissivity_lte", "planck_radiance"]
