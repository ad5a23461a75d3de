"""Drift standardisation with setup samples (two-point correction per line or per response).

Setup samples (homogeneous materials with a high and a low content of the
elements concerned) are measured when the calibration is made; their line
intensities -- and, per curve, their responses -- are stored as *reference*
values ``R`` with their standard uncertainties.  In a later run they are
measured again (``M``) and every line -- or, for an internal-standard
calibration, every analyte/internal-standard intensity *ratio*, as spark-OES
instruments standardise the ratios they calibrate with -- is corrected by the
straight line that maps the measured setup values back onto their references
(common practice of spark-OES standard methods, "two-point standardisation")::

    alpha = (R_H - R_L) / (M_H - M_L),   beta = R_L - alpha M_L
    I_corr = alpha I + beta = R_L + alpha (I - M_L)

with H and L the setup samples of highest and lowest reference value.  The
two-point form needs a low setup value well below the high one; when
``R_L > 0.5 R_H`` (e.g. a matrix line, high in every sample) the slope would
amplify the setup measurements' noise, and a one-point factor over the setup
samples ``alpha = sum R / sum M``, ``beta = 0`` is used instead.

Uncertainty, first-order propagation with independent inputs (GUM, JCGM 100:2008, 5.1.2)::

    u^2(I_corr) = alpha^2 u^2(I) + sum_X (dI_corr/dX)^2 u^2(X),   X in {M_H, M_L, R_H, R_L}

    two-point:  dI_corr/dM_H = -alpha (I - M_L)/(M_H - M_L)   dI_corr/dR_H = (I - M_L)/(M_H - M_L)
                dI_corr/dM_L =  alpha (I - M_H)/(M_H - M_L)   dI_corr/dR_L = (M_H - I)/(M_H - M_L)
    one-point:  dI_corr/dM_i = -alpha I / sum M               dI_corr/dR_i = I / sum M

Each setup disc is compared with itself: ``R`` is the disc measured on the
calibration day, ``M`` the same disc today.  How far a *material* lies off the
calibration curve (the curve's excess scatter sigma_m) is the same on both days
and cancels in the ratio ``R/M``, so it is not part of ``u(M)`` or ``u(R)``;
what does not cancel is the repeatability of the two measurements:
``u(M)`` from today's shots and ``u(R)``, stored with ``R`` when the calibration
was made.  The reproducibility between the two sessions beyond that is what
the check sample tests (E_n, docs/calibration.md, sections 9-10).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: two-point only when the low reference is at most this fraction of the high one
MAX_LOW_FRACTION = 0.5


def response_key(line_id: str, internal_standard: str | None) -> str:
    """Key of a curve's response: ``"<line>"`` or ``"<line> / <internal standard>"`` (as in the drift record)."""
    return str(line_id) + (f" / {internal_standard}" if internal_standard else "")


def reference_intensities(line_table: pd.DataFrame, curves: dict | None = None, shot_table=None) -> dict:
    """``{sample_id: {key: [value, u]}}`` of the setup samples in a line table.

    ``key`` is each line id (its mean intensity and ``u_intensity``) and, with ``curves``
    (element -> curve with ``line_id`` and ``internal_standard``), each ratio curve's response key
    ``"<line> / <internal standard>"`` with the response and its standard uncertainty as the
    calibration computes them (:func:`compquant.calibrate.response.sample_responses`: paired shots,
    so the covariance of the two lines is kept; GUM 5.2.2).  Those are the references ``R, u(R)``
    of the drift standardisation.
    """
    out = {}
    sub = line_table[line_table["role"] == "setup"]
    for sid, g in sub.groupby("sample_id", sort=True):
        out[str(sid)] = {str(r.line_id): [float(r.intensity), float(r.u_intensity)] for r in g.itertuples()}
    if not out or not curves:
        return out
    from compquant.calibrate.response import sample_responses

    for c in curves.values():
        if not c.internal_standard:
            continue
        r = sample_responses(sub, c.line_id, c.internal_standard, shot_table)
        for sid, row in r.iterrows():
            y, uy = float(row["y"]), float(row["u_y"])
            if str(sid) in out and np.isfinite(y) and np.isfinite(uy):
                out[str(sid)][response_key(c.line_id, c.internal_standard)] = [y, uy]
    return out


def _usable(p) -> bool:
    return bool(np.isfinite(p[0]) and np.isfinite(p[1]) and p[0] > 0 and p[1] > 0)


def two_point(points) -> dict | None:
    """Correction from setup points ``[(R, M, u_M, sample_id, u_R), ...]`` (see module docstring).

    ``R``: the setup sample's reference value (calibration day) with standard uncertainty ``u_R``;
    ``M``: the same sample measured now, ``u_M``.  Points with a non-positive or non-finite ``R``
    or ``M`` are not used.  Returns None when no point is usable.
    """
    pts = sorted((p for p in points if _usable(p)), key=lambda p: p[0])
    if not pts:
        return None
    lo, hi = pts[0], pts[-1]
    if len(pts) >= 2 and lo[0] <= MAX_LOW_FRACTION * hi[0] and hi[1] > lo[1]:
        alpha = (hi[0] - lo[0]) / (hi[1] - lo[1])
        return {"kind": "two-point", "alpha": alpha, "beta": lo[0] - alpha * lo[1], "high": hi[3],
                "low": lo[3], "R_H": hi[0], "R_L": lo[0], "M_H": hi[1], "M_L": lo[1], "u_M_H": hi[2],
                "u_M_L": lo[2], "u_R_H": float(hi[4]), "u_R_L": float(lo[4]), "samples": [p[3] for p in pts]}
    sR = sum(p[0] for p in pts)
    sM = sum(p[1] for p in pts)
    return {"kind": "one-point", "alpha": sR / sM, "beta": 0.0, "high": hi[3],
            "low": lo[3] if len(pts) > 1 else None, "sum_R": sR, "sum_M": sM,
            "u_sum_M": float(np.sqrt(sum(p[2] ** 2 for p in pts))),
            "u_sum_R": float(np.sqrt(sum(float(p[4]) ** 2 for p in pts))), "samples": [p[3] for p in pts]}


