"""Saha equation in log form, safe against overflow.

Saha (1920); in the form used for LIBS (e.g. Cristoforetti et al. 2010,
Spectrochim. Acta B 65, 86, eq. 1; Griem, *Plasma Spectroscopy*, 1964)::

    n_{z+1} nₑ / n_z = 2 (2π mₑ k T / h²)^{3/2} · U_{z+1}(T)/U_z(T) · exp(-E_ion,z / kT)

with nₑ in cm⁻³, T in K and E_ion in eV; the prefactor
2 (2π mₑ k/h²)^{3/2} = 4.83×10¹⁵ cm⁻³ K^{-3/2} comes from CODATA constants.
Everything here returns **logarithms** so that low temperatures (exp(-E/kT)
underflow) or high temperatures never produce inf/NaN; a non-finite input is a
:class:`~compquant.errors.PhysicsError`.
"""

from __future__ import annotations

import numpy as np

from compquant.cflibs.constants import K_B_EV, LN_SAHA_PREFACTOR
from compquant.errors import PhysicsError


def check_temperature(T, where: str = "calibration-free analysis") -> np.ndarray:
    """Return T as a float array; raise PhysicsError unless every value is finite and > 0."""
    T = np.asarray(T, dtype=float)
    if not np.all(np.isfinite(T)) or np.any(T <= 0):
        raise PhysicsError(
            "plasma temperature is not a finite positive number",
            where=where,
            fix="check the Boltzmann plot: it needs lines spread over upper-level energy and a "
            "negative slope",
        )
    return T


def ln_saha_factor(T, ne) -> np.ndarray:
    """ln[2 (2π mₑ k T/h²)^{3/2} / nₑ]  (dimensionless; T in K, nₑ in cm⁻³)."""
    T = check_temperature(T)
    ne = np.asarray(ne, dtype=float)
    if not np.all(np.isfinite(ne)) or np.any(ne <= 0):
        raise PhysicsError(
            "electron density is not a finite positive number",
            where="Saha equation",
            fix="give an electron density (cm⁻³) or lines that measure it",
        )
    return LN_SAHA_PREFACTOR + 1.5 * np.log(T) - np.log(ne)


def ln_saha_ratio(T, ne, e_ion_ev, ln_u_lower, ln_u_upper) -> np.ndarray:
    """ln(n_{z+1}/n_z) from the Saha equation (see module docstring)."""
    T = check_temperature(T)
    out = ln_saha_factor(T, ne) + np.asarray(ln_u_upper) - np.asarray(ln_u_lower) - np.asarray(
        e_ion_ev
    ) / (K_B_EV * T)
    return out


def ne_from_ln_ratio(T, ln_ratio, e_ion_ev, ln_u_lower, ln_u_upper) -> np.ndarray:
    """Invert the Saha equation: nₑ (cm⁻³) from ln(n_{z+1}/n_z)."""
    T = check_temperature(T)
    ln_ne = (
        LN_SAHA_PREFACTOR
        + 1.5 * np.log(T)
        + np.asarray(ln_u_upper)
        - np.asarray(ln_u_lower)
        - np.asarray(e_ion_ev) / (K_B_EV * T)
        - np.asarray(ln_ratio)
    )
    if np.any(ln_ne > 700) or np.any(ln_ne < -700):
        raise PhysicsError(
            "electron density from the Saha ratio is out of any physical range",
            where="Saha ratio of I and II lines",
            fix="check the ion-stage intensities and the temperature",
        )
    return np.exp(ln_ne)


__all__ = ["check_temperature", "ln_saha_factor", "ln_saha_ratio", "ne_from_ln_ratio"]
