"""One analyte's calibration curve from its per-standard records (the fitting half of :func:`calibrate`).

:func:`curve_from_records` fits the curve with Bonferroni outlier exclusion, checks its
sensitivity, works out the stated and excess scatter, the diagnostics (lack of fit, Mandel's
test), the detection limits and the interference coefficients; docs/calibration.md gives the
statistics.

References
----------
.. [1] ISO 11843-2:2000, Capability of detection -- linear calibration case.
.. [2] JCGM 100:2008 (GUM), 5.1.2.
.. [3] IUPAC, Compendium of Analytical Nomenclature, 3rd ed. 1998, 18.4.3.7 (LOD = 3 s / slope).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.calibrate.config import AnalyteConfig
from compquant.calibrate.fit import (
    QUADRATIC_MODELS,
    WEIGHTED_MODELS,
    d_dxi,
    fit_curve,
    outlier_limit,
    slope_at,
)
from compquant.calibrate.limits import iso11843_2, lod_loq
from compquant.calibrate.lof import lack_of_fit, lack_of_fit_shots, mandel_test
from compquant.calibrate.model import Curve
from compquant.errors import CalibrationError


def curve_from_records(
    a: AnalyteConfig,
    recs: list,
    *,
    outlier_alpha: float = 0.05,
    blank: tuple | None = None,
    where: str = "calibration",
) -> Curve:
    """Fit one analyte's curve from per-standard records.

    Each record: ``standard_id, sample_id, x, u_x, y, u_y, n_shots, used, reason``
    (+ ``w`` mass fraction, ``matrix_fraction`` for basis 'ratio', ``xi:<El>`` and
    ``uxi:<El>`` per interferer, ``shots`` per-shot responses or None,
    ``line_flags``).  ``blank``: ``(s, source, n)`` from :func:`blank_sd` or None.

    Steps: fit with Bonferroni outlier exclusion (:func:`_fit_excluding_outliers`), sensitivity
    checks (:func:`_check_sensitivity`), the stated variance and excess scatter
    (:func:`_scatter`), per-standard and curve diagnostics (:func:`_diagnostics`), detection
    limits (:func:`_detection_limits`, IUPAC 3s/10s and ISO 11843-2) and the interference
    coefficients (:func:`_interference_terms`).  Equations: docs/calibration.md.

    References
    ----------
    .. [1] ISO 11843-2:2000, capability of detection, linear calibration.
    .. [2] JCGM 100:2008 (GUM), 5.1.2 (uncertainty of x through the local slope).
    """
    recs = [dict(r) for r in recs]
    for r in recs:
        r.setdefault("reason", "")
        r.setdefault("used", True)
        r.setdefault("shots", None)
        r.setdefault("line_flags", "")
    weighted = a.model in WEIGHTED_MODELS
    interf = [(it["element"], it["kind"]) for it in a.interferences]
    fit, use, lim = _fit_excluding_outliers(a, recs, weighted, interf, outlier_alpha, where)
    x = np.array([r["x"] for r in use])
    y = np.array([r["y"] for r in use])
    uy = np.array([r["u_y"] for r in use])
    xi = {el: np.array([r[f"xi:{el}"] for r in use]) for el, _ in interf}
    slope = _check_sensitivity(fit, x, xi, where)
    scale_stated, sigma_m2, cov = _scatter(fit, use, interf, x, uy, slope)
    lof, mandel, resid_sd = _diagnostics(a, fit, use, lim, x, y, uy, weighted, interf)
    lod_x, loq_x, s_blank, lod_source = _detection_limits(fit, interf, blank, resid_sd, y, where)
    iso = iso11843_2(x, y) if not interf else None
    ws = np.array([r.get("w", r["x"]) for r in use])
    wm_nom = float(np.mean([r["matrix_fraction"] for r in use])) if a.basis == "ratio" else 1.0
    if iso is not None and a.basis == "ratio":
        iso["x_c_mass_fraction"] = iso["x_c"] * wm_nom
        iso["x_d_mass_fraction"] = iso["x_d"] * wm_nom
    return Curve(
        element=a.element,
        line_id=a.line,
        basis=a.basis,
        internal_standard=a.internal_standard,
        model=a.model,
        through_origin=a.through_origin,
        weighted=weighted,
        terms=list(fit.terms),
        beta=fit.beta.tolist(),
        cov_fit=fit.cov.tolist(),
        cov=cov.tolist(),
        scale=float(fit.scale),
        scale_stated=scale_stated,
        sigma_m2=sigma_m2,
        dof=int(fit.dof),
        r2=float(fit.r2),
        residual_sd=resid_sd,
        range_x=[float(x.min()), float(x.max())],
        range_mass_fraction=[float(ws.min()), float(ws.max())],
        matrix_fraction_nominal=wm_nom,
        lod_x=float(lod_x),
        loq_x=float(loq_x),
        lod=float(lod_x * wm_nom),
        loq=float(loq_x * wm_nom),
        lod_source=lod_source,
        iso11843=iso,
        standards=[{k: v for k, v in r.items() if k != "shots"} for r in recs],
        interferences=_interference_terms(fit, interf, cov),
        diagnostics={
            "lack_of_fit": lof,
            "mandel": mandel,
            "outlier_limit": float(lim),
            "n_used": int(fit.n),
            "n_excluded": int(sum(not r["used"] for r in recs)),
            "s_blank": float(s_blank),
        },
    )


def _fit_excluding_outliers(a: AnalyteConfig, recs: list, weighted: bool, interf: list, outlier_alpha: float,
                            where: str):
    """Fit the curve, excluding one standard at a time whose studentised residual exceeds the
    Bonferroni limit (``outliers = "exclude"``) while enough standards remain.

    Returns ``(fit, used records, outlier limit)``; excluded records get ``used=False`` and a reason.
    """
    while True:
        use = [r for r in recs if r["used"]]
        uy = np.array([r["u_y"] for r in use])
        if weighted and np.any(uy <= 0):
            raise CalibrationError(
                "a standard has zero response uncertainty; weights 1/u^2 undefined",
                where=where,
                fix="use model 'linear'",
            )
        fit = fit_curve(
            np.array([r["x"] for r in use]),
            np.array([r["y"] for r in use]),
            model=a.model,
            through_origin=a.through_origin,
            weights=1.0 / uy**2 if weighted else None,
            xi={el: np.array([r[f"xi:{el}"] for r in use]) for el, _ in interf},
            interferences=interf,
            where=where,
        )
        limit_used = outlier_limit(fit.n, len(fit.terms), outlier_alpha)
        worst = int(np.argmax(np.abs(fit.studentized)))
        t_worst = float(fit.studentized[worst])
        if a.outliers == "exclude" and abs(t_worst) > limit_used and fit.n - 1 >= max(3, len(fit.terms) + 2):
            use[worst].update(
                used=False,
                reason=f"outlier: studentised residual {t_worst:.2f} beyond "
                f"+-{limit_used:.2f} (Bonferroni, alpha "
                f"{outlier_alpha})",
            )
            continue
        return fit, use, limit_used


def _check_sensitivity(fit, x, xi, where: str) -> np.ndarray:
    """The local slope at each standard; refuse a curve whose sensitivity is not positive over the
    standards' range or a quadratic that turns over inside it."""
    beta = fit.beta
    slope = slope_at(fit.terms, beta, x, xi)
    if (
        np.any(slope <= 0)
        or slope_at(fit.terms, beta, np.array([x.min(), x.max()]), {k: np.zeros(2) for k in xi}).min() <= 0
    ):
        raise CalibrationError(
            f"curve sensitivity is not positive over the standards' range (slope {float(np.min(slope)):.3g})",
            where=where,
            fix="check the line choice, the standards, or the model",
        )
    if "x2" in fit.terms:
        c2 = beta[fit.terms.index("x2")]
        c1 = beta[fit.terms.index("x")]
        if c2 < 0 and -c1 / (2 * c2) < x.max():
            raise CalibrationError(
                "quadratic curve turns over inside the calibrated range",
                where=where,
                fix="use the linear model or fewer high standards",
            )
    return slope


