"""Blend (spectral-interference) correction of window-integrated lines (docs/calibration-free.md §1b)
and the one Gaussian-width function of compquant.cflibs."""

from __future__ import annotations

import importlib.util
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy import constants as sc
from scipy import integrate, special

from compquant.cflibs.blends import blend_terms, voigt_cdf, window_response
from compquant.cflibs.capture import window_capture_fraction
from compquant.cflibs.electron_density import gaussian_fwhm_nm

FWHM_TO_SIGMA = 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0)))


def _gauss_interval(lo, hi, centre, fwhm):
    """P(lo ≤ X ≤ hi), X ~ N(centre, σ²): ½[erf((hi − c)/(σ√2)) − erf((lo − c)/(σ√2))] (closed form)."""
    s = fwhm * FWHM_TO_SIGMA * math.sqrt(2.0)
    return 0.5 * (special.erf((hi - centre) / s) - special.erf((lo - centre) / s))


@pytest.mark.parametrize("offset", [0.0, 0.05, 0.11, 0.16, 0.2, -0.18, 0.35])
def test_window_response_of_a_gaussian_line_matches_the_erf_closed_form(offset):
    # a Gaussian line at `offset` from the window centre: window part minus (h/s)·side-band parts,
    # each an erf difference (closed form of the normal CDF, Abramowitz & Stegun 7.1.1 / 26.2.29)
    window, side, gap, fwhm = 0.2, 0.08, 0.02, 0.07
    h = window / 2
    want = (_gauss_interval(-h, h, offset, fwhm)
            - h / side * (_gauss_interval(-h - gap - side, -h - gap, offset, fwhm)
                          + _gauss_interval(h + gap, h + gap + side, offset, fwhm)))
    got = float(window_response(offset, window, side, gap, fwhm, 0.0))
    assert got == pytest.approx(want, abs=2e-6)


@pytest.mark.parametrize("wg,wl,offset", [(0.06, 0.02, 0.13), (0.02, 0.06, 0.15), (0.05, 0.05, -0.24)])
def test_window_response_of_a_voigt_line_matches_quadrature_of_scipy_voigt_profile(wg, wl, offset):
    # reference: scipy.special.voigt_profile integrated over window and side bands (scipy.integrate.quad)
    window, side, gap = 0.2, 0.08, 0.02
    h = window / 2
    sigma, gamma = wg * FWHM_TO_SIGMA, wl / 2

    def p(lo, hi):
        return integrate.quad(lambda x: special.voigt_profile(x - offset, sigma, gamma), lo, hi,
                              points=[offset] if lo < offset < hi else None, limit=200)[0]

    want = p(-h, h) - h / side * (p(-h - gap - side, -h - gap) + p(h + gap, h + gap + side))
    assert float(window_response(offset, window, side, gap, wg, wl)) == pytest.approx(want, abs=1e-6)
    # at offset 0 the response is the capture fraction of §1a
    assert float(window_response(0.0, window, side, gap, wg, wl)) == pytest.approx(
        float(window_capture_fraction(window, side, gap, wg, wl)), abs=1e-12)


def test_far_wing_response_matches_scipy_and_does_not_flip_sign():
    # reference: scipy.special.voigt_profile integrated with scipy.integrate.quad.  The case of
    # docs/calibration-free.md §11 (seed 7, MA02): Al I 308.215 (Gaussian FWHM 0.0618 nm, Stark
    # 0.0084–0.0092 nm) 0.626 nm from the window of Zn I 307.590.  Its convex Lorentzian wing
    # puts more into the side bands than the window: c < 0 for every width (the old quadrature
    # gave c of either sign, ±3e-4, as the Stark width moved by 10 %).
    window, side, gap, offset, wg = 0.2, 0.08, 0.02, 0.626, 0.0618
    h = window / 2
    for wl in (0.0084, 0.0088, 0.0092):
        sigma, gamma = wg * FWHM_TO_SIGMA, wl / 2

        def p(lo, hi, sigma=sigma, gamma=gamma):
            return integrate.quad(lambda x: special.voigt_profile(x - offset, sigma, gamma), lo, hi,
                                  epsabs=1e-14, epsrel=1e-10, limit=200)[0]

        want = p(-h, h) - h / side * (p(-h - gap - side, -h - gap) + p(h + gap, h + gap + side))
        got = float(window_response(offset, window, side, gap, wg, wl))
        assert want < 0
        assert got == pytest.approx(want, rel=1e-3, abs=1e-9)


