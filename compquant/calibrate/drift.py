"""Drift standardisation with setup samples (two-point per-line correction).

Setup samples (homogeneous materials with a high and a low content of the
elements concerned) are measured when the calibration is made; their line
intensities are stored as *reference* values ``R``.  In a later run they are
measured again (``M``) and every line is corrected by the straight line that
maps the measured setup intensities back onto their references -- common
practice of spark-OES standard methods (drift "standardisation" or
"recalibration")::

    alpha = (R_H - R_L) / (M_H - M_L),   beta = R_L - alpha M_L
    I_corr = alpha I + beta = R_L + alpha (I - M_L)

per line, with H and L the setup samples of highest and lowest reference
intensity of that line.  With one usable setup sample the correction is a
factor ``alpha = R / M`` (one-point).  Uncertainty (first-order propagation,
GUM 5.1.2) from ``u(I)``, ``u(M_H)``, ``u(M_L)``::

    dI/dI = alpha,  dI/dM_H = -alpha (I - M_L)/(M_H - M_L),
    dI/dM_L = alpha (I - M_H)/(M_H - M_L)

(reference intensities enter the calibration itself and are taken as exact).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: relative difference of the two setup references below which a two-point
#: correction is ill-conditioned and the one-point factor is used instead
MIN_SPREAD = 0.2


def reference_intensities(line_table: pd.DataFrame) -> dict:
    """``{sample_id: {line_id: [intensity, u]}}`` of the setup samples in a line table."""
    out = {}
    sub = line_table[line_table["role"] == "setup"]
    for sid, g in sub.groupby("sample_id", sort=True):
        out[str(sid)] = {str(r.line_id): [float(r.intensity), float(r.u_intensity)] for r in g.itertuples()}
    return out


def drift_coefficients(reference: dict, line_table: pd.DataFrame) -> dict:
    """Per-line correction ``{line_id: {alpha, beta, kind, high, low, M_H, M_L, u_M_H, u_M_L}}``.

    Uses the setup samples present in both ``reference`` and the (later) run's
    ``line_table``.  Lines without a usable setup measurement are absent.
    """
    sub = line_table[line_table["role"] == "setup"]
    meas = {(str(r.sample_id), str(r.line_id)): (float(r.intensity), float(r.u_intensity)) for r in sub.itertuples()}
    lines = sorted({lid for s in reference.values() for lid in s})
    out = {}
    for lid in lines:
        pts = []
        for sid, lines_ref in reference.items():
            if lid in lines_ref and (sid, lid) in meas:
                R = lines_ref[lid][0]
                M, uM = meas[(sid, lid)]
                if np.isfinite(R) and np.isfinite(M) and M > 0 and R > 0:
                    pts.append((R, M, uM, sid))
        if not pts:
            continue
        pts.sort()
        lo, hi = pts[0], pts[-1]
        if len(pts) >= 2 and (hi[0] - lo[0]) > MIN_SPREAD * hi[0] and hi[1] > lo[1]:
            alpha = (hi[0] - lo[0]) / (hi[1] - lo[1])
            beta = lo[0] - alpha * lo[1]
            out[lid] = {
                "kind": "two-point",
                "alpha": alpha,
                "beta": beta,
                "high": hi[3],
                "low": lo[3],
                "R_H": hi[0],
                "R_L": lo[0],
                "M_H": hi[1],
                "M_L": lo[1],
                "u_M_H": hi[2],
                "u_M_L": lo[2],
            }
        else:
            R, M, uM, sid = hi
            out[lid] = {
                "kind": "one-point",
                "alpha": R / M,
                "beta": 0.0,
                "high": sid,
                "low": None,
                "R_H": R,
                "R_L": None,
                "M_H": M,
                "M_L": None,
                "u_M_H": uM,
                "u_M_L": None,
            }
    return out


def apply_drift(line_table: pd.DataFrame, coefs: dict, shot_table: pd.DataFrame | None = None):
    """Corrected copies of the line table (and per-shot table); inputs are not modified.

    Adds ``drift_alpha`` and ``drift_beta`` columns; ``u_intensity`` includes the
    setup measurements' uncertainty.  Lines without a coefficient are unchanged
    (alpha = 1, beta = 0) and listed by :func:`uncorrected_lines`.
    """
    lt = line_table.copy()
    a = lt["line_id"].map(lambda k: coefs.get(k, {}).get("alpha", 1.0)).astype(float)
    b = lt["line_id"].map(lambda k: coefs.get(k, {}).get("beta", 0.0)).astype(float)
    I = lt["intensity"].astype(float)
    u = lt["u_intensity"].astype(float)
    var = (a * u) ** 2
    for i, lid in enumerate(lt["line_id"]):
        c = coefs.get(lid)
        if not c:
            continue
        Ii = I.iloc[i]
        if c["kind"] == "two-point":
            d = c["M_H"] - c["M_L"]
            dH = -c["alpha"] * (Ii - c["M_L"]) / d
            dL = c["alpha"] * (Ii - c["M_H"]) / d
            var.iloc[i] += (dH * c["u_M_H"]) ** 2 + (dL * c["u_M_L"]) ** 2
        else:
            var.iloc[i] += (Ii * c["R_H"] / c["M_H"] ** 2 * c["u_M_H"]) ** 2
    lt["intensity"] = a * I + b
    lt["u_intensity"] = np.sqrt(var)
    if "sd_shots" in lt:
        lt["sd_shots"] = lt["sd_shots"].astype(float) * a.abs()
    lt["drift_alpha"] = a
    lt["drift_beta"] = b
    st = None
    if shot_table is not None:
        st = shot_table.copy()
        sa = st["line_id"].map(lambda k: coefs.get(k, {}).get("alpha", 1.0)).astype(float)
        sb = st["line_id"].map(lambda k: coefs.get(k, {}).get("beta", 0.0)).astype(float)
        st["intensity"] = sa * st["intensity"].astype(float) + sb
    return lt, st


def uncorrected_lines(line_table: pd.DataFrame, coefs: dict) -> list:
    return sorted(set(map(str, line_table["line_id"])) - set(coefs))


__all__ = ["reference_intensities", "drift_coefficients", "apply_drift", "uncorrected_lines"]
