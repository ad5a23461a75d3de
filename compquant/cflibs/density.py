"""Electron density from line widths, and the width arithmetic it needs.

* Doppler FWHM (Gaussian): Δλ_D = λ·√(8 kT ln2 / (m c²))  (e.g. Griem, *Principles of Plasma
  Spectroscopy*, 1997, §4).
* Voigt FWHM (Olivero & Longbothum 1977, J. Quant. Spectrosc. Radiat. Transfer 17, 233)::

      w_V ≈ 0.5346 w_L + √(0.2166 w_L² + w_G²)        (accuracy ≈ 0.02 %)

  inverted here for the Lorentzian (Stark) part ``w_L`` given the total ``w_V`` and the
  Gaussian part ``w_G = √(w_instr² + w_Doppler²)``.
* H I 656.28 nm (H-alpha) Stark FWHM → nₑ (Gigosos, González & Cardeñoso 2003,
  Spectrochim. Acta B 58, 1489; fit to their computer-simulated profiles, valid roughly for
  10¹⁴–10¹⁸ cm⁻³, weakly dependent on T and reduced mass)::

      nₑ = 10¹⁷ · (w_Stark / 1.098 nm)^{1.47135}  cm⁻³

* Stark width of a line with tabulated parameters (electron-impact width, linear in nₑ;
  Griem 1974, *Spectral Line Broadening by Plasmas*; Konjević 1999 Phys. Rep. 316, 339)::

      w = w_ref · (nₑ / n_ref) · (T / T_ref)^a  →  nₑ = n_ref · (w / w_ref) · (T / T_ref)^{−a}

  with ``a`` the temperature exponent (0 = no temperature dependence), the same convention
  as the forward model (:func:`compquant.plasma.profiles.stark_fwhm`).
"""

from __future__ import annotations

import numpy as np

from compquant.errors import PhysicsError
from compquant.plasma.profiles import doppler_fwhm, stark_fwhm, voigt_fwhm

#: Gigosos, González & Cardeñoso 2003 H-alpha FWHM relation (from memory of the paper's
#: abstract/eq.; the form nₑ = 10¹⁷ (w/1.098)^{1.47135} is widely quoted, verify)
GGC2003_NE0_CM3 = 1.0e17
GGC2003_W0_NM = 1.098
GGC2003_EXPONENT = 1.47135

_OL_A = 0.5346
_OL_B = 0.2166


def doppler_fwhm_nm(wavelength_nm, T, mass_u) -> np.ndarray:
    """Doppler (Gaussian) FWHM in nm (:func:`compquant.plasma.profiles.doppler_fwhm`)."""
    return np.asarray(doppler_fwhm(wavelength_nm, T, mass_u), dtype=float)


def lorentz_from_voigt(w_voigt, w_gauss) -> np.ndarray:
    """Lorentzian FWHM that, with Gaussian FWHM ``w_gauss``, gives Voigt FWHM ``w_voigt``.

    Exact inverse of :func:`voigt_fwhm`: the smaller root of
    (A² − B) w_L² − 2A·w_V·w_L + (w_V² − w_G²) = 0.  Returns 0 where w_V ≤ w_G
    (no Lorentzian part resolvable).
    """
    wv = np.asarray(w_voigt, dtype=float)
    wg = np.asarray(w_gauss, dtype=float)
    a = _OL_A**2 - _OL_B
    b = -2.0 * _OL_A * wv
    c = wv**2 - wg**2
    disc = np.maximum(b**2 - 4 * a * c, 0.0)
    root = (-b - np.sqrt(disc)) / (2 * a)
    return np.where(wv > wg, np.maximum(root, 0.0), 0.0)


def ne_h_alpha(w_stark_nm) -> np.ndarray:
    """nₑ (cm⁻³) from the H-alpha Stark FWHM (nm), Gigosos, González & Cardeñoso 2003."""
    w = np.asarray(w_stark_nm, dtype=float)
    if np.any(~np.isfinite(w)) or np.any(w <= 0):
        raise PhysicsError(
            "H-alpha Stark width is not positive after removing instrumental and Doppler width",
            where="H I 656.28 nm",
            fix="check the instrumental FWHM setting ([cf] instrument_fwhm_nm) and the line fit",
        )
    return GGC2003_NE0_CM3 * (w / GGC2003_W0_NM) ** GGC2003_EXPONENT


def h_alpha_width(ne_cm3) -> np.ndarray:
    """Inverse of :func:`ne_h_alpha`: H-alpha Stark FWHM (nm) at nₑ (cm⁻³)."""
    ne = np.asarray(ne_cm3, dtype=float)
    return GGC2003_W0_NM * (ne / GGC2003_NE0_CM3) ** (1.0 / GGC2003_EXPONENT)


def _p(p):
    p = np.asarray(1.0 if p is None else p, dtype=float)
    return np.where(np.isfinite(p) & (p > 0), p, 1.0)


def ne_stark_linear(w_stark_nm, w_ref_nm, ne_ref_cm3, T=None, T_ref=None, t_exponent: float = 0.0,
                    ne_exponent=None):
    """nₑ (cm⁻³) from a Stark FWHM: inverse of :func:`stark_width_linear`.

    ``w = w_ref (nₑ/n_ref)^p (T/T_ref)^a``  ⇒  ``nₑ = n_ref (w / (w_ref (T/T_ref)^a))^{1/p}``
    (p = 1 for electron-impact widths, Griem 1974; p from the line list otherwise,
    e.g. 0.67965 for H-alpha after Gigosos et al. 2003).
    """
    unit = stark_fwhm(np.asarray(w_ref_nm, float), 1.0, 1.0, T, T_ref, t_exponent)
    return np.asarray(ne_ref_cm3, float) * (np.asarray(w_stark_nm, float) / unit) ** (1.0 / _p(ne_exponent))


def stark_width_linear(ne_cm3, w_ref_nm, ne_ref_cm3, T=None, T_ref=None, t_exponent: float = 0.0,
                       ne_exponent=None):
    """Stark FWHM (nm) at nₑ: :func:`compquant.plasma.profiles.stark_fwhm` (p = 1), or
    ``w_ref (nₑ/n_ref)^p (T/T_ref)^a`` where the line list gives an exponent p ≠ 1."""
    p = _p(ne_exponent)
    ne = np.asarray(ne_cm3, float)
    nref = np.asarray(ne_ref_cm3, float)
    eff = nref * (ne / nref) ** p  # equals nₑ when p = 1
    return np.asarray(stark_fwhm(w_ref_nm, eff, ne_ref_cm3, T, T_ref, t_exponent), dtype=float)


__all__ = [
    "GGC2003_EXPONENT",
    "GGC2003_NE0_CM3",
    "GGC2003_W0_NM",
    "doppler_fwhm_nm",
    "h_alpha_width",
    "lorentz_from_voigt",
    "ne_h_alpha",
    "ne_stark_linear",
    "stark_width_linear",
    "voigt_fwhm",
]
