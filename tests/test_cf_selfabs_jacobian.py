"""The self-absorption fit's Jacobian against finite differences (issue 22 item 6).

Outside references: central finite differences (common practice: error O(h²)) and
``scipy.optimize.approx_fprime`` (scipy's forward differences); the analytic columns of the
fit's Jacobian must agree with them (every column in closed form: to 10⁻⁶ of the column), the
curve-of-growth slope ∂ln SA/∂ln τ₀ with the
small-τ₀ limit of the Ladenburg–Reiche function (Ladenburg & Reiche 1913: for a Lorentzian,
SA ≈ 1 − τ₀/4, so ∂ln SA/∂ln τ₀ → −τ₀/4).
"""

from __future__ import annotations

import math
import warnings

import cf_hand
import numpy as np
import pytest
from scipy.optimize import approx_fprime
from test_cflibs import _self_absorbed_table

from compquant.cflibs import analyse_cf
from compquant.cflibs.analysis import _Analysis
from compquant.cflibs.atomicdata import default_atomic_data
from compquant.cflibs.selfabs import dln_sa_dln_tau0, sa_factor, sa_slopes
from compquant.cflibs.selfabs_fit import SelfAbsFit
from compquant.plasma.constants import KB_EV
from compquant.plasma.profiles import voigt


def _central(f, x, h):
    """Central differences of a vector function f at x, step h per coordinate (O(h²))."""
    x = np.asarray(x, float)
    cols = []
    for j in range(x.size):
        e = np.zeros_like(x)
        e[j] = h[j]
        cols.append((f(x + e) - f(x - e)) / (2.0 * h[j]))
    return np.column_stack(cols)


@pytest.mark.parametrize("wg,wl", [(0.004, 0.0), (0.004, 0.01), (0.001, 0.05)])
def test_curve_of_growth_slope_against_finite_differences(wg, wl):
    tau0 = np.array([1e-3, 0.05, 0.7, 3.0, 25.0])
    got = dln_sa_dln_tau0(tau0, wg, wl)
    for t, g in zip(tau0, got):
        def ln_sa(v):
            return np.log(sa_factor(np.exp(v), wg, wl))
        h = 1e-5
        central = float((ln_sa(np.log(t) + h) - ln_sa(np.log(t) - h)) / (2 * h))
        assert g == pytest.approx(central, rel=1e-6, abs=1e-12)
        fwd = approx_fprime(np.array([np.log(t)]), lambda v: float(ln_sa(v[0])), 1e-7)[0]
        assert g == pytest.approx(fwd, rel=1e-4, abs=1e-9)
    # Lorentzian, small τ₀: SA ≈ 1 − τ₀/4 (Ladenburg–Reiche), so the slope is ≈ −τ₀/4
    small = dln_sa_dln_tau0(np.array([1e-4]), 1e-9, 0.02)[0]
    assert small == pytest.approx(-1e-4 / 4, rel=1e-3)
    # the flat branches of sa_factor have slope 0
    assert dln_sa_dln_tau0(np.array([1e-12]), wg, wl)[0] == 0.0


def _captured_fits(monkeypatch, settings):
    """Run a columnar analysis and keep every (resid, jac, bounds) the fit built, with θ at the end.

    ``settings`` may hold ``package_atomic`` (the shipped atomic data, whose ∂ln U/∂T is in closed
    form, instead of the hand tables, differentiated numerically) and ``fallback`` (an assumed
    Stark FWHM for the lines without Stark data, which then widens with nₑ)."""
    settings = dict(settings)
    package = settings.pop("package_atomic", False)
    fallback = settings.pop("fallback", 0.0)
    seen = []
    real = _Analysis._residual_fn

    def spy(self, X, groups, ne_est, fit_length, length_cm):
        out = real(self, X, groups, ne_est, fit_length, length_cm)
        seen.append(out)
        return out

    monkeypatch.setattr(_Analysis, "_residual_fn", spy)
    lt, _, w_instr = _self_absorbed_table(fallback)
    if fallback:
        settings.update(stark_fallback_fwhm_nm=fallback, stark_fallback_ne_cm3=1e17)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        analyse_cf(line_table=lt, atomic=default_atomic_data() if package else cf_hand.atomic(),
                   settings={"mc_draws": 0, "instrument_fwhm_nm": w_instr, "self_absorption": "columnar",
                             **settings})
    return seen