@pytest.mark.parametrize("ratio", [0.16, 0.5, 0.95])
def test_abs_cdf_tail_against_scipy_out_to_forty_gaussian_sigma(ratio):
    # P(|X| > x) = 2∫_x^∞ voigt_profile (scipy.special.voigt_profile, scipy.integrate.quad), γ/σ < 1
    # (the Gauss–Legendre branch): the far wing is taken by the Gauss–Hermite form beyond 4σ
    from compquant.cflibs.capture import abs_cdf

    wg = 0.0618
    sigma = wg * FWHM_TO_SIGMA
    gamma = ratio * sigma
    for k in (1.0, 3.0, 3.9, 4.1, 6.0, 10.0, 24.0, 40.0):
        x = k * sigma
        want = 2 * integrate.quad(lambda t: special.voigt_profile(t, sigma, gamma), x, np.inf,
                                  epsabs=1e-15, epsrel=1e-11, limit=500)[0]
        got = 1.0 - float(abs_cdf(x, wg, 2 * gamma))
        assert got == pytest.approx(want, rel=1e-5, abs=1e-12), k


def test_voigt_cdf_against_scipy_integration():
    # P(X ≤ x) = ∫_{-∞}^{x} voigt_profile (scipy.special.voigt_profile, scipy.integrate.quad)
    sigma, gamma = 0.03, 0.01
    for x in (-0.1, -0.02, 0.0, 0.04):
        want = integrate.quad(lambda t: special.voigt_profile(t, sigma, gamma), -np.inf, x, limit=400)[0]
        got = float(voigt_cdf(x, sigma / FWHM_TO_SIGMA, 2 * gamma))
        assert got == pytest.approx(want, abs=2e-5)


def test_two_line_blend_matches_window_integration_of_a_pixel_spectrum():
    # Two Gaussian lines on a fine pixel grid, measured by the line pipeline's own window weights
    # (compquant.lines.windows: interpolant integral over the window, least-squares line over the side
    # intervals of the interpolant); the net of line 1's window is A1·c11 + A2·c12 with c the erf closed form above.
    # blend_terms gives A2·c12 — the part to remove from line 1.  Offsets: line 2 inside the window's
    # wing (0.07 nm) and in the middle of the right side band (0.16 nm).  The pixel grid (0.0005 nm)
    # is fine enough that the interpolant's error, about (h²/12)·|Δy'| per interval end (trapezoid-rule
    # error; common practice), stays below 1e-4 of line 1's area.
    from compquant.lines.windows import build_window_weights, integrate_windows, window_geometry

    wl = np.arange(395.0, 405.0, 0.0005)
    l1, a1, a2, fwhm, h = 400.0, 1.0, 0.7, 0.06, 0.1
    s = fwhm * FWHM_TO_SIGMA
    W = build_window_weights(wl, [window_geometry(l1, 0.2, 0.08, 0.02)])
    c11 = float(window_capture_fraction(0.2, 0.08, 0.02, fwhm, 0.0))
    for off in (0.07, 0.16):
        l2 = l1 + off
        spec = sum(a * np.exp(-0.5 * ((wl - c) / s) ** 2) / (s * math.sqrt(2 * math.pi))
                   for a, c in ((a1, l1), (a2, l2)))
        net = float(integrate_windows(spec[None, :], W)[0, 0])
        c12 = (_gauss_interval(-h, h, off, fwhm)
               - h / 0.08 * (_gauss_interval(-0.2, -0.12, off, fwhm) + _gauss_interval(0.12, 0.2, off, fwhm)))
        assert net == pytest.approx(a1 * c11 + a2 * c12, abs=1e-4)  # 0.01 % of line 1's area
        delta, u_delta, absum = blend_terms(np.array([l1]), np.array([[0.2, 0.08, 0.02]]), np.array([l2]),
                                            np.array([a2]), np.array([fwhm]), np.array([0.0]), np.array([0.1]))
        assert delta[0] == pytest.approx(a2 * c12, rel=1e-5)
        assert u_delta[0] == pytest.approx(0.1 * abs(a2 * c12), rel=1e-5)  # eq. (2), one line
        assert (net - delta[0]) / c11 == pytest.approx(a1, rel=4e-3)  # eq. (3) recovers line 1's area
        assert abs(net / c11 - a1) > 0.05  # while the uncorrected area is off by more than 5 %


