"""Mutual absorption of coincident lines in the blend correction of the slab modes
(eq. (6) of compquant.cflibs.blends, docs/calibration-free.md §1b item 6)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special

from compquant.cflibs.blends import blend_terms, optical_reach

FWHM_TO_SIGMA = 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))
WINDOW, SIDE, GAP, W_DOPPLER, W_INSTR = 0.2, 0.08, 0.02, 0.004, 0.05


def _gauss_interval(lo, hi, centre, fwhm):
    """P(lo ≤ X ≤ hi), X ~ N(centre, σ²): ½[erf((hi − c)/(σ√2)) − erf((lo − c)/(σ√2))] (closed form,
    Abramowitz & Stegun 7.1.1 / 26.2.29)."""
    s = fwhm * FWHM_TO_SIGMA * math.sqrt(2.0)
    return 0.5 * (special.erf((hi - centre) / s) - special.erf((lo - centre) / s))


def _kernel(mu):
    """Net window signal (window less the side bands' straight background, continuous geometry) of
    unit light emitted at μ (window centred at 0) and spread by the instrument's Gaussian."""
    h = WINDOW / 2
    return (_gauss_interval(-h, h, mu, W_INSTR)
            - h / SIDE * (_gauss_interval(-h - GAP - SIDE, -h - GAP, mu, W_INSTR)
                          + _gauss_interval(h + GAP, h + GAP + SIDE, mu, W_INSTR)))


def _lines(offset, tau1, tau2, wl1, wl2):
    """Line 1 (the window's own, at 0) and line 2 (at ``offset``) in one slab with one source function S:
    thin areas S·τ₀/V(0) (V = scipy.special.voigt_profile of the absorbing atoms), line 2's = 1."""
    sg = W_DOPPLER * FWHM_TO_SIGMA
    v1, v2 = special.voigt_profile(0.0, sg, wl1 / 2), special.voigt_profile(0.0, sg, wl2 / 2)
    S = v2 / tau2
    return S, S * tau1 / v1, 1.0, v1, v2


def _slab_quadrature(offset, tau1, tau2, wl1, wl2, kernel=_kernel, lo=-1.5, hi=1.5):
    """What line 2 adds to line 1's window in the shared slab, by direct quadrature (scipy.integrate.quad)
    of the homogeneous slab's emergent radiance S(1 − e^{−τ₁−τ₂}) less that of line 1 alone S(1 − e^{−τ₁})
    (formal solution of the transfer equation; Rybicki & Lightman 1979 §1.4), times the window's
    response ``kernel``."""
    sg = W_DOPPLER * FWHM_TO_SIGMA
    S, _a1, _a2, v1, v2 = _lines(offset, tau1, tau2, wl1, wl2)

    def f(mu):
        t1 = tau1 * special.voigt_profile(mu, sg, wl1 / 2) / v1
        t2 = tau2 * special.voigt_profile(mu - offset, sg, wl2 / 2) / v2
        return S * (math.expm1(-t1) - math.expm1(-t1 - t2)) * kernel(mu)

    pts = sorted({0.0, offset})
    return integrate.quad(f, lo, hi, points=pts, limit=4000, epsabs=1e-13)[0]


def _blend(offset, tau1, tau2, wl1, wl2, exclude=True, window=(WINDOW, SIDE, GAP), w_instr=W_INSTR):
    """blend_terms' Δ of window 1 from line 2, both lines as candidates (line 1 excluded as the window's
    own) with the slab's τ₀ of both."""
    _S, a1, a2, _v1, _v2 = _lines(offset, tau1, tau2, wl1, wl2)
    args = (np.array([300.0]), np.array([window]), np.array([300.0, 300.0 + offset]), np.array([a1, a2]),
            np.hypot(w_instr, W_DOPPLER) * np.ones(2), np.array([wl1, wl2]), np.zeros(2))
    ab = (np.array([tau1, tau2]), np.full(2, W_DOPPLER), np.full(2, w_instr))
    return blend_terms(*args, exclude=np.array([0]) if exclude else None, absorption=ab)[0][0]


def _eq5_alone(offset, tau1, tau2, wl1, wl2):
    """Eq. (5): line 2 self-absorbed on its own in window 1 (line 1 not a candidate at all)."""
    _S, _a1, a2, _v1, _v2 = _lines(offset, tau1, tau2, wl1, wl2)
    return blend_terms(np.array([300.0]), np.array([[WINDOW, SIDE, GAP]]), np.array([300.0 + offset]),
                       np.array([a2]), np.array([math.hypot(W_INSTR, W_DOPPLER)]), np.array([wl2]), np.zeros(1),
                       absorption=(np.array([tau2]), np.array([W_DOPPLER]), np.array([W_INSTR])))[0][0]


@pytest.mark.parametrize("offset,tau1,tau2,wl1,wl2", [
    (0.0005, 60.0, 3.0, 0.0025, 0.0025),  # the CO01 pair: Cu II 202.549 beside the thick Zn II 202.548
    (0.0, 20.0, 20.0, 0.01, 0.01),
    (0.01, 50.0, 0.3, 0.01, 0.01),
    (0.03, 80.0, 5.0, 0.005, 0.01),
    (-0.13, 5.0, 5.0, 0.01, 0.01),  # the interferer's core in the lower side band, wings overlapping
])
def test_coincident_interferer_matches_two_line_slab_quadrature(offset, tau1, tau2, wl1, wl2):
    # reference: direct quadrature of S[(1 − e^{−τ₁−τ₂}) − (1 − e^{−τ₁})] times the window's response
    # (scipy.special.voigt_profile, scipy.integrate.quad, instrument by erf differences); in units of the
    # interferer's thin area
    want = _slab_quadrature(offset, tau1, tau2, wl1, wl2)
    got = _blend(offset, tau1, tau2, wl1, wl2)
    assert got == pytest.approx(want, abs=1e-6)
    # eq. (5), the interferer self-absorbed alone, is off (the defect eq. (6) removes): far off where the
    # cores overlap (0.14–0.84 of the thin area), by 0.002 of it where only the wings do (-0.13 nm)
    off5 = abs(_eq5_alone(offset, tau1, tau2, wl1, wl2) - want)
    assert off5 > 100 * abs(got - want)
    if abs(offset) < 0.1:
        assert off5 > 0.05 * max(abs(want), 0.01)


@pytest.mark.parametrize("offset", [0.3, -0.45, 0.6])
def test_far_apart_lines_keep_eq5_exactly(offset):
    # beyond the sum of the two lines' reaches at τ = 0.01 the pair is left to eq. (5) (the same number to
    # the last bit as without the window's own line), and the slab quadrature agrees with it within the
    # stated bound: 1 % of the two emergent areas (here much closer)
    tau1, tau2, wl = 10.0, 2.0, 0.01
    r = optical_reach(np.array([tau1, tau2]), W_DOPPLER, wl)
    assert abs(offset) > r.sum()
    eq5 = _eq5_alone(offset, tau1, tau2, wl, wl)
    assert _blend(offset, tau1, tau2, wl, wl) == eq5
    want = _slab_quadrature(offset, tau1, tau2, wl, wl, lo=-2.5, hi=2.5)
    assert eq5 == pytest.approx(want, abs=2e-3)


def test_reach_is_where_the_optical_depth_falls_below_the_limit():
    # τ₀ V(r)/V(0) < 0.01 at the reach and ≥ 0.01 a grid step (×1/1.06) inside it (scipy.special.voigt_profile)
    tau0, wg, wl = np.array([0.005, 0.5, 8.0, 80.0]), 0.004, np.array([0.01, 0.002, 0.01, 0.0025])
    r = optical_reach(tau0, wg, wl)
    assert r[0] == 0.0
    sg = wg * FWHM_TO_SIGMA
    for t, x, w in zip(tau0[1:], r[1:], wl[1:]):
        v0 = special.voigt_profile(0.0, sg, w / 2)
        assert t * special.voigt_profile(x, sg, w / 2) / v0 < 0.01
        assert t * special.voigt_profile(x / 1.07, sg, w / 2) / v0 >= 0.01


@pytest.mark.parametrize("tau1,tau2", [(5.0, 5.0), (40.0, 10.0), (0.5, 30.0)])
def test_coincident_identical_lines_follow_the_joint_curve_of_growth(tau1, tau2):
    # two Lorentzian lines with the same centre and width in one slab are one line of τ₀ = τ₁ + τ₂: the
    # pair emits (Â₁ + Â₂)·SA(τ₁ + τ₂), line 1 alone Â₁·SA(τ₁), SA the Ladenburg–Reiche function
    # e^{−τ₀/2}[I₀(τ₀/2) + I₁(τ₀/2)] (Ladenburg & Reiche 1913; scipy.special.ive).  A 200 nm window without
    # side bands takes all of it but the thin far wings beyond ±100 nm, 1 − (2/π)·atan(2·100/w) of line 2's
    # thin area (Lorentzian CDF, closed form)
    global W_DOPPLER
    wl, keep = 0.01, W_DOPPLER
    W_DOPPLER = 1e-7
    try:
        S, a1, a2, _v1, _v2 = _lines(0.0, tau1, tau2, wl, wl)

        def lr(t):
            return special.ive(0, t / 2) + special.ive(1, t / 2)

        lost = a2 * (1.0 - 2.0 / math.pi * math.atan(2 * 100.0 / wl))
        want = (a1 + a2) * lr(tau1 + tau2) - a1 * lr(tau1) - lost
        got = _blend(0.0, tau1, tau2, wl, wl, window=(200.0, 0.0, 0.0), w_instr=1e-4)
    finally:
        W_DOPPLER = keep
    assert got == pytest.approx(want, rel=3e-4)
    assert abs(a2 * lr(tau2) - lost - want) > 0.05 * want  # line 2 self-absorbed alone (eq. (5)) is not it


def test_coincident_interferer_on_pixels_matches_the_line_pipeline():
    # the CO01 pair on 0.015 nm pixels: a thick own line (τ₀ = 60) and a τ₀ = 3 interferer 0.0005 nm from it.
    # The pixel means of what the interferer adds in the shared slab (quadrature as above, the instrument
    # Gaussian over each pixel by erf differences) put through the line pipeline's window weights
    # (compquant.lines.windows) must equal eq. (6) on the pixels (eq. (1′))
    from compquant.cflibs.blends import pixel_window_weights
    from compquant.lines.windows import build_window_weights, integrate_windows, window_geometry

    wl = np.arange(195.0, 210.0, 0.015)
    edges = np.concatenate([[wl[0] - 0.0075], 0.5 * (wl[1:] + wl[:-1]), [wl[-1] + 0.0075]])
    centre, offset, tau1, tau2, w_l = 202.548, 0.0005, 60.0, 3.0, 0.0025
    W = build_window_weights(wl, [window_geometry(centre, WINDOW, SIDE, GAP)])
    pix = np.zeros(wl.size)
    for p in W.pixels[0]:
        pix[p] = _slab_quadrature(offset, tau1, tau2, w_l, w_l,
                                  kernel=lambda mu, p=p: _gauss_interval(edges[p] - centre, edges[p + 1] - centre, mu,
                                                                         W_INSTR)) / (edges[p + 1] - edges[p])
    want = float(integrate_windows(pix[None, :], W)[0, 0])
    _S, a1, a2, _v1, _v2 = _lines(offset, tau1, tau2, w_l, w_l)
    px, w = pixel_window_weights(wl, centre, WINDOW, SIDE, GAP)
    got = blend_terms(np.array([centre]), np.array([[WINDOW, SIDE, GAP]]), np.array([centre, centre + offset]),
                      np.array([a1, a2]), np.hypot(W_INSTR, W_DOPPLER) * np.ones(2), np.full(2, w_l), np.zeros(2),
                      exclude=np.array([0]), axis=wl, pixel_weights=[(px, w)],
                      absorption=(np.array([tau1, tau2]), np.full(2, W_DOPPLER), np.full(2, W_INSTR)))[0][0]
    assert got == pytest.approx(want, abs=1e-6)
    assert abs(want) < 0.1  # beside the thick line it adds 0.04 of its thin area; alone (eq. (5)) 0.51