@pytest.mark.parametrize("settings", [{"ne_method": "stark"}, {"ne_method": "saha"},
                                      {"ne_method": "stark", "fit": "boltzmann"},
                                      {"ne_method": "stark", "package_atomic": True},
                                      {"ne_method": "saha", "package_atomic": True},
                                      {"ne_method": "stark", "fallback": 0.01}])
def test_columnar_fit_jacobian_against_central_differences(monkeypatch, settings):
    seen = _captured_fits(monkeypatch, settings)
    free = [s for s in seen if s[3][0][-1] == np.log(1e-6)]  # the fits with ln L free
    assert free, "the columnar fit ran with L free"
    resid, jac, _, (lo, hi) = free[-1]
    assert callable(jac)
    rng = np.random.default_rng(5)
    # a physical point: T 10 000 K, intercepts from the thin start, L = 0.5 mm (the truth) and
    # nearby points; ln nₑ at the truth when fitted
    n_par = lo.size
    theta = np.zeros(n_par)
    theta[0] = -1.0 / (KB_EV * 10000.0)
    # intercepts: least squares at fixed slope/L/nₑ from the residual itself (linear start)
    ne_free = settings["ne_method"] == "saha"
    if ne_free:
        theta[-2] = np.log(5e16)
    theta[-1] = np.log(0.05)
    qcols = [j for j in range(1, n_par - 1) if not (ne_free and j == n_par - 2)]
    for _ in range(3):  # Gauss–Newton on the intercepts only (analytic columns)
        J = jac(theta)
        step, *_ = np.linalg.lstsq(J[:, qcols], -resid(theta), rcond=None)
        theta[qcols] += step
    theta_true = theta.copy()
    for k in range(3):
        th = theta_true + (0.0 if k == 0 else 1.0) * rng.normal(0, 0.02, n_par)
        th = np.clip(th, lo, hi)
        r0 = resid(th)
        assert np.all(np.abs(r0) < 1e3)  # a valid point
        J = jac(th)
        h = 1e-6 * np.maximum(1.0, np.abs(th))
        Jc = _central(resid, th, h)
        scale = np.max(np.abs(Jc), axis=0)
        # every column in closed form (intercepts, ln L, slope, ln nₑ): 10⁻⁶ of the column's size
        # (central differences' own error at h = 10⁻⁶ is ~10⁻⁹..10⁻⁷ of the column here)
        assert np.all(np.abs(J - Jc) <= 1e-6 * scale[None, :] + 1e-12)
        # and the whole Jacobian against scipy's forward differences
        Jf = np.column_stack([approx_fprime(th, lambda t, i=i: resid(t)[i], h) for i in range(r0.size)]).T
        np.testing.assert_allclose(J, Jf, rtol=0, atol=1e-4 * np.max(scale))


@pytest.mark.parametrize("wg,wl", [(0.004, 0.0), (0.004, 0.01), (0.001, 0.05), (0.01, 0.002)])
def test_width_slopes_of_sa_and_peak_against_finite_differences(wg, wl):
    """∂ln SA/∂w_G, ∂ln SA/∂w_L (fixed τ₀) and ∂ln φ₀/∂w against central differences (common
    practice, O(h²)) of sa_factor and of the Voigt peak (scipy.special.voigt_profile)."""
    tau0 = np.array([0.05, 0.7, 3.0, 25.0])
    s_tau, s_g, s_l, p_g, p_l = sa_slopes(tau0, wg, wl)
    np.testing.assert_allclose(s_tau, dln_sa_dln_tau0(tau0, wg, wl), rtol=1e-12, atol=1e-15)
    h = 1e-6 * max(wg, wl)

    def ln_sa(t, a, b):
        return float(np.log(sa_factor(np.array([t]), a, b))[0])

    def ln_peak(a, b):
        return float(np.log(voigt(0.0, 0.0, a, b)))

    for k, t in enumerate(tau0):
        cg = (ln_sa(t, wg + h, wl) - ln_sa(t, wg - h, wl)) / (2 * h)
        assert s_g[k] == pytest.approx(cg, rel=1e-5, abs=1e-6 * abs(s_l[k]) + 1e-9)
        if wl > h:
            cl = (ln_sa(t, wg, wl + h) - ln_sa(t, wg, wl - h)) / (2 * h)
            assert s_l[k] == pytest.approx(cl, rel=1e-5)
        else:  # w_L = 0: one-sided (the Lorentzian width cannot go below 0)
            cl = (ln_sa(t, wg, 2 * h) - ln_sa(t, wg, h)) / h
            assert s_l[k] == pytest.approx(cl, rel=1e-3)
        # Euler: SA is homogeneous of degree 0 in the widths
        assert wg * s_g[k] + wl * s_l[k] == pytest.approx(0.0, abs=1e-12 * (1 + abs(s_l[k])))
    assert p_g[0] == pytest.approx((ln_peak(wg + h, wl) - ln_peak(wg - h, wl)) / (2 * h), rel=1e-6)
    if wl > h:
        assert p_l[0] == pytest.approx((ln_peak(wg, wl + h) - ln_peak(wg, wl - h)) / (2 * h), rel=1e-6)
    # a pure Gaussian line: SA depends on τ₀ alone, and φ₀ = √(4 ln 2/π)/w_G, ∂ln φ₀/∂w_G = −1/w_G
    if wl == 0.0:
        assert np.all(s_g == 0.0)
        assert p_g[0] == pytest.approx(-1.0 / wg, rel=1e-12)


