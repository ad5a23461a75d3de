"""Calibration curves: design matrices, (weighted) least squares, diagnostics, inverse prediction.

A curve relates the *response* ``y`` (line intensity or intensity ratio) to the
*content* ``x`` (mass fraction or mass-fraction ratio) and, optionally, to the
contents ``x_j`` of named interfering elements::

    y = b0 + b1 x [+ b2 x^2] + sum_j d_j x_j + sum_j g_j x x_j

``b0`` is dropped for a curve through the origin; ``d_j`` are *additive*
(line-overlap) interference terms, ``g_j`` *multiplicative* (sensitivity)
terms, so that the local sensitivity is ``b1 + 2 b2 x + sum_j g_j x_j``.  The
model is linear in its coefficients, so it is fitted by ordinary or weighted
least squares (``beta = (X'WX)^-1 X'W y``) with the covariance
``sigma^2 (X'WX)^-1``, ``sigma^2 = sum w r^2 / (n - p)`` -- the conventions of
``statsmodels`` OLS/WLS (checked against it in the tests).

Inverse prediction (the content of an unknown from its response) solves the
model for ``x``; its uncertainty follows ISO 8466-1:1990 for the straight line
and the first-order delta method (GUM, JCGM 100:2008, 5.1.2, law of propagation
of uncertainty, with the implicit-function derivatives) for every model; see
docs/calibration.md for the budget.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from compquant.calibrate.curve_models import MODELS, QUADRATIC_MODELS, WEIGHTED_MODELS
from compquant.errors import CalibrationError


def design_terms(model: str, through_origin: bool, interferences=()) -> list[str]:
    """Names of the design-matrix columns: ``1``, ``x``, ``x2``, ``add:<El>``, ``mul:<El>``."""
    terms = [] if through_origin else ["1"]
    terms.append("x")
    if model in QUADRATIC_MODELS:
        terms.append("x2")
    for el, kind in interferences:
        terms.append(f"{'add' if kind == 'additive' else 'mul'}:{el}")
    return terms


def design_matrix(terms, x, xi: dict | None = None) -> np.ndarray:
    """Design matrix for ``terms`` at contents ``x`` (n,) and interferer contents ``xi``."""
    x = np.asarray(x, dtype=float)
    xi = xi or {}
    cols = []
    for t in terms:
        if t == "1":
            cols.append(np.ones_like(x))
        elif t == "x":
            cols.append(x)
        elif t == "x2":
            cols.append(x * x)
        elif t.startswith("add:"):
            cols.append(np.broadcast_to(np.asarray(xi[t[4:]], float), x.shape))
        elif t.startswith("mul:"):
            cols.append(x * np.asarray(xi[t[4:]], float))
        else:
            raise ValueError(f"unknown design term {t!r}")
    return np.column_stack(cols)


def _coefs(terms, beta, xi):
    """Polynomial coefficients ``(c0, c1, c2)`` in x at fixed interferer contents."""
    c0 = c1 = c2 = 0.0
    for t, b in zip(terms, beta):
        if t == "1":
            c0 = c0 + b
        elif t == "x":
            c1 = c1 + b
        elif t == "x2":
            c2 = c2 + b
        elif t.startswith("add:"):
            c0 = c0 + b * np.asarray(xi[t[4:]], float)
        elif t.startswith("mul:"):
            c1 = c1 + b * np.asarray(xi[t[4:]], float)
    return c0, c1, c2


def slope_at(terms, beta, x, xi=None):
    """Local sensitivity ``dy/dx`` at ``x``."""
    _, c1, c2 = _coefs(terms, beta, xi or {})
    return c1 + 2.0 * c2 * np.asarray(x, float)


def d_dxi(terms, beta, x, el):
    """``dy/dx_j`` for interfering element ``el`` at ``x``."""
    out = 0.0
    for t, b in zip(terms, beta):
        if t == f"add:{el}":
            out = out + b
        elif t == f"mul:{el}":
            out = out + b * np.asarray(x, float)
    return out


@dataclass
class CurveFit:
    """Result of one least-squares curve fit (arrays are per standard used)."""

    terms: list
    beta: np.ndarray
    cov: np.ndarray  # sigma_hat^2 (X'WX)^-1, as statsmodels
    xtwx_inv: np.ndarray  # (X'WX)^-1
    scale: float  # sigma_hat^2 = sum w r^2 / dof
    dof: int
    x: np.ndarray
    y: np.ndarray
    w: np.ndarray
    xi: dict = field(default_factory=dict)
    fitted: np.ndarray = None
    resid: np.ndarray = None
    leverage: np.ndarray = None
    studentized: np.ndarray = None  # externally studentised residuals
    r2: float = float("nan")

    @property
    def n(self) -> int:
        return len(self.x)

    @property
    def residual_sd(self) -> float:
        """sqrt(sum w r^2 / dof): response units (unweighted fit) or weighted units."""
        return math.sqrt(self.scale)

    def predict(self, x, xi=None) -> np.ndarray:
        return design_matrix(self.terms, np.atleast_1d(np.asarray(x, float)), xi) @ self.beta


def fit_curve(
    x,
    y,
    *,
    model: str = "linear",
    through_origin: bool = False,
    weights=None,
    xi: dict | None = None,
    interferences=(),
    where: str = "calibration",
) -> CurveFit:
    """Least-squares fit of a calibration curve.

    ``model`` is ``linear`` (OLS), ``weighted`` (WLS, straight line, ``weights``
    required: 1/u^2 of the responses), ``quadratic`` (OLS, or WLS when
    ``weights`` are given) or ``weighted_quadratic`` (WLS, weights required).  ``interferences`` is a sequence of
    ``(element, "additive"|"multiplicative")`` with contents in ``xi``.

    Raises :class:`CalibrationError` for fewer than 3 standards, fewer standards
    than coefficients + 1, non-finite data, identical contents, or a singular
    design (e.g. an interferer whose content does not vary).
    """
    if model not in MODELS:
        raise CalibrationError(f"unknown model '{model}'", where=where, fix=f"use one of {', '.join(MODELS)}")
    x = np.asarray(x, float).ravel()
    y = np.asarray(y, float).ravel()
    n = len(x)
    xi = {k: np.asarray(v, float).ravel() for k, v in (xi or {}).items()}
    terms = design_terms(model, through_origin, interferences)
    _check_data(x, y, len(terms), where)
    w = _weights(weights, model, n, where)
    X = design_matrix(terms, x, xi)
    sw = np.sqrt(w)
    Xw = X * sw[:, None]
    yw = y * sw
    # scale columns before the rank test so that tiny contents do not look singular
    colscale = np.linalg.norm(Xw, axis=0)
    if np.any(colscale == 0) or np.linalg.matrix_rank(Xw / colscale) < len(terms):
        raise CalibrationError(
            "singular calibration design (a term does not vary between standards)",
            where=where,
            fix="drop the term (e.g. an interference whose content is constant) or add standards",
        )
    Q, R = np.linalg.qr(Xw)
    beta = np.linalg.solve(R, Q.T @ yw)
    Rinv = np.linalg.inv(R)
    xtwx_inv = Rinv @ Rinv.T
    fitted = X @ beta
    resid = y - fitted
    dof = n - len(terms)
    ssr = float(np.sum(w * resid**2))
    scale = ssr / dof
    lev = np.sum(Q**2, axis=1)
    if "1" in terms:
        ybar = np.sum(w * y) / np.sum(w)
        sst = float(np.sum(w * (y - ybar) ** 2))
    else:
        sst = float(np.sum(w * y**2))
    r2 = 1.0 - ssr / sst if sst > 0 else float("nan")
    return CurveFit(
        terms=terms,
        beta=beta,
        cov=scale * xtwx_inv,
        xtwx_inv=xtwx_inv,
        scale=scale,
        dof=dof,
        x=x,
        y=y,
        w=w,
        xi=xi,
        fitted=fitted,
        resid=resid,
        leverage=lev,
        studentized=_studentized(resid, sw, lev, scale, dof),
        r2=r2,
    )


def _check_data(x, y, p: int, where: str) -> None:
    """Refuse fewer than 3 standards, fewer than ``p + 1``, non-finite data or identical contents."""
    n = len(x)
    if n < 3:
        raise CalibrationError(
            f"only {n} standard(s) usable; at least 3 are needed",
            where=where,
            fix="measure at least 3 certified standards spanning the range",
        )
    if n < p + 1:
        raise CalibrationError(
            f"{n} standards cannot fit {p} coefficients with a residual",
            where=where,
            fix="add standards or use a simpler model",
        )
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise CalibrationError(
            "non-finite content or response", where=where, fix="check the line measurements of the standards"
        )
    if np.ptp(x) <= 1e-12 * max(1.0, float(np.max(np.abs(x)))):
        raise CalibrationError(
            "all standards have the same content",
            where=where,
            fix="use standards that span the calibration range",
        )


def _weights(weights, model: str, n: int, where: str) -> np.ndarray:
    """The least-squares weights: ones (OLS), or the given 1/u^2, finite and positive."""
    if weights is None:
        if model in WEIGHTED_MODELS:
            raise CalibrationError(
                "weighted model needs response uncertainties",
                where=where,
                fix="use model 'linear' or provide u_intensity",
            )
        return np.ones(n)
    w = np.asarray(weights, float).ravel()
    if w.shape != (n,) or not np.all(np.isfinite(w)) or np.any(w <= 0):
        raise CalibrationError(
            "weights must be finite and > 0 (zero response uncertainty?)",
            where=where,
            fix="check u_intensity of the standards",
        )
    return w


def _studentized(resid, sw, lev, scale: float, dof: int) -> np.ndarray:
    """Externally studentised residuals (Belsley, Kuh & Welsch 1980; statsmodels
    OLSInfluence.resid_studentized_external); NaN (too few degrees of freedom) as 0."""
    n = len(resid)
    with np.errstate(divide="ignore", invalid="ignore"):
        if scale > 0:
            r_int = resid * sw / np.sqrt(scale * np.clip(1 - lev, 1e-300, None))
        else:
            r_int = np.zeros(n)
        if dof > 1:
            t_ext = r_int * np.sqrt((dof - 1) / np.clip(dof - r_int**2, 1e-300, None))
        else:
            t_ext = np.full(n, np.nan)
    return np.nan_to_num(t_ext, nan=0.0)


def outlier_limit(n: int, p: int, alpha: float = 0.05) -> float:
    """Bonferroni critical value for the largest |externally studentised residual|.

    ``t_{1 - alpha/(2n)}(n - p - 1)`` (outlier test on studentised residuals with
    a Bonferroni bound: Cook & Weisberg 1982, *Residuals and Influence in
    Regression*, sec. 2.2 -- common practice).
    """
    dof = n - p - 1
    if dof < 1:
        return float("inf")
    return float(stats.t.ppf(1 - alpha / (2 * n), dof))


def invert(terms, beta, y, xi=None, *, lo=None, hi=None):
    """Solve the curve for the content ``x`` that gives response ``y``.

    For a quadratic the root on the increasing branch (``dy/dx > 0``) is taken.
    Returns ``(x, dydx)``; raises CalibrationError when no increasing root exists.
    """
    c0, c1, c2 = _coefs(terms, beta, xi or {})
    c0, c1, c2 = float(c0), float(c1), float(c2)
    d = c0 - float(y)
    if abs(c2) < 1e-300 or abs(c2 * (abs(d) + 1)) < 1e-14 * c1 * c1:
        if c1 <= 0:
            raise CalibrationError(
                "curve sensitivity is not positive at these interferer contents",
                fix="check the interference corrections of the calibration",
            )
        x = -d / c1
    else:
        disc = c1 * c1 - 4 * c2 * d
        if disc < 0:
            raise CalibrationError(
                "response outside the values the quadratic curve can reach",
                fix="re-calibrate with standards bracketing the sample",
            )
        sq = math.sqrt(disc)
        # numerically stable root with positive derivative c1 + 2 c2 x = +sqrt(disc)
        x = (2 * -d) / (c1 + sq) if (c1 + sq) != 0 else (-c1 + sq) / (2 * c2)
    dydx = c1 + 2 * c2 * x
    if dydx <= 0:
        raise CalibrationError(
            "curve is not increasing at this response",
            fix="re-calibrate with standards bracketing the sample",
        )
    return x, dydx


# the tests of the curve's form live in compquant.calibrate.lof (imported here for callers of fit)
from compquant.calibrate.lof import lack_of_fit, lack_of_fit_shots, mandel_test  # noqa: E402

__all__ = [
    "MODELS",
    "CurveFit",
    "fit_curve",
    "design_terms",
    "design_matrix",
    "invert",
    "slope_at",
    "d_dxi",
    "outlier_limit",
    "lack_of_fit",
    "lack_of_fit_shots",
    "mandel_test",
]
