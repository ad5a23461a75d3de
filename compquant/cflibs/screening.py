"""Robust closure: which lines and elements may enter the calibration-free closure.

Rules (docs/calibration-free.md §5a), applied between the fit and the closure by
:func:`compquant.cflibs.analysis.analyse_cf`, which re-runs the analysis after every change:

1. **Enough evidence** (:func:`too_few_lines`): an element is reported with at least
   ``min_lines_per_element`` usable lines, or with one line whose SNR = I/u(I) reaches
   ``single_line_min_snr`` (default 10, the 10σ quantification limit of Currie 1968, *Anal.
   Chem.* 40, 586).  Otherwise it is *not determined*: its value is not reported; it stays in
   the closure (so the others are not biased by its absence) only while no non-detection
   contradicts it and its estimate stays below ``weak_element_closure_max`` (0.2; a judgement:
   a weak signal cannot carry a major element); else it is removed from the closure.
2. **Outliers** (:func:`outlier_lines`): after the joint fit, a line whose ordinate departs
   from the fitted plasma by more than ``outlier_sigma`` standard deviations is rejected (one
   line per element and round, the worst first) and reported.  The standard deviation of
   line i is √(u_i² + s²): u_i the ordinate's own u (intensity and A_ki grade) and s the
   robust scatter of all residuals (1.4826 × median absolute deviation; Rousseeuw & Croux
   1993, *J. Am. Stat. Assoc.* 88, 1273), so a model that is off by a few per cent for every
   line does not lose its lines, while a blend at 20× its predicted intensity (Δy = 3) does.
3. **Non-detections are upper limits** (:func:`nondetection_conflicts`): every line of an
   analysed element that was looked for and not found gives I < max(I_meas, 0) + k u(I)
   (k = ``upper_limit_sigma``).  The fitted plasma predicts each such line's intensity; a
   prediction that exceeds its limit by more than 2 u(prediction) contradicts the element's
   detection.  An element with one usable line and any contradiction, or with at least as
   many contradicted non-detections as usable lines, is *not determined*.
"""

from __future__ import annotations

import math

import numpy as np

from compquant.cflibs.atomicdata import species_name
from compquant.cflibs.constants import K_B_EV, LN_SAHA_PREFACTOR

MAD_TO_SD = 1.4826  # normal-consistency factor of the median absolute deviation


def too_few_lines(L, settings) -> dict[str, str]:
    """Elements without enough usable lines → reason (rule 1)."""
    out = {}
    snr = np.where(L.u_intensity > 0, L.intensity / np.where(L.u_intensity > 0, L.u_intensity, 1.0), np.inf)
    for e in sorted(set(L.element)):
        idx = np.flatnonzero(L.element == e)
        if len(idx) >= settings.min_lines_per_element:
            continue
        best = float(np.max(snr[idx]))
        if len(idx) == 1 and best >= settings.single_line_min_snr:
            continue
        lines = ", ".join(f"{L.line_id[i]} (SNR {snr[i]:.3g})" for i in idx)
        out[e] = (f"{len(idx)} usable line(s): {lines}; needs ≥ {settings.min_lines_per_element} lines or one "
                  f"line with SNR ≥ {settings.single_line_min_snr:g}")
    return out


def residual_z(sol, u_y) -> tuple[np.ndarray, np.ndarray, float]:
    """Residuals y − ŷ of the central fit, their z-scores and the robust scatter s (rule 2)."""
    res = np.asarray(sol.fit.residuals[0], float)
    s = 0.0
    if res.size >= 5:
        s = MAD_TO_SD * float(np.median(np.abs(res - np.median(res))))
    z = res / np.sqrt(np.asarray(u_y, float) ** 2 + s**2)
    return res, z, s


