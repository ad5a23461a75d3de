"""False hot plasma solutions are refused with the failed check named (issue 18, item 3).

Outside references beside each check: the Stark (electron-impact) FWHM is linear in nₑ (Griem
1974, *Spectral Line Broadening by Plasmas*; common practice); measured line widths are the
half-maximum widths of Voigt profiles computed by ``scipy.special.voigt_profile`` (σ from the
Gaussian FWHM / (2√(2 ln 2)), γ = half the Lorentzian FWHM — the definitions of that function);
the forward-model spectrum is :func:`compquant.plasma.synthesize`, configured apart from the
analysis (Stark 0.015 nm at 10¹⁷ cm⁻³ scaling as T^0.3, where the analysis assumes 0.01 nm).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import voigt_profile

from compquant.cflibs import CFSettings
from compquant.cflibs.consistency import plasma_checks, thin_t_check
from compquant.cflibs.lineset import LineSet
from compquant.cflibs.linewidths import assumed_stark_fwhm_nm, line_width_check
from compquant.lines.windows import peak_centre_fwhm

MG_U = 24.305  # from memory of IUPAC standard atomic weights (Mg)
R = 5000.0
SETTINGS = CFSettings.from_section({"stark_fallback_fwhm_nm": 0.01, "stark_fallback_ne_cm3": 1e17})


def _lines(wl, fwhm, stark_w=None):
    n = len(wl)
    nan = np.full(n, np.nan)
    return LineSet(line_id=np.array([f"Mg I {w:.3f}" for w in wl]), species=np.array(["Mg I"] * n),
                   element=np.array(["Mg"] * n), ion=np.ones(n, int), wl=np.asarray(wl, float),
                   intensity=np.full(n, 100.0), u_intensity=np.full(n, 1.0), gA=np.ones(n), ek=np.ones(n),
                   ei=np.zeros(n), u_ln_a=np.full(n, 0.1), fwhm=np.asarray(fwhm, float),
                   stark_w=nan.copy() if stark_w is None else np.asarray(stark_w, float),
                   stark_ne=np.full(n, 1e17), stark_t=nan.copy(), stark_p=nan.copy())


def _check(lines, T, ne, settings=SETTINGS):
    return line_width_check(T=T, ne=ne, lines=lines, w_instr_nm=lines.wl / R, mass_u=np.full(lines.n, MG_U),
                            settings=settings)


def _voigt_fwhm_numeric(w_gauss, w_lorentz):
    """FWHM of scipy's Voigt profile by half-maximum crossings on a fine grid."""
    sigma = w_gauss / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    x = np.linspace(-5 * (w_gauss + w_lorentz), 5 * (w_gauss + w_lorentz), 200001)
    y = voigt_profile(x, sigma, 0.5 * w_lorentz)
    above = x[y >= 0.5 * y.max()]
    return float(above[-1] - above[0])


def _doppler(wl, T):
    # λ √(8 k T ln2 / (M c²)) with CODATA k, u, c from memory
    return wl * math.sqrt(8 * 1.380649e-23 * T * math.log(2) / (MG_U * 1.66053907e-27 * 299792458.0**2))


def test_assumed_stark_width_is_linear_in_ne():
    # Stark electron-impact FWHM ∝ nₑ (Griem 1974; common practice), tabulated and fallback alike
    L = _lines([285.2, 383.8, 518.4], [0.1] * 3, stark_w=[0.004, np.nan, 0.02])
    w1 = assumed_stark_fwhm_nm(1e17, 10000.0, L, SETTINGS)
    w3 = assumed_stark_fwhm_nm(3e17, 10000.0, L, SETTINGS)
    assert w1 == pytest.approx([0.004, 0.01, 0.02])
    assert w3 == pytest.approx(3 * w1)
    # no data and no fallback: no prediction
    assert np.isnan(assumed_stark_fwhm_nm(1e17, 1e4, L, CFSettings())[1])


