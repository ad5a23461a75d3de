"""Tests of a calibration curve's form: lack of fit against pure error, and Mandel's test.

Lack of fit compares the residual scatter with the pure error of repeated standards (or of the
shots): ``F = (SS_lof / nu_lof) / (SS_pe / nu_pe)``; Mandel's test compares a straight line with
a quadratic through the same points.

References
----------
.. [1] N. R. Draper, H. Smith, Applied Regression Analysis, 3rd ed., Wiley 1998, 2.1 (lack of fit
   and pure error).
.. [2] J. Mandel, The Statistical Analysis of Experimental Data, Wiley 1964 (the test as used in
   DIN 38402-51; from memory).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from scipy import stats

from compquant.errors import CalibrationError

if TYPE_CHECKING:
    from compquant.calibrate.fit import CurveFit


def lack_of_fit(fit: CurveFit, groups) -> dict | None:
    """Lack-of-fit F test from replicate points (same standard measured several times).

    ``groups``: group label per fitted point.  ``SS_pe = sum w (y - ybar_g)^2``
    (pure error, ``n - m`` dof), ``SS_lof = SS_res - SS_pe`` (``m - p`` dof),
    ``F = (SS_lof/(m-p)) / (SS_pe/(n-m))`` (Draper & Smith 1998, *Applied
    Regression Analysis*, 3rd ed., sec. 2.1).  None when replicates do not allow it.
    """
    g = np.asarray(groups)
    labels = np.unique(g)
    m, n, p = len(labels), fit.n, len(fit.terms)
    if n - m < 1 or m - p < 1:
        return None
    ss_pe = 0.0
    for lab in labels:
        s = g == lab
        ww, yy = fit.w[s], fit.y[s]
        ss_pe += float(np.sum(ww * (yy - np.sum(ww * yy) / np.sum(ww)) ** 2))
    ss_res = float(np.sum(fit.w * fit.resid**2))
    return _lof_result(ss_res - ss_pe, m - p, ss_pe, n - m, "repeated standards")


def lack_of_fit_shots(fit: CurveFit, shot_values: list) -> dict | None:
    """Lack-of-fit test with the shots of each standard as replicates.

    ``shot_values[i]``: per-shot responses of standard i.  ``SS_lof = sum_i n_i
    (ybar_i - yhat_i)^2`` with ``m - p`` dof against the shot-to-shot pure error
    (same reference as :func:`lack_of_fit`).  In LIBS the between-standard
    (matrix) scatter usually exceeds shot noise, so this test is often
    significant; it is reported, not enforced.
    """
    m, p = fit.n, len(fit.terms)
    if m - p < 1 or any(len(v) < 2 for v in shot_values):
        return None
    ss_pe = float(sum(np.sum((np.asarray(v) - np.mean(v)) ** 2) for v in shot_values))
    nu_pe = int(sum(len(v) - 1 for v in shot_values))
    ss_lof = float(sum(len(v) * (np.mean(v) - fh) ** 2 for v, fh in zip(shot_values, fit.fitted)))
    return _lof_result(ss_lof, m - p, ss_pe, nu_pe, "shots")


def _lof_result(ss_lof, nu_lof, ss_pe, nu_pe, basis):
    if ss_pe <= 0:
        return None
    F = (max(ss_lof, 0.0) / nu_lof) / (ss_pe / nu_pe)
    pval = float(stats.f.sf(F, nu_lof, nu_pe))
    return {
        "F": float(F),
        "dof_lof": int(nu_lof),
        "dof_pe": int(nu_pe),
        "p_value": pval,
        "significant": bool(pval < 0.05),
        "basis": basis,
    }


def mandel_test(x, y, weights=None) -> dict | None:
    """Mandel's fitting test, linear vs quadratic (ISO 8466-1:1990, sec. 6.2; DIN 38402-51).

    ``DS^2 = (N-2) s_1^2 - (N-3) s_2^2``, ``PW = DS^2 / s_2^2`` compared with
    ``F(1, N-3)`` at 99 %; a significant result says the quadratic fits better.
    """
    x = np.asarray(x, float)
    if len(x) < 5:
        return None
    from compquant.calibrate.fit import fit_curve

    try:
        f1 = fit_curve(x, y, model="linear", weights=weights)
        f2 = fit_curve(x, y, model="quadratic", weights=weights)
    except CalibrationError:
        return None
    N = len(x)
    if f2.scale <= 0:
        return None
    ds2 = (N - 2) * f1.scale - (N - 3) * f2.scale
    pw = ds2 / f2.scale
    crit = float(stats.f.ppf(0.99, 1, N - 3))
    return {"PW": float(pw), "F_crit_99": crit, "quadratic_better": bool(pw > crit)}


__all__ = ["lack_of_fit", "lack_of_fit_shots", "mandel_test"]