@pytest.mark.parametrize("settings", [{"ne_method": "stark"}, {"ne_method": "saha"},
                                      {"ne_method": "stark", "fit": "boltzmann"}])
def test_closed_form_columns_leave_the_solution_where_the_differences_put_it(monkeypatch, settings):
    """The closed-form T and ln nₑ columns against the forward differences they replace: both
    are Jacobians of the same residual, so the optimiser stops at the same point within its
    tolerances (xtol 10⁻¹⁰, ftol 10⁻¹²; here T, nₑ and every mass fraction within 10⁻⁷)."""
    lt, _, w_instr = _self_absorbed_table()
    out = {}
    for tn in (False, True):
        monkeypatch.setattr(SelfAbsFit, "ANALYTIC_TN", tn)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out[tn] = analyse_cf(line_table=lt, atomic=cf_hand.atomic(),
                                 settings={"mc_draws": 0, "instrument_fwhm_nm": w_instr,
                                           "self_absorption": "columnar", **settings}).to_dict()
    a, b = out[False], out[True]
    assert b["temperature_k"] == pytest.approx(a["temperature_k"], rel=1e-7)
    assert b["electron_density_cm3"] == pytest.approx(a["electron_density_cm3"], rel=1e-7)
    checked = 0
    for key in ("mass_fraction", "uncertified_mass_fraction"):  # withheld results keep the latter
        fa = {e["element"]: e.get(key) for e in a["elements"]}
        for e in b["elements"]:
            if isinstance(fa[e["element"]], float):
                assert e[key] == pytest.approx(fa[e["element"]], rel=1e-7)
                checked += 1
            else:
                assert e.get(key) is None
    assert checked


@pytest.mark.parametrize("T", [4321.0, 9876.5, 17654.3])
def test_partition_function_log_derivative_against_central_differences(T):
    """d ln U/d ln T of the shipped partition functions (level sums: ⟨E⟩/kT; tables: the slope of
    the interpolant; bare nucleus: 0) against central differences of partition_function (common
    practice, O(h²)), at temperatures between the tables' grid points."""
    from compquant.atomic import partition as part

    idx = part.partition_index()
    tab = [n for n in idx.index if idx.loc[n, "method"] == "tabulated"][:3]
    names = ("Fe I", "Fe II", "Cu I", "Cu II", "Al I", "H II", *tab)
    got = part.dln_partition_functions_dln_t(names, T)
    h = 1e-5
    for sp, g in zip(names, got):
        c = (math.log(part.partition_function(sp, T * math.exp(h)))
             - math.log(part.partition_function(sp, T * math.exp(-h)))) / (2 * h)
        assert g == pytest.approx(c, rel=1e-7, abs=1e-9), sp
    assert got[names.index("H II")] == 0.0


