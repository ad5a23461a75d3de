"""Line integration and profile fitting against scipy references."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate
from scipy.special import voigt_profile

from compquant.lines.fit import fit_group, fwhm_of, widths_for_fwhm
from compquant.lines.windows import (
    build_window_weights,
    interpolant_integral_weights,
    peak_centre_fwhm,
    window_geometry,
)


def test_interpolant_weights_exact_for_piecewise_linear():
    # the trapezoid rule is exact for piecewise-linear data (common practice); check with a
    # non-uniform grid and window edges between pixels, against scipy.integrate.quad of np.interp
    rng = np.random.default_rng(0)
    x = np.sort(rng.uniform(0, 10, 200))
    y = rng.normal(0, 1, 200)
    for a, b in ((1.234, 7.89), (x[10], x[50]), (0.0, 10.0)):
        w = interpolant_integral_weights(x, a, b)
        lo, hi = max(a, x[0]), min(b, x[-1])
        ref, _ = integrate.quad(lambda t: np.interp(t, x, y), lo, hi, points=x[(x > lo) & (x < hi)], limit=500)
        assert w @ y == pytest.approx(ref, rel=1e-9, abs=1e-9)


@pytest.mark.parametrize("shape", ["gauss", "lorentz"])
def test_window_integration_matches_quad_on_analytic_shapes(shape):
    # analytic line on a linear background; the window result must equal scipy.integrate.quad of
    # the line alone over the window (background removed exactly by the side-window fit)
    wl = np.linspace(400, 401, 2001)  # 0.0005 nm pixels
    c = 400.5
    if shape == "gauss":

        def f(t):
            return 800 * np.exp(-0.5 * ((t - c) / 0.01) ** 2)

        win, side = 0.12, 0.05  # side windows beyond 6 sigma: line-free
    else:

        def f(t):
            return 5.0 * 0.004 / (np.pi * ((t - c) ** 2 + 0.004**2))

        win, side = 0.2, 0.05
    bg = 120 + 35 * (wl - 400)
    y = f(wl) + bg
    g = window_geometry(c, win, side, 0.0)
    ww = build_window_weights(wl, [g])
    got = float(y @ ww.W[:, 0])
    line_only, _ = integrate.quad(f, g.a, g.b, points=[c], limit=200)
    if shape == "gauss":
        assert got == pytest.approx(line_only, rel=1e-5)
    else:
        # Lorentzian wings in the side windows raise the fitted background; compare with quad of
        # the line minus the straight line fitted by continuous least squares to the interpolant of
        # the line's pixel values over the side intervals (normal equations with integral inner
        # product, Burden & Faires, Numerical Analysis, sec. 8.2), every integral by scipy.integrate.quad
        def yi(t):
            return np.interp(t, wl, f(wl))

        M, r = np.zeros((2, 2)), np.zeros(2)
        for lo, hi in (g.left, g.right):
            pts = wl[(wl > lo) & (wl < hi)]
            for i in range(2):  # basis (l - c)^i
                r[i] += integrate.quad(lambda t, i=i: (t - c) ** i * yi(t), lo, hi, points=pts, limit=500)[0]
                for k in range(2):
                    M[i, k] += integrate.quad(lambda t, n=i + k: (t - c) ** n, lo, hi)[0]
        alpha, beta = np.linalg.solve(M, r)
        wing, _ = integrate.quad(lambda t: alpha + beta * (t - c), g.a, g.b)
        assert got == pytest.approx(line_only - wing, rel=1e-5)


def test_window_noise_estimate():
    rng = np.random.default_rng(2)
    wl = np.linspace(400, 401, 1001)
    y = 100 + rng.normal(0, 3.0, wl.size)
    ww = build_window_weights(wl, [window_geometry(400.5, 0.1, 0.2, 0.0)])
    assert ww.noise_sigma(y)[0] == pytest.approx(3.0, rel=0.15)
    assert ww.u_noise(y)[0] == pytest.approx(3.0 * np.linalg.norm(ww.W[:, 0]), rel=0.15)


def test_voigt_area_recovered_within_half_percent():
    # reference line shape: scipy.special.voigt_profile, area 1500 counts*nm
    rng = np.random.default_rng(0)
    wl = np.linspace(300, 302, 801)  # 0.0025 nm pixels
    s, g, area = 0.012, 0.009, 1500.0
    y = area * voigt_profile(wl - 301.003, s, g) + 200 + 10 * (wl - 300)
    y = y + rng.normal(0, 0.002 * y.max(), wl.size)  # peak SNR 500
    fit = fit_group(wl, y, [301.0], lo_nm=300.6, hi_nm=301.4, kind="voigt", fwhm0=0.04, max_offset_nm=0.02)
    assert fit.success
    assert fit.areas[0] == pytest.approx(area, rel=0.005)
    assert fit.centres[0] == pytest.approx(301.003, abs=0.001)
    assert fit.fwhm[0] == pytest.approx(fwhm_of("voigt", s, g), rel=0.05)
    u = np.sqrt(fit.cov_areas[0, 0])
    assert 0 < u < 0.01 * area
    assert abs(fit.areas[0] - area) < 4 * u


def test_voigt_fwhm_olivero_longbothum_limits():
    # Olivero & Longbothum (1977): pure Gaussian and pure Lorentzian limits are exact to 0.02 %
    assert fwhm_of("voigt", 0.01, 1e-12) == pytest.approx(2 * np.sqrt(2 * np.log(2)) * 0.01, rel=2e-4)
    assert fwhm_of("voigt", 1e-12, 0.01) == pytest.approx(0.02, rel=2e-4)
    s, g = widths_for_fwhm("voigt", 0.05)
    assert fwhm_of("voigt", s, g) == pytest.approx(0.05, rel=1e-12)


@pytest.mark.parametrize("sep_fraction", [0.5, 0.7])
def test_blended_doublet_below_fwhm_recovered_within_2_percent(sep_fraction):
    rng = np.random.default_rng(7)
    wl = np.linspace(500, 501, 1001)  # 0.001 nm pixels
    s, g = 0.010, 0.006
    fw = fwhm_of("voigt", s, g)
    c1, c2 = 500.5, 500.5 + sep_fraction * fw
    a1, a2 = 900.0, 450.0
    y = a1 * voigt_profile(wl - c1, s, g) + a2 * voigt_profile(wl - c2, s, g) + 50
    y = y + rng.normal(0, 0.002 * y.max(), wl.size)
    fit = fit_group(
        wl,
        y,
        [c1 + 0.002, c2 - 0.002],
        lo_nm=500.3,
        hi_nm=500.75,
        kind="voigt",
        shared_width=True,
        fwhm0=fw * 1.2,
        max_offset_nm=0.3 * fw,
    )
    assert fit.areas[0] == pytest.approx(a1, rel=0.02)
    assert fit.areas[1] == pytest.approx(a2, rel=0.02)


def test_lorentzian_free_widths():
    wl = np.linspace(600, 601, 1001)
    y = 300 * 0.01 / np.pi / ((wl - 600.4) ** 2 + 0.01**2) + 200 * 0.02 / np.pi / ((wl - 600.6) ** 2 + 0.02**2) + 10
    fit = fit_group(
        wl,
        y,
        [600.4, 600.6],
        lo_nm=600.1,
        hi_nm=600.9,
        kind="lorentzian",
        shared_width=False,
        fwhm0=0.03,
        max_offset_nm=0.01,
    )
    assert fit.areas == pytest.approx([300, 200], rel=1e-4)
    assert fit.fwhm == pytest.approx([0.02, 0.04], rel=1e-4)
    # fixed-shape projection reproduces the areas on the same spectrum
    A = fit.projection() @ y[fit.pixels]
    assert A == pytest.approx(fit.areas, rel=1e-8)


def test_peak_centre_fwhm_gaussian():
    wl = np.linspace(400, 401, 1001)
    sig = 0.02
    y = 100 * np.exp(-0.5 * ((wl - 400.5004) / sig) ** 2)
    c, f = peak_centre_fwhm(wl, y, 400.4, 400.6)
    assert c == pytest.approx(400.5004, abs=1e-4)
    assert f == pytest.approx(2 * np.sqrt(2 * np.log(2)) * sig, rel=0.01)
