"""The Saha ionisation balance and Debye-Hueckel lowering of the ionisation energy.

Saha equation for two successive ion stages z and z+1 of one element (Saha
1920; in this form e.g. Griem 1964, *Plasma Spectroscopy*, eq. 6-40; Unsoeld
1955, *Physik der Sternatmosphaeren*)::

    n_e n_{z+1} / n_z = 2 U_{z+1}(T) / U_z(T) * (2 pi m_e k T / h^2)^(3/2)
                        * exp(-(E_z - dE_z) / (k T))

with densities in cm^-3 (the constant ``2 (2 pi m_e k/h^2)^(3/2)`` is
4.829e15 cm^-3 K^-3/2), E_z the ionisation energy of stage z (eV) and dE_z its
lowering by the plasma (eV).

Lowering in the Debye-Hueckel approximation (Griem 1964, sec. 6-3; Unsoeld
1948)::

    dE_z = z_eff e^2 / (4 pi eps0 lambda_D)      (J;  /e for eV)

where z_eff = z + 1 is the charge of the ion produced (1 for I -> II) and the
Debye length uses the electrons only (a common LIBS simplification; including
ions would shorten lambda_D by about sqrt(2))::

    lambda_D = sqrt(eps0 k T / (n_e e^2))       (m)

Log form (used by the calibration-free inversion, :mod:`compquant.cflibs`; in this form e.g.
Cristoforetti et al. 2010, Spectrochim. Acta B 65, 86, eq. 1)::

    ln(n_{z+1}/n_z) = ln[2 (2 pi m_e k/h^2)^(3/2)] + 1.5 ln T - ln n_e
                      + ln U_{z+1}(T) - ln U_z(T) - E_z / (k T)

:func:`ln_saha_factor`, :func:`ln_saha_ratio` and :func:`ne_from_ln_ratio` return
**logarithms** so that low temperatures (exp(-E/kT) underflow) or high temperatures never
produce inf/NaN; a non-finite input is a :class:`~compquant.errors.PhysicsError`.
"""

from __future__ import annotations

import math

import numpy as np

from compquant.errors import PhysicsError
from compquant.plasma.constants import EPS0, KB, KB_EV, LN_SAHA_PREFACTOR, QE, SAHA_PREFACTOR_CM3


def debye_length_m(temperature_k, ne_cm3):
    """Electron Debye length ``sqrt(eps0 k T / (n_e e^2))`` in m (n_e in cm^-3)."""
    t = np.asarray(temperature_k, dtype=float)
    ne_m3 = np.asarray(ne_cm3, dtype=float) * 1e6
    return np.sqrt(EPS0 * KB * t / (ne_m3 * QE**2))


def ionisation_lowering_ev(temperature_k, ne_cm3, charge_produced=1):
    """Debye-Hueckel lowering of the ionisation energy, eV (Griem 1964, sec. 6-3).

    ``dE = z e / (4 pi eps0 lambda_D)`` in eV, ``z`` = charge of the ion
    produced (1 for I -> II, 2 for II -> III).  About 0.07 eV at 10,000 K and
    1e17 cm^-3.
    """
    lam = debye_length_m(temperature_k, ne_cm3)
    return charge_produced * QE / (4.0 * math.pi * EPS0 * lam)


def saha_ratio(temperature_k, ne_cm3, u_lower, u_upper, ionisation_energy_ev, lowering_ev=0.0):
    """``n_{z+1}/n_z`` from the Saha equation (dimensionless).

    Parameters (broadcast together): ``temperature_k`` (K), ``ne_cm3`` electron
    density (cm^-3), ``u_lower`` and ``u_upper`` the partition functions of
    stages z and z+1, ``ionisation_energy_ev`` E_z (eV), ``lowering_ev`` dE_z
    (eV, 0 for none).  Citation: Saha 1920; Griem 1964, eq. 6-40.
    """
    t = np.asarray(temperature_k, dtype=float)
    ne = np.asarray(ne_cm3, dtype=float)
    e_eff = np.asarray(ionisation_energy_ev, dtype=float) - np.asarray(lowering_ev, dtype=float)
    return (
        (SAHA_PREFACTOR_CM3 * t**1.5 / ne)
        * (np.asarray(u_upper, float) / np.asarray(u_lower, float))
        * np.exp(-e_eff / (KB_EV * t))
    )


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
    """ln(n_{z+1}/n_z) from the Saha equation, log form (see module docstring; Saha 1920;
    Cristoforetti et al. 2010, eq. 1)."""
    T = check_temperature(T)
    out = ln_saha_factor(T, ne) + np.asarray(ln_u_upper) - np.asarray(ln_u_lower) - np.asarray(
        e_ion_ev
    ) / (KB_EV * T)
    return out


def ne_from_ln_ratio(T, ln_ratio, e_ion_ev, ln_u_lower, ln_u_upper) -> np.ndarray:
    """Invert the Saha equation: nₑ (cm⁻³) from ln(n_{z+1}/n_z) (log form, module docstring)."""
    T = check_temperature(T)
    ln_ne = (
        LN_SAHA_PREFACTOR
        + 1.5 * np.log(T)
        + np.asarray(ln_u_upper)
        - np.asarray(ln_u_lower)
        - np.asarray(e_ion_ev) / (KB_EV * T)
        - np.asarray(ln_ratio)
    )
    if np.any(ln_ne > 700) or np.any(ln_ne < -700):
        raise PhysicsError(
            "electron density from the Saha ratio is out of any physical range",
            where="Saha ratio of I and II lines",
            fix="check the ion-stage intensities and the temperature",
        )
    return np.exp(ln_ne)


__all__ = [
    "check_temperature",
    "debye_length_m",
    "ionisation_lowering_ev",
    "ln_saha_factor",
    "ln_saha_ratio",
    "ne_from_ln_ratio",
    "saha_ratio",
]
