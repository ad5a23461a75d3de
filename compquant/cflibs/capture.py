"""Fraction of a line's area that window integration with side-band background measures.

Window integration (``compquant.lines.windows``) reports ``I = ∫_a^b y dλ − (b − a)·B``, with
B the background fitted to two side bands ``[a − g − s, a − g]`` and ``[b + g, b + g + s]``.
For a line of area A and unit-area profile φ centred in the window (half-width h = (b − a)/2)
on a flat background this is ``I = A·f`` with

    f = P(|X| ≤ h) − (h / s) · P(h + g ≤ |X| ≤ h + g + s)                        (1)

X distributed as φ (the least-squares line through two symmetric side bands has the mean over both bands,
P(band)/(2s), as its value at the centre; times the window width 2h).  For a Voigt profile — Gaussian part
(instrument function ⊕ Doppler) convolved with a Lorentzian (Stark) — the distribution of |X|
follows from the Lorentzian's closed-form CDF averaged over the Gaussian (Gauss–Hermite
quadrature, Abramowitz & Stegun 1964, 25.4.46):

    P(|X| ≤ x) = E_G[ F_L(x − G) − F_L(−x − G) ],   F_L(t) = ½ + arctan(t/γ)/π    (2)

γ = w_L/2, G ~ N(0, σ²), σ = w_G/(2√(2 ln 2)).  f depends on the line's width relative to
the window: with a fixed window it falls with wavelength when the instrumental FWHM is λ/R,
and with the Stark width, so the lines of one Boltzmann plot are measured with different
fractions — a tilt of the plot (a temperature error) unless each line is divided by its f.
"""

from __future__ import annotations

import math

import numpy as np

_GH_X, _GH_W = np.polynomial.hermite.hermgauss(160)
_GL_X, _GL_W = np.polynomial.legendre.leggauss(160)
_THETA = 0.5 * math.pi * _GL_X  # Gauss–Legendre nodes on (−π/2, π/2)
_THETA_W = 0.5 * math.pi * _GL_W
#: from this many Gaussian σ on P(|X| ≤ x) is taken by the Gauss–Hermite route (eq. (2)) for every γ
FAR_WING_SIGMA = 4.0


def abs_cdf(x, w_gauss, w_lorentz) -> np.ndarray:
    """P(|X| ≤ x) for a Voigt-distributed X (FWHMs ``w_gauss``, ``w_lorentz`` in nm), eq. (2).

    Two quadratures of the same convolution, each used where its integrand is smooth:
    γ ≥ σ — eq. (2), the Lorentzian CDF averaged over the Gaussian (Gauss–Hermite);
    γ < σ and x < 4σ (``FAR_WING_SIGMA``) — the Gaussian CDF Φ averaged over the Lorentzian with
    L = γ tan θ, θ uniform on (−π/2, π/2): P = (1/π)∫[Φ((x − γ tan θ)/σ) − Φ((−x − γ tan θ)/σ)] dθ
    (Gauss–Legendre); beyond 4σ eq. (2) again, whose integrand is smooth there.  Against
    scipy.special.voigt_profile integrated by scipy.integrate.quad, P(|X| > x) is within 1e-7 for
    0.16 ≤ γ/σ out to 40σ (the Legendre form alone in the far wing: errors up to 9e-4, 20 % of
    the tail at 36σ — enough to flip the sign of a far line's window response, §1b).
    Broadcasts over all arguments; either width may be 0 (not both).
    """
    from scipy.special import ndtr

    x, wg, wl = np.broadcast_arrays(np.asarray(x, float), np.asarray(w_gauss, float), np.asarray(w_lorentz, float))
    shape = x.shape
    x, wg, wl = x.ravel(), wg.ravel(), wl.ravel()
    sigma = wg / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gamma = 0.5 * wl
    out = np.empty(x.shape)
    # each element by the quadrature whose integrand is smooth there (only that one): beyond
    # FAR_WING_SIGMA σ the Lorentzian CDF's step at G = ±x lies in the Gaussian's far tail, while the
    # Gaussian CDF's step in θ (width ≈ σγ/x² near ±π/2) is narrower than the Legendre nodes there
    # (a pure Gaussian, γ = 0, stays with the Gaussian CDF, exact for it)
    lg = (gamma >= sigma) | ((x >= FAR_WING_SIGMA * sigma) & (gamma > 0))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        xx, sg, gm = x[lg, None], sigma[lg, None], gamma[lg, None]
        g = math.sqrt(2.0) * sg * _GH_X
        lor = (np.arctan((xx - g) / gm) - np.arctan((-xx - g) / gm)) / math.pi
        out[lg] = np.sum(lor * _GH_W, axis=-1) / math.sqrt(math.pi)
        xx, sg, gm = x[~lg, None], sigma[~lg, None], gamma[~lg, None]
        shift = gm * np.tan(_THETA)
        gau = ndtr((xx - shift) / sg) - ndtr((-xx - shift) / sg)
        out[~lg] = np.sum(gau * _THETA_W, axis=-1) / math.pi
    return np.clip(np.nan_to_num(out, nan=0.0), 0.0, 1.0).reshape(shape)


def window_capture_fraction(window_nm, side_nm, gap_nm, w_gauss, w_lorentz) -> np.ndarray:
    """Measured fraction f of a centred Voigt line's area, eq. (1) (all widths in nm).

    ``side_nm = 0`` (no side bands): f = P(|X| ≤ h).  Broadcasts over all arguments.
    """
    h = 0.5 * np.asarray(window_nm, float)
    s = np.asarray(side_nm, float)
    g = np.asarray(gap_nm, float)
    inside = abs_cdf(h, w_gauss, w_lorentz)
    band = abs_cdf(h + g + s, w_gauss, w_lorentz) - abs_cdf(h + g, w_gauss, w_lorentz)
    with np.errstate(divide="ignore", invalid="ignore"):
        bg = np.where(s > 0, h / np.where(s > 0, s, 1.0) * band, 0.0)
    return inside - bg


class WindowSet(dict):
    """``line_id → (window_nm, side_nm, gap_nm)``, with the run's pixel axis as ``wavelength``
    (nm; ``None`` when only a pitch was given) so that the blend correction
    (:mod:`compquant.cflibs.blends`) can place every window's side bands on the pixels the line
    pipeline uses."""

    wavelength: np.ndarray | None = None


def method_windows(method, wavelength) -> WindowSet:
    """``line_id → (window_nm, side_nm, gap_nm)`` of a method's window-integrated lines, as
    the line pipeline builds them (:func:`compquant.method.window_width_nm`, ``side_width_nm``).

    ``wavelength``: the run's wavelength axis (nm), or its pixel pitch (nm) — the default
    window widths are counted in pixels.  A :class:`WindowSet` (a dict) that keeps the axis."""
    from compquant.method import side_width_nm, window_width_nm

    w = np.asarray(wavelength, float)
    pitch_nm = float(np.median(np.diff(w))) if w.ndim and w.size > 1 else float(w)

    out = WindowSet()
    out.wavelength = w.copy() if w.ndim and w.size > 1 else None
    for ln in method.lines:
        if getattr(ln, "mode", "window") != "window":
            continue
        out[str(ln.line_id)] = (window_width_nm(ln, pitch_nm), side_width_nm(ln, pitch_nm), float(ln.gap_nm or 0.0))
    return out


__all__ = ["WindowSet", "abs_cdf", "method_windows", "window_capture_fraction"]
