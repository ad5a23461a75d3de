"""Inverse prediction of a run's samples from a calibration (the per-sample half of :func:`quantify`).

:func:`predict_sample` inverts every curve for one sample, solving the interference corrections
by fixed-point iteration; :func:`sample_rows` closes the contents with the matrix by difference
(:func:`closure`, uncertainties through the Jacobian, GUM 5.1.2), applies LOD/LOQ and range
flags and ``U = k u`` (:func:`coverage_factor`); :func:`pls_rows` gives the PLS models' rows.

References
----------
.. [1] JCGM 100:2008 (GUM), 5.1.2 (law of propagation of uncertainty) and G.3-G.4 (coverage
   factor from the effective degrees of freedom).
.. [2] ISO 11095:1996, Linear calibration using reference materials (calibrated range).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from compquant.calibrate.negnet import widen_negative_net
from compquant.errors import CalibrationError


def coverage_factor(mode: str, dof: float) -> float:
    """2, or ``t_0.975(nu_eff)`` for mode 'student' (GUM G.3-G.4)."""
    if mode == "student" and math.isfinite(dof):
        return float(stats.t.ppf(0.975, max(dof, 1.0)))
    return 2.0


def effective_dof(c, u, dof) -> float:
    """Welch-Satterthwaite effective degrees of freedom of ``y = f(x_1..x_n)`` with independent
    inputs (GUM G.4.1, eq. G.2b): ``nu_eff = u_c^4(y) / sum_i (c_i u(x_i))^4 / nu_i``, with
    ``u_c^2(y) = sum_i (c_i u(x_i))^2``; sensitivity coefficients ``c``, standard uncertainties
    ``u`` and degrees of freedom ``dof`` of the inputs.  Inputs with infinite ``nu`` add nothing
    to the denominator; ``inf`` when no input has a finite one (then ``k = 2``)."""
    parts = [(float(ci) * float(ui)) ** 2 for ci, ui in zip(c, u)]
    den = sum(v**2 / float(nu) for v, nu in zip(parts, dof) if v > 0 and math.isfinite(float(nu)))
    var = sum(parts)
    return var**2 / den if den > 0 else math.inf


def closure(elements, x, ux, bases):
    """Mass fractions from contents (ratios or mass fractions) with the matrix by difference.

    ``w_m = (1 - sum w_i) / (1 + sum r_j)`` over the mass-fraction contents ``w_i`` and the
    ratios ``r_j`` to the matrix element (``w_j = r_j w_m``); uncertainties by the law of
    propagation (GUM 5.1.2) with the numerical Jacobian ``J`` (rows: the ``w``, then ``w_m``;
    columns: the contents), returned for :func:`effective_dof`."""
    x = np.asarray(x, float)

    def f(v):
        r = np.where(bases == "ratio", v, 0.0)
        wi = np.where(bases == "intensity", v, 0.0)
        wm = (1.0 - wi.sum()) / (1.0 + r.sum())
        return np.where(bases == "ratio", v * wm, v), wm

    w, wm = f(x)
    n = len(x)
    J = np.zeros((n + 1, n))
    for j in range(n):
        h = 1e-7 * max(abs(x[j]), 1e-6)
        xp, xm = x.copy(), x.copy()
        xp[j] += h
        xm[j] -= h
        (wp, wmp), (wq, wmq) = f(xp), f(xm)
        J[:n, j] = (wp - wq) / (2 * h)
        J[n, j] = (wmp - wmq) / (2 * h)
    cov = J @ np.diag(np.asarray(ux, float) ** 2) @ J.T
    u = np.sqrt(np.clip(np.diag(cov), 0, None))
    return w, u[:n], float(wm), float(u[n]), J


def pls_rows(measurement, calibration, smap, sample_ids, run_flags, not_reported,
              matrix_fraction) -> list:
    """Results of the PLS models (basis 'pls') when the measurement carries mean spectra."""
    pls = calibration.pls
    spectra = getattr(measurement, "mean_spectra", None)
    wl = getattr(measurement, "wavelength", None)
    if not pls or not spectra or wl is None:
        if pls:
            not_reported.append(
                {
                    "sample_id": "*",
                    "element": ",".join(pls["models"]),
                    "reason": "PLS needs the mean spectra of the measurement",
                }
            )
        return []
    from compquant.calibrate.pls import predict_pls, spectra_matrix

    wl = np.asarray(wl, float)
    ids = [s for s in sample_ids if s in spectra]
    is_mask = None
    if pls.get("is_mask_nm"):
        is_mask = np.isin(np.round(wl, 6), np.round(np.asarray(pls["is_mask_nm"], float), 6))
    if pls.get("target") == "ratio":
        for s in ids:
            if s not in matrix_fraction:
                not_reported.append({"sample_id": s, "element": ",".join(pls["models"]),
                                     "reason": "PLS ratio result needs the matrix fraction from the curves"})
        ids = [s for s in ids if s in matrix_fraction]
    if not ids:
        return []
    rows = []
    for el, m in pls["models"].items():
        want = np.asarray(m["wavelength_mask_nm"], float)
        mask = np.isin(np.round(wl, 6), np.round(want, 6))
        bad_is = is_mask is not None and int(is_mask.sum()) != len(pls["is_mask_nm"])
        if int(mask.sum()) != len(want) or bad_is:
            not_reported.append({"sample_id": "*", "element": el,
                                 "reason": "the run's wavelength axis differs from the PLS calibration's"})
            continue
        X = spectra_matrix(spectra, ids, mask, pls.get("normalise", "none"), is_mask)
        pr = predict_pls(m, X)
        for i, sid in enumerate(ids):
            f = matrix_fraction[sid][0] if pls.get("target") == "ratio" else 1.0
            u = m["rmsecv"] * f
            y = float(pr["y"][i]) * f
            lo_r, hi_r = m["y_range"][0] * f, m["y_range"][1] * f
            flags = []
            below = y < 3 * u
            if below:
                flags.append("below_lod")
            if not pr["inside"][i]:
                flags.append("outside_model_space")
            if y > hi_r:
                flags.append("above_range")
            elif y < lo_r and not below:
                flags.append("below_range")
            flags += run_flags
            rows.append(
                {
                    "sample_id": sid,
                    "element": el,
                    "mass_fraction": y,
                    "u": u,
                    "U": 2 * u,
                    "k": 2.0,
                    "lod": 3 * u,
                    "loq": 10 * u,
                    "below_lod": bool(below),
                    "flags": ";".join(flags),
                    "basis": "pls",
                    "line_id": f"PLS {m['n_components']} comp.: " + ", ".join(m["lines"]),
                    "role": smap.get(sid, ("unknown", None))[0],
                    "dof": float(m["n"] - 1),
                }
            )
    return rows


def _beyond_range(x: float, range_x, allow: float) -> str:
    """Why a predicted content ``x`` is not reported: above the top of the calibrated range
    ``range_x`` by more than the fraction ``allow`` of it (the method's ``max_above_range``); "" if not.
    Inverse prediction beyond the standards rests on the curve's form alone: a calibration holds
    over the range of its reference materials (ISO 11095:1996, linear calibration using reference
    materials; from memory of that standard)."""
    top = float(range_x[1])
    if not (top > 0 and math.isfinite(x)) or x <= top * (1 + allow) * (1 + 1e-9):
        return ""
    return (f"{100 * (x / top - 1):.0f} % above the calibrated range (the method allows "
            f"{100 * allow:g} %): add a standard above it")


def predict_sample(sid, ok, curves, resp) -> tuple[dict, dict]:
    """Inverse predictions of one sample's analytes ``ok``, interference corrections solved by
    fixed-point iteration (each curve's correction uses the current contents of its interferents).

    Returns ``(predictions, failed)``: element -> :meth:`Curve.predict_content` dict, and element
    -> why it could not be predicted.
    """
    xcur = {el: 0.0 for el in ok}
    ucur = {el: 0.0 for el in ok}
    preds, failed = {}, {}
    for _ in range(100):
        change = 0.0
        for el in ok:
            c = curves[el]
            r = resp[el].loc[sid]
            xi = {it["element"]: xcur.get(it["element"], 0.0) for it in c.interferences}
            uxi = {it["element"]: ucur.get(it["element"], 0.0) for it in c.interferences}
            try:
                p = c.predict_content(float(r["y"]), float(r["u_y"]), int(r["n_shots"]), xi, uxi,
                                      where=f"sample {sid}, {el}", u_weight=float(r.get("u_rep_y", r["u_y"])))
            except CalibrationError as exc:
                failed[el] = exc.one_line()
                continue
            failed.pop(el, None)
            p = widen_negative_net(p, r)  # a side window holds another line: Type B component
            change = max(change, abs(p["x"] - xcur[el]) / max(abs(p["x"]), 1e-12))
            xcur[el], ucur[el] = p["x"], p["u"]
            preds[el] = p
        if change < 1e-12:
            break
    return preds, failed


def sample_rows(sid, role, good, preds, curves, resp, allow_above, coverage, run_flags, not_reported,
                 matrix_fraction) -> list[dict]:
    """One sample's result rows: closure with the matrix by difference, LOD/LOQ, range flags, ``U = k u``.

    Contents extrapolated beyond the calibrated range by more than the method allows get no row
    (a reason in ``not_reported``); the matrix by difference goes to ``matrix_fraction`` as
    ``(w_m, u, k, nu_eff)``: its coverage factor by the same rule as the results' (``k = 2``, or
    ``t_0.975(nu_eff)`` with ``coverage = "student"``), ``nu_eff`` by Welch-Satterthwaite over
    the contents the closure combines (:func:`effective_dof`, GUM G.4.1).
    """
    bases = np.array([curves[el].basis for el in good])
    ux = [preds[el]["u"] for el in good]
    w, uw, wm, uwm, J = closure(good, [preds[el]["x"] for el in good], ux, bases)
    if np.any(bases == "ratio"):
        dof_m = effective_dof(J[-1], ux, [preds[el]["dof"] for el in good])
        matrix_fraction[sid] = (wm, uwm, coverage_factor(coverage, dof_m), dof_m)
    rows = []
    for i, el in enumerate(good):
        c = curves[el]
        p = preds[el]
        why = _beyond_range(p["x"], c.range_x, allow_above)
        if why:  # extrapolated too far: no number (docs/certificate.md, release rules)
            not_reported.append({"sample_id": sid, "element": el, "reason": why})
            continue
        wmul = wm if c.basis == "ratio" else 1.0
        lod, loq = c.lod_x * wmul, c.loq_x * wmul
        # a line whose background is over-estimated (negative net, rule negative-net) cannot show
        # absence: no "< LOD" / "below LOQ" claim from it; the value is given with its widened U
        negnet = "background" in p["budget"]
        content = _content_flags(w[i], p["x"], lod, loq, c, negnet)
        below = "below_lod" in content
        flags = list(resp[el].loc[sid]["flags"]) + content + run_flags
        if negnet:
            flags.append("negative_net")
        k = coverage_factor(coverage, p["dof"])
        if below and w[i] + k * uw[i] > lod:
            # "< LOD" must be true of this result: where its own expanded interval reaches above
            # the method's blank-based LOD (its u at this level is larger than the blank's
            # scatter the LOD assumes: matrix, curve, background), the limit printed is the upper
            # end of that interval, w + U (docs/calibration.md sec. 8; demo day 2 LOT-2612-H Zn
            # was "< 0.090 %" for a true 0.288 %)
            lod = float(w[i] + k * uw[i])
            loq = max(loq, lod)
            flags.append("lod_from_result")
        rows.append(
            {
                "sample_id": sid,
                "element": el,
                "mass_fraction": float(w[i]),
                "u": float(uw[i]),
                "U": float(k * uw[i]),
                "k": k,
                "lod": float(lod),
                "loq": float(loq),
                "below_lod": below,
                "flags": ";".join(dict.fromkeys(flags)),
                "basis": "calibration",
                "line_id": c.line_id,
                "role": role,
                "dof": float(p["dof"]),
            }
        )
    return rows


def _content_flags(w, x, lod, loq, c, negnet: bool = False) -> list[str]:
    """``below_lod`` / ``below_loq`` (not with ``negnet``: a negative-net line cannot show absence),
    ``above_range`` / ``below_range``, ``interference_corrected``.

    The calibrated range is that of the reference materials' certified mass fractions
    (``c.range_mass_fraction``, ISO 11095:1996; the certificate prints it so): a result ``w``
    outside it is flagged.  So is one whose content on the curve's own axis ``x`` (for a ratio
    curve, the ratio to the internal-standard element) lies outside the standards' ``c.range_x``:
    the curve is extrapolated there even when ``w`` is inside (a different matrix fraction).
    Until 2026-12-03 only ``x`` was tested, and a result below the printed lower end carried
    no flag (demo LOT-2611-E Sn 0.0496 % under 0.0500 %)."""
    flags = []
    below = bool(w < lod) and not negnet
    if below:
        flags.append("below_lod")
    elif w < loq and not negnet:
        flags.append("below_loq")
    lo_w, hi_w = (float(v) for v in c.range_mass_fraction)
    if w > hi_w * (1 + 1e-9) or x > c.range_x[1] * (1 + 1e-9):
        flags.append("above_range")
    elif (w < lo_w * (1 - 1e-9) or x < c.range_x[0] * (1 - 1e-9)) and not below:
        flags.append("below_range")
    if c.interferences:
        flags.append("interference_corrected")
    return flags


__all__ = ["closure", "coverage_factor", "effective_dof", "pls_rows", "predict_sample", "sample_rows"]
