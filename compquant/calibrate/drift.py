"""Drift standardisation with setup samples (two-point correction per line or per response).

Setup samples (homogeneous materials with a high and a low content of the
elements concerned) are measured when the calibration is made; their line
intensities are stored as *reference* values.  In a later run they are
measured again (``M``) and every line -- or, for an internal-standard
calibration, every analyte/internal-standard intensity *ratio*, as spark-OES
instruments standardise the ratios they calibrate with -- is corrected by the
straight line that maps the measured setup values back onto their references
``R`` (common practice of spark-OES standard methods, "two-point
standardisation")::

    alpha = (R_H - R_L) / (M_H - M_L),   beta = R_L - alpha M_L
    I_corr = alpha I + beta = R_L + alpha (I - M_L)

with H and L the setup samples of highest and lowest reference value.  The
two-point form needs a low setup value well below the high one; when
``R_L > 0.5 R_H`` (e.g. a matrix line, high in every sample) the slope would
amplify the setup measurements' noise, and a one-point factor over the setup
samples ``alpha = sum R / sum M``, ``beta = 0`` is used instead.  Uncertainty
(first-order propagation, GUM 5.1.2) from ``u(I)`` and the setup measurements::

    two-point:  dI/dM_H = -alpha (I - M_L)/(M_H - M_L),  dI/dM_L = alpha (I - M_H)/(M_H - M_L)
    one-point:  dI/dM_i = -alpha I / sum M

(reference values enter the calibration itself and are taken as exact).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: two-point only when the low reference is at most this fraction of the high one
MAX_LOW_FRACTION = 0.5


def reference_intensities(line_table: pd.DataFrame) -> dict:
    """``{sample_id: {line_id: [intensity, u]}}`` of the setup samples in a line table."""
    out = {}
    sub = line_table[line_table["role"] == "setup"]
    for sid, g in sub.groupby("sample_id", sort=True):
        out[str(sid)] = {str(r.line_id): [float(r.intensity), float(r.u_intensity)] for r in g.itertuples()}
    return out


def two_point(points) -> dict | None:
    """Correction from setup points ``[(R, M, u_M, sample_id), ...]`` (see module docstring)."""
    pts = sorted((p for p in points if np.isfinite(p[0]) and np.isfinite(p[1]) and p[0] > 0 and p[1] > 0),
                 key=lambda p: p[0])
    if not pts:
        return None
    lo, hi = pts[0], pts[-1]
    if len(pts) >= 2 and lo[0] <= MAX_LOW_FRACTION * hi[0] and hi[1] > lo[1]:
        alpha = (hi[0] - lo[0]) / (hi[1] - lo[1])
        return {"kind": "two-point", "alpha": alpha, "beta": lo[0] - alpha * lo[1], "high": hi[3],
                "low": lo[3], "R_H": hi[0], "R_L": lo[0], "M_H": hi[1], "M_L": lo[1], "u_M_H": hi[2],
                "u_M_L": lo[2], "samples": [p[3] for p in pts]}
    sR = sum(p[0] for p in pts)
    sM = sum(p[1] for p in pts)
    return {"kind": "one-point", "alpha": sR / sM, "beta": 0.0, "high": hi[3],
            "low": lo[3] if len(pts) > 1 else None, "sum_M": sM,
            "u_sum_M": float(np.sqrt(sum(p[2] ** 2 for p in pts))), "samples": [p[3] for p in pts]}


def correct(value, u, coef: dict):
    """``(alpha I + beta, u)`` with the setup measurements' uncertainty added (arrays or scalars)."""
    I = np.asarray(value, float)
    uI = np.asarray(u, float)
    a, b = coef["alpha"], coef["beta"]
    var = (a * uI) ** 2
    if coef["kind"] == "two-point":
        d = coef["M_H"] - coef["M_L"]
        var = var + (a * (I - coef["M_L"]) / d * coef["u_M_H"]) ** 2 + (a * (I - coef["M_H"]) / d * coef["u_M_L"]) ** 2
    else:
        var = var + (a * I / coef["sum_M"] * coef["u_sum_M"]) ** 2
    return a * I + b, np.sqrt(var)


def drift_coefficients(reference: dict, line_table: pd.DataFrame) -> dict:
    """Per-line corrections ``{line_id: coef}`` from the setup samples of a later run.

    Uses the setup samples present in both ``reference`` and ``line_table``;
    lines without a usable setup measurement are absent.
    """
    sub = line_table[line_table["role"] == "setup"]
    meas = {(str(r.sample_id), str(r.line_id)): (float(r.intensity), float(r.u_intensity)) for r in sub.itertuples()}
    out = {}
    for lid in sorted({lid for s in reference.values() for lid in s}):
        pts = [(ref[lid][0], *meas[(sid, lid)], sid) for sid, ref in reference.items()
               if lid in ref and (sid, lid) in meas]
        c = two_point(pts)
        if c:
            out[lid] = c
    return out


def apply_drift(line_table: pd.DataFrame, coefs: dict, shot_table: pd.DataFrame | None = None):
    """Corrected copies of the line table (and per-shot table); inputs are not modified.

    Adds ``drift_alpha`` and ``drift_beta`` columns; ``u_intensity`` includes the
    setup measurements' uncertainty.  Lines without a coefficient are unchanged.
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
    """Reference response ``(R, u)`` of a setup sample: intensity or ratio to the internal standard."""
    ref = reference.get(sample_id, {})
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


__all__ = ["reference_intensities", "two_point", "correct", "drift_coefficients", "apply_drift",
           "uncorrected_lines", "reference_response"]