def test_gaussian_width_is_instrument_plus_codata_doppler():
    # Doppler FWHM λ√(8 kT ln2 / (M c²)) with CODATA k, c and atomic mass constant (scipy.constants),
    # combined with the instrument width in quadrature (Gaussians convolve into a Gaussian; common practice)
    lam, T, M, w_ins = np.array([250.0, 404.582, 656.28]), 11000.0, 55.845, np.array([0.05, 0.08, 0.13])
    doppler = lam * np.sqrt(8 * sc.k * T * math.log(2) / (M * sc.physical_constants["atomic mass constant"][0]
                                                           * sc.c**2))
    assert gaussian_fwhm_nm(lam, T, M, w_ins) == pytest.approx(np.hypot(w_ins, doppler), rel=1e-7)
    assert gaussian_fwhm_nm(lam, T, M, 0.0) == pytest.approx(doppler, rel=1e-7)


def _benchmark_module():
    path = Path(__file__).resolve().parents[1] / "benchmarks" / "accuracy_families.py"
    spec = importlib.util.spec_from_file_location("accuracy_families_for_test", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


@pytest.fixture(scope="module")
def iron_nickel_noise_free(tmp_path_factory):
    """One noise-free iron–nickel spectrum from the benchmark's generator (every shipped line of
    Fe, Ni, Cr, Mn emitted; the method measures 34), measured once by the line pipeline."""
    from compquant.cflibs.capture import method_windows
    from compquant.fileio import tomllib
    from compquant.lines import measure_run
    from compquant.method import method_from_dict
    from compquant.plasma import synthesize
    from compquant.plasma.forward import default_lines
    from compquant.run import Run, write_run

    af = _benchmark_module()
    comp = {"Fe": 0.544, "Ni": 0.369, "Cr": 0.0733, "Mn": 0.0137}
    T, ne = 9458.0, 8.5e16
    wl = np.arange(200.0, 560.0, 0.02)
    lines = default_lines(elements=list(comp)).with_default_stark(0.015, 1e17)
    spec = synthesize(wl, comp, np.full(2, T), np.full(2, ne), length_mm=0.1, resolving_power=5000.0,
                      self_absorption=False, continuum=True, lines=lines,
                      partition_function=af.generator_partition, stark_t_exponent=0.3)
    spec = spec / spec.max() * 4e4
    path = tmp_path_factory.mktemp("blend") / "feni.h5"
    write_run(path, wl, spec, [{"sample_id": "FN", "role": "unknown", "standard_ref": "", "description": "x"}],
              np.zeros(2, int), instrument={"resolving_power": 5000.0, "model": "forward model (test)"},
              acquisition={"gate_delay_us": 1.0, "gate_width_us": 2.0})
    cf = 'mc_draws = 0\nstark_fallback_fwhm_nm = 0.01\nself_absorption = "detect"\n'
    method = method_from_dict(tomllib.loads(af.method_toml(af.LINES["iron-nickel"], cf)), source="test")
    with Run.open(path) as run:
        lm = measure_run(run, method)
        out = dict(table=lm.table, windows=method_windows(method, run.wavelength), acquisition=dict(run.acquisition),
                   instrument=dict(run.instrument), settings=method.sections["cf"])
    return comp, T, out


def _errors(comp, data, blend):
    from compquant.cflibs import CFSettings, analyse_cf

    s = CFSettings.from_section(data["settings"]).to_dict()
    s["blend_correction"] = blend
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = analyse_cf(data["table"], sample_id="FN", settings=s, acquisition=data["acquisition"],
                       instrument=data["instrument"], windows=data["windows"], mc_draws=0)
    return r, {e: r.element(e).mass_fraction / w - 1.0 for e, w in comp.items()}


@pytest.mark.slow
def test_blend_correction_recovers_a_noise_free_iron_nickel_composition(iron_nickel_noise_free):
    # Truth: the composition given to the benchmark's forward model (generator configured apart from
    # the analysis: all shipped lines, truncated partition functions, continuum, other Stark widths).
    # Measured when written (2026-12-02): without the correction T +0.65 %, Fe +4.6 %, Ni −4.2 %,
    # Cr −12.3 %, Mn −0.8 %; with it T −0.06 %, Fe −0.04 %, Ni +0.17 %, Cr −0.45 %, Mn −0.3 %.
    comp, T, data = iron_nickel_noise_free
    r0, before = _errors(comp, data, False)
    r1, after = _errors(comp, data, True)
    worst_before = max(abs(before[e]) for e in ("Fe", "Ni", "Cr"))
    worst_after = max(abs(after[e]) for e in ("Fe", "Ni", "Cr"))
    assert worst_before > 0.04  # the blend bias is there without the correction
    assert worst_after < 0.01  # and gone with it (majors within 1 %, Cr within 1 %)
    assert worst_after < worst_before / 5
    assert abs(after["Mn"]) < 0.05
    assert abs(r1.temperature_k / T - 1) < 0.005
    info = r1.fit["blend_correction"]
    assert info["applied"] and info["converged"] and 2 <= info["passes"] <= 6
    assert info["changes"][-1] < 0.002 <= info["changes"][0]  # settled from a first correction above tolerance
    assert r0.fit["blend_correction"] == {"applied": False}
    # every dropped line is reported with its reason and predicted self share
    dropped = {d["line_id"] for d in info["dropped"]}
    reported = {x["line_id"] for x in r1.excluded_lines if x["reason"].startswith("blend:")}
    assert dropped == reported
    assert all(d["self_share"] < 0.5 for d in info["dropped"])
    # the correction's uncertainty reaches the lines' u (eq. 3): a corrected line's u is not below its
    # measured u, scaled to the corrected area
    by_id = {x["line_id"]: x for x in r0.lines}
    for x in r1.lines:
        if x["line_id"] in by_id and abs(x["blend_share"]) > 0.05:
            assert x["u_intensity"] > by_id[x["line_id"]]["u_intensity"]


@pytest.mark.slow
def test_predicted_areas_reproduce_the_fitted_ordinates_of_the_measured_lines(iron_nickel_noise_free):
    # consistency of eq. (ln Â) with the solver: for the measured lines, ln I − ln Â equals the fit's
    # residual y − Xβ (neutral and ion rows, Saha shift with Debye–Hückel lowering); to rounding
    from compquant.cflibs import CFSettings
    from compquant.cflibs.analysis import _Analysis
    from compquant.cflibs.atomicdata import default_atomic_data
    from compquant.cflibs.blends import predicted_ln_area

    _, _, data = iron_nickel_noise_free
    rows = data["table"][data["table"]["sample_id"] == "FN"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = _Analysis(rows, "FN", CFSettings.from_section(data["settings"]), default_atomic_data(),
                      data["acquisition"], data["instrument"], None, "test", windows=data["windows"])
        a.solve()
    L, sol = a.L, a.sol
    assert set(L.ion) == {1, 2}
    pred = predicted_ln_area(sol, a.model, L.element, L.ion, L.wl, L.gA, L.ek)
    resid = sol.y[0] - sol.X @ sol.fit.beta[0]
    assert np.log(L.intensity) - pred == pytest.approx(resid, abs=1e-9)


def test_pixel_response_matches_the_line_pipeline_on_a_pixel_averaged_gaussian():
    # A Gaussian line whose pixel values are its exact pixel averages (erf differences over the pixel
    # edges, closed form), on a coarse 0.015 nm grid, with the line just outside a side band's edge:
    # the pipeline's window weights applied to those pixels (compquant.lines.windows) must equal
    # pixel_response.  (The side bands are continuous intervals of the pixel interpolant since the
    # sidewin change, so the old check that eq. (1)'s continuous geometry is > 0.05 off here, which
    # came from whole pixels in the band, no longer holds and was removed.)
    from compquant.cflibs.blends import pixel_response, pixel_window_weights
    from compquant.lines.windows import build_window_weights, integrate_windows, window_geometry

    wl = np.arange(240.0, 260.0, 0.015)
    edges = np.concatenate([[wl[0] - 0.0075], 0.5 * (wl[1:] + wl[:-1]), [wl[-1] + 0.0075]])
    centre, line, fwhm = 249.215, 248.96533, 0.0416
    s = fwhm * FWHM_TO_SIGMA * math.sqrt(2.0)
    pix = 0.5 * (special.erf((edges[1:] - line) / s) - special.erf((edges[:-1] - line) / s)) / np.diff(edges)
    W = build_window_weights(wl, [window_geometry(centre, 0.24, 0.1, 0.02)])
    want = float(integrate_windows(pix[None, :], W)[0, 0])
    px, w = pixel_window_weights(wl, centre, 0.24, 0.1, 0.02)
    got = float(pixel_response(wl, px, w, np.array([line]), np.array([fwhm]), np.array([0.0]))[0])
    assert got == pytest.approx(want, rel=1e-9, abs=1e-12)


# --- self-absorption modes (eq. (5) of compquant.cflibs.blends) -----------------------------------


def _slab_window_response(offset, tau0, w_doppler, w_lorentz, w_instr, kernel):
    """Net window signal of a self-absorbed line per unit optically thin area, by direct quadrature.

    Emergent spectral radiance of a homogeneous slab in LTE, I(λ) = S(λ)(1 − e^{−τ(λ)}) (formal
    solution of the transfer equation; Cowan & Dieke 1948, Rev. Mod. Phys. 20, 418), with
    τ(λ) = τ₀ V(λ)/V(0), V = scipy.special.voigt_profile; the thin area is S∫τ = S τ₀/V(0).  The
    instrument spreads light emitted at μ by a Gaussian, so the window sees
    ∫ (1 − e^{−τ(μ)}) K(μ) dμ / (τ₀/V(0)) with K the window's response to light emitted at μ
    (``kernel``); integrated by scipy.integrate.quad."""
    sg, gm = w_doppler * FWHM_TO_SIGMA, w_lorentz / 2
    v0 = special.voigt_profile(0.0, sg, gm)

    def f(mu):
        return -math.expm1(-tau0 * special.voigt_profile(mu - offset, sg, gm) / v0) * kernel(mu)

    num = integrate.quad(f, offset - 1.5, offset + 1.5, points=[offset], limit=1000, epsabs=1e-13)[0]
    return num / (tau0 / v0)


@pytest.mark.parametrize("offset,tau0,w_lorentz", [(0.13, 5.0, 0.01), (0.0, 20.0, 0.02), (-0.16, 50.0, 0.01),
                                                    (0.3, 3.0, 0.01), (0.05, 0.3, 0.01)])
def test_self_absorbed_interferer_matches_slab_transfer_quadrature(offset, tau0, w_lorentz):
    # window and side bands (continuous geometry), instrument 0.05 nm, Doppler 0.004 nm: blend_terms with
    # the absorption of eq. (5) against the direct quadrature of the slab's emergent profile (above);
    # K(μ) = window part − (h/s)·band parts of the instrument Gaussian, each an erf difference
    # (Abramowitz & Stegun 7.1.1 / 26.2.29)
    window, side, gap, w_d, w_ins = 0.2, 0.08, 0.02, 0.004, 0.05
    h = window / 2

    def kernel(mu):
        return (_gauss_interval(-h, h, mu, w_ins) - h / side * (_gauss_interval(-h - gap - side, -h - gap, mu, w_ins)
                                                                + _gauss_interval(h + gap, h + gap + side, mu, w_ins)))

    want = _slab_window_response(offset, tau0, w_d, w_lorentz, w_ins, kernel)
    args = (np.array([300.0]), np.array([[window, side, gap]]), np.array([300.0 + offset]), np.array([1.0]),
            np.array([math.hypot(w_ins, w_d)]), np.array([w_lorentz]), np.array([0.0]))
    got = blend_terms(*args, absorption=(np.array([tau0]), np.array([w_d]), np.array([w_ins])))[0][0]
    thin = blend_terms(*args)[0][0]
    assert got == pytest.approx(want, abs=1e-8)
    if abs(offset) < 0.25:  # the core in the window or a band: the thin prediction is far off
        assert abs(thin - want) > 0.02
    else:  # only the far wing reaches the band, and the wing (τ ≪ 1) is not absorbed: thin is right there
        assert thin == pytest.approx(want, rel=0.01)


def test_self_absorbed_interferer_on_pixels_matches_the_line_pipeline():
    # a thick line (τ₀ = 8) just beside a side band on 0.015 nm pixels: the pixel means of its emergent
    # profile (slab transfer as above, instrument Gaussian over each pixel: erf differences) put through the
    # pipeline's window weights (compquant.lines.windows) must equal eq. (5) on the pixels (eq. (1′))
    from compquant.cflibs.blends import pixel_window_weights
    from compquant.lines.windows import build_window_weights, integrate_windows, window_geometry

    wl = np.arange(240.0, 260.0, 0.015)
    edges = np.concatenate([[wl[0] - 0.0075], 0.5 * (wl[1:] + wl[:-1]), [wl[-1] + 0.0075]])
    centre, line, tau0, w_d, w_l, w_ins = 249.215, 249.05, 8.0, 0.0035, 0.012, 0.05
    W = build_window_weights(wl, [window_geometry(centre, 0.24, 0.1, 0.02)])
    pix = np.zeros(wl.size)
    for p in W.pixels[0]:
        pix[p] = _slab_window_response(line, tau0, w_d, w_l, w_ins,
                                       lambda mu, p=p: _gauss_interval(edges[p], edges[p + 1], mu, w_ins)
                                       ) / (edges[p + 1] - edges[p])
    want = float(integrate_windows(pix[None, :], W)[0, 0])
    px, w = pixel_window_weights(wl, centre, 0.24, 0.1, 0.02)
    got = blend_terms(np.array([centre]), np.array([[0.24, 0.1, 0.02]]), np.array([line]), np.array([1.0]),
                      np.array([math.hypot(w_ins, w_d)]), np.array([w_l]), np.array([0.0]), axis=wl,
                      pixel_weights=[(px, w)], absorption=(np.array([tau0]), np.array([w_d]), np.array([w_ins])))[0][0]
    assert got == pytest.approx(want, abs=1e-8)


def test_absorbed_part_holds_exactly_what_the_fit_takes_as_self_absorption():
    # Σ a = 1 − SA with SA the fit's own sa_factor (same grid; eq. (5)); for a Lorentzian line SA is the
    # Ladenburg–Reiche function e^{−τ₀/2}[I₀(τ₀/2) + I₁(τ₀/2)] (Ladenburg & Reiche 1913), scipy.special.ive
    from compquant.cflibs.blends import absorbed_part
    from compquant.cflibs.selfabs import sa_factor

    tau0 = np.array([1e-3, 0.5, 5.0, 80.0])
    wg, wl = np.array([0.004, 0.003, 1e-7, 0.004]), np.array([0.01, 0.02, 0.01, 0.005])
    _x, a = absorbed_part(tau0, wg, wl)
    assert a.sum(axis=1) == pytest.approx(1.0 - sa_factor(tau0, wg, wl), rel=1e-12, abs=1e-15)
    lr = special.ive(0, 2.5) + special.ive(1, 2.5)
    assert 1.0 - a[2].sum() == pytest.approx(lr, rel=2e-4)


@pytest.fixture(scope="module")
def iron_nickel_slab(tmp_path_factory):
    """One noise-free, self-absorbed (0.1 mm slab) iron–nickel spectrum of the forward model, every shipped
    line of Fe, Ni, Cr, Mn emitted (the method measures 34), with the Stark widths the analysis assumes
    (0.01 nm at 10¹⁷ cm⁻³, no T scaling) and full partition functions, so that the slab physics is the
    analysis' own and what is left is the blends (and the continuum); measured once by the line pipeline."""
    from compquant.cflibs.capture import method_windows
    from compquant.fileio import tomllib
    from compquant.lines import measure_run
    from compquant.method import method_from_dict
    from compquant.plasma import synthesize
    from compquant.plasma.forward import default_lines
    from compquant.run import Run, write_run

    af = _benchmark_module()
    comp = {"Fe": 0.544, "Ni": 0.369, "Cr": 0.0733, "Mn": 0.0137}
    T, ne = 9458.0, 8.5e16
    wl = np.arange(200.0, 560.0, 0.02)
    lines = default_lines(elements=list(comp)).with_default_stark(0.01, 1e17)
    spec = synthesize(wl, comp, np.full(2, T), np.full(2, ne), length_mm=0.1, resolving_power=5000.0,
                      self_absorption=True, continuum=True, lines=lines, stark_t_exponent=0.0)
    spec = spec / spec.max() * 4e4
    path = tmp_path_factory.mktemp("blend_sa") / "feni_sa.h5"
    write_run(path, wl, spec, [{"sample_id": "FN", "role": "unknown", "standard_ref": "", "description": "x"}],
              np.zeros(2, int), instrument={"resolving_power": 5000.0, "model": "forward model (test)"},
              acquisition={"gate_delay_us": 1.0, "gate_width_us": 2.0})
    cf = ('mc_draws = 0\nstark_fallback_fwhm_nm = 0.01\nself_absorption = "curve_of_growth"\n'
          'plasma_length_mm = 0.1\n')
    method = method_from_dict(tomllib.loads(af.method_toml(af.LINES["iron-nickel"], cf)), source="test")
    with Run.open(path) as run:
        lm = measure_run(run, method)
        out = dict(table=lm.table, windows=method_windows(method, run.wavelength), acquisition=dict(run.acquisition),
                   instrument=dict(run.instrument), settings=method.sections["cf"])
    return comp, T, ne, out


@pytest.mark.slow
def test_blend_correction_with_self_absorbed_interferers_removes_the_blend_bias(iron_nickel_slab, monkeypatch):
    # Truth: the composition, T and nₑ given to the forward model (above).  Measured when written
    # (2026-12-03): without the correction T −0.08 %, nₑ +23.9 %, Fe +4.2 %, Ni −3.3 %, Cr −14.1 %,
    # Mn −1.7 %; with it (eq. (5)) T −0.36 %, nₑ +3.9 %, Fe −0.4 %, Ni +0.7 %, Cr −1.1 %, Mn +2.1 %; with
    # the interferers predicted optically thin instead nₑ +10.7 % (Fe −0.7 %, Ni +1.1 %, Cr −0.6 %).
    from compquant.cflibs.blends import BlendCorrection

    comp, T, ne, data = iron_nickel_slab
    r0, before = _errors(comp, data, False)
    r1, after = _errors(comp, data, True)
    assert max(abs(before[e]) for e in ("Fe", "Ni", "Cr")) > 0.04  # the blend bias is there
    assert max(abs(after[e]) for e in ("Fe", "Ni", "Cr")) < 0.015  # and gone with the correction
    assert abs(after["Mn"]) < 0.04
    assert abs(r1.temperature_k / T - 1) < 0.01
    assert abs(r1.electron_density_cm3 / ne - 1) < 0.06 < abs(r0.electron_density_cm3 / ne - 1)
    info = r1.fit["blend_correction"]
    assert info["applied"] and info["self_absorbed"] and info["converged"] and 2 <= info["passes"] <= 6
    assert r0.fit["blend_correction"] == {"applied": False}
    # the interferers' own self-absorption matters: predicted optically thin they leave nₑ further off
    orig = BlendCorrection.blend_prediction
    monkeypatch.setattr(BlendCorrection, "blend_prediction", lambda self, sol, length_cm=None: orig(self, sol))
    r2, _ = _errors(comp, data, True)
    assert abs(r2.electron_density_cm3 / ne - 1) > abs(r1.electron_density_cm3 / ne - 1) + 0.03


@pytest.mark.slow
def test_slab_mode_without_interference_leaves_the_fit_as_it_is():
    # The demo runs (compquant.simulate, invented brasses) emit the method's lines only, so the predicted
    # interference of every window is below blend_tolerance: the columnar result must be the one without the
    # correction, to the last bit, with 0 passes (and no second slab fit). Internal consistency check.
    from compquant import Run, load_method, measure_run
    from compquant.cflibs import CFSettings, analyse_cf
    from compquant.cflibs.capture import method_windows

    root = Path(__file__).resolve().parents[1] / "demo_runs"
    method = load_method(root / "method.toml")
    with Run.open(root / "demo-day1.h5") as run:
        m = measure_run(run, method)
        windows = method_windows(method, run.wavelength)
        acq, ins = dict(run.acquisition), dict(run.instrument)
    out = []
    for blend in (True, False):
        s = CFSettings.from_section(method.sections["cf"]).to_dict()
        s["blend_correction"] = blend
        assert s["self_absorption"] == "columnar"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out.append(analyse_cf(m.table, sample_id="LOT-2611-A", settings=s, windows=windows, acquisition=acq,
                                  instrument=ins, measurement=m, mc_draws=0))
    on, off = out
    info = on.fit["blend_correction"]
    assert info["applied"] and info["self_absorbed"] and info["negligible"] and info["passes"] == 0
    assert info["changes"][0] < 0.002
    assert on.temperature_k == off.temperature_k and on.electron_density_cm3 == off.electron_density_cm3
    np.testing.assert_array_equal([e.mass_fraction for e in on.elements], [e.mass_fraction for e in off.elements])
    np.testing.assert_array_equal([e.u for e in on.elements], [e.u for e in off.elements])