def outlier_lines(L, sol, u_y, settings, can_drop) -> dict[str, str]:
    """The worst line of each element beyond ``outlier_sigma`` → reason (rule 2).

    ``can_drop(mask)`` says whether the fit still determines T (and nₑ) without the lines.
    """
    res, z, s = residual_z(sol, u_y)
    mask = np.zeros(L.n, bool)
    out = {}
    for e in sorted(set(L.element)):
        idx = np.flatnonzero(L.element == e)
        if len(idx) < 2:
            continue  # a single line fits its own intercept exactly
        j = idx[int(np.argmax(np.abs(z[idx])))]
        if abs(z[j]) <= settings.outlier_sigma:
            continue
        trial = mask.copy()
        trial[j] = True
        if not can_drop(trial):
            continue
        mask = trial
        kind = "above" if res[j] > 0 else "below"
        out[str(L.line_id[j])] = (
            f"rejected: intensity {math.exp(abs(res[j])):.3g}× {kind} the fitted plasma "
            f"({abs(z[j]):.1f} σ, σ from the line's u and the fit scatter {s:.3g}); "
            + ("a blend or wrong atomic data" if res[j] > 0 else "self-absorption or wrong atomic data"))
    return out


def predict_ln_intensity(model, sol, nd, settings):
    """ln I and u(ln I) of lines ``nd`` (a LineSet) predicted by the central solution.

    Uses the fitted slope and the element's (Saha–Boltzmann) or species' (Boltzmann)
    intercept; ion lines carry the Saha shift at the fitted T and nₑ (the inverse of the
    ordinate transformation of :mod:`compquant.cflibs.solver`).  Lines with no intercept
    in the fit give NaN.
    """
    T = float(sol.T[0])
    ne = float(sol.ne[0])
    beta = sol.fit.beta[0]
    cov = sol.fit.cov[0]
    out = np.full(nd.n, np.nan)
    u = np.full(nd.n, np.nan)
    low = float(model.lowering(np.array([T]), np.array([ne]), 1)[0])
    shift = LN_SAHA_PREFACTOR + 1.5 * math.log(T) - math.log(ne) + low / (K_B_EV * T)
    for i in range(nd.n):
        e, z = str(nd.element[i]), int(nd.ion[i])
        key = e if settings.fit == "saha-boltzmann" else species_name(e, z)
        if key not in sol.groups:
            continue
        g = 1 + sol.groups.index(key)
        x = float(nd.ek[i])
        if settings.fit == "saha-boltzmann" and z == 2:
            x += model.ie1[e]
        y = beta[0] * x + beta[g]
        if settings.fit == "saha-boltzmann" and z == 2:
            y += shift
        out[i] = y - math.log(nd.wl[i]) + math.log(nd.gA[i])
        v = np.array([x, 1.0])
        c = cov[np.ix_([0, g], [0, g])]
        u[i] = math.sqrt(max(float(v @ c @ v), 0.0) + float(nd.u_ln_a[i]) ** 2)
    return out, u


def nondetection_conflicts(L, nd, model, sol, settings):
    """Rule 3: ``(checks, undetermined)``.

    ``checks`` lists every non-detected line with its prediction and limit; ``undetermined``
    maps elements whose detection the non-detections contradict to a reason.
    """
    checks = []
    if nd.n == 0:
        return checks, {}
    ln_pred, u_pred = predict_ln_intensity(model, sol, nd, settings)
    conflicts: dict[str, list[tuple[str, float]]] = {}
    for i in range(nd.n):
        if not np.isfinite(ln_pred[i]) or not (nd.intensity[i] > 0):
            continue
        ratio = math.exp(ln_pred[i] - math.log(nd.intensity[i]))
        bad = ln_pred[i] - 2.0 * u_pred[i] > math.log(nd.intensity[i])
        checks.append({"line_id": str(nd.line_id[i]), "element": str(nd.element[i]),
                       "predicted_intensity": math.exp(ln_pred[i]), "u_ln_predicted": float(u_pred[i]),
                       "upper_limit": float(nd.intensity[i]), "ratio": ratio, "contradicted": bool(bad)})
        if bad:
            conflicts.setdefault(str(nd.element[i]), []).append((str(nd.line_id[i]), ratio))
    out = {}
    for e, items in conflicts.items():
        n_lines = int(np.sum(L.element == e))
        if n_lines == 1 or len(items) >= n_lines:
            items = sorted(items, key=lambda t: -t[1])
            shown = ", ".join(f"{lid} predicted {r:.3g}× its limit" for lid, r in items[:4])
            out[e] = (f"{len(items)} line(s) predicted above their non-detection limits against "
                      f"{n_lines} detected: {shown}{' …' if len(items) > 4 else ''}")
    return checks, out


__all__ = ["nondetection_conflicts", "outlier_lines", "predict_ln_intensity", "residual_z", "too_few_lines"]