def _scatter(fit, use, interf, x, uy, slope):
    """``(scale_stated, sigma_m2, cov)``: the stated variance (repeatability + certified uncertainty
    through the local slope + interferers' uncertainties), the excess scatter of a new sample, and
    the coefficients' covariance scaled by the larger of observed and stated variance."""
    beta = fit.beta
    ux = np.array([r["u_x"] for r in use])
    kstat = uy**2 + (slope * ux) ** 2
    for el, _ in interf:
        kstat = kstat + (np.asarray(d_dxi(fit.terms, beta, x, el)) * np.array([r[f"uxi:{el}"] for r in use])) ** 2
    scale_stated = float(np.mean(fit.w * kstat))
    scale_used = max(fit.scale, scale_stated)
    # scatter of a new sample about the curve beyond its own repeatability: the
    # observed residual variance (never less than the stated one) minus the
    # standards' mean repeatability, which the unknown's replaces
    sigma_m2 = max(scale_used - float(np.mean(fit.w * uy**2)), 0.0)
    return scale_stated, sigma_m2, scale_used * fit.xtwx_inv


def _diagnostics(a, fit, use, lim, x, y, uy, weighted, interf):
    """Per-standard diagnostics (written into the records), lack of fit, Mandel's test and the
    residual standard deviation: ``(lack_of_fit, mandel, residual_sd)``."""
    for i, r in enumerate(use):
        r.update(
            fitted=float(fit.fitted[i]),
            residual=float(fit.resid[i]),
            studentized=float(fit.studentized[i]),
            leverage=float(fit.leverage[i]),
            outlier=bool(abs(fit.studentized[i]) > lim),
        )
    # lack of fit: repeated standards first, else shots
    refs = [r["standard_id"] for r in use]
    lof = lack_of_fit(fit, refs) if len(set(refs)) < len(refs) else None
    if lof is None and all(r["shots"] is not None for r in use):
        lof = lack_of_fit_shots(fit, [r["shots"] for r in use])
    mandel = (
        mandel_test(x, y, 1.0 / uy**2 if weighted else None)
        if a.model not in QUADRATIC_MODELS and not interf and not a.through_origin
        else None
    )
    return lof, mandel, float(np.sqrt(np.sum(fit.resid**2) / fit.dof))


