"""Spectral-interference (blend) correction of window-integrated lines (docs/calibration-free.md §1b).

Window integration (``compquant.lines.windows``) reports the net area ``N = ∫_a^b y dλ − (b − a)·B``
of a window [a, b] = [λ_j − h, λ_j + h] less a straight background B fitted to two side bands
[a − g − s, a − g] and [b + g, b + g + s].  Every line k of the plasma whose profile reaches the
window or a side band adds to N: for a line of area A_k and unit-area profile φ_k centred at λ_k
(offset δ = λ_k − λ_j from the window centre)

    N_j = Σ_k A_k c_jk,
    c_jk = P_k(a ≤ X ≤ b) − (h/s)·[P_k(a − g − s ≤ X ≤ a − g) + P_k(b + g ≤ X ≤ b + g + s)]      (1)

(X distributed as φ_k; the least-squares line through two symmetric side bands has the mean over
both bands as its value at the window centre, times the window width 2h — the same geometry as
:func:`compquant.cflibs.capture.window_capture_fraction`, which is c_jj).  A line inside a side
band (c < 0) lowers N through the background; one inside the window (c > 0) raises it.  When the
run's pixel axis is known, c is taken on the pixels the measurement uses (eq. (1′),
:func:`pixel_response`): c_jk = Σ_p w_p v_p with the pipeline's window weights w_p and v_p the
pixel mean of line k's profile — the pipeline's side bands are continuous intervals of the
pixel interpolant (so the pixel form differs from eq. (1) by the interpolation, most for a line
near a band edge).

After a first plasma solution (T, nₑ and one intercept per element of the Saha–Boltzmann fit) the
area of every line of the solution's elements (stages I and II of the shipped line list,
:mod:`compquant.atomic`, not only the method's lines) is predicted from the fit itself,

    ln Â_k = q_el − E_k/kT − ln(λ_k / g_k A_k)                                   (neutral)
    ln Â_k = q_el − (E_k + E_ion)/kT + ln(2 (2π mₑ kT/h²)^{3/2} / nₑ) + ΔE/kT − ln(λ_k / g_k A_k)   (ion)

(Aragón & Aguilera 2008; the ordinates of :mod:`compquant.cflibs.solver`), with the profile
model of the window capture fraction: Gaussian part instrument ⊕ Doppler
(:func:`compquant.cflibs.electron_density.gaussian_fwhm_nm`), Lorentzian part the Stark FWHM at nₑ
(line data, else ``stark_fallback_fwhm_nm``).  The predicted interference of window j is

    Δ_j = Σ_{k≠j} Â_k c_jk,   u(Δ_j)² = Σ_{k≠j} (Â_k c_jk)² (u_A,k² + u_b²)          (2)

with u_A,k the relative u of line k's A_ki grade and u_b = ``[cf] blend_u_rel`` the stated
relative u of the model's prediction (T, composition, widths).  The line's corrected area is

    I_j = (N_j − Δ_j) / c_jj,   u(I_j)² = (u(N_j)² + u(Δ_j)²) / c_jj²                     (3)

so the Paule–Mandel weights and the Monte Carlo see the correction's uncertainty.  The predicted
self share

    σ_j = Â_j c_jj / (Â_j c_jj + Σ_{k≠j} |Â_k c_jk|)                                         (4)

decides whether a line is usable: below ``[cf] blend_min_self_share`` the line is mostly
someone else's and is dropped (reported in ``excluded_lines``).  The solution is repeated with the
corrected areas and the prediction redone from the original N_j until no corrected area moves by
more than ``[cf] blend_tolerance`` (relative) or ``blend_max_passes`` passes have run — the
iterative interference correction of CF-LIBS practice (Tognoni et al. 2010 review §4).

Self-absorption modes ``curve_of_growth`` and ``columnar`` (eq. (5)).  There the solution is a
homogeneous slab in LTE of length L (given or fitted) whose emergent spectral radiance is
S(1 − e^{−τ(λ)}) (the formal solution of the transfer equation for a uniform slab; Cowan & Dieke
1948, Rev. Mod. Phys. 20, 418; the curve-of-growth model of :mod:`compquant.cflibs.selfabs`),
τ(λ) = τ₀ φ(λ)/φ₀ with φ the Voigt of the absorbing atoms (Doppler ⊕ Stark, no instrument) and τ₀
from :func:`compquant.cflibs.selfabs.tau0_slab` at the solution's T, nₑ, absolute species
densities (charge neutrality) and L.  A strong interfering line is then itself optically thick
and its thin area Â_k overstates what reaches the window; but only its core is absorbed, its
wings (τ ≪ 1) arrive whole.  Writing the emergent profile as the thin one less an absorbed part,

    Â_k φ_k(μ)(1 − e^{−τ})/τ = Â_k [φ_k(μ) − a_k(μ)],   a_k = (φ₀/τ₀)(τ − 1 + e^{−τ}),
    ∫ a_k dμ = 1 − SA_k,
    c_jk → c_jk − c^abs_jk,   c^abs_jk = ∫ a_k(μ) K_j(μ) dμ                                    (5)

with K_j(μ) the window's net response (eq. (1) or (1′)) to light emitted at μ and spread by the
instrument's Gaussian alone (:func:`instrument_kernel`).  a_k is taken on the sinh grid of
:func:`compquant.cflibs.selfabs.sa_factor` (:func:`absorbed_part`), so Σ a_k = 1 − SA_k of the fit
itself and each line's total predicted area is Â_k·SA_k.  The measured line's own predicted area
in σ_j (eq. (4)) is Â_j SA_j c_jj.  Each pass re-runs the whole self-absorption fit on the
corrected areas (:meth:`BlendCorrection.apply_blend_correction_sa`).

Mutual absorption of coincident lines (eq. (6)).  Eq. (5) self-absorbs each interfering line on its
own; lines whose profiles overlap share the slab, where opacities add and the emergent radiance is
S(1 − e^{−Σ_k τ_k}) (one source function S for all lines at the slab's T in LTE; the formal
solution of the transfer equation for a homogeneous slab, Rybicki & Lightman 1979, §1.4; the
slab model of the self-absorption literature, Bulajic et al. 2002, El Sherbini et al. 2005).  The
part of window j's signal that is not line j's own (the line alone in the slab, which the fit
models) is then

    Δ_j(λ) = S[(1 − e^{−Σ_k τ_k}) − (1 − e^{−τ_j})] = S e^{−τ_j}(1 − e^{−Σ_{k≠j} τ_k}),
    Δ_j = ∫ Δ_j(λ) K_j(λ) dλ                                                                      (6)

(K_j as in eq. (5)).  It is applied to the group of line j and the interferers k within
r_j + r_k of it, r the distance beyond which a line's τ stays below ``MUTUAL_TAU_MIN`` = 0.01
(:func:`optical_reach`); then at every λ at least one line of a pair left to eq. (5) has τ < 0.01,
and eq. (5)'s error for that pair, −∫S(1 − e^{−τ_k})(1 − e^{−τ_l}) K_j, is at most 1 % of their
emergent areas (times |K_j|).  Δ_j(λ) is split among the group's interferers by their share of the
opacity at λ, τ_k/Σ_{i≠j} τ_i (for u(Δ_j) and σ_j), with each line's thin emission Â_k φ_k in
place of S τ_k (:func:`mutual_absorbed`); for τ_j → 0 and one interferer it is eq. (5).  Where no
interferer lies within reach of the window's own line eq. (5) stands unchanged; overlaps of
interferers with each other away from line j are left to eq. (5).  Not in ``reference_line``
mode: its SA factors are ratios to a reference line (Sun & Yu 2009), with no slab, τ₀ or length
from which another line's self-absorption could be predicted.

Units: wavelengths and widths nm; areas in the line table's intensity units; energies eV; T K;
nₑ cm⁻³.

References
----------
.. [1] A. Ciucci et al., Appl. Spectrosc. 53 (1999) 960 (calibration-free LIBS).
.. [2] E. Tognoni, G. Cristoforetti, S. Legnaioli, V. Palleschi, Spectrochim. Acta B 65 (2010) 1
   (calibration-free LIBS review: line selection, interferences).
.. [3] C. Aragón, J. A. Aguilera, Spectrochim. Acta B 63 (2008) 893 (Saha–Boltzmann plot).
.. [4] M. Abramowitz, I. A. Stegun, Handbook of Mathematical Functions (1964), 25.4.46
   (Gauss–Hermite quadrature of the Voigt CDF, :func:`compquant.cflibs.capture.abs_cdf`).
.. [5] R. D. Cowan, G. H. Dieke, Rev. Mod. Phys. 20 (1948) 418 (self-absorption of spectrum lines:
   the emergent intensity of a uniform slab, S(1 − e^{−τ})).
.. [6] G. B. Rybicki, A. P. Lightman, Radiative Processes in Astrophysics (Wiley, 1979), §1.4
   (formal solution of the transfer equation: I = S(1 − e^{−τ}) for a uniform slab; opacities add).
.. [7] D. Bulajic et al., Spectrochim. Acta B 57 (2002) 339; A. M. El Sherbini et al.,
   Spectrochim. Acta B 60 (2005) 1573 (the homogeneous LTE slab of self-absorption, as
   :mod:`compquant.cflibs.selfabs`).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.cflibs.capture import abs_cdf
from compquant.cflibs.electron_density import gaussian_fwhm_nm
from compquant.errors import PhysicsError
from compquant.plasma.constants import KB_EV, LN_SAHA_PREFACTOR
from compquant.plasma.profiles import voigt_fwhm

#: lines farther than this beyond a window's outer side-band edge are not counted (nm): at
#: 0.5 nm a Lorentzian of FWHM 0.02 nm puts 0.6 % of its area beyond the offset, spread thinly
SEARCH_MARGIN_NM = 0.5
#: lines predicted weaker than this fraction of the measured line's own window signal are not
#: counted (a thousand of them in one window could move it by 1 %; the iron-group spectra hold
#: thousands of such lines near every window)
NEGLIGIBLE_AREA = 1e-5
#: optical depth below which a line is taken not to absorb its neighbours' light (eq. (6)): lines
#: farther apart than the sum of their reaches at this τ are left to eq. (5), which then errs by at
#: most this fraction of their emergent areas
MUTUAL_TAU_MIN = 0.01
# nodes (in half-widths) on which optical_reach looks for τ < MUTUAL_TAU_MIN
_REACH_GRID = np.geomspace(1e-2, 1e6, 321)


def voigt_cdf(x, w_gauss, w_lorentz) -> np.ndarray:
    """P(X ≤ x) of a centred Voigt (FWHMs in nm): ½ ± ½·P(|X| ≤ |x|) by symmetry.

    ``P(|X| ≤ x)`` is :func:`compquant.cflibs.capture.abs_cdf` (eq. (2) there).  Broadcasts.
    """
    x = np.asarray(x, float)
    return 0.5 + 0.5 * np.sign(x) * abs_cdf(np.abs(x), w_gauss, w_lorentz)


def window_response(offset_nm, window_nm, side_nm, gap_nm, w_gauss, w_lorentz) -> np.ndarray:
    """c of eq. (1): net window signal of a unit-area Voigt line at ``offset_nm`` from the window
    centre (window width ``window_nm`` = 2h, side bands ``side_nm`` = s wide ``gap_nm`` = g away).

    At offset 0 this is :func:`compquant.cflibs.capture.window_capture_fraction`.  Without side
    bands (s = 0) the background term is 0.  All widths nm; broadcasts over all arguments.
    """
    d = np.asarray(offset_nm, float)
    h = 0.5 * np.asarray(window_nm, float)
    s = np.asarray(side_nm, float)
    g = np.asarray(gap_nm, float)

    def prob(lo, hi):  # P(lo ≤ X + d ≤ hi) for the line centred at d
        return voigt_cdf(hi - d, w_gauss, w_lorentz) - voigt_cdf(lo - d, w_gauss, w_lorentz)

    inside = prob(-h, h)
    bands = prob(-h - g - s, -h - g) + prob(h + g, h + g + s)
    with np.errstate(divide="ignore", invalid="ignore"):
        bg = np.where(s > 0, h / np.where(s > 0, s, 1.0) * bands, 0.0)
    return inside - bg


def pixel_window_weights(axis, centre_nm, window_nm, side_nm, gap_nm):
    """The line pipeline's weights of one window on the run's pixels (``pixels``, ``weights``):
    N = Σ_p w_p y_p (:func:`compquant.lines.windows.build_window_weights` — interpolant integral
    over the window less the least-squares line over the side bands' interpolant, integrated over
    it)."""
    from compquant.lines.windows import build_window_weights, window_geometry

    W = build_window_weights(axis, [window_geometry(float(centre_nm), float(window_nm), float(side_nm),
                                                    float(gap_nm))])
    return W.pixels[0], W.weights[0]


def pixel_response(axis, pixels, weights, line_nm, w_gauss, w_lorentz) -> np.ndarray:
    """c of eq. (1) on the pixels the measurement uses: c = Σ_p w_p v_p, with v_p the mean over
    pixel p of a unit-area Voigt line at ``line_nm`` (nm⁻¹),

        v_p = [F(e_p⁺ − λ_k) − F(e_p⁻ − λ_k)] / (e_p⁺ − e_p⁻),

    F the Voigt CDF (:func:`voigt_cdf`) and e_p± the pixel edges midway between pixel centres (the
    ends mirrored; as :attr:`compquant.plasma.forward.Instrument.pixel_edges`).  Unlike the
    continuous geometry of eq. (1), the pixels are the run's: the line's profile is averaged over
    each pixel and the side bands are intervals of the pixel interpolant, which matters for a line
    near a band edge.  ``line_nm``,
    ``w_gauss``, ``w_lorentz``: (m,) arrays; returns (m,).
    """
    x = np.asarray(axis, float)
    p = np.asarray(pixels, int)
    lo = np.where(p > 0, 0.5 * (x[np.maximum(p - 1, 0)] + x[p]), x[0] - 0.5 * (x[1] - x[0]))
    hi = np.where(p < x.size - 1, 0.5 * (x[np.minimum(p + 1, x.size - 1)] + x[p]), x[-1] + 0.5 * (x[-1] - x[-2]))
    lam = np.asarray(line_nm, float)[:, None]
    wg = np.asarray(w_gauss, float)[:, None]
    wl = np.asarray(w_lorentz, float)[:, None]
    edges, inv = np.unique(np.concatenate([lo, hi]), return_inverse=True)  # neighbours share an edge
    F = voigt_cdf(edges[None, :] - lam, wg, wl)
    v = (F[:, inv[p.size:]] - F[:, inv[:p.size]]) / (hi - lo)[None, :]
    return v @ np.asarray(weights, float)


def absorbed_part(tau0, w_gauss_abs, w_lorentz):
    """The absorbed part of self-absorbed lines as quadrature nodes (eq. (5)): ``(x, a)``, each
    (m, 481), with x the offsets from the line centre (nm) and a the weights (dimensionless) of

        a(x) = (φ₀/τ₀)·(τ(x) − 1 + e^{−τ(x)}),   τ(x) = τ₀ φ(x)/φ₀,   ∫ a dx = 1 − SA

    on the sinh grid of :func:`compquant.cflibs.selfabs.sa_factor` (the same profile φ — the Voigt
    of the absorbing atoms, Doppler ⊕ Stark FWHMs ``w_gauss_abs``, ``w_lorentz`` in nm — the same
    nodes and steps), so Σ a = 1 − SA of the fit to rounding.  Rows with τ₀ ≤ 10⁻⁹ are 0 (SA = 1).
    """
    from compquant.cflibs.selfabs import _XS, _profile_on_grid

    t0 = np.asarray(tau0, float)
    wg = np.maximum(np.asarray(w_gauss_abs, float) * np.ones_like(t0), 1e-12)
    wl = np.maximum(np.asarray(w_lorentz, float) * np.ones_like(t0), 0.0)
    phi, dx, phi0 = _profile_on_grid(wg, wl)
    scale = 0.5 * (0.5346 * wl + np.sqrt(0.2166 * wl**2 + wg**2))  # as selfabs._profile_on_grid
    x = _XS[None, :] * scale[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        tau = t0[:, None] * phi / phi0[:, None]
        a = np.where(t0[:, None] > 1e-9, (phi0 / t0)[:, None] * (tau + np.expm1(-tau)) * dx, 0.0)
    return x, a


def _gauss_cdf(x, sigma):
    from scipy.special import ndtr

    with np.errstate(divide="ignore", invalid="ignore"):
        return ndtr(x / sigma)


def instrument_kernel(mu_nm, centre_nm, geometry, w_instr, axis=None, pixels=None, weights=None) -> np.ndarray:
    """K(μ) of eq. (5): net window signal of unit-area light emitted at wavelength ``mu_nm`` (any
    shape) and spread by the instrument's Gaussian of FWHM ``w_instr`` (broadcast with ``mu_nm``)
    — eq. (1) for a Gaussian of the instrument width alone, continuous geometry, or with ``axis``
    and the window's ``pixels``/``weights`` eq. (1′) (pixel means of the Gaussian, as
    :func:`pixel_response`).  One window (``centre_nm``, ``geometry`` = (window, side, gap) nm)."""
    mu = np.asarray(mu_nm, float)
    fwhm = np.maximum(np.broadcast_to(np.asarray(w_instr, float), mu.shape), 1e-9)
    sig = fwhm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    if axis is None:
        window, side, gap = (float(v) for v in geometry)
        h, d = 0.5 * window, mu - float(centre_nm)

        def prob(lo, hi):
            return _gauss_cdf(hi - d, sig) - _gauss_cdf(lo - d, sig)

        out = prob(-h, h)
        if side > 0:
            out = out - h / side * (prob(-h - gap - side, -h - gap) + prob(h + gap, h + gap + side))
        return out
    x = np.asarray(axis, float)
    p = np.asarray(pixels, int)
    lo = np.where(p > 0, 0.5 * (x[np.maximum(p - 1, 0)] + x[p]), x[0] - 0.5 * (x[1] - x[0]))
    hi = np.where(p < x.size - 1, 0.5 * (x[np.minimum(p + 1, x.size - 1)] + x[p]), x[-1] + 0.5 * (x[-1] - x[-2]))
    edges, inv = np.unique(np.concatenate([lo, hi]), return_inverse=True)
    m, s = mu.reshape(-1, 1), sig.reshape(-1, 1)
    F = _gauss_cdf(edges[None, :] - m, s)
    v = (F[:, inv[p.size:]] - F[:, inv[:p.size]]) / (hi - lo)[None, :]
    return (v @ np.asarray(weights, float)).reshape(mu.shape)


def blend_terms(centre_nm, geometry, cand_wl, cand_area, cand_wg, cand_wl_lorentz, cand_u_rel, exclude=None,
                axis=None, pixel_weights=None, min_area=None, absorption=None):
    """Δ, u(Δ) and Σ|Â c| of eq. (2) for each window from its candidate interfering lines.

    Parameters
    ----------
    centre_nm : (n,) array
        Window centres (the measured lines' wavelengths), nm.
    geometry : (n, 3) array
        ``(window_nm, side_nm, gap_nm)`` of each window.
    cand_wl, cand_area, cand_wg, cand_wl_lorentz, cand_u_rel : (m,) arrays
        The interfering lines: wavelength (nm), predicted area Â, Gaussian and Lorentzian FWHM
        (nm), relative standard u of Â (eq. (2): √(u_A² + u_b²)).
    exclude : (n,) array of int, optional
        Index of the candidate that is window j's own line (−1: none), left out of window j.
    axis, pixel_weights : optional
        The run's pixel axis (nm) and, per window, its ``(pixels, weights)``
        (:func:`pixel_window_weights`): c is then :func:`pixel_response`, else the continuous
        eq. (1) (:func:`window_response`).

    min_area : (n,) array, optional
        Candidates with a smaller predicted area are left out of window j (negligible lines).
    absorption : tuple, optional
        ``(tau0, w_gauss_abs, w_instr)`` per candidate: peak optical depth of the slab, Doppler
        FWHM of the absorbing atoms and instrument FWHM (nm).  Each (window, candidate) pair then
        responds with c_jk − c^abs_jk of eq. (5) (``cand_area`` stays the optically thin area;
        the absorbed part is taken for pairs whose absorbed area (1 − SA)·Â reaches ``min_area``).
        Without it (the thin modes) c_jk alone.  With ``exclude`` too, the pairs of a window whose own
        line (a candidate with its τ₀) shares the slab with them take eq. (6) instead.

    Returns ``(delta, u_delta, abs_sum)``, each (n,).  All (window, candidate) pairs within
    reach are evaluated in one vectorised call.
    """
    centre = np.asarray(centre_nm, float)
    geo = np.asarray(geometry, float).reshape(-1, 3)
    n = centre.size
    cand_wl = np.asarray(cand_wl, float)
    reach = 0.5 * geo[:, 0] + geo[:, 1] + geo[:, 2] + SEARCH_MARGIN_NM
    order = np.argsort(cand_wl)
    sw = cand_wl[order]
    lo = np.searchsorted(sw, centre - reach, side="left")
    hi = np.searchsorted(sw, centre + reach, side="right")
    counts = hi - lo
    jj = np.repeat(np.arange(n), counts)
    kk = order[np.concatenate([np.arange(a, b) for a, b in zip(lo, hi)])] if counts.sum() else np.zeros(0, int)
    if exclude is not None:
        keep = kk != np.asarray(exclude)[jj]
        jj, kk = jj[keep], kk[keep]
    if min_area is not None:
        keep = np.asarray(cand_area, float)[kk] >= np.asarray(min_area, float)[jj]
        jj, kk = jj[keep], kk[keep]
    wg_all, wl_all = np.asarray(cand_wg, float), np.asarray(cand_wl_lorentz, float)
    if axis is None:
        c = window_response(cand_wl[kk] - centre[jj], geo[jj, 0], geo[jj, 1], geo[jj, 2], wg_all[kk], wl_all[kk])
    else:
        # on the pixels for lines whose core reaches the window or a band (centre within 5 FWHM of
        # the outer band edge); the far wings of the others are smooth on the pixel scale
        off = cand_wl[kk] - centre[jj]
        outer = 0.5 * geo[jj, 0] + geo[jj, 1] + geo[jj, 2]
        near = np.abs(off) <= outer + 5.0 * (wg_all[kk] + wl_all[kk])
        c = np.zeros(kk.size)
        far = ~near
        if np.any(far):
            c[far] = window_response(off[far], geo[jj[far], 0], geo[jj[far], 1], geo[jj[far], 2], wg_all[kk[far]],
                                     wl_all[kk[far]])
        for j in np.unique(jj[near]):
            sel = near & (jj == j)
            px, wt = pixel_weights[j]
            c[sel] = pixel_response(axis, px, wt, cand_wl[kk[sel]], wg_all[kk[sel]], wl_all[kk[sel]])
    if absorption is not None:
        c_thin = c
        c = c - _absorbed_response(centre, geo, jj, kk, cand_wl, np.asarray(cand_area, float), wl_all, absorption,
                                   axis, pixel_weights, min_area)
        if exclude is not None:  # eq. (6): interferers that share the slab with a window's own line
            _mutual_absorption(c, c_thin, centre, geo, jj, kk, np.asarray(exclude, int), cand_wl,
                               np.asarray(cand_area, float), wl_all, absorption, axis, pixel_weights)
    contrib = np.asarray(cand_area, float)[kk] * c
    delta = np.bincount(jj, contrib, minlength=n)
    u2 = np.bincount(jj, (contrib * np.asarray(cand_u_rel, float)[kk]) ** 2, minlength=n)
    absum = np.bincount(jj, np.abs(contrib), minlength=n)
    return delta, np.sqrt(u2), absum


def _absorbed_response(centre, geo, jj, kk, cand_wl, area, wl_all, absorption, axis, pixel_weights, min_area):
    """c^abs_jk of eq. (5) for the pairs (jj, kk) (0 where negligible): Σ_m a_km K_j(λ_k + x_km)."""
    tau0, wg_abs, w_ins = (np.asarray(v, float) * np.ones(cand_wl.size) for v in absorption)
    out = np.zeros(kk.size)
    # 1 − SA ≤ min(1, τ₀/2) (1 − e^{−τ} ≥ τ − τ²/2 and φ ≤ φ₀): pairs whose absorbed area cannot
    # reach min_area are not evaluated
    cand = tau0[kk] > 1e-9
    if min_area is not None:
        cand &= area[kk] * np.minimum(1.0, 0.5 * tau0[kk]) >= np.asarray(min_area, float)[jj]
    thick = np.unique(kk[cand])
    if thick.size == 0:
        return out
    x, a = absorbed_part(tau0[thick], wg_abs[thick], wl_all[thick])
    lost = area[thick] * a.sum(axis=1)  # (1 − SA)·Â: the area the slab absorbs
    row = np.full(cand_wl.size, -1)
    row[thick] = np.arange(thick.size)
    sel = np.nonzero(cand)[0]
    if min_area is not None:
        sel = sel[lost[row[kk[sel]]] >= np.asarray(min_area, float)[jj[sel]]]
    keep = a > 1e-14 * a.max(axis=1, keepdims=True)  # nodes that carry weight (at most 481·10⁻¹⁴ of it lost)
    for j in np.unique(jj[sel]):
        pairs = sel[jj[sel] == j]
        r = row[kk[pairs]]
        mu = cand_wl[kk[pairs], None] + x[r]
        px, wt = (None, None) if axis is None else pixel_weights[j]
        K = np.zeros(mu.shape)
        K[keep[r]] = instrument_kernel(mu[keep[r]], centre[j], geo[j], np.broadcast_to(w_ins[kk[pairs], None],
                                                                                        mu.shape)[keep[r]],
                                       axis=axis, pixels=px, weights=wt)
        out[pairs] = np.sum(a[r] * K, axis=1)
    return out


def optical_reach(tau0, w_gauss_abs, w_lorentz, tau_min=MUTUAL_TAU_MIN) -> np.ndarray:
    """Distance (nm) from a line's centre beyond which its slab optical depth stays below ``tau_min``:
    the smallest node x of a geometric grid (ratio 1.06, 10⁻² to 10⁶ half-widths) with
    τ₀ φ(x)/φ(0) < ``tau_min`` (φ the absorbing atoms' Voigt, FWHMs ``w_gauss_abs``, ``w_lorentz``;
    monotone in |x|, so the true distance is at most this node, and at least 1/1.06 of it).  0 where
    τ₀ < ``tau_min`` (τ < ``tau_min`` everywhere).  Broadcasts to 1-D."""
    from scipy.special import voigt_profile

    t0 = np.atleast_1d(np.asarray(tau0, float))
    wg = np.maximum(np.asarray(w_gauss_abs, float) * np.ones_like(t0), 1e-12)
    wl = np.maximum(np.asarray(w_lorentz, float) * np.ones_like(t0), 0.0)
    out = np.zeros(t0.size)
    thick = t0 >= tau_min
    if not np.any(thick):
        return out
    sig = wg[thick] / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    gam = 0.5 * wl[thick]
    hw = 0.5 * voigt_fwhm(wg[thick], wl[thick])  # Voigt HWHM (Olivero & Longbothum)
    x = hw[:, None] * _REACH_GRID[None, :]
    ratio = voigt_profile(x, sig[:, None], gam[:, None]) / voigt_profile(0.0, sig, gam)[:, None]
    below = t0[thick, None] * ratio < tau_min
    first = np.where(below.any(axis=1), np.argmax(below, axis=1), x.shape[1] - 1)
    out[thick] = x[np.arange(first.size), first]
    return out


def mutual_absorbed(grid, centres, tau0, w_gauss_abs, w_lorentz, area, own=0):
    """Absorbed part a_k(λ) (area units, on ``grid``) of each line k ≠ ``own`` of a group of lines that
    share one homogeneous slab with line ``own`` (eq. (6)): rows for the lines other than ``own``, in
    their order.

    With e_k = Â_k φ_k(λ) = S_k τ_k(λ) the optically thin emission (φ_k the absorbing atoms' unit-area
    Voigt, τ_k = τ₀_k φ_k/φ_k(0)), T = Σ τ_k and h(τ) = (1 − e^{−τ})/τ, the slab's emergent
    radiance is Σ_k e_k h(T) (= S(1 − e^{−T}) for one source function S) and that of line ``own``
    alone e_own h(τ_own); the difference, the other lines' share of the window, is split among them
    by their share of the opacity at λ, τ_k/(T − τ_own):

        D_k = τ_k/(T − τ_own) · [Σ_i e_i h(T) − e_own h(τ_own)]  → S e^{−τ_own}(1 − e^{−Σ_{i≠own} τ_i}) τ_k/Σ,
        a_k = e_k − D_k

    For τ_own → 0 and one line k this is eq. (5)'s Â_k a_k.  Widths in nm, ``area`` the thin Â."""
    from scipy.special import voigt_profile

    lam = np.asarray(grid, float)[None, :]
    sig = (np.asarray(w_gauss_abs, float) / (2.0 * math.sqrt(2.0 * math.log(2.0))))[:, None]
    gam = 0.5 * np.asarray(w_lorentz, float)[:, None]
    phi = voigt_profile(lam - np.asarray(centres, float)[:, None], sig, gam)
    tau = np.asarray(tau0, float)[:, None] * phi / voigt_profile(0.0, sig, gam)
    e = np.asarray(area, float)[:, None] * phi

    def h(t):
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(t > 1e-12, -np.expm1(-t) / np.where(t > 1e-12, t, 1.0), 1.0 - 0.5 * t)

    T = tau.sum(axis=0)
    others = e.sum(axis=0) * h(T) - e[own] * h(tau[own])
    rest = np.delete(np.arange(tau.shape[0]), own)
    R = T - tau[own]
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(R > 0, tau[rest] / np.where(R > 0, R, 1.0), 0.0)
    return e[rest] - share * others[None, :]


def _mutual_absorption(c, c_thin, centre, geo, jj, kk, own, cand_wl, area, wl_all, absorption, axis, pixel_weights):
    """Eq. (6) in place: for each window j whose own line (candidate ``own[j]``) shares the slab with
    interferers — |λ_k − λ_j| < r_j + r_k, r the :func:`optical_reach` at τ = ``MUTUAL_TAU_MIN`` — the
    c_jk of those pairs become c_jk(thin) − ∫ a_k K_j dλ / Â_k with a_k of :func:`mutual_absorbed`,
    integrated by Simpson's rule (uneven nodes) on the union of the group's sinh grids (those of
    :func:`absorbed_part`) and their midpoints, where K_j reaches (the window and its side bands, 10
    instrument FWHM and two pixels beyond).  Other pairs keep eq. (5)."""
    from scipy.integrate import simpson

    from compquant.cflibs.selfabs import _XS

    tau0, wg_abs, w_ins = (np.asarray(v, float) * np.ones(cand_wl.size) for v in absorption)
    if kk.size == 0:
        return
    need = np.unique(np.concatenate([kk, own[own >= 0]]))
    step = 0.0 if axis is None else 2.0 * float(np.max(np.abs(np.diff(np.asarray(axis, float)))))
    reach = np.zeros(cand_wl.size)
    reach[need] = optical_reach(tau0[need], wg_abs[need], wl_all[need])
    for j in np.unique(jj):
        o = int(own[j])
        if o < 0:
            continue
        pairs = np.nonzero(jj == j)[0]
        d = np.abs(cand_wl[kk[pairs]] - cand_wl[o])
        pairs = pairs[(d < reach[o] + reach[kk[pairs]]) & (area[kk[pairs]] > 0)]
        if pairs.size == 0:
            continue
        grp = np.concatenate([[o], kk[pairs]])
        wg, wl = np.maximum(wg_abs[grp], 1e-12), np.maximum(wl_all[grp], 0.0)
        scale = 0.5 * voigt_fwhm(wg, wl)  # the sinh grids' scale, as absorbed_part's
        grid = np.unique((cand_wl[grp, None] + _XS[None, :] * scale[:, None]).ravel())
        # K_j vanishes (< 10⁻²⁰) beyond 10 instrument FWHM (and two pixels) outside the outer band edges
        edge = 0.5 * geo[j, 0] + geo[j, 1] + geo[j, 2] + 10.0 * w_ins[o] + step
        grid = grid[np.abs(grid - centre[j]) <= edge]
        if grid.size < 3:
            continue
        grid = np.sort(np.concatenate([grid, 0.5 * (grid[1:] + grid[:-1])]))  # and the midpoints
        a = mutual_absorbed(grid, cand_wl[grp], tau0[grp], wg, wl, area[grp], own=0)
        px, wt = (None, None) if axis is None else pixel_weights[j]
        # one instrument width for the group, the own line's (its members lie within a few reaches,
        # well under 1 nm: λ/R changes by under 0.5 %)
        K = instrument_kernel(grid, centre[j], geo[j], w_ins[o], axis=axis, pixels=px, weights=wt)
        c[pairs] = c_thin[pairs] - simpson(a * K[None, :], x=grid, axis=1) / area[kk[pairs]]


def predicted_ln_area(sol, model, element, ion, wl, gA, ek) -> np.ndarray:
    """ln Â of arbitrary lines from a central solution (module docstring): the solver's own
    Saha–Boltzmann (or Boltzmann) ordinate at the fitted T, nₑ and intercepts, less ln(λ/gA).

    Lines of elements (Saha–Boltzmann) or species (Boltzmann) without an intercept, and stages
    above II, get −inf (not predicted)."""
    beta = sol.fit.beta[0]
    T = float(sol.T[0])
    ne = float(sol.ne[0])
    kT = KB_EV * T
    out = np.full(len(wl), -np.inf)
    sb = model.mode == "saha-boltzmann"
    low = float(model.lowering(np.array([T]), np.array([ne]), 1)[0]) if sb else 0.0
    saha = LN_SAHA_PREFACTOR + 1.5 * math.log(T) - math.log(ne) + low / kT
    for i, (e, z) in enumerate(zip(element, ion)):
        z = int(z)
        if z not in (1, 2):
            continue
        if sb:
            if e not in sol.groups:
                continue
            q = beta[1 + sol.groups.index(e)]
            y = q - (ek[i] + (model.ie1[e] if z == 2 else 0.0)) / kT + (saha if z == 2 else 0.0)
        else:
            from compquant.atomic import species_name

            sp = species_name(e, z)
            if sp not in sol.groups:
                continue
            y = beta[1 + sol.groups.index(sp)] - ek[i] / kT
        out[i] = y - math.log(wl[i]) + math.log(gA[i])
    return out


class BlendCorrection:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: the blend correction (§1b)."""

    def _blend_candidates(self):
        """Stage I/II lines of the shipped line list of the model's elements that reach a
        window (cached): a :class:`~compquant.cflibs.lineset.LineSet` with intensity 0."""
        if getattr(self, "_blend_cands", None) is not None:
            return self._blend_cands
        from compquant.cflibs.lineset import _lineset
        from compquant.errors import AtomicDataError

        try:
            ll = self.atomic.line_list()
        except AtomicDataError:  # atomic data without a line list: the measured lines are all we know
            self._warn("blend correction: the atomic data have no line list; only the measured lines' "
                       "interference with each other is corrected")
            self._blend_cands = self.L.subset(np.ones(self.L.n, bool))
            return self._blend_cands
        els = set(self.model.elements)
        d = ll[ll["element"].isin(els) & ll["ion"].isin([1, 2])]
        d = d[np.isfinite(d["aki"]) & (d["aki"] > 0) & np.isfinite(d["gk"]) & (d["gk"] > 0)
              & np.isfinite(d["ek_ev"])].drop_duplicates("line_id")
        geo = self._blend_geometry(self.L)
        lo = float(np.min(self.L.wl - 0.5 * geo[:, 0] - geo[:, 1] - geo[:, 2])) - SEARCH_MARGIN_NM
        hi = float(np.max(self.L.wl + 0.5 * geo[:, 0] + geo[:, 1] + geo[:, 2])) + SEARCH_MARGIN_NM
        d = d[(d["wavelength_nm"] >= lo) & (d["wavelength_nm"] <= hi)].reset_index(drop=True)
        zeros = np.zeros(len(d))
        self._blend_cands = _lineset(d, self.atomic, intensity=zeros, u_intensity=zeros)
        return self._blend_cands

    def _blend_geometry(self, L):
        geo = np.array([self.windows.get(str(x), (np.nan, np.nan, np.nan)) for x in L.line_id], float)
        return geo.reshape(-1, 3)

    def _slab_sa(self, sol, lines, mass, w_lorentz, length_cm, with_sa=True):
        """Peak optical depth τ₀, SA and the absorbing atoms' Doppler FWHM of ``lines`` in the slab
        of the self-absorption solution (``length_cm``; absolute densities from nₑ and charge
        neutrality, :meth:`~compquant.cflibs.selfabs_cog.CurveOfGrowth.absolute_species`) — the
        fit's own :func:`~compquant.cflibs.selfabs.tau0_slab` and
        :func:`~compquant.cflibs.selfabs.sa_factor`, the Lorentzian part ``w_lorentz`` as the fit's
        (:meth:`lorentz_thin` at SA = 1).  Species without a density get τ₀ = 0."""
        from compquant.cflibs.electron_density import doppler_fwhm_nm
        from compquant.cflibs.selfabs import sa_factor, tau0_slab

        T = float(sol.T[0])
        nabs = self.absolute_species(sol)
        names = list(dict.fromkeys(lines.species))
        u = {sp: float(self.atomic.partition_function(sp, np.array([T]))[0]) for sp in names if sp in nabs}
        n_sp = np.array([nabs.get(sp, 0.0) for sp in lines.species])
        u_sp = np.array([u.get(sp, 1.0) for sp in lines.species])
        wg_abs = doppler_fwhm_nm(lines.wl, T, mass)
        tau = tau0_slab(lines.wl, lines.gA, lines.ei, T, n_sp, u_sp, length_cm, wg_abs, w_lorentz)
        return tau, (sa_factor(tau, wg_abs, w_lorentz) if with_sa else None), wg_abs

    def blend_prediction(self, sol, length_cm=None):
        """Per measured line: Δ_j/c_jj, u(Δ_j)/c_jj (in corrected-area units) and σ_j (eqs. 2–4).

        ``length_cm``: the slab length of a self-absorption solution (modes ``curve_of_growth``
        and ``columnar``): every line's predicted area is then its observed, self-absorbed one,
        eq. (5); ``None`` (the thin modes): optically thin."""
        L, C = self.L, self._blend_candidates()
        T, ne = float(sol.T[0]), float(sol.ne[0])
        geo = self._blend_geometry(L)
        have = np.all(np.isfinite(geo), axis=1) & (geo[:, 0] > 0)
        n = L.n
        corr, u_corr, share = np.zeros(n), np.zeros(n), np.ones(n)
        if not np.any(have) or C.n == 0:
            return corr, u_corr, share
        mass = {e: self.atomic.mass_u(e) for e in dict.fromkeys(C.element)}
        m_c = np.array([mass[e] for e in C.element])
        w_ins_c = np.asarray(self.w_instr_fn(C.wl), float) * np.ones(C.n)
        wg_c = gaussian_fwhm_nm(C.wl, T, m_c, w_ins_c)
        wl_c = self.lorentz_thin(T, ne, np.ones(C.n), lines=C, mass=m_c, w_instr=w_ins_c)
        area_c = np.exp(predicted_ln_area(sol, self.model, C.element, C.ion, C.wl, C.gA, C.ek))
        u_c = np.sqrt(C.u_ln_a**2 + float(self.s.blend_u_rel) ** 2)  # A_ki grade ⊕ model, eq. (2)
        area_self = np.exp(predicted_ln_area(sol, self.model, L.element, L.ion, L.wl, L.gA, L.ek))
        f = np.exp(self.ln_capture)
        idx = np.nonzero(have)[0]
        pos = {lid: k for k, lid in enumerate(C.line_id)}
        own_k = np.array([pos.get(str(L.line_id[j]), -1) for j in idx], int)
        axis = getattr(self, "window_axis", None)
        pw = None
        if axis is not None:
            memo = self.__dict__.setdefault("_blend_pixel_weights", {})
            pw = []
            for j in idx:
                key = (str(L.line_id[j]), float(L.wl[j]), *map(float, geo[j]))
                if key not in memo:
                    memo[key] = pixel_window_weights(axis, L.wl[j], *geo[j])
                pw.append(memo[key])
        own = area_self[idx] * f[idx]
        absorption = None
        if length_cm is not None:  # eq. (5): the interfering lines and the line itself self-absorbed
            tau_c, _, wga_c = self._slab_sa(sol, C, m_c, wl_c, length_cm, with_sa=False)
            absorption = (tau_c, wga_c, w_ins_c)
            wl_l = self.lorentz_thin(T, ne, np.ones(L.n))
            own = own * self._slab_sa(sol, L, self.mass_line, wl_l, length_cm)[1][idx]
        delta, u_delta, absum = blend_terms(L.wl[idx], geo[idx], C.wl, area_c, wg_c, wl_c, u_c, exclude=own_k,
                                            axis=axis, pixel_weights=pw, min_area=NEGLIGIBLE_AREA * own,
                                            absorption=absorption)
        corr[idx] = delta / f[idx]
        u_corr[idx] = u_delta / f[idx]
        tot = own + absum
        share[idx] = np.where(tot > 0, own / np.where(tot > 0, tot, 1.0), 0.0)
        return corr, u_corr, share

    def _set_ordinate_weights(self):
        """u_y and the weights from the current intensities (as in ``_Analysis.__init__``), the
        Paule–Mandel scatter kept."""
        L = self.L
        rel = np.where(L.intensity > 0, L.u_intensity / L.intensity, 0.0)
        self.u_y = np.maximum(np.sqrt(rel**2 + L.u_ln_a**2), self.s.u_rel_floor)
        self.w = 1.0 / (self.u_y**2 + self.u_model**2)

    def apply_blend_correction(self, sol, ne_pick):
        """Correct every window-integrated line for the predicted interference (eqs. 1–4) and
        re-solve until the corrections settle; returns the new central solution.

        Passes: predict from the current solution, drop lines with σ_j < ``blend_min_self_share``
        (reported), set I_j and u(I_j) by eq. (3) from the measured N_j, re-solve (with the
        Paule–Mandel weights of §2); stop when no corrected area moved by more than
        ``blend_tolerance`` (relative) since the last pass, at most ``blend_max_passes`` passes.
        """
        s = self.s
        I0, u0 = self.L.intensity.copy(), self.L.u_intensity.copy()
        ids0 = list(self.L.line_id)
        prev = None
        info = {"applied": True, "passes": 0, "converged": False, "tolerance": float(s.blend_tolerance), "dropped": []}
        for _ in range(int(s.blend_max_passes)):
            corr, u_corr, share = self.blend_prediction(sol)
            low = (share < s.blend_min_self_share) | (I0 - corr <= 0)
            if np.any(low) and np.sum(~low) >= 2:
                for i in np.nonzero(low)[0]:
                    info["dropped"].append({"line_id": str(self.L.line_id[i]), "self_share": float(share[i])})
                keep = ~low
                self.drop_lines(low, f"blend: predicted self share below blend_min_self_share = "
                                     f"{s.blend_min_self_share:g} (§1b)")
                I0, u0, corr, u_corr, share = I0[keep], u0[keep], corr[keep], u_corr[keep], share[keep]
                if prev is not None:
                    prev = prev[keep]
                self._blend_cands = None
            new = I0 - corr
            self.L.intensity = new
            self.L.u_intensity = np.sqrt(u0**2 + u_corr**2)
            self.blend_share = corr / I0  # share of the measured (capture-corrected) area removed
            self.blend_self_share = share
            self._set_ordinate_weights()
            try:
                ne_name, ne_est = ne_pick(None)
                sol = self.solve_central(self.sa, ne_name, ne_est)
                sol = self.consistent_weights(sol, ne_pick)
            except PhysicsError as exc:  # the corrected lines have no physical solution: keep them uncorrected
                self._warn(f"blend correction abandoned in pass {info['passes'] + 1} ({exc.one_line()}); "
                           "lines left uncorrected")
                self.L.intensity, self.L.u_intensity = I0, u0
                self.blend_share = np.zeros(self.L.n)
                self._set_ordinate_weights()
                ne_name, ne_est = ne_pick(None)
                sol = self.consistent_weights(self.solve_central(self.sa, ne_name, ne_est), ne_pick)
                info["abandoned"] = exc.one_line()
                break
            info["passes"] += 1
            # change of the corrected areas since the last pass (pass 1: since no correction)
            change = float(np.max(np.abs(new - (I0 if prev is None else prev)) / I0))
            info.setdefault("changes", []).append(change)
            if prev is not None and change < s.blend_tolerance:
                info["converged"] = True
                break
            prev = new
        info["lines"] = len(ids0)
        self._report_blend_passes(info)
        return sol

    def _report_blend_passes(self, info):
        """Keep ``info`` as ``blend_info`` and warn of dropped lines and of passes that did not
        settle (both modes' passes end here)."""
        s = self.s
        self.blend_info = info
        if info["dropped"]:
            self._warn("blend correction: dropped " + ", ".join(
                f"{d['line_id']} (self share {d['self_share']:.2f})" for d in info["dropped"])
                + f" — below blend_min_self_share = {s.blend_min_self_share:g}")
        if not info["converged"]:
            self._warn(f"blend correction did not settle within {info['passes']} passes "
                       f"(tolerance {s.blend_tolerance:g})")

    def apply_blend_correction_sa(self, out, refit):
        """The blend correction of the self-absorption modes ``curve_of_growth`` and ``columnar``
        (§1b, eq. (5)): ``out`` is the tuple of
        :meth:`~compquant.cflibs.selfabs_fit.SelfAbsFit.selfabs_corrected` (SA, solution, τ₀, nₑ
        route, nₑ estimator, slab length, χ²) and ``refit()`` repeats that fit on the current lines.

        Passes as :meth:`apply_blend_correction`, each predicting from the current self-absorption
        solution (its T, nₑ, intercepts and slab length: every line's area self-absorbed, eq. (5))
        and re-running the whole self-absorption fit on the corrected areas.  The measured areas
        are kept by line id, so lines the fit removes as too optically thick leave the iteration
        with their correction.  A first prediction that drops no line and moves none by more than
        ``blend_tolerance`` leaves the lines and the fit as they are (``negligible``, 0 passes).
        Returns the last fit's tuple.
        """
        s = self.s
        meas = {str(lid): (float(i), float(u)) for lid, i, u in zip(self.L.line_id, self.L.intensity,
                                                                    self.L.u_intensity)}
        prev: dict[str, float] | None = None
        info = {"applied": True, "self_absorbed": True, "passes": 0, "converged": False,
                "tolerance": float(s.blend_tolerance), "dropped": []}
        n_lines = self.L.n
        for _ in range(int(s.blend_max_passes)):
            sol, length_cm = out[1], float(out[5])
            corr, u_corr, share = self.blend_prediction(sol, length_cm=length_cm)
            ids = [str(x) for x in self.L.line_id]
            I0 = np.array([meas[k][0] for k in ids])
            u0 = np.array([meas[k][1] for k in ids])
            low = (share < s.blend_min_self_share) | (I0 - corr <= 0)
            if np.any(low) and np.sum(~low) >= 2:
                for i in np.nonzero(low)[0]:
                    info["dropped"].append({"line_id": ids[i], "self_share": float(share[i])})
                keep = ~low
                self.drop_lines(low, f"blend: predicted self share below blend_min_self_share = "
                                     f"{s.blend_min_self_share:g} (§1b)")
                I0, u0, corr, u_corr, share = I0[keep], u0[keep], corr[keep], u_corr[keep], share[keep]
                ids = [k for k, kp in zip(ids, keep) if kp]
                self._blend_cands = None
            if prev is None and not info["dropped"] and float(np.max(np.abs(corr) / I0)) < s.blend_tolerance:
                # the first prediction moves no line by more than the tolerance the iteration stops
                # at: the lines and the fit stay as they are (a re-fit costs a whole slab fit)
                self.blend_self_share = share
                info.update(converged=True, changes=[float(np.max(np.abs(corr) / I0))], negligible=True)
                break
            new = I0 - corr
            self.L.intensity = new
            self.L.u_intensity = np.sqrt(u0**2 + u_corr**2)
            self.blend_share = corr / I0
            self.blend_self_share = share
            self._set_ordinate_weights()
            try:
                out = refit()
            except PhysicsError as exc:  # no self-absorption solution for the corrected lines
                self._warn(f"blend correction abandoned in pass {info['passes'] + 1} ({exc.one_line()}); "
                           "lines left uncorrected")
                self.L.intensity, self.L.u_intensity = I0, u0
                self.blend_share = np.zeros(self.L.n)
                self.blend_self_share = np.ones(self.L.n)
                self._set_ordinate_weights()
                out = refit()
                info["abandoned"] = exc.one_line()
                break
            info["passes"] += 1
            change = max(abs(v - (meas[k][0] if prev is None else prev.get(k, meas[k][0]))) / meas[k][0]
                         for k, v in zip(ids, new))
            info.setdefault("changes", []).append(float(change))
            if prev is not None and change < s.blend_tolerance:
                info["converged"] = True
                break
            prev = dict(zip(ids, new))
        info["lines"] = n_lines
        self._report_blend_passes(info)
        return out


__all__ = ["BlendCorrection", "absorbed_part", "blend_terms", "instrument_kernel", "mutual_absorbed",
           "optical_reach", "pixel_response", "pixel_window_weights", "predicted_ln_area",
           "voigt_cdf", "window_response"]
