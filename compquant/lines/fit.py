"""Least-squares profile fitting of groups of overlapping lines.

Model of a group of ``n`` lines over its fit window (models separate from the
fitter, as in astropy.modeling)::

    y(l) = sum_j A_j * V(l - c_j; sigma_j, gamma_j) + b0 + b1 (l - l_ref)

with ``V`` an area-normalised profile (so ``A_j`` is the integrated line
intensity, counts * nm):

* Voigt: ``scipy.special.voigt_profile`` (convolution of a Gaussian of
  standard deviation sigma and a Lorentzian of half width gamma);
* Lorentzian: ``gamma / (pi ((l - c)^2 + gamma^2))``;
* Gaussian: normal density of standard deviation sigma.

Widths are shared by the lines of a group (one instrument + Stark profile) or
free per line.  The fit is :func:`scipy.optimize.least_squares` (trust-region
reflective, centres bounded to ``c_table +- max_offset``).  The covariance is
``s^2 (J^T J)^-1`` with ``s^2 = RSS / (m - p)`` (Gauss-Newton approximation,
e.g. Press et al., Numerical Recipes, 3rd ed., section 15.5).

Voigt FWHM from the Olivero & Longbothum (1977) approximation
``f_V = 0.5346 f_L + sqrt(0.2166 f_L^2 + f_G^2)`` with ``f_G = 2 sigma sqrt(2 ln 2)`` and
``f_L = 2 gamma`` (J. Quant. Spectrosc. Radiat. Transfer 17, 233-236).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares
from scipy.special import voigt_profile

SIG2FWHM = 2.0 * np.sqrt(2.0 * np.log(2.0))


def profile(x, kind: str, sigma: float, gamma: float) -> np.ndarray:
    """Area-normalised line profile at offsets ``x`` (nm) from the centre (1/nm)."""
    if kind == "voigt":
        return voigt_profile(x, sigma, gamma)
    if kind == "lorentzian":
        return gamma / (np.pi * (x * x + gamma * gamma))
    if kind == "gaussian":
        return np.exp(-0.5 * (x / sigma) ** 2) / (sigma * np.sqrt(2 * np.pi))
    raise ValueError(f"unknown profile {kind!r}")


def fwhm_of(kind: str, sigma: float, gamma: float) -> float:
    """FWHM (nm) of the profile; Voigt by Olivero & Longbothum (1977)."""
    fg, fl = SIG2FWHM * sigma, 2.0 * gamma
    if kind == "gaussian":
        return fg
    if kind == "lorentzian":
        return fl
    return 0.5346 * fl + np.sqrt(0.2166 * fl * fl + fg * fg)


def widths_for_fwhm(kind: str, fwhm: float) -> tuple[float, float]:
    """(sigma, gamma) starting values giving ``fwhm``; Voigt with equal Gaussian/Lorentzian FWHM."""
    if kind == "gaussian":
        return fwhm / SIG2FWHM, 0.0
    if kind == "lorentzian":
        return 0.0, fwhm / 2.0
    f = fwhm / (0.5346 + np.sqrt(0.2166 + 1.0))
    return f / SIG2FWHM, f / 2.0


@dataclass
class GroupFit:
    """Result of fitting one group of lines."""

    areas: np.ndarray  # (n,) counts*nm
    cov_areas: np.ndarray  # (n, n) full covariance (all parameters free)
    var_areas_linear: np.ndarray  # (n,) variance with centres and widths held at the solution
    centres: np.ndarray  # (n,) nm
    fwhm: np.ndarray  # (n,) nm
    sigma: np.ndarray
    gamma: np.ndarray
    pixels: np.ndarray  # pixel indices of the fit window
    design: np.ndarray  # (m, n + 2): profile columns then background columns at the solution
    success: bool
    message: str
    rss: float
    dof: int

    def projection(self) -> np.ndarray:
        """(n, m) matrix giving each shot's areas with fixed shapes: ``A = P @ y[pixels]``."""
        return np.linalg.pinv(self.design)[: self.areas.size]


