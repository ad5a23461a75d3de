"""PLS block: predictions equal scikit-learn's, limits follow their published formulas."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from sklearn.cross_decomposition import PLSRegression

from compquant.calibrate.pls import fit_pls, predict_pls, q_limit, t2_limit


def _data(seed=0, n=12, p=80):
    rng = np.random.default_rng(seed)
    y = rng.uniform(0.01, 0.1, n)
    basis = rng.normal(size=(3, p))
    X = np.outer(y, basis[0]) + np.outer(rng.normal(size=n) * 0.01, basis[1]) + rng.normal(0, 1e-3, (n, p))
    return X, y, basis


def test_predictions_match_sklearn_and_loo_rmsecv():
    X, y, _ = _data()
    m = fit_pls(X, y, max_components=4)
    pr = predict_pls(m, X)
    ref = PLSRegression(n_components=m["n_components"], scale=False).fit(X - X.mean(0), y)  # reference
    np.testing.assert_allclose(pr["y"], ref.predict(X - X.mean(0)).ravel(), rtol=1e-10, atol=1e-14)
    # leave-one-out RMSECV recomputed with sklearn directly
    A = m["n_components"]
    pred = []
    for i in range(len(y)):
        tr = np.arange(len(y)) != i
        mu = X[tr].mean(0)
        pred.append(PLSRegression(A, scale=False).fit(X[tr] - mu, y[tr]).predict(X[i:i + 1] - mu)[0])
    assert m["rmsecv"] == pytest.approx(math.sqrt(np.mean((np.ravel(pred) - y) ** 2)), rel=1e-8)
    assert m["rmsecv"] < 0.01 * np.ptp(y) * 10


def test_applicability_flags_foreign_spectra():
    X, y, basis = _data(1)
    m = fit_pls(X, y, max_components=3)
    inside = predict_pls(m, X)["inside"]
    assert inside.mean() >= 0.75
    foreign = X[:3] + 0.05 * basis[2]  # a component never seen in the calibration
    assert not predict_pls(m, foreign)["inside"].any()


def test_t2_limit_formula():
    # Tracy, Young & Mason 1992 new-observation limit (from memory, verify)
    A, n = 2, 20
    assert t2_limit(A, n, 0.05) == pytest.approx(
        A * (n - 1) * (n + 1) / (n * (n - A)) * stats.f.ppf(0.95, A, n - A))


def test_q_limit_single_eigenvalue_is_scaled_chi2():
    # with one residual eigenvalue lam, Q = lam * chi2(1); Jackson-Mudholkar's normal
    # approximation should give a limit of the right size (within 25 % of lam * chi2_0.95(1))
    lam = 2.0
    assert q_limit([lam]) == pytest.approx(lam * stats.chi2.ppf(0.95, 1), rel=0.25)
    # many equal eigenvalues: Q ~ lam chi2(k); the approximation is then close (5 %)
    assert q_limit([lam] * 30) == pytest.approx(lam * stats.chi2.ppf(0.95, 30), rel=0.05)
