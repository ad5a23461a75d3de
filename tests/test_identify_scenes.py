"""Identification on forward-model spectra of known composition, over several noise seeds.

The spectra come from the project's LTE forward model with transition probabilities
perturbed by a seeded log-normal factor (20 % spread, about NIST grade B-C accuracy, from
memory of the NIST ASD grade definitions) so that the database the identification uses is
not the exact one the "plasma" followed; noise from the detector model (Poisson + read noise,
mean of 8 shots).

Criteria (docs/identification.md):

* an element is *above its detection limit* when at least two of its line groups have a
  noiseless peak height of at least 2 · k_sigma = 10 noise σ — each such element must be
  reported *detected* in every seed;
* an element of the line list that is not in the sample must never be reported *detected*
  (issue 15: none in at least 1 000 absent-element checks; the rate of *possible* is asserted to
  stay under 5 %).

Measured with the shipped line database (4 seeds x 4 materials here, more in
benchmarks/identify_rates.py): elements above the limit detected 100 %; absent reported
detected 0 of 1 144 checks, *possible* 25 of 1 144; with 30 % of the rows removed 0 of 556
(with the opt-in Gaia-ESO build: 0 of 1 208).  Before the weaker database lines of the detected
elements were allowed to explain their peaks (docs/identification.md, section 4) the figures,
with the Gaia-ESO lines and 3 seeds, were 5 of 906
(all tungsten in the stainless steel: W I 429.461 nm on Fe I 429.412 nm, W I 458.875 nm on
Cr II 458.820 nm, lines outside the 40 strongest of Fe I and Cr II) and *possible* 57 of 906;
with the former 227-line database 0 of 294.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from identify_helpers import R, axis, observe, radiance

from compquant.atomic import load_line_list
from compquant.identify import IdentifySettings, identify_spectrum
from compquant.identify.peaks import noise_sigma

WL = (240.0, 560.0, 0.03)
SEEDS = range(4)
T, NE = 9500.0, 3e16
COMPOSITIONS = {  # invented test materials; the method of the scenario measures Cu, Zn and Pb only
    "leaded brass": {"Cu": 0.60, "Zn": 0.37, "Pb": 0.02, "Sn": 0.008, "Fe": 0.002},
    "stainless": {"Fe": 0.70, "Cr": 0.18, "Ni": 0.10, "Mn": 0.02},
    "aluminium": {"Al": 0.93, "Mg": 0.03, "Si": 0.03, "Cu": 0.01},
    "copper": {"Cu": 1.0},
}


def _perturbed_lines(seed: int = 99) -> pd.DataFrame:
    df = load_line_list()
    rng = np.random.default_rng(seed)
    return df.assign(aki=df["aki"] * np.exp(rng.normal(0.0, 0.2, len(df))))


@pytest.fixture(scope="module")
def scenes():
    wl = axis(*WL)
    lines = _perturbed_lines()
    out = {}
    for name, comp in COMPOSITIONS.items():
        total = radiance(wl, comp, T, NE, lines_frame=lines[lines["element"].isin(list(comp))])
        per_el = {el: radiance(wl, comp, T, NE, lines_frame=lines[lines["element"] == el]) for el in comp}
        out[name] = (total, per_el)
    return wl, out


def _above_limit(wl, per_el_rad, scale, sigma, k_sigma, ll):
    """Elements with >= 2 line groups whose noiseless peak is >= 2 k_sigma noise sigma."""
    above = set()
    for el, rad in per_el_rad.items():
        y = rad * scale
        lam = ll.loc[(ll["element"] == el) & ll["wavelength_nm"].between(wl[0], wl[-1]), "wavelength_nm"]
        lam = np.sort(lam.to_numpy())
        if lam.size == 0:
            continue
        groups = np.split(lam, np.flatnonzero(np.diff(lam) > lam[1:] / R) + 1)
        n_strong = 0
        for g in groups:
            m = (wl >= g[0] - g[0] / R) & (wl <= g[-1] + g[-1] / R)
            if m.any() and y[m].max() >= 2 * k_sigma * sigma:
                n_strong += 1
        if n_strong >= 2:
            above.add(el)
    return above


def test_detection_and_false_positive_rates(scenes):
    wl, data = scenes
    st = IdentifySettings()
    ll = load_line_list()
    candidates = set(ll.query(f"{WL[0]} <= wavelength_nm <= {WL[1]}")["element"])
    n_above = n_found = n_absent = n_fp = n_possible = 0
    for name, (total, per_el) in data.items():
        for seed in SEEDS:
            y = observe(total, seed)
            scale = 5.0e4 / float(np.max(total))  # observe(): peak_pe photoelectrons at the brightest pixel
            sigma = float(noise_sigma(y, clip=3.5))
            ident = identify_spectrum(wl, y, settings=st, resolving_power=R)
            el = ident.elements().set_index("element")
            above = _above_limit(wl, per_el, scale, sigma, st.k_sigma, ll)
            # truth: the composition given to the forward model (COMPOSITIONS)
            for e in above:
                n_above += 1
                n_found += el.loc[e, "status"] == "detected"
                assert el.loc[e, "status"] == "detected", (name, seed, e, el)
            for e in candidates - set(COMPOSITIONS[name]):
                n_absent += 1
                status = el.loc[e, "status"] if e in el.index else "not detected"
                n_fp += status == "detected"
                n_possible += status == "possible"
    print(f"absent elements: detected {n_fp}/{n_absent}, possible {n_possible}/{n_absent}")
    assert n_above >= 2 * len(SEEDS)
    assert n_found == n_above
    # issue 15: no false detection in at least 1 000 absent-element checks (docs/identification.md)
    assert n_absent >= 1000
    assert n_fp == 0
    assert n_possible <= 0.05 * n_absent


def test_no_false_detection_with_an_incomplete_line_database(scenes):
    """The plasma emits lines the database lacks (30 % of the rows dropped at random): their peaks
    stay unexplained and must not make an absent element *detected*; see docs/identification.md."""
    wl, data = scenes
    st = IdentifySettings()
    ll = load_line_list()
    n_absent = n_fp = n_unexplained = 0
    for k in range(2):
        rng = np.random.default_rng(100 + k)
        sub = ll[rng.random(len(ll)) > 0.3]
        for name, (total, _) in data.items():
            ident = identify_spectrum(wl, observe(total, k), sub, settings=st, resolving_power=R)
            el = ident.elements()
            absent = ~el["element"].isin(list(COMPOSITIONS[name]))
            n_absent += int(absent.sum())
            n_fp += int((absent & (el["status"] == "detected")).sum())
            n_unexplained += int(ident.peaks["unexplained"].sum())
    print(f"incomplete database: absent elements detected {n_fp}/{n_absent}")
    # goal 0 (issue 15); the test above holds the >= 1 000 checks
    assert n_absent > 100 and n_fp == 0
    assert n_unexplained > 0  # the lines missing from the database are listed as unexplained peaks