def _design(x, centres, sig, gam, kind, x_ref):
    cols = [profile(x - c, kind, s, g) for c, s, g in zip(centres, sig, gam)]
    cols.append(np.ones_like(x))
    cols.append(x - x_ref)
    return np.column_stack(cols)


def fit_group(
    wavelength,
    spectrum,
    centres0,
    *,
    lo_nm: float,
    hi_nm: float,
    kind: str = "voigt",
    shared_width: bool = True,
    fwhm0: float,
    max_offset_nm: float,
    max_fwhm_nm: float | None = None,
) -> GroupFit:
    """Fit ``len(centres0)`` lines of one group in ``[lo_nm, hi_nm]`` of ONE spectrum.

    Parameters
    ----------
    wavelength, spectrum : 1-D arrays (nm, counts)
    centres0 : expected centres (nm), each bounded to ``+- max_offset_nm``
    fwhm0 : starting FWHM (nm); widths are bounded to ``(1e-4 fwhm0, max_fwhm_nm]``
    """
    wl = np.asarray(wavelength, dtype=np.float64)
    y = np.asarray(spectrum, dtype=np.float64)
    pix = np.nonzero((wl >= lo_nm) & (wl <= hi_nm))[0]
    x = wl[pix]
    yy = y[pix]
    c0 = np.asarray(centres0, dtype=np.float64)
    n = c0.size
    model = _GroupModel(x, n, kind, shared_width, 0.5 * (lo_nm + hi_nm))
    p0, lb, ub = _start_and_bounds(model, yy, c0, fwhm0, max_offset_nm, max_fwhm_nm or 10.0 * fwhm0)
    scale = max(float(np.max(np.abs(yy))), 1e-300)

    def resid(p):
        return (model(p) - yy) / scale

    m = x.size
    npar = p0.size
    if m <= npar:
        raise ValueError("fit window holds fewer pixels than parameters")
    res = least_squares(
        resid, p0, bounds=(lb, ub), method="trf", x_scale="jac", xtol=1e-12, ftol=1e-12, gtol=1e-12, max_nfev=2000
    )
    p = res.x
    A, c, s, g, b = model.unpack(p)
    J = res.jac * scale
    r = model(p) - yy
    rss = float(r @ r)
    dof = m - npar
    s2 = rss / dof
    cov = np.linalg.pinv(J.T @ J) * s2
    G = _design(x, c, s, g, kind, model.x_ref)
    cov_lin = np.linalg.pinv(G.T @ G) * s2
    fw = np.array([fwhm_of(kind, s[j], g[j]) for j in range(n)])
    return GroupFit(
        areas=A.copy(),
        cov_areas=cov[:n, :n],
        var_areas_linear=np.diag(cov_lin)[:n].copy(),
        centres=c.copy(),
        fwhm=fw,
        sigma=s.copy(),
        gamma=g.copy(),
        pixels=pix,
        design=G,
        success=bool(res.success),
        message=str(res.message),
        rss=rss,
        dof=dof,
    )


class _GroupModel:
    """The profile sum of one group plus a straight background, over a parameter vector
    ``[areas (n), centres (n), sigma (nw, Gaussian part), gamma (nw, Lorentzian part), b0, b1]``
    (``nw`` = 1 with a shared width, else ``n``; sigma/gamma only where the profile has them)."""

    def __init__(self, x, n: int, kind: str, shared_width: bool, x_ref: float):
        self.x, self.n, self.kind, self.shared_width, self.x_ref = x, n, kind, shared_width, x_ref
        self.use_s = kind in ("voigt", "gaussian")
        self.use_g = kind in ("voigt", "lorentzian")
        self.nw = 1 if shared_width else n

    def unpack(self, p):
        """``(areas, centres, sigma, gamma, background)``, widths repeated per line."""
        n, nw = self.n, self.nw
        A = p[:n]
        c = p[n : 2 * n]
        k = 2 * n
        if self.use_s:
            s = p[k : k + nw]
            k += nw
        else:
            s = np.zeros(nw)
        if self.use_g:
            g = p[k : k + nw]
            k += nw
        else:
            g = np.zeros(nw)
        b = p[k : k + 2]
        if self.shared_width:
            s = np.repeat(s, n)
            g = np.repeat(g, n)
        return A, c, s, g, b

    def __call__(self, p):
        A, c, s, g, b = self.unpack(p)
        x = self.x
        out = b[0] + b[1] * (x - self.x_ref)
        for j in range(self.n):
            out = out + A[j] * profile(x - c[j], self.kind, s[j], g[j])
        return out


