"""Window integration with a continuous side-window background (compquant.lines.windows)."""

from __future__ import annotations

import numpy as np
import pytest

from compquant.lines.windows import (
    WindowLine,
    build_window_weights,
    interpolant_integral_weights,
    side_background,
    window_geometry,
)

# a pixel grid of 0.005 nm with a slight non-uniformity (dispersion changes along a detector)
_WL = 465.0 + 0.005 * np.arange(1200) + 2e-7 * np.arange(1200) ** 1.5


def _shifted(g: WindowLine, d: float) -> WindowLine:
    """The whole geometry moved by ``d`` nm (as a sample's wavelength shift moves it)."""

    def mv(r):
        return None if r is None else (r[0] + d, r[1] + d)

    return WindowLine(g.centre_nm + d, g.a + d, g.b + d, mv(g.left), mv(g.right))


def _spectrum(wl):
    # a line in the window, the shoulder of a strong neighbour reaching the blue side window and a
    # sloping continuum: the side pixels are far from flat, so a pixel dropping out of a side window
    # moves a discrete background fit by a visible step
    return (
        2000 * np.exp(-0.5 * ((wl - 468.014) / 0.02) ** 2)
        + 9000 * np.exp(-0.5 * ((wl - 467.479) / 0.03) ** 2)
        + 300
        + 40 * (wl - 468)
    )


def test_intensity_is_continuous_when_window_edges_cross_pixels():
    # the integral of the interpolant over intervals is continuous in the interval ends, and so is
    # the continuous least-squares fit over them (its normal matrix is positive definite).  Moving the
    # geometry by 1e-7 nm across a pixel must change the result as a step of 1e-7 nm just before the
    # pixel does (the smooth slope, large here on the neighbour's shoulder): the difference of the two
    # steps, the jump, must stay below 1e-6 of the result (common practice: a continuous, piecewise
    # smooth function of the edges).  A whole-pixel side window jumps by the pixel's pull on the fit.
    g0 = window_geometry(468.014, 0.3, 0.2, 0.2)
    y = _spectrum(_WL)
    ref = abs(float(build_window_weights(_WL, [g0]).integrate(y)[0]))
    assert ref > 1.0
    edges = [g0.left[0], g0.left[1], g0.a, g0.b, g0.right[0], g0.right[1]]
    for e in edges:
        k = int(np.searchsorted(_WL, e))  # the next pixel above the edge: shift the edge onto it
        d = float(_WL[k] - e)
        v = [float(build_window_weights(_WL, [_shifted(g0, d + s)]).integrate(y)[0]) for s in (-1.5e-7, -5e-8, 5e-8)]
        jump = (v[2] - v[1]) - (v[1] - v[0])
        assert abs(jump) <= 1e-6 * ref, (e, v)


def test_linear_spectrum_plus_line_gives_the_line_interpolant_area():
    # background exactly linear in wavelength: its interpolant is the same straight line (piecewise-linear
    # interpolation reproduces a linear function), and the least-squares line through a straight line is
    # itself, so the background is removed exactly and the result is the line's interpolant area
    # (arithmetic of a linear function); the line is > 40 sigma from the side windows (exactly zero there)
    g = window_geometry(468.0137, 0.3, 0.2, 0.2)
    line = 1500 * np.exp(-0.5 * ((_WL - 468.0137) / 0.003) ** 2)
    bg = 250.0 - 37.5 * (_WL - 468.0)
    ww = build_window_weights(_WL, [g])
    assert ww.background == ["linear"]
    assert np.all(line[ww.side[0]] == 0.0)
    want = float(interpolant_integral_weights(_WL, g.a, g.b) @ line)
    assert float(ww.integrate(bg + line)[0]) == pytest.approx(want, rel=1e-12)
    scale = float(np.abs(bg).max()) * (g.b - g.a)
    assert abs(float(ww.integrate(bg)[0])) <= 1e-12 * scale  # a pure straight line nets 0