@pytest.mark.parametrize("ne_true,T_true", [(5.7e16, 9061.0), (1e17, 11000.0)])
def test_widths_of_scipy_voigt_profiles_pass_the_truth_and_refuse_a_hot_dense_solution(ne_true, T_true):
    wl = np.array([279.55, 285.21, 309.69, 383.83, 470.30, 516.73, 518.36, 552.84])
    # the spectrum's lines: instrument (λ/R) ⊕ Doppler, Stark 0.015 nm at 10¹⁷ (wider than assumed)
    measured = [_voigt_fwhm_numeric(math.hypot(w / R, _doppler(w, T_true)), 0.015 * ne_true / 1e17) for w in wl]
    L = _lines(wl, measured)
    ok = _check(L, T_true, ne_true)
    assert ok["checked"] and ok["passed"] and ok["value"] > 0.95
    # within the factors a good solution shows (nₑ ×2.2, T +5 %): passes
    assert _check(L, 1.05 * T_true, 2.2 * ne_true)["passed"]
    # the false hot solution of the thin magnesium benchmark case: 12 980 K, 1.5×10¹⁸ cm⁻³
    bad = _check(L, 12980.0, 1.5e18)
    assert bad["checked"] and not bad["passed"]
    assert bad["value"] < SETTINGS.width_ratio_min
    assert "narrower than this electron density allows" in bad["note"]


def test_too_few_measured_widths_are_not_judged():
    L = _lines([285.2, 383.8, 518.4], [0.06, np.nan, np.nan])
    c = _check(L, 13000.0, 1.5e18)
    assert not c["checked"] and c["passed"]


def _forward_lines(T, ne):
    """Mg lines measured (half-maximum FWHM) on a thin forward-model spectrum."""
    from compquant.plasma import synthesize
    from compquant.plasma.forward import default_lines

    grid = np.arange(270.0, 560.0, 0.02)
    lines = default_lines(elements=["Mg"]).with_default_stark(0.015, 1e17)
    spec = synthesize(grid, {"Mg": 1.0}, T, ne, resolving_power=R, self_absorption=False, continuum=False,
                      lines=lines, stark_t_exponent=0.3)
    centres = np.array([279.553, 280.270, 285.213, 383.829, 516.732, 518.360])
    fw = [peak_centre_fwhm(grid, spec, c - 0.1, c + 0.1)[1] for c in centres]
    return _lines(centres, fw)


def test_forward_model_hot_solution_is_refused_by_line_widths():
    L = _forward_lines(9061.0, 5.7e16)
    assert np.all(np.isfinite(L.fwhm))
    common = dict(u_T=100.0, u_ln_ne=0.1, ne_estimates=[], lte={}, species=[], sa_info={}, settings=SETTINGS)
    kw = dict(lines=L, w_instr_nm=L.wl / R, mass_u=np.full(L.n, MG_U), settings=SETTINGS)
    # the truth passes
    checks, failed = plasma_checks(T=9061.0, ne=5.7e16, ne_used="saha",
                                   widths=line_width_check(T=9061.0, ne=5.7e16, **kw), **common)
    assert failed == []
    assert next(c for c in checks if c["check"] == "line_widths")["passed"]
    # the hot solution a Saha-balance fit certified before: refused, the check named
    _, failed = plasma_checks(T=12980.0, ne=1.5e18, ne_used="saha",
                              widths=line_width_check(T=12980.0, ne=1.5e18, **kw), **common)
    assert failed == ["line_widths"]
    # with nₑ not fitted (fixed by the method) the disagreement is reported, not refused
    checks, failed = plasma_checks(T=12980.0, ne=1.5e18, ne_used="fixed",
                                   widths=line_width_check(T=12980.0, ne=1.5e18, **kw), **common)
    assert failed == [] and not next(c for c in checks if c["check"] == "line_widths")["passed"]


def test_thin_lines_temperature_is_judged_by_the_stated_u():
    # the §11 magnesium case (values as measured by the analysis): the nearly thin lines alone,
    # weighted by their stated u, 10 096 ± 350 K against 11 244 K: −10 % and 3.3 u, refused
    c = thin_t_check(11244.0, {"temperature_k": 10096.0, "u_temperature_k": 350.0, "n_lines": 22}, 0.03)
    assert c["checked"] and not c["passed"] and "stated u" in c["note"]
    # within the tolerance (3 %) it passes whatever the u
    assert thin_t_check(11244.0, {"temperature_k": 11000.0, "u_temperature_k": 20.0, "n_lines": 9}, 0.03)["passed"]
    # more than 3 % off but within 2 u (case 3: −5.3 % at 1.2 u): passes
    assert thin_t_check(11855.0, {"temperature_k": 11223.0, "u_temperature_k": 538.0, "n_lines": 17}, 0.03)["passed"]
    assert thin_t_check(11244.0, None, 0.03)["checked"] is False
