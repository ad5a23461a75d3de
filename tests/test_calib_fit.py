"""Calibration curve fits checked against statsmodels (outside reference library)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.outliers_influence import OLSInfluence

from compquant.calibrate.build import curve_from_records
from compquant.calibrate.config import AnalyteConfig
from compquant.calibrate.fit import fit_curve, lack_of_fit, outlier_limit
from compquant.errors import CalibrationError

X = np.array([0.01, 0.03, 0.06, 0.10, 0.15, 0.22, 0.30])
Y = np.array([0.118, 0.335, 0.628, 1.041, 1.530, 2.262, 3.050])
UY = np.array([0.004, 0.006, 0.009, 0.012, 0.016, 0.024, 0.030])


def _records(x, y, uy, ux=None):
    ux = np.zeros_like(x) if ux is None else ux
    return [
        dict(
            standard_id=f"S{i}",
            sample_id=f"S{i}",
            x=float(x[i]),
            u_x=float(ux[i]),
            y=float(y[i]),
            u_y=float(uy[i]),
            n_shots=100,
            w=float(x[i]),
        )
        for i in range(len(x))
    ]


def test_ols_matches_statsmodels():
    fit = fit_curve(X, Y, model="linear")
    res = sm.OLS(Y, sm.add_constant(X)).fit()  # statsmodels OLS (reference)
    np.testing.assert_allclose(fit.beta, res.params, rtol=1e-10)
    np.testing.assert_allclose(np.sqrt(np.diag(fit.cov)), res.bse, rtol=1e-10)
    assert fit.r2 == pytest.approx(res.rsquared, rel=1e-12)
    assert fit.scale == pytest.approx(res.scale, rel=1e-10)
    infl = OLSInfluence(res)
    np.testing.assert_allclose(fit.studentized, infl.resid_studentized_external, rtol=1e-8)
    np.testing.assert_allclose(fit.leverage, infl.hat_matrix_diag, rtol=1e-10)


def test_wls_matches_statsmodels():
    w = 1 / UY**2
    fit = fit_curve(X, Y, model="weighted", weights=w)
    res = sm.WLS(Y, sm.add_constant(X), weights=w).fit()  # statsmodels WLS (reference)
    np.testing.assert_allclose(fit.beta, res.params, rtol=1e-10)
    np.testing.assert_allclose(np.sqrt(np.diag(fit.cov)), res.bse, rtol=1e-9)
    assert fit.r2 == pytest.approx(res.rsquared, rel=1e-10)
    # WLS is OLS on the whitened data (y sqrt(w), X sqrt(w)); studentised residuals of that model
    sw = np.sqrt(w)
    white = sm.OLS(Y * sw, sm.add_constant(X) * sw[:, None]).fit()
    np.testing.assert_allclose(fit.studentized, OLSInfluence(white).resid_studentized_external, rtol=1e-7)


def test_quadratic_and_origin_match_statsmodels():
    fit = fit_curve(X, Y, model="quadratic")
    res = sm.OLS(Y, np.column_stack([np.ones_like(X), X, X**2])).fit()
    np.testing.assert_allclose(fit.beta, res.params, rtol=1e-9)
    np.testing.assert_allclose(np.sqrt(np.diag(fit.cov)), res.bse, rtol=1e-9)
    fit0 = fit_curve(X, Y, model="linear", through_origin=True)
    res0 = sm.OLS(Y, X[:, None]).fit()  # no constant: statsmodels uses the uncentred R^2
    np.testing.assert_allclose(fit0.beta, res0.params, rtol=1e-10)
    np.testing.assert_allclose(np.sqrt(np.diag(fit0.cov)), res0.bse, rtol=1e-10)
    assert fit0.r2 == pytest.approx(res0.rsquared, rel=1e-12)


def test_prediction_band_matches_statsmodels_obs_interval():
    # OLS: with u0 equal to the standards' mean repeatability and exact certificates the
    # new-sample variance is s^2 + x'Cx: statsmodels' observation interval
    uy = np.full(len(X), 0.003)
    a = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity")
    c = curve_from_records(a, _records(X, Y, uy))
    xg = np.array([0.0, 0.05, 0.2, 0.35])
    yhat, half = c.band(xg, 0.95, u0=0.003)
    res = sm.OLS(Y, sm.add_constant(X)).fit()
    sf = res.get_prediction(sm.add_constant(xg)).summary_frame(alpha=0.05)
    np.testing.assert_allclose(yhat, sf["mean"], rtol=1e-10)
    np.testing.assert_allclose(yhat + half, sf["obs_ci_upper"], rtol=1e-8)
    # WLS: observation variance scale / w0 (statsmodels get_prediction with weights)
    aw = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity", model="weighted")
    cw = curve_from_records(aw, _records(X, Y, UY))
    u0 = 0.015
    yh, hw = cw.band(xg, 0.95, u0=u0)
    rw = sm.WLS(Y, sm.add_constant(X), weights=1 / UY**2).fit()
    assert rw.scale > cw.scale_stated  # the regime in which both conventions coincide
    sfw = rw.get_prediction(sm.add_constant(xg), weights=np.full(len(xg), 1 / u0**2)).summary_frame(0.05)
    np.testing.assert_allclose(yh + hw, sfw["obs_ci_upper"], rtol=1e-8)


def test_inverse_prediction_iso8466_1():
    # ISO 8466-1:1990 eq. for s_x0 with one measurement of the sample (from memory of
    # ISO 8466-1, verify): s_x0 = s_y/b * sqrt(1 + 1/N + (y0 - ybar)^2 / (b^2 Sxx))
    uy = np.full(len(X), 0.003)
    a = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity")
    c = curve_from_records(a, _records(X, Y, uy))
    res = sm.OLS(Y, sm.add_constant(X)).fit()
    b0, b1 = res.params
    sy = math.sqrt(res.scale)
    N = len(X)
    sxx = float(np.sum((X - X.mean()) ** 2))
    for y0 in (0.2, 1.3, 2.9):
        p = c.predict_content(y0, 0.003, 100)
        assert p["x"] == pytest.approx((y0 - b0) / b1, rel=1e-10)
        s_x0 = sy / b1 * math.sqrt(1 + 1 / N + (y0 - Y.mean()) ** 2 / (b1**2 * sxx))
        assert p["u"] == pytest.approx(s_x0, rel=1e-9)


def test_quadratic_inverse_is_delta_method():
    a = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity", model="quadratic")
    yq = 10 * X - 6 * X**2 + np.array([1, -1, 2, -2, 1, 0, -1]) * 1e-3
    c = curve_from_records(a, _records(X, yq, np.full(len(X), 1e-4)))
    p = c.predict_content(1.5, 1e-4, 100)
    b = np.asarray(c.beta)
    assert b[0] + b[1] * p["x"] + b[2] * p["x"] ** 2 == pytest.approx(1.5, rel=1e-12)
    # Monte Carlo of the same linearised budget (beta ~ N(beta, C), new response scatter)
    rng = np.random.default_rng(3)
    bs = rng.multivariate_normal(b, np.asarray(c.cov), 20000)
    ys = 1.5 + rng.normal(0, math.sqrt(c.sigma_m2 + 1e-8), 20000)
    xs = (-bs[:, 1] + np.sqrt(bs[:, 1] ** 2 - 4 * bs[:, 2] * (bs[:, 0] - ys))) / (2 * bs[:, 2])
    assert np.std(xs) == pytest.approx(p["u"], rel=0.05)


def test_lack_of_fit_matches_statsmodels_anova():
    # repeated standards: lack-of-fit F = anova of the line against the saturated (group) model
    rng = np.random.default_rng(1)
    x = np.repeat([0.05, 0.1, 0.2, 0.3], 3)
    y = 1 + 10 * x + 8 * x**2 + rng.normal(0, 0.02, len(x))
    fit = fit_curve(x, y, model="linear")
    lof = lack_of_fit(fit, x)
    df = pd.DataFrame({"x": x, "y": y})
    table = anova_lm(ols("y ~ x", df).fit(), ols("y ~ C(x)", df).fit())  # statsmodels reference
    assert lof["F"] == pytest.approx(table["F"].iloc[1], rel=1e-9)
    assert lof["p_value"] == pytest.approx(table["Pr(>F)"].iloc[1], rel=1e-7)
    assert lof["significant"]


def test_outlier_excluded_with_reason():
    y = Y.copy()
    y[3] *= 1.25
    a = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity", outliers="exclude")
    c = curve_from_records(a, _records(X, y, np.full(len(X), 0.003)))
    bad = [s for s in c.standards if not s["used"]]
    assert [s["standard_id"] for s in bad] == ["S3"]
    assert "outlier" in bad[0]["reason"] and "Bonferroni" in bad[0]["reason"]
    aflag = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity", outliers="flag")
    cf = curve_from_records(aflag, _records(X, y, np.full(len(X), 0.003)))
    assert all(s["used"] for s in cf.standards)
    assert [s["standard_id"] for s in cf.standards if s["outlier"]] == ["S3"]
    assert outlier_limit(7, 2) > 3.0


@pytest.mark.parametrize(
    "x,y,msg",
    [
        ([0.1, 0.2], [1.0, 2.0], "at least 3"),
        ([0.1, 0.1, 0.1, 0.1], [1.0, 1.1, 0.9, 1.0], "same content"),
        ([0.1, 0.2, 0.3, 0.4], [1.0, np.nan, 3.0, 4.0], "non-finite"),
    ],
)
def test_fit_refuses_bad_designs(x, y, msg):
    with pytest.raises(CalibrationError, match=msg):
        fit_curve(x, y)


def test_negative_slope_and_quadratic_with_too_few():
    a = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity")
    with pytest.raises(CalibrationError, match="not positive"):
        curve_from_records(a, _records(X, Y[::-1], UY))
    aq = AnalyteConfig(element="Zn", line="Zn I 481.053", basis="intensity", model="quadratic")
    with pytest.raises(CalibrationError, match="coefficients"):
        curve_from_records(aq, _records(X[:3], Y[:3], UY[:3]))


def test_interference_singular_when_constant():
    xi = {"Fe": np.full(len(X), 0.01)}
    with pytest.raises(CalibrationError, match="singular"):
        fit_curve(X, Y, xi=xi, interferences=[("Fe", "additive")])
