"""Hand-computed LTE line intensities for the calibration-free tests.

Written from the textbook formulas with CODATA constants from scipy.constants only (no
compquant code): Boltzmann populations, the Saha equation (Griem 1964, eq. 6-40) with the
Debye–Hückel lowering ΔE = z e/(4π ε₀ λ_D), λ_D = √(ε₀ k T/(nₑ e²)) (Griem 1964 §6-3),
charge neutrality, and the energy-unit line intensity I = F·(hc/λ)·A g_k e^{−E_k/kT} n_s/U_s.
The atomic data below are invented for the tests (plausible magnitudes only).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import constants as sc

KB_EV = sc.k / sc.e
SAHA = 2.0 * (2.0 * math.pi * sc.m_e * sc.k / sc.h**2) ** 1.5 * 1e-6  # cm^-3 K^-3/2


def U_FE1(T):
    return 20.0 + 1.2e-3 * (np.asarray(T, float) - 5000.0)


def U_FE2(T):
    return 35.0 + 1.0e-3 * (np.asarray(T, float) - 5000.0)


PARTITION = {
    "Fe I": U_FE1, "Fe II": U_FE2, "Fe III": 25.0,
    "Cr I": lambda T: 9.0 + 8e-4 * (np.asarray(T, float) - 5000.0), "Cr II": 7.5, "Cr III": 18.0,
    "Ni I": 30.0, "Ni II": 9.0, "Ni III": 20.0,
    "Mn I": 6.5, "Mn II": 7.2, "Mn III": 10.0,
    "H I": 2.0, "H II": 1.0,
}
IONISATION = {"Fe I": 7.9024, "Fe II": 16.1992, "Cr I": 6.7665, "Cr II": 16.486,
              "Ni I": 7.6399, "Ni II": 18.169, "Mn I": 7.434, "Mn II": 15.640, "H I": 13.598}
# atomic masses from memory of IUPAC standard atomic weights (the tests check the shipped
# masses against periodictable separately)
MASSES = {"Fe": 55.845, "Cr": 51.996, "Ni": 58.693, "Mn": 54.938, "H": 1.008}

# invented lines: (element, ion, wavelength nm, Ek eV, Ei eV, gk*Aki 1/s, aki grade)
LINES = [
    ("Fe", 1, 371.994, 3.332, 0.000, 1.78e8, "B"),
    ("Fe", 1, 404.581, 4.549, 1.485, 7.76e8, "B+"),
    ("Fe", 1, 438.354, 4.312, 1.485, 5.50e8, "B"),
    ("Fe", 1, 381.584, 4.733, 1.485, 8.82e8, "C+"),
    ("Fe", 1, 526.954, 3.211, 0.859, 1.14e7, "B"),
    ("Fe", 2, 259.940, 4.768, 0.000, 2.35e9, "B"),
    ("Fe", 2, 238.204, 5.203, 0.000, 4.56e9, "B"),
    ("Fe", 2, 273.955, 5.511, 0.986, 2.14e9, "C"),
    ("Fe", 2, 266.470, 8.003, 3.350, 5.0e7, "C"),
    ("Cr", 1, 425.433, 2.914, 0.000, 2.84e8, "B"),
    ("Cr", 1, 520.844, 3.321, 0.941, 3.55e8, "B"),
    ("Cr", 1, 357.869, 3.463, 0.000, 1.33e9, "B"),
    ("Cr", 2, 267.716, 6.180, 1.547, 1.25e9, "C+"),
    ("Cr", 2, 283.563, 5.921, 1.550, 1.66e9, "C"),
    ("Cr", 2, 312.870, 6.412, 2.450, 1.0e7, "C"),
    ("Ni", 1, 341.476, 3.655, 0.025, 3.85e8, "B"),
    ("Ni", 1, 352.454, 3.542, 0.025, 5.00e8, "B"),
    ("Ni", 1, 361.939, 3.847, 0.423, 4.62e8, "C+"),
    ("Ni", 2, 231.604, 6.390, 1.041, 2.0e9, "C"),
]


def lowering_ev(T, ne, z):
    lam_d = math.sqrt(sc.epsilon_0 * sc.k * T / (ne * 1e6 * sc.e**2))
    return z * sc.e / (4.0 * math.pi * sc.epsilon_0 * lam_d)


def u_of(species, T):
    v = PARTITION[species]
    return float(v(T)) if callable(v) else float(v)


def species_densities(mass_fractions, T, ne, lowering=True, stage3=True):
    """Relative species densities (arbitrary common scale) with charge neutrality."""
    x = {e: w / MASSES[e] for e, w in mass_fractions.items()}
    tot = sum(x.values())
    out = {}
    for e, xe in x.items():
        roman = ["I", "II", "III"]
        d1 = lowering_ev(T, ne, 1) if lowering else 0.0
        d2 = lowering_ev(T, ne, 2) if lowering else 0.0
        r1 = SAHA * T**1.5 / ne * u_of(f"{e} II", T) / u_of(f"{e} I", T) * math.exp(
            -(IONISATION[f"{e} I"] - d1) / (KB_EV * T))
        r2 = 0.0
        if stage3:
            r2 = SAHA * T**1.5 / ne * u_of(f"{e} III", T) / u_of(f"{e} II", T) * math.exp(
                -(IONISATION[f"{e} II"] - d2) / (KB_EV * T))
        n1 = xe / tot / (1.0 + r1 + r1 * r2)
        for z, n in zip(roman, (n1, n1 * r1, n1 * r1 * r2)):
            out[f"{e} {z}"] = n
    return out


def line_table(mass_fractions, T, ne, *, lowering=True, stage3=True, rel_u=0.01, scale=1e12,
               lines=LINES, aki_bias=None, sample_id="S1", extra_rows=()):
    """Line table (compquant contract columns + atomic columns) of exact LTE intensities."""
    dens = species_densities(mass_fractions, T, ne, lowering, stage3)
    rows = []
    for el, ion, wl, ek, ei, ga, grade in lines:
        if el not in mass_fractions:
            continue
        sp = f"{el} {'I' if ion == 1 else 'II'}"
        I = scale * (sc.h * sc.c / (wl * 1e-9)) * ga * math.exp(-ek / (KB_EV * T)) * dens[sp] / u_of(sp, T)
        lid = f"{sp} {wl:.3f}"
        ga_tab = ga * (aki_bias.get(lid, 1.0) if aki_bias else 1.0)
        rows.append({"sample_id": sample_id, "role": "unknown", "line_id": lid, "element": el, "ion": ion,
                     "wavelength_nm": wl, "intensity": I, "u_intensity": rel_u * I, "sd_shots": rel_u * I * 10,
                     "n_shots": 100, "centre_nm": wl, "fwhm_nm": np.nan, "snr": 100.0, "flags": "",
                     "aki": ga_tab, "gk": 1.0, "ek_ev": ek, "ei_ev": ei, "aki_grade": grade,
                     "stark_w_nm": np.nan, "stark_ne_ref_cm3": np.nan, "stark_t_ref_k": np.nan})
    rows.extend(extra_rows)
    return pd.DataFrame(rows)


def atomic():
    from compquant.cflibs import TableAtomicData

    return TableAtomicData(PARTITION, IONISATION, MASSES)
