"""Paule–Mandel line scatter in the self-absorption fits and the ``fit_quality`` check (issue 18).

Outside references: the Paule–Mandel estimator (Paule & Mandel 1982, *J. Res. Natl. Bur.
Stand.* 87, 377: s² such that Σ (x_i − x̂(s²))²/(u_i² + s²) = ν, x̂ the weighted fit) is
computed here independently by scipy's ``brentq`` root finder on small textbook-style examples
(a consensus mean of five laboratories; a straight line); the self-absorbed spectra are hand LTE
intensities × the slab curve of growth (``tests/test_cflibs.py``), with a known log-normal
line-to-line scatter added.
"""

from __future__ import annotations

import warnings

import cf_hand
import numpy as np
import pytest
from scipy.optimize import brentq
from test_cflibs import W_TRUE, _self_absorbed_table

from compquant.cflibs import CFSettings, analyse_cf
from compquant.cflibs.consistency import SA_SCATTER_MAX, plasma_checks
from compquant.cflibs.fitting import paule_mandel_scatter


def _pm_by_hand(X, y, u):
    """s of Paule & Mandel 1982 from its defining equation, by brentq on s² (independent of wls_batch)."""
    nu = X.shape[0] - X.shape[1]

    def excess(s2):
        w = 1.0 / (u**2 + s2)
        beta = np.linalg.solve((X * w[:, None]).T @ X, (X * w[:, None]).T @ y)
        return float(np.sum(w * (y - X @ beta) ** 2)) - nu

    return float(np.sqrt(brentq(excess, 0.0, 100.0 * np.var(y) + 1.0, xtol=1e-14, rtol=1e-13)))


def test_paule_mandel_estimator_on_small_examples():
    # consensus mean of five laboratories (values and standard uncertainties, invented)
    x = np.array([10.1, 9.6, 10.8, 10.3, 9.2])
    u = np.array([0.10, 0.20, 0.15, 0.10, 0.30])
    ones = np.ones((5, 1))
    assert paule_mandel_scatter(ones, x, u) == pytest.approx(_pm_by_hand(ones, x, u), rel=2e-3)
    # a straight line whose points scatter beyond their u
    t = np.linspace(0.0, 4.0, 9)
    X = np.column_stack([np.ones_like(t), t])
    y = 1.0 + 0.5 * t + np.array([0.3, -0.2, 0.1, -0.4, 0.25, 0.05, -0.15, 0.35, -0.3])
    uy = np.full(9, 0.05)
    assert paule_mandel_scatter(X, y, uy) == pytest.approx(_pm_by_hand(X, y, uy), rel=2e-3)
    # consistent data need no extra variance
    assert paule_mandel_scatter(ones, np.array([1.0, 1.01, 0.99, 1.0, 1.0]), np.full(5, 0.05)) == 0.0


def _scattered(sd, seed=3):
    """The self-absorbed slab table (0.5 mm, 10 000 K, 5×10¹⁶ cm⁻³) with A_ki claimed to 0.3 %
    (grade AAA) but every line moved by a log-normal factor of standard deviation ``sd``."""
    lt, _, w_instr = _self_absorbed_table(fallback_fwhm_nm=0.02)
    lt["aki_grade"] = "AAA"
    lt["intensity"] *= np.exp(np.random.default_rng(seed).normal(0.0, sd, len(lt)))
    return lt, w_instr


def _columnar(lt, w_instr, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse_cf(line_table=lt, atomic=cf_hand.atomic(),
                          settings={"mc_draws": 200, "seed": 7, "instrument_fwhm_nm": w_instr,
                                    "ne_method": "stark", "self_absorption": "columnar",
                                    "stark_fallback_fwhm_nm": 0.02, **kw})


def test_selfabs_fit_weights_lines_by_the_scatter_it_sees():
    lt, w_instr = _scattered(0.08)
    r = _columnar(lt, w_instr)
    s = r.fit["model_scatter_ln"]
    # the scatter was 8 % in ln I on 19 lines (and the lines' own u about 0.6 %): s near it
    assert 0.03 < s < 0.16
    # the stated u alone do not describe the lines (the flag), the weighted fit does: χ² = ν with
    # ν = n − (T, intercepts, ln L) of the self-absorbed fit
    assert "cf_fit_poor" in r.flags
    assert r.fit["chi2"] == pytest.approx(r.self_absorption["dof_selfabs"], rel=0.02)
    fq = next(c for c in r.plasma_checks if c["check"] == "fit_quality")
    assert fq["checked"] and fq["passed"] and fq["value"] == pytest.approx(s)
    assert r.plasma_consistent
    assert r.temperature_k == pytest.approx(10000.0, rel=0.03)
    # U (k = 2) of every element covers the truth once s is drawn in the Monte Carlo
    for e, w in W_TRUE.items():
        el = r.element(e)
        assert abs(el.mass_fraction - w) <= 2.0 * el.u


def test_selfabs_fit_needing_an_absurd_scatter_is_refused():
    lt, w_instr = _scattered(0.6)
    r = _columnar(lt, w_instr)
    fq = next(c for c in r.plasma_checks if c["check"] == "fit_quality")
    assert fq["checked"] and not fq["passed"]
    assert fq["value"] > SA_SCATTER_MAX and fq["limit"] == SA_SCATTER_MAX
    assert "Paule–Mandel" in fq["note"]
    assert not r.plasma_consistent
    assert all(not r.element(e).determined for e in W_TRUE)


def test_fit_quality_judges_the_scatter_not_only_the_p_value():
    s = CFSettings.from_section({"self_absorption": "columnar"})
    kw = dict(T=10000.0, u_T=100.0, ne=5e16, u_ln_ne=0.1, ne_used="saha", ne_estimates=[], lte={}, species=[],
              settings=s, fit={"birge_ratio": 1.0, "p_value": 0.5})
    _, failed = plasma_checks(sa_info={"plasma_length_mm": 0.5, "fitted": True, "model_scatter_ln": 0.1}, **kw)
    assert failed == []
    _, failed = plasma_checks(sa_info={"plasma_length_mm": 0.5, "fitted": True, "model_scatter_ln": 0.4}, **kw)
    assert failed == ["fit_quality"]  # χ² = ν with s, but s is 40 % of the line intensities
