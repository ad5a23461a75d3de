"""The Saha-balance electron density carries the temperature error, amplified (docs §3, §11).

With ln nₑ a free parameter the ion lines fix nₑ and not the slope, so T rests on the neutral
lines; a neutral Boltzmann plot tilted about its weighted mean energy x̄ (slope −1/kT₀ → −1/kT′)
moves the fitted nₑ by (hand derivation from the Saha–Boltzmann ordinates of Aragón & Aguilera
2008, eqs. 19–20, with CODATA k/e from scipy.constants)

    ln(nₑ′/nₑ₀) = 1.5 ln(T′/T₀) + (x*_II − x̄)(1/kT₀ − 1/kT′),   x*_II = E_ion + E_k,II,

i.e. d ln nₑ = (1.5 + (x*_II − x̄)/kT) d ln T — about 9–12 for Mg I/Mg II at 8–11 kK, the
reason thin magnesium-alloy nₑ misses 15 % on noisy spectra (§11). Exact LTE intensities of
``tests/cf_hand.py`` (textbook formulas, scipy.constants only; invented Fe atomic data).
"""

from __future__ import annotations

import math
import warnings

import cf_hand
import numpy as np
import pytest
from scipy import constants as sc

from compquant.cflibs import analyse_cf

KB_EV = sc.k / sc.e  # CODATA via scipy.constants
# one element, equal grades so the neutral lines weigh alike (x̄ is their plain mean);
# a single ion line: it fixes ln nₑ exactly and carries no slope (invented data, cf_hand style)
LINES = [
    ("Fe", 1, 371.994, 3.332, 0.000, 1.78e8, "B"),
    ("Fe", 1, 404.581, 4.549, 1.485, 7.76e8, "B"),
    ("Fe", 1, 438.354, 4.312, 1.485, 5.50e8, "B"),
    ("Fe", 1, 381.584, 4.733, 1.485, 8.82e8, "B"),
    ("Fe", 1, 526.954, 3.211, 0.859, 1.14e7, "B"),
    ("Fe", 2, 259.940, 4.768, 0.000, 2.35e9, "B"),
]
SETTINGS = {"mc_draws": 0, "ionisation_lowering": False, "include_ion3": False}


def _analyse(lt):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse_cf(line_table=lt, atomic=cf_hand.atomic(), settings=SETTINGS,
                          instrument={"instrument_fwhm_nm": 0.05})


@pytest.mark.parametrize("t_ratio", [1.02, 0.97])
def test_saha_balance_ne_follows_the_neutral_slope_error(t_ratio):
    T0, ne0 = 9000.0, 8.0e16
    lt = cf_hand.line_table({"Fe": 1.0}, T0, ne0, lowering=False, stage3=False, lines=LINES)
    r0 = _analyse(lt)
    # exact data: T and nₑ come back (hand Saha equation, scipy.constants)
    assert r0.temperature_k == pytest.approx(T0, rel=1e-7)
    assert r0.electron_density_cm3 == pytest.approx(ne0, rel=1e-6)
    # tilt the neutral lines about their mean E_k so that their slope is −1/kT′
    T1 = t_ratio * T0
    a = 1.0 / (KB_EV * T1) - 1.0 / (KB_EV * T0)  # change of the slope (per eV): m′ − m₀
    neutral = lt["ion"] == 1
    xbar = float(lt.loc[neutral, "ek_ev"].mean())
    tilted = lt.copy()
    tilted.loc[neutral, "intensity"] *= np.exp(-a * (tilted.loc[neutral, "ek_ev"] - xbar))
    tilted.loc[neutral, "u_intensity"] *= np.exp(-a * (tilted.loc[neutral, "ek_ev"] - xbar))
    r1 = _analyse(tilted)
    assert r1.temperature_k == pytest.approx(T1, rel=1e-7)
    x_ion = cf_hand.IONISATION["Fe I"] + 4.768
    expected = 1.5 * math.log(T1 / T0) + (x_ion - xbar) * (1.0 / (KB_EV * T0) - 1.0 / (KB_EV * T1))
    assert math.log(r1.electron_density_cm3 / ne0) == pytest.approx(expected, rel=1e-6, abs=1e-9)
    # the amplification the docs quote: here (x*_II − x̄)/kT ≈ 11 at 9 000 K, so a 2 % T error
    # is a 20–25 % nₑ error
    gain = math.log(r1.electron_density_cm3 / ne0) / math.log(T1 / T0)
    assert 10.0 < gain < 14.0


def test_reported_coupling_and_t_share_match_the_hand_formulas():
    T0, ne0 = 9000.0, 8.0e16
    lt = cf_hand.line_table({"Fe": 1.0}, T0, ne0, lowering=False, stage3=False, lines=LINES)
    r = _analyse(lt)
    saha = next(e for e in r.ne_estimates if e["method"] == "saha")
    neutral = lt["ion"] == 1
    x = lt.loc[neutral, "ek_ev"].to_numpy()
    xbar = float(x.mean())  # equal weights (one grade, one relative u)
    d = cf_hand.IONISATION["Fe I"] + 4.768 - xbar
    # d ln nₑ/d ln T = 1.5 + (x*_II − x̄)/kT (hand derivation above; k/e from scipy.constants)
    assert saha["dln_ne_dln_t"] == pytest.approx(1.5 + d / (KB_EV * T0), rel=1e-6)
    # ρ² of ln nₑ = q + m x*_II − y*_II with the straight-line variances of weighted least
    # squares (Bevington & Robinson ch. 6): var(q + m x̄) = σ²/N, var(m) = σ²/S_xx, plus the
    # ion line's own σ² — all lines carry the same ordinate u here
    u = {row["line_id"]: row["u_ordinate"] for row in r.lines}
    assert len(set(np.round(list(u.values()), 12))) == 1
    sxx = float(np.sum((x - xbar) ** 2))
    rho2 = (d**2 / sxx) / (1.0 / len(x) + d**2 / sxx + 1.0)
    assert saha["t_share_of_u_ln_ne"] == pytest.approx(rho2, rel=1e-6)
