"""Radiative transfer through a homogeneous plasma slab in LTE.

For a slab of thickness L with uniform emission eps_lambda and absorption
kappa_lambda the emergent radiance is (e.g. Rybicki & Lightman 1979, eq. 1.30;
in LIBS Aragon & Aguilera 2008, Spectrochim. Acta B 63, 893)::

    I_lambda = (eps_lambda / kappa_lambda) (1 - exp(-tau)) = B_lambda(T) (1 - exp(-tau)),
    tau(lambda) = kappa_lambda L

It tends to ``eps L`` for tau << 1 (optically thin) and to ``B_lambda(T)``
for tau >> 1 (black body).
"""

from __future__ import annotations

import numpy as np

from compquant.plasma.emission import planck_radiance


def optical_depth(kappa_per_m, length_m):
    """``tau = kappa L`` (kappa in m^-1, L in m)."""
    return np.asarray(kappa_per_m, float) * np.asarray(length_m, float)


def slab_radiance(wavelength_nm, temperature_k, tau):
    """``B_lambda(T) (1 - exp(-tau))`` in W m^-2 sr^-1 nm^-1."""
    return planck_radiance(wavelength_nm, temperature_k) * -np.expm1(-np.asarray(tau, float))


def thin_radiance(emissivity, length_m):
    """Optically thin limit ``eps L``: W m^-2 sr^-1 nm^-1 from W m^-3 sr^-1 nm^-1 and m."""
    return np.asarray(emissivity, float) * np.asarray(length_m, float)


def self_absorption_coefficient(tau0):
    """Ratio of the thick to the thin line-centre radiance, ``(1 - exp(-tau0)) / tau0``.

    A common measure of self-absorption at the line centre (e.g. El Sherbini et
    al. 2005, Spectrochim. Acta B 60, 1573); 1 for a thin line.
    """
    t = np.asarray(tau0, float)
    return np.where(t > 1e-12, -np.expm1(-t) / np.where(t > 1e-12, t, 1.0), 1.0)


__all__ = ["optical_depth", "self_absorption_coefficient", "slab_radiance", "thin_radiance"]