def test_one_side_window_gives_the_interpolant_mean_as_constant_background():
    # the red side window leaves the spectrum: the background is the constant mean of the interpolant
    # over the blue side interval.  For y = p + q*l (exactly linear, so its interpolant is itself) the
    # mean over [u, v] is y((u + v)/2) and the window integral is (b - a) y((a + b)/2): the net is
    # (b - a) q ((a + b)/2 - (u + v)/2) (arithmetic of a linear function)
    c = float(_WL[-1]) - 0.2
    g = window_geometry(c, 0.1, 0.15, 0.02)
    ww = build_window_weights(_WL, [g])
    assert ww.background == ["constant"]
    p, q = 250.0, -37.5
    u, v = g.left
    want = (g.b - g.a) * q * (0.5 * (g.a + g.b) - 0.5 * (u + v))
    assert float(ww.integrate(p + q * _WL)[0]) == pytest.approx(want, rel=1e-10)
    # and a constant spectrum nets 0 (the mean of a constant is the constant)
    assert abs(float(ww.integrate(np.full(_WL.size, 300.0))[0])) <= 1e-12 * 300.0 * (g.b - g.a)
    # no side window inside the spectrum: no background, the interpolant integral itself
    g2 = WindowLine(c, c - 0.05, c + 0.05, None, (c + 0.07, c + 0.3))
    ww2 = build_window_weights(_WL, [g2])
    assert ww2.background == ["none"]
    y = _spectrum(_WL)
    assert float(ww2.integrate(y)[0]) == pytest.approx(float(interpolant_integral_weights(_WL, g2.a, g2.b) @ y))


def test_dense_matrix_equals_the_sparse_weights():
    # I = Y @ W (dense, built on demand) and the per-line sparse sums must agree; every pixel with a
    # non-zero weight must lie in the line's support (it is what saturation checks use)
    rng = np.random.default_rng(5)
    centres = np.sort(rng.uniform(465.3, _WL[-1] - 0.1, 12))
    geo = [window_geometry(float(c), 0.12, 0.08, 0.03) for c in centres]
    ww = build_window_weights(_WL, geo)
    Y = rng.normal(300, 20, (4, _WL.size))
    assert ww.integrate(Y) == pytest.approx(Y @ ww.W, rel=1e-12, abs=1e-9)
    for j in range(ww.n_lines):
        assert np.all(np.isin(ww.pixels[j], ww.support[j]))
        col = ww.W[:, j]
        assert np.array_equal(np.flatnonzero(col), ww.pixels[j])
        assert np.array_equal(col[ww.pixels[j]], ww.weights[j])


def test_side_background_is_the_line_the_weights_remove():
    # the background drawn on the review page (side_background) must be the one the weights remove:
    # I = int_a^b y - int_a^b (alpha + beta (l - c)) dl (module docstring), for an arbitrary spectrum;
    # and for a straight-line spectrum the continuous least-squares line is that line itself
    # (arithmetic of a linear function)
    y = _spectrum(_WL)
    for g in (window_geometry(468.014, 0.3, 0.2, 0.2), window_geometry(float(_WL[-1]) - 0.2, 0.1, 0.15, 0.02)):
        kind, alpha, beta = side_background(_WL, y, g)
        ww = build_window_weights(_WL, [g])
        assert kind == ww.background[0]
        ua, ub = g.a - g.centre_nm, g.b - g.centre_nm
        area = float(interpolant_integral_weights(_WL, g.a, g.b) @ y)
        want = area - (alpha * (ub - ua) + 0.5 * beta * (ub**2 - ua**2))
        assert float(ww.integrate(y)[0]) == pytest.approx(want, rel=1e-12)
    g = window_geometry(468.014, 0.3, 0.2, 0.2)
    kind, alpha, beta = side_background(_WL, 250.0 - 37.5 * (_WL - 468.0), g)
    assert (kind, alpha, beta) == ("linear", pytest.approx(250.0 - 37.5 * (g.centre_nm - 468.0), rel=1e-12),
                                   pytest.approx(-37.5, rel=1e-10))
