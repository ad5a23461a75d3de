"""Boltzmann populations of excited levels in local thermodynamic equilibrium.

In LTE the number density of atoms of one species in level k is (Boltzmann
distribution; e.g. Griem 1964, *Plasma Spectroscopy*, ch. 6; Thorne,
*Spectrophysics*, ch. 9)::

    n_k = n_s * g_k * exp(-E_k / (k T)) / U_s(T)

with n_s the density of the species (cm^-3), g_k the statistical weight of the
level, E_k its energy above the species' ground state (eV), T the excitation
temperature (K) and U_s(T) the partition function.  All functions broadcast
numpy-style, so a vector of temperatures (one per shot) against a vector of
levels gives a 2-D result when the caller reshapes (``T[:, None]``).
"""

from __future__ import annotations

import numpy as np

from compquant.plasma.constants import KB_EV


def boltzmann_factor(g, energy_ev, temperature_k):
    """``g exp(-E / kT)`` (dimensionless), E in eV, T in K."""
    g = np.asarray(g, dtype=float)
    e = np.asarray(energy_ev, dtype=float)
    t = np.asarray(temperature_k, dtype=float)
    return g * np.exp(-e / (KB_EV * t))


def level_population(n_species_cm3, g, energy_ev, partition, temperature_k):
    """Density of one level, ``n_k = n_s g_k exp(-E_k/kT) / U_s(T)`` (cm^-3).

    Parameters are broadcast together: ``n_species_cm3`` (cm^-3), ``g``,
    ``energy_ev`` (eV, above the species' ground state), ``partition`` U_s(T)
    (dimensionless) and ``temperature_k`` (K).
    """
    return (
        np.asarray(n_species_cm3, dtype=float)
        * boltzmann_factor(g, energy_ev, temperature_k)
        / np.asarray(partition, dtype=float)
    )


def population_ratio(g_a, e_a_ev, g_b, e_b_ev, temperature_k):
    """Ratio of the populations of two levels of one species, ``n_a/n_b``.

    ``(g_a/g_b) exp(-(E_a - E_b)/kT)``; the partition function cancels.
    """
    return (np.asarray(g_a, float) / np.asarray(g_b, float)) * np.exp(
        -(np.asarray(e_a_ev, float) - np.asarray(e_b_ev, float)) / (KB_EV * np.asarray(temperature_k, float))
    )


__all__ = ["boltzmann_factor", "level_population", "population_ratio"]