def correct(value, u, coef: dict):
    """``(alpha I + beta, u)``: the corrected value and its standard uncertainty (arrays or scalars).

    ``u^2 = alpha^2 u^2(I)`` plus the setup measurements' ``u(M)`` and the references' ``u(R)``
    through the sensitivities of the module docstring (GUM 5.1.2, first order, inputs
    independent: different discs, or the same disc on different days).
    """
    I = np.asarray(value, float)
    uI = np.asarray(u, float)
    a, b = coef["alpha"], coef["beta"]
    var = (a * uI) ** 2
    if coef["kind"] == "two-point":
        d = coef["M_H"] - coef["M_L"]
        fh = (I - coef["M_L"]) / d  # dI_corr/dR_H; dI_corr/dM_H = -alpha fh
        fl = (coef["M_H"] - I) / d  # dI_corr/dR_L; dI_corr/dM_L = -alpha fl
        var = (var + (a * fh * coef["u_M_H"]) ** 2 + (a * fl * coef["u_M_L"]) ** 2
               + (fh * coef["u_R_H"]) ** 2 + (fl * coef["u_R_L"]) ** 2)
    else:
        g = I / coef["sum_M"]  # dI_corr/dR_i; dI_corr/dM_i = -alpha g
        var = var + (a * g * coef["u_sum_M"]) ** 2 + (g * coef["u_sum_R"]) ** 2
    return a * I + b, np.sqrt(var)


def drift_coefficients(reference: dict, line_table: pd.DataFrame) -> dict:
    """Per-line corrections ``{line_id: coef}`` from the setup samples of a later run.

    Uses the setup samples present in both ``reference`` and ``line_table``;
    lines without a usable setup measurement are absent.
    """
    sub = line_table[line_table["role"] == "setup"]
    meas = {(str(r.sample_id), str(r.line_id)): (float(r.intensity), float(r.u_intensity)) for r in sub.itertuples()}
    out = {}
    for lid in sorted({lid for s in reference.values() for lid in s if " / " not in lid}):  # lines, not ratios
        pts = [(ref[lid][0], *meas[(sid, lid)], sid, ref[lid][1]) for sid, ref in reference.items()
               if lid in ref and (sid, lid) in meas]
        c = two_point(pts)
        if c:
            out[lid] = c
    return out


def apply_drift(line_table: pd.DataFrame, coefs: dict, shot_table: pd.DataFrame | None = None):
    """Corrected copies of the line table (and per-shot table); inputs are not modified.

    Adds ``drift_alpha`` and ``drift_beta`` columns; ``u_intensity`` includes the
    uncertainty of the setup measurements and of their references.  Lines without a coefficient are unchanged.
    """
    lt = line_table.copy()
    I = lt["intensity"].to_numpy(float).copy()
    u = lt["u_intensity"].to_numpy(float).copy()
    a = np.ones(len(lt))
    b = np.zeros(len(lt))
    lids = lt["line_id"].astype(str).to_numpy()
    for lid, c in coefs.items():
        m = lids == lid
        if m.any():
            I[m], u[m] = correct(I[m], u[m], c)
            a[m], b[m] = c["alpha"], c["beta"]
    lt["intensity"] = I
    lt["u_intensity"] = u
    if "sd_shots" in lt:
        lt["sd_shots"] = lt["sd_shots"].astype(float) * np.abs(a)
    lt["drift_alpha"] = a
    lt["drift_beta"] = b
    st = None
    if shot_table is not None:
        st = shot_table.copy()
        sa = st["line_id"].map(lambda k: coefs.get(k, {}).get("alpha", 1.0)).astype(float)
        sb = st["line_id"].map(lambda k: coefs.get(k, {}).get("beta", 0.0)).astype(float)
        st["intensity"] = sa * st["intensity"].astype(float) + sb
    return lt, st


def reference_response(reference: dict, sample_id: str, line_id: str, internal_standard: str | None):
    """Reference response ``(R, u(R))`` of a setup sample: intensity, or ratio to the internal standard.

    The ratio stored at calibration time (:func:`reference_intensities` with the curves: paired
    shots) is used when present.  Calibrations saved before it was stored hold the two line
    intensities only; the ratio then is ``I_a / I_s`` with ``u`` propagated as for independent
    lines (GUM 5.1.2), which overstates ``u(R)`` when the lines fluctuate together, as
    shot-to-shot they do.
    """
    ref = reference.get(sample_id, {})
    key = response_key(line_id, internal_standard)
    if internal_standard and key in ref:
        return float(ref[key][0]), float(ref[key][1])
    if line_id not in ref:
        return None
    Ia, ua = ref[line_id]
    if not internal_standard:
        return Ia, ua
    if internal_standard not in ref:
        return None
    Is, us = ref[internal_standard]
    if not Is > 0:
        return None
    return Ia / Is, float(np.sqrt((ua / Is) ** 2 + (Ia * us / Is**2) ** 2))


def uncorrected_lines(line_table: pd.DataFrame, coefs: dict) -> list:
    return sorted(set(map(str, line_table["line_id"])) - set(coefs))


__all__ = ["response_key", "reference_intensities", "two_point", "correct", "drift_coefficients", "apply_drift",
           "uncorrected_lines", "reference_response"]