def _start_and_bounds(model: _GroupModel, yy, c0, fwhm0: float, max_offset_nm: float, max_fwhm_nm: float):
    """Starting vector and bounds ``(p0, lb, ub)``: areas and background by linear least squares at
    the starting shapes, centres within ``+- max_offset_nm``, widths in ``(1e-4 fwhm0, max_fwhm_nm]``."""
    n, nw, kind = model.n, model.nw, model.kind
    s0, g0 = widths_for_fwhm(kind, fwhm0)
    wmin = 1e-4 * fwhm0
    G0 = _design(model.x, c0, np.full(n, s0), np.full(n, g0), kind, model.x_ref)
    lin0, *_ = np.linalg.lstsq(G0, yy, rcond=None)
    p0 = [lin0[:n], c0]
    lb = [np.full(n, -np.inf), c0 - max_offset_nm]
    ub = [np.full(n, np.inf), c0 + max_offset_nm]
    if model.use_s:
        p0.append(np.full(nw, s0))
        lb.append(np.full(nw, wmin))
        ub.append(np.full(nw, max_fwhm_nm / SIG2FWHM))
    if model.use_g:
        p0.append(np.full(nw, g0))
        lb.append(np.full(nw, wmin))
        ub.append(np.full(nw, max_fwhm_nm / 2.0))
    p0.append(lin0[n:])
    lb.append(np.full(2, -np.inf))
    ub.append(np.full(2, np.inf))
    p0 = np.concatenate(p0)
    lb = np.concatenate(lb)
    ub = np.concatenate(ub)
    p0[~np.isfinite(p0)] = 0.0
    fin = np.isfinite(lb) & np.isfinite(ub)
    eps = 1e-9 * (ub[fin] - lb[fin])
    p0[fin] = np.clip(p0[fin], lb[fin] + eps, ub[fin] - eps)
    return p0, lb, ub


def fit_group_fixed(
    wavelength, spectrum, centres, *, lo_nm: float, hi_nm: float, kind: str = "voigt", fwhm: float
) -> GroupFit:
    """Linear least-squares areas with centres and widths FIXED (the profile shapes known).

    Used when a group is not detected: a free fit of noise has no stable centres or
    widths, while fixed shapes give unbiased areas (about zero for an absent line) with
    the covariance ``s^2 (G^T G)^-1`` of the linear model.
    """
    wl = np.asarray(wavelength, dtype=np.float64)
    y = np.asarray(spectrum, dtype=np.float64)
    pix = np.nonzero((wl >= lo_nm) & (wl <= hi_nm))[0]
    x, yy = wl[pix], y[pix]
    c = np.asarray(centres, dtype=np.float64)
    n = c.size
    s0, g0 = widths_for_fwhm(kind, fwhm)
    sig, gam = np.full(n, s0), np.full(n, g0)
    G = _design(x, c, sig, gam, kind, 0.5 * (lo_nm + hi_nm))
    if x.size <= G.shape[1]:
        raise ValueError("fit window holds fewer pixels than parameters")
    coef, *_ = np.linalg.lstsq(G, yy, rcond=None)
    r = G @ coef - yy
    rss = float(r @ r)
    dof = x.size - G.shape[1]
    cov = np.linalg.pinv(G.T @ G) * (rss / dof)
    fw = np.full(n, fwhm_of(kind, s0, g0))
    return GroupFit(
        areas=coef[:n].copy(),
        cov_areas=cov[:n, :n].copy(),
        var_areas_linear=np.diag(cov)[:n].copy(),
        centres=c.copy(),
        fwhm=fw,
        sigma=sig,
        gamma=gam,
        pixels=pix,
        design=G,
        success=True,
        message="fixed shapes (group not detected)",
        rss=rss,
        dof=dof,
    )
