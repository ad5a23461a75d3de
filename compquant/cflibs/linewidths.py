"""Line-width consistency: does the measured spectrum allow the solution's electron density?

A calibration-free solution fixes nₑ (by the Saha balance or by a self-absorption fit) and the
analysis then *assumes* each line's Stark width at that nₑ — from the line list's Stark
parameters, else the method's ``stark_fallback_fwhm_nm`` at ``stark_fallback_ne_cm3`` — in the
window capture, the blend correction and the curve of growth.  Those widths are a prediction
the spectrum can refute: a line's profile is the Voigt of the Gaussian part (instrument
function ⊕ Doppler) and the Lorentzian Stark part, so at the solution's (T, nₑ) every line
is at least

    w_low = w_V(w_G, w_S(nₑ, T) / F),   w_G = √(w_instr² + w_D²),
    w_V(w_G, w_L) = 0.5346 w_L + √(0.2166 w_L² + w_G²)

wide (nm; Olivero & Longbothum 1977 for w_V; Stark electron-impact width linear in nₑ,
w_S = w_ref (nₑ/n_ref)(T/T_ref)^a, Griem 1974; Konjević 1999), with F = ``width_stark_factor``
(2.5) the factor by which the Stark data may overstate the width (tabulated electron-impact
widths scatter by 20–50 % between sources, Konjević 1999; an assumed fallback width by more).
Self-absorption, blends and unlisted neighbours only *widen* a measured line, so the test is
one-sided: the solution is refused when the median over the well-measured lines (relative u
of the intensity ≤ 10 %, a measured FWHM) of w_obs / w_low is below ``width_ratio_min`` (0.85:
room for the stated instrument width and the half-maximum estimate of a sampled profile)
**and** below 1 − 3 u, u = 1.2533 ``u_rel_fwhm`` / √n the standard uncertainty of a median of n
widths (1.2533 = √(π/2), the asymptotic efficiency of the median of normal data; common
practice).

Why it catches the false hot solutions (docs/calibration-free.md §4a): a slab or Saha fit that
settles on 13 000 K and 1.5×10¹⁸ cm⁻³ for a 9 000 K, 6×10¹⁶ cm⁻³ plasma implies Stark widths of
0.15 nm with the 0.01 nm fallback — twice the instrument width at R = 5000 — while the measured
lines are instrument-limited.  It cannot judge a solution whose Stark part is below the
instrument width (nₑ ×3 at 10¹⁷ cm⁻³ with R = 5000): there the other checks decide.

References
----------
.. [1] H. R. Griem, *Spectral Line Broadening by Plasmas*, Academic Press (1974).
.. [2] N. Konjević, Phys. Rep. 316 (1999) 339 (Stark widths: plasma broadening of
   non-hydrogenic lines, accuracy of the data).
.. [3] J. J. Olivero and R. L. Longbothum, J. Quant. Spectrosc. Radiat. Transfer 17 (1977) 233.
.. [4] G. Cristoforetti et al., Spectrochim. Acta B 65 (2010) 86 (LTE and its checks beyond
   McWhirter's criterion).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.cflibs.electron_density import gaussian_fwhm_nm, stark_width_linear
from compquant.plasma.profiles import voigt_fwhm

#: √(π/2): standard error of the median of n normal values is √(π/2)·σ/√n (large n; common practice)
MEDIAN_SE_FACTOR = math.sqrt(math.pi / 2.0)


def assumed_stark_fwhm_nm(ne_cm3, T, lines, settings) -> np.ndarray:
    """Stark FWHM (nm) the analysis assumes for each line at (T, nₑ): the line list's
    parameters (``stark_width_linear``, linear in nₑ, Griem 1974), else ``stark_fallback_fwhm_nm``
    × nₑ / ``stark_fallback_ne_cm3``; NaN where neither exists."""
    L = lines
    have = np.isfinite(L.stark_w) & (L.stark_w > 0)
    out = np.full(L.n, np.nan)
    if np.any(have):
        t_ref = np.where(np.isfinite(L.stark_t), L.stark_t, T)
        out[have] = stark_width_linear(ne_cm3, L.stark_w[have], L.stark_ne[have], T, t_ref[have],
                                       settings.stark_t_exponent, L.stark_p[have])
    if settings.stark_fallback_fwhm_nm:
        out[~have] = settings.stark_fallback_fwhm_nm * ne_cm3 / settings.stark_fallback_ne_cm3
    return out


def line_width_check(*, T, ne, lines, w_instr_nm, mass_u, settings, refuses=True) -> dict:
    """The ``line_widths`` check of one solution (module docstring): measured FWHMs against the
    least width the solution's (T, nₑ) and the assumed Stark data allow.

    Parameters
    ----------
    T, ne : float
        The solution's temperature (K) and electron density (cm⁻³).
    lines : LineSet
        The analysed lines (``fwhm`` measured, nm; Stark parameters; intensities).
    w_instr_nm, mass_u : array
        Instrument FWHM (nm) and emitter mass (u) per line.
    settings : CFSettings
        ``width_stark_factor``, ``width_ratio_min``, ``u_rel_fwhm`` and the Stark fallback.
    refuses : bool
        Whether a failure refuses the solution (nₑ fitted) or is only reported.

    Returns
    -------
    dict
        ``{"check": "line_widths", "checked", "passed", "value" (median w_obs / w_low),
        "limit" (width_ratio_min), "note", "refuses"}``.
    """
    L = lines
    w_s = assumed_stark_fwhm_nm(ne, T, L, settings)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(L.intensity > 0, L.u_intensity / L.intensity, np.inf)
    ok = np.isfinite(L.fwhm) & (L.fwhm > 0) & np.isfinite(w_s) & (rel <= 0.1)
    base = {"check": "line_widths", "refuses": bool(refuses), "limit": settings.width_ratio_min}
    if ok.sum() < 3:
        return {**base, "checked": False, "passed": True, "value": None,
                "note": "fewer than 3 well-measured lines with a measured FWHM and Stark data (or fallback)"}
    wg = gaussian_fwhm_nm(L.wl[ok], T, np.asarray(mass_u)[ok], np.asarray(w_instr_nm)[ok])
    w_low = voigt_fwhm(wg, w_s[ok] / settings.width_stark_factor)
    ratio = L.fwhm[ok] / w_low
    med = float(np.median(ratio))
    n = int(ok.sum())
    u = MEDIAN_SE_FACTOR * settings.u_rel_fwhm / math.sqrt(n)
    passed = not (med < settings.width_ratio_min and math.log(med) < -3.0 * u)
    w_full = voigt_fwhm(wg, w_s[ok])
    note = (f"{n} lines: measured FWHM median {float(np.median(L.fwhm[ok])):.4g} nm against "
            f"{float(np.median(w_full)):.4g} nm predicted at {T:.0f} K, {ne:.3g} cm⁻³ (Stark part "
            f"{float(np.median(w_s[ok])):.3g} nm; at least {float(np.median(w_low)):.4g} nm with it ÷ "
            f"{settings.width_stark_factor:g}); median ratio {med:.3f} (u {u:.3f})"
            + ("" if passed else ": the lines are narrower than this electron density allows"))
    return {**base, "checked": True, "passed": passed, "value": med, "note": note}


__all__ = ["MEDIAN_SE_FACTOR", "assumed_stark_fwhm_nm", "line_width_check"]