def _detection_limits(fit, interf, blank, resid_sd, y, where: str):
    """LOD and LOQ in content units (3 s / slope, 10 s / slope at zero content, IUPAC practice) with
    s from the blank or, without a usable blank, the calibration residuals.

    Returns ``(lod_x, loq_x, s_blank, lod_source)``.
    """
    s0 = slope_at(fit.terms, fit.beta, 0.0, {el: 0.0 for el, _ in interf})
    if s0 <= 0:
        raise CalibrationError(
            "curve sensitivity at zero content is not positive",
            where=where,
            fix="check the model (a quadratic may bend at low content)",
        )
    if blank is not None and blank[0] > 0:
        s_blank, lod_source = blank[0], f"blank: {blank[1]}"
    else:
        s_blank, lod_source = resid_sd, "calibration residual sd (no usable blank in the run)"
    # a zero scatter (identical blank shots and a perfect fit: copied or noise-free data) gives
    # no detection limit at all; refuse rather than certify against LOD = 0
    y_scale = float(np.max(np.abs(y))) if len(y) else 0.0
    if not (np.isfinite(s_blank) and s_blank > 1e-12 * max(y_scale, 1e-300)):
        raise CalibrationError(
            "the blank scatter and the calibration residuals are both zero: no detection limit can be computed",
            where=where,
            fix="measure a blank with several shots; identical shots suggest copied or simulated noise-free data",
        )
    lod_x, loq_x = lod_loq(s_blank, s0)
    return lod_x, loq_x, s_blank, lod_source


def _interference_terms(fit, interf, cov) -> list[dict]:
    """The fitted interference coefficients with their standard uncertainties."""
    out = []
    for el, kind in interf:
        term = f"{'add' if kind == 'additive' else 'mul'}:{el}"
        j = fit.terms.index(term)
        out.append(
            {
                "element": el,
                "kind": kind,
                "coefficient": float(fit.beta[j]),
                "u": float(math.sqrt(cov[j, j])),
                "meaning": (
                    "response added per unit content of the interferer"
                    if kind == "additive"
                    else "sensitivity change per unit content of the interferer"
                ),
            }
        )
    return out


__all__ = ["curve_from_records"]
