"""Line profiles: Doppler (Gaussian), Stark (Lorentzian), Voigt, instrument function.

All profiles are area-normalised over wavelength in nm (values in nm^-1) and
broadcast numpy-style.

* Doppler FWHM of a line from atoms of mass M at temperature T (e.g. Griem
  1964; Thorne, *Spectrophysics*)::

      w_D = lambda0 * sqrt(8 k T ln2 / (M c^2))            (nm)

* Stark broadening by electron impact, linear in n_e (Griem 1974, *Spectral
  Line Broadening by Plasmas*; Konjevic et al. 2002, J. Phys. Chem. Ref. Data
  31, 819)::

      w_S = w_ref * (n_e / n_ref)^p * (T / T_ref)^a        (FWHM, nm)
      d_S = d_ref * (n_e / n_ref)^p * (T / T_ref)^a        (shift, nm)

  with p = 1 for isolated non-hydrogenic lines (p ~ 0.68 for the hydrogen
  Balmer lines, Gigosos & Cardenoso 1996) and the exponent ``a`` 0 unless
  given (the data seldom give it).
* Voigt = convolution of the two, evaluated with
  :func:`scipy.special.voigt_profile`; its FWHM is approximated by Olivero &
  Longbothum 1977 (JQSRT 17, 233), accurate to 0.02 %::

      w_V = 0.5346 w_L + sqrt(0.2166 w_L^2 + w_G^2)

  and its exact inverse for the Lorentzian (Stark) part given the total and the Gaussian
  part (:func:`lorentz_from_voigt`, used to measure Stark widths).

* Instrument function: Gaussian of FWHM ``lambda / R`` for resolving power R
  (common practice for grating spectrometers), or a constant FWHM in nm.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import voigt_profile

from compquant.plasma.constants import AMU, KB, C

FWHM_TO_SIGMA = 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
#: Olivero & Longbothum 1977 coefficients of the Voigt FWHM
_OL_A = 0.5346
_OL_B = 0.2166


def gaussian(x_nm, centre_nm, fwhm_nm):
    """Area-normalised Gaussian of FWHM ``fwhm_nm`` (nm^-1)."""
    s = np.asarray(fwhm_nm, float) * FWHM_TO_SIGMA
    d = np.asarray(x_nm, float) - np.asarray(centre_nm, float)
    return np.exp(-0.5 * (d / s) ** 2) / (s * math.sqrt(2.0 * math.pi))


def lorentzian(x_nm, centre_nm, fwhm_nm):
    """Area-normalised Lorentzian of FWHM ``fwhm_nm`` (nm^-1)."""
    g = 0.5 * np.asarray(fwhm_nm, float)
    d = np.asarray(x_nm, float) - np.asarray(centre_nm, float)
    return g / (math.pi * (d * d + g * g))


def voigt(x_nm, centre_nm, fwhm_gauss_nm, fwhm_lorentz_nm):
    """Area-normalised Voigt profile (nm^-1) from the Gaussian and Lorentzian FWHMs.

    Uses :func:`scipy.special.voigt_profile` (sigma = w_G / (2 sqrt(2 ln 2)),
    gamma = w_L / 2).  Either width may be 0 (pure Lorentzian / Gaussian), not both.
    """
    d = np.asarray(x_nm, float) - np.asarray(centre_nm, float)
    return voigt_profile(d, np.asarray(fwhm_gauss_nm, float) * FWHM_TO_SIGMA, 0.5 * np.asarray(fwhm_lorentz_nm, float))


def voigt_fwhm(fwhm_gauss_nm, fwhm_lorentz_nm):
    """Voigt FWHM after Olivero & Longbothum 1977 (JQSRT 17, 233), 0.02 % accuracy."""
    wl = np.asarray(fwhm_lorentz_nm, float)
    wg = np.asarray(fwhm_gauss_nm, float)
    return _OL_A * wl + np.sqrt(_OL_B * wl * wl + wg * wg)


def lorentz_from_voigt(w_voigt, w_gauss) -> np.ndarray:
    """Lorentzian FWHM that, with Gaussian FWHM ``w_gauss``, gives Voigt FWHM ``w_voigt``.

    Exact inverse of :func:`voigt_fwhm` (Olivero & Longbothum 1977): the smaller root of
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


def doppler_fwhm(wavelength_nm, temperature_k, mass_u):
    """Doppler FWHM ``lambda sqrt(8 k T ln2 / (M c^2))`` in nm (M in u, T in K)."""
    m = np.asarray(mass_u, float) * AMU
    return np.asarray(wavelength_nm, float) * np.sqrt(
        8.0 * KB * np.asarray(temperature_k, float) * math.log(2.0) / (m * C * C)
    )


def _t_factor(temperature_k, t_ref_k, t_exponent):
    if temperature_k is None or t_ref_k is None or t_exponent == 0:
        return 1.0
    t_ref = np.asarray(t_ref_k, float)
    ratio = np.where(np.isfinite(t_ref) & (t_ref > 0), np.asarray(temperature_k, float) / t_ref, 1.0)
    return ratio**t_exponent


def stark_fwhm(w_ref_nm, ne_cm3, ne_ref_cm3, temperature_k=None, t_ref_k=None, t_exponent=0.0, ne_exponent=1.0):
    """Stark (electron-impact) FWHM ``w_ref (n_e/n_ref)^p (T/T_ref)^a`` (nm); p = 1 by default.

    Citation: Griem 1974; Konjevic et al. 2002.  NaN or missing ``w_ref`` gives 0;
    NaN ``ne_exponent`` means 1.
    """
    w = np.nan_to_num(np.asarray(w_ref_nm, float), nan=0.0)
    nref = np.asarray(ne_ref_cm3, float)
    nref = np.where(np.isfinite(nref) & (nref > 0), nref, 1e16)
    p = np.asarray(ne_exponent, float)
    p = np.where(np.isfinite(p), p, 1.0)
    return w * (np.asarray(ne_cm3, float) / nref) ** p * _t_factor(temperature_k, t_ref_k, t_exponent)


def stark_shift(d_ref_nm, ne_cm3, ne_ref_cm3, temperature_k=None, t_ref_k=None, t_exponent=0.0, ne_exponent=1.0):
    """Stark shift ``d_ref (n_e/n_ref)^p (T/T_ref)^a`` (nm, + = to the red)."""
    return stark_fwhm(d_ref_nm, ne_cm3, ne_ref_cm3, temperature_k, t_ref_k, t_exponent, ne_exponent)


def instrument_fwhm(wavelength_nm, resolving_power=None, fwhm_nm=None):
    """Instrument-function FWHM: ``lambda / R`` (nm), or a constant ``fwhm_nm``."""
    lam = np.asarray(wavelength_nm, float)
    if fwhm_nm is not None:
        return np.full_like(lam, float(fwhm_nm))
    return lam / float(resolving_power)


__all__ = [
    "FWHM_TO_SIGMA",
    "doppler_fwhm",
    "gaussian",
    "instrument_fwhm",
    "lorentz_from_voigt",
    "lorentzian",
    "stark_fwhm",
    "stark_shift",
    "voigt",
    "voigt_fwhm",
]
