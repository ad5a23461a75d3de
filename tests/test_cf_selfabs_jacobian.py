"""The self-absorption fit's Jacobian against finite differences (issue 22 item 6).

Outside references: central finite differences (common practice: error O(h²)) and
``scipy.optimize.approx_fprime`` (scipy's forward differences); the analytic columns of the
fit's Jacobian must agree with them, the curve-of-growth slope ∂ln SA/∂ln τ₀ with the
small-τ₀ limit of the Ladenburg–Reiche function (Ladenburg & Reiche 1913: for a Lorentzian,
SA ≈ 1 − τ₀/4, so ∂ln SA/∂ln τ₀ → −τ₀/4).
"""

from __future__ import annotations

import warnings

import cf_hand
import numpy as np
import pytest
from scipy.optimize import approx_fprime
from test_cflibs import _self_absorbed_table

from compquant.cflibs import analyse_cf
from compquant.cflibs.analysis import _Analysis
from compquant.cflibs.selfabs import dln_sa_dln_tau0, sa_factor
from compquant.plasma.constants import KB_EV


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
    """Run a columnar analysis and keep every (resid, jac, bounds) the fit built, with θ at the end."""
    seen = []
    real = _Analysis._residual_fn

    def spy(self, X, groups, ne_est, fit_length, length_cm):
        out = real(self, X, groups, ne_est, fit_length, length_cm)
        seen.append(out)
        return out

    monkeypatch.setattr(_Analysis, "_residual_fn", spy)
    lt, _, w_instr = _self_absorbed_table()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        analyse_cf(line_table=lt, atomic=cf_hand.atomic(),
                   settings={"mc_draws": 0, "instrument_fwhm_nm": w_instr, "self_absorption": "columnar",
                             **settings})
    return seen


@pytest.mark.parametrize("settings", [{"ne_method": "stark"}, {"ne_method": "saha"},
                                      {"ne_method": "stark", "fit": "boltzmann"}])
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
        analytic = qcols + [n_par - 1]
        # analytic columns: 1e-6 of the column's size
        assert np.all(np.abs(J[:, analytic] - Jc[:, analytic]) <= 1e-6 * scale[None, analytic] + 1e-12)
        # forward-difference columns (slope, ln nₑ): scipy's step √ε·max(1, |θ|); their own error
        # is O(h·∂²r/∂θ²), up to ~10⁻⁵ of the column where T bends the curve of growth strongly
        fd = [j for j in range(n_par) if j not in analytic]
        assert np.all(np.abs(J[:, fd] - Jc[:, fd]) <= 1e-4 * scale[None, fd] + 1e-9)
        # and the whole Jacobian against scipy's forward differences
        Jf = np.column_stack([approx_fprime(th, lambda t, i=i: resid(t)[i], h) for i in range(r0.size)]).T
        np.testing.assert_allclose(J, Jf, rtol=0, atol=1e-4 * np.max(scale))