def test_profile_from_the_kept_faddeeva_values_is_scipys_voigt_profile_bit_for_bit():
    """The curve-of-growth grid's profile is computed from w(z) (kept for the Jacobian): the same
    numbers, bit for bit, as scipy.special.voigt_profile (the outside reference), with and without a
    Lorentzian part, and the kept w(z) is scipy.special.wofz at z = (x + iγ)/(σ√2) (to 1e-13)."""
    from scipy.special import voigt_profile, wofz

    from compquant.cflibs import selfabs

    rng = np.random.default_rng(11)
    wg = rng.uniform(1e-3, 2e-2, 60)
    wl = np.where(rng.random(60) < 0.25, 0.0, 10.0 ** rng.uniform(-5, -1, 60))
    selfabs._PROFILE_MEMO.clear()
    phi, dx, phi0, w = selfabs._profile_and_faddeeva(wg, wl)
    sigma = wg / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    scale = 0.5 * (0.5346 * wl + np.sqrt(0.2166 * wl**2 + wg**2))
    x = selfabs._XS_HALF[None, :] * scale[:, None]
    ref = voigt_profile(x, sigma[:, None], wl[:, None] / 2.0)
    assert phi[:, selfabs._MID:].tobytes() == ref.tobytes()
    assert phi0.tobytes() == ref[:, 0].tobytes()
    assert np.array_equal(phi[:, : selfabs._MID + 1], phi[:, selfabs._MID:][:, ::-1])  # even
    lor = wl > 0
    z = (x[lor] + 1j * wl[lor, None] / 2.0) / (sigma[lor, None] * math.sqrt(2.0))
    np.testing.assert_allclose(w[lor], wofz(z), rtol=1e-13, atol=0)  # z rounded differently
    assert np.all(np.isnan(w[~lor]))
    # sa_factor and the slopes read the same memo entry: sa_factor's numbers are unchanged by it
    tau0 = rng.uniform(0.01, 10.0, 60)
    before = selfabs.sa_factor(tau0, wg, wl)
    sa_slopes(tau0, wg, wl)
    assert selfabs.sa_factor(tau0, wg, wl).tobytes() == before.tobytes()


@pytest.mark.parametrize("case", ["stark", "fallback", "measured"])
def test_lorentz_width_slopes_against_central_differences(case):
    """∂w_L/∂ln T and ∂w_L/∂ln nₑ of CurveOfGrowth.lorentz_thin (Stark widths w_ref (nₑ/n_ref)^p
    (T/T_ref)^a with and without T_ref, the fallback ∝ nₑ, the measured-width branch through the
    Doppler width) against central differences (common practice, O(h²))."""
    from types import SimpleNamespace

    from compquant.cflibs.selfabs_cog import CurveOfGrowth

    n = 6
    nan = float("nan")
    stark = case == "stark"
    L = SimpleNamespace(
        n=n, wl=np.array([324.7, 327.4, 404.6, 438.4, 510.6, 521.8]),
        stark_w=np.array([0.01, 0.02, 0.015, nan, nan, 0.0]) if stark else np.full(n, nan),
        stark_ne=np.array([1e16, 1e17, 1e16, nan, nan, 1e16]) if stark else np.full(n, nan),
        stark_t=np.array([1e4, nan, 8e3, nan, nan, nan]), stark_p=np.array([1.0, 0.8, nan, nan, nan, 1.0]),
        fwhm=np.array([0.05, 0.06, nan, 0.04, 0.045, 0.05]))
    s = SimpleNamespace(stark_t_exponent=-0.35 if stark else 0.0,
                        stark_fallback_fwhm_nm=0.012 if case == "fallback" else None,
                        stark_fallback_ne_cm3=1e17, sa_width_from_measured=case == "measured")
    cog = CurveOfGrowth()
    cog.L, cog.s = L, s
    cog.mass_line = np.array([63.5, 63.5, 55.8, 55.8, 63.5, 63.5])
    cog.w_instr = np.full(n, 0.03)
    T, ne = 9500.0, 4e16
    ones = np.ones(n)
    wl = cog.lorentz_thin(T, ne, ones)
    d_t, d_n = cog.lorentz_thin_slopes(T, ne, wl)
    h = 1e-5
    c_t = (cog.lorentz_thin(T * math.exp(h), ne, ones) - cog.lorentz_thin(T * math.exp(-h), ne, ones)) / (2 * h)
    c_n = (cog.lorentz_thin(T, ne * math.exp(h), ones) - cog.lorentz_thin(T, ne * math.exp(-h), ones)) / (2 * h)
    assert np.any(wl > 0)
    np.testing.assert_allclose(d_t, c_t, rtol=1e-6, atol=1e-14)
    np.testing.assert_allclose(d_n, c_n, rtol=1e-6, atol=1e-14)
    if case == "measured":
        assert np.any(d_t != 0)  # the measured widths move with the Doppler width
    if stark:
        assert d_t[0] != 0 and d_t[1] == 0  # (T/T_ref)^a only where T_ref is given
