"""Electron density: the relations from line widths and the estimators used by
:func:`compquant.cflibs.analyse_cf` (the one module for nₑ in the calibration-free analysis;
nₑ from the Saha balance is solved in :mod:`compquant.cflibs.solver` with
:mod:`compquant.plasma.saha`).

Relations:

* Doppler FWHM (Gaussian): Δλ_D = λ·√(8 kT ln2 / (m c²))  (e.g. Griem, *Principles of Plasma
  Spectroscopy*, 1997, §4).
* Voigt FWHM (Olivero & Longbothum 1977, J. Quant. Spectrosc. Radiat. Transfer 17, 233)::

      w_V ≈ 0.5346 w_L + √(0.2166 w_L² + w_G²)        (accuracy ≈ 0.02 %)

  inverted for the Lorentzian (Stark) part ``w_L`` given the total ``w_V`` and the
  Gaussian part ``w_G = √(w_instr² + w_Doppler²)``
  (:func:`compquant.plasma.profiles.lorentz_from_voigt`).
* H I 656.28 nm (H-alpha) Stark FWHM → nₑ (Gigosos, González & Cardeñoso 2003,
  Spectrochim. Acta B 58, 1489; fit to their computer-simulated profiles, valid roughly for
  10¹⁴–10¹⁸ cm⁻³, weakly dependent on T and reduced mass)::

      nₑ = 10¹⁷ · (w_Stark / 1.098 nm)^{1.47135}  cm⁻³

* Stark width of a line with tabulated parameters (electron-impact width, linear in nₑ;
  Griem 1974, *Spectral Line Broadening by Plasmas*; Konjević 1999 Phys. Rep. 316, 339)::

      w = w_ref · (nₑ / n_ref) · (T / T_ref)^a  →  nₑ = n_ref · (w / w_ref) · (T / T_ref)^{−a}

  with ``a`` the temperature exponent (0 = no temperature dependence), the same convention
  as the forward model (:func:`compquant.plasma.profiles.stark_fwhm`).

Estimators: each returns nₑ(T) for the central solution and, for the Monte Carlo, a sampler
that perturbs its inputs (measured widths by their relative uncertainty, Stark parameters
and the H-alpha relation by their stated accuracy).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.cflibs.selfabs import EL_SHERBINI_ALPHA
from compquant.errors import PhysicsError
from compquant.plasma.profiles import doppler_fwhm, lorentz_from_voigt, stark_fwhm, voigt_fwhm

#: Gigosos, González & Cardeñoso 2003 H-alpha FWHM relation (from memory of the paper's
#: abstract/eq.; the form nₑ = 10¹⁷ (w/1.098)^{1.47135} is widely quoted, verify)
GGC2003_NE0_CM3 = 1.0e17
GGC2003_W0_NM = 1.098
GGC2003_EXPONENT = 1.47135


def doppler_fwhm_nm(wavelength_nm, T, mass_u) -> np.ndarray:
    """Doppler (Gaussian) FWHM in nm (:func:`compquant.plasma.profiles.doppler_fwhm`)."""
    return np.asarray(doppler_fwhm(wavelength_nm, T, mass_u), dtype=float)


def gaussian_fwhm_nm(wavelength_nm, T, mass_u, w_instr_nm) -> np.ndarray:
    """Gaussian part of a line's Voigt profile, FWHM in nm: instrument function ⊕ Doppler.

    Two Gaussians convolve into a Gaussian whose variances add, so for FWHMs

        w_G = √(w_instr² + w_D²),   w_D = λ·√(8 k T ln 2 / (M c²))

    (λ in nm, T in K, M the emitter's mass in u; e.g. Griem, *Principles of Plasma
    Spectroscopy*, 1997, §4; Thorne, *Spectrophysics*, 1988).  The one place this sum is
    written for the calibration-free analysis (window capture, blends, Stark and H-alpha nₑ,
    width-based self-absorption).  Broadcasts over all arguments.

    References
    ----------
    .. [1] H. R. Griem, Principles of Plasma Spectroscopy, Cambridge University Press (1997).
    """
    return np.sqrt(w_instr_nm**2 + doppler_fwhm_nm(wavelength_nm, T, mass_u) ** 2)


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


H_MASS_U = 1.00794  # from memory of IUPAC standard atomic weights (H), verify


def _dlog(f, x, h=1e-4):
    """d ln f / d ln x by central differences."""
    return (np.log(f(x * math.exp(h))) - np.log(f(x * math.exp(-h)))) / (2 * h)


class HAlphaNe:
    """nₑ from the H-alpha Stark FWHM (Gigosos, González & Cardeñoso 2003)."""

    name = "h_alpha"

    def __init__(self, h_alpha: dict, w_instr_nm: float, settings):
        self.line_id = h_alpha["line_id"]
        self.fwhm = float(h_alpha["fwhm_nm"])
        self.wl = float(h_alpha.get("wavelength_nm", 656.28))
        u = h_alpha.get("u_fwhm_nm", np.nan)
        self.u_rel_w = float(u / self.fwhm) if np.isfinite(u) and u > 0 else settings.u_rel_fwhm
        self.u_rel_rel = settings.h_alpha_relation_u_rel
        self.w_instr = w_instr_nm
        self.lines = [self.line_id]

    def w_gauss(self, T):
        return gaussian_fwhm_nm(self.wl, T, H_MASS_U, self.w_instr)

    def usable(self, T) -> bool:
        return bool(np.all(lorentz_from_voigt(self.fwhm, self.w_gauss(T)) > 0))

    def __call__(self, T):
        return ne_h_alpha(lorentz_from_voigt(self.fwhm, self.w_gauss(T)))

    def u_ln(self, T) -> float:
        T = float(np.ravel(T)[0])
        g = _dlog(lambda w: ne_h_alpha(lorentz_from_voigt(w, self.w_gauss(T))), self.fwhm)
        return float(math.hypot(g * self.u_rel_w, self.u_rel_rel))

    def sampler(self, rng, d):
        e1, e2 = rng.standard_normal(d), rng.standard_normal(d)
        fw = self.fwhm * np.exp(self.u_rel_w * e1)
        fac = np.exp(self.u_rel_rel * e2)

        def f(T):
            wl = lorentz_from_voigt(fw, self.w_gauss(T))
            return ne_h_alpha(np.maximum(wl, 1e-6 * self.fwhm)) * fac
        return f


class StarkLinesNe:
    """nₑ from Stark widths of lines with tabulated parameters (weighted mean in ln nₑ)."""

    name = "stark"

    def __init__(self, lines, mass_u: np.ndarray, w_instr_nm: float, settings, sa=None, idx=None):
        self.idx = np.asarray(idx)
        L = lines
        self.ids = L.line_id[self.idx]
        self.lines = list(self.ids)
        self.wl = L.wl[self.idx]
        self.mass = np.asarray(mass_u)[self.idx]
        self.fwhm = L.fwhm[self.idx]
        # El Sherbini et al. 2005: the Stark (Lorentzian) width of a self-absorbed line is
        # broadened as Δλ_obs = Δλ_thin · SA^α, α = −0.54; undone after the Voigt deconvolution
        self.sa_fac = np.ones(len(self.idx)) if sa is None else np.asarray(sa, float)[self.idx] ** (
            -EL_SHERBINI_ALPHA)
        self.w_instr = np.broadcast_to(np.asarray(w_instr_nm, float), L.wl.shape)[self.idx]
        self.w_ref = L.stark_w[self.idx]
        self.ne_ref = L.stark_ne[self.idx]
        self.t_ref = L.stark_t[self.idx]
        self.p = L.stark_p[self.idx]
        self.alpha = settings.stark_t_exponent
        self.u_w = settings.u_rel_fwhm
        self.u_par = settings.stark_param_u_rel

    @staticmethod
    def eligible(lines, w_instr_nm, T, mass_u) -> np.ndarray:
        L = lines
        ok = np.isfinite(L.stark_w) & (L.stark_w > 0) & np.isfinite(L.stark_ne) & (L.stark_ne > 0)
        ok &= np.isfinite(L.fwhm) & (L.fwhm > 0)
        wg = gaussian_fwhm_nm(L.wl, T, mass_u, w_instr_nm)
        with np.errstate(invalid="ignore"):
            ok &= lorentz_from_voigt(np.where(np.isfinite(L.fwhm), L.fwhm, 0.0), wg) > 0
        return ok

    def _each(self, T, fwhm, wref):
        T = np.atleast_1d(np.asarray(T, dtype=float))
        wg = gaussian_fwhm_nm(self.wl[None, :], T[:, None], self.mass[None, :], self.w_instr)
        wl = np.maximum(lorentz_from_voigt(fwhm, wg), 1e-9) * self.sa_fac
        t_ref = np.where(np.isfinite(self.t_ref), self.t_ref, T[:, None])
        return ne_stark_linear(wl, wref, self.ne_ref, T[:, None], t_ref, self.alpha, self.p)

    def _u_each(self, T):
        T = float(np.ravel(T)[0])
        g = np.array([
            _dlog(lambda w, j=j: self._each(np.array([T]), self._rep(j, w), self.w_ref)[0, j],
                  self.fwhm[j]) for j in range(len(self.fwhm))])
        return np.sqrt((g * self.u_w) ** 2 + self.u_par**2)

    def _rep(self, j, w):
        f = self.fwhm.copy()
        f[j] = w
        return f

    def each(self, T) -> tuple[np.ndarray, np.ndarray]:
        """Per-line nₑ and u(ln nₑ) at temperature T (scalar)."""
        return self._each(np.array([float(np.ravel(T)[0])]), self.fwhm, self.w_ref)[0], self._u_each(T)

    def _weights(self, T):
        # weights of the mean: computed once (they depend on T only through the small Doppler part)
        if getattr(self, "_wts", None) is None:
            self._wts = 1.0 / self._u_each(np.atleast_1d(T)[:1]) ** 2
        return self._wts

    def __call__(self, T):
        T = np.atleast_1d(np.asarray(T, dtype=float))
        ne = self._each(T, self.fwhm[None, :], self.w_ref[None, :])
        wts = self._weights(T)
        return np.exp(np.sum(np.log(ne) * wts, axis=1) / np.sum(wts))

    def u_ln(self, T) -> float:
        u = self._u_each(T)
        # Stark parameters of different lines come from different measurements: treated as
        # independent; the combined u is that of a weighted mean, not below the best line
        return float(math.sqrt(1.0 / np.sum(1.0 / u**2)))

    def sampler(self, rng, d):
        n = len(self.fwhm)
        fw = self.fwhm[None, :] * np.exp(self.u_w * rng.standard_normal((d, n)))
        wr = self.w_ref[None, :] * np.exp(self.u_par * rng.standard_normal((d, n)))
        wts = self._weights(np.array([10000.0]))

        def f(T):
            ne = self._each(T, fw, wr)
            return np.exp(np.sum(np.log(ne) * wts, axis=1) / np.sum(wts))
        return f


class FixedNe:
    """nₑ given in the method ([cf] ne_fixed_cm3, relative u ne_fixed_u_rel)."""

    name = "fixed"

    def __init__(self, ne: float, u_rel: float):
        self.ne = float(ne)
        self.u_rel = float(u_rel)
        self.lines: list[str] = []

    def __call__(self, T):
        return np.full(np.shape(np.atleast_1d(T)), self.ne)

    def u_ln(self, T) -> float:
        return self.u_rel

    def sampler(self, rng, d):
        v = self.ne * np.exp(self.u_rel * rng.standard_normal(d))
        return lambda T: v



__all__ = [
    "GGC2003_EXPONENT",
    "GGC2003_NE0_CM3",
    "GGC2003_W0_NM",
    "FixedNe",
    "HAlphaNe",
    "StarkLinesNe",
    "doppler_fwhm_nm",
    "gaussian_fwhm_nm",
    "h_alpha_width",
    "lorentz_from_voigt",
    "ne_h_alpha",
    "ne_stark_linear",
    "stark_width_linear",
    "voigt_fwhm",
]
