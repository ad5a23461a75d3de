"""Synthetic line tables of known truth for the calibration tests (invented data, tests only)."""

from __future__ import annotations

import numpy as np
import pandas as pd

LINES = {"Zn": "Zn I 481.053", "Sn": "Sn I 317.502", "Fe": "Fe I 371.994", "Cu": "Cu I 510.554"}


def make_tables(
    seed=0,
    *,
    n_shots=50,
    shot_rsd=0.05,
    matrix_rsd=0.01,
    sens=None,
    u_cert_rel=0.01,
    interference=None,
    n_unknowns=3,
    blank=True,
    setup=True,
    drift=None,
    contents=None,
    unknown_contents=None,
    check=True,
    cert_error=True,
):
    """Line table + per-shot table + samples + standards for a Cu-matrix synthetic run.

    Response model: I_el = S_el * w_el * (1 + matrix effect) * A_shot + noise, with A_shot
    a shot-to-shot ablation factor shared by all lines (what the internal standard removes).
    ``interference``: {"analyte": "Zn", "element": "Fe", "kind": "additive", "coef": c}
    adds c * S_Zn * w_Fe (additive) or multiplies the Zn sensitivity by (1 + c w_Fe/w_Cu).
    ``drift``: {line_id: (alpha, beta)} applies I -> alpha I + beta (instrument drift).
    """
    rng = np.random.default_rng(seed)
    sens = sens or {"Zn": 1000.0, "Sn": 400.0, "Fe": 700.0, "Cu": 50.0}
    if contents is None:
        contents = {  # mass fractions of the standards
            "STD-1": {"Zn": 0.02, "Sn": 0.002, "Fe": 0.001},
            "STD-2": {"Zn": 0.05, "Sn": 0.006, "Fe": 0.004},
            "STD-3": {"Zn": 0.10, "Sn": 0.010, "Fe": 0.002},
            "STD-4": {"Zn": 0.15, "Sn": 0.015, "Fe": 0.008},
            "STD-5": {"Zn": 0.25, "Sn": 0.020, "Fe": 0.006},
            "STD-6": {"Zn": 0.35, "Sn": 0.030, "Fe": 0.010},
        }
    samples = []
    truth = {}
    certified_rows = []
    for sid, comp in contents.items():
        true = dict(comp)
        cert = {}
        for el, w in comp.items():
            u = u_cert_rel * w
            cert[el] = w
            true[el] = w + (rng.normal(0, u) if cert_error else 0.0)
            certified_rows.append((sid, el, w, 2 * u))
        true["Cu"] = 1 - sum(true.values())
        cert_cu = 1 - sum(cert.values())
        certified_rows.append((sid, "Cu", cert_cu, 2 * u_cert_rel * 0.2 * cert_cu))
        samples.append((sid, "standard", sid))
        truth[sid] = true
    if check:
        comp = {"Zn": 0.12, "Sn": 0.012, "Fe": 0.005}
        certified_rows += [("CHK-1", el, w, 2 * u_cert_rel * w) for el, w in comp.items()]
        certified_rows.append(("CHK-1", "Cu", 1 - sum(comp.values()), 0.002))
        t = dict(comp)
        t["Cu"] = 1 - sum(comp.values())
        truth["CHECK"] = t
        samples.append(("CHECK", "check", "CHK-1"))
    if blank:
        truth["BLANK"] = {"Zn": 0.0, "Sn": 0.0, "Fe": 0.0, "Cu": 1.0}
        samples.append(("BLANK", "blank", ""))
    if setup:
        for sid, comp in (
            ("SET-H", {"Zn": 0.30, "Sn": 0.025, "Fe": 0.009}),
            ("SET-L", {"Zn": 0.03, "Sn": 0.003, "Fe": 0.0015}),
        ):
            t = dict(comp)
            t["Cu"] = 1 - sum(comp.values())
            truth[sid] = t
            samples.append((sid, "setup", ""))
    unknown_contents = unknown_contents or [
        {"Zn": 0.08, "Sn": 0.004, "Fe": 0.003},
        {"Zn": 0.20, "Sn": 0.018, "Fe": 0.007},
        {"Zn": 0.30, "Sn": 0.025, "Fe": 0.002},
        {"Zn": 0.03, "Sn": 0.008, "Fe": 0.009},
    ]
    for i in range(n_unknowns):
        comp = unknown_contents[i % len(unknown_contents)]
        t = dict(comp)
        t["Cu"] = 1 - sum(comp.values())
        truth[f"UNK-{i + 1}"] = t
        samples.append((f"UNK-{i + 1}", "unknown", ""))
    lt_rows, st_rows = [], []
    for sid, role, _ref in samples:
        t = truth[sid]
        A = rng.lognormal(0, 0.15, n_shots)  # shared ablation factor
        mfac = {el: 1 + rng.normal(0, matrix_rsd) for el in LINES}
        for el, lid in LINES.items():
            S = sens[el]
            mean = S * t[el] * mfac[el]
            if interference and interference["analyte"] == el:
                c, je = interference["coef"], interference["element"]
                if interference["kind"] == "additive":
                    mean = mean + c * S * t[je]
                else:
                    mean = mean * (1 + c * t[je] / t["Cu"])
            shots = mean * A * (1 + rng.normal(0, shot_rsd, n_shots)) + rng.normal(0, 0.02, n_shots)
            if drift and lid in drift:
                a, b = drift[lid]
                shots = a * shots + b
            for k, v in enumerate(shots):
                st_rows.append((sid, k, lid, float(v)))
            lt_rows.append(
                {
                    "sample_id": sid,
                    "role": role,
                    "line_id": lid,
                    "element": el,
                    "ion": 1,
                    "wavelength_nm": float(lid.split()[-1]),
                    "intensity": float(shots.mean()),
                    "u_intensity": float(shots.std(ddof=1) / np.sqrt(n_shots)),
                    "sd_shots": float(shots.std(ddof=1)),
                    "n_shots": n_shots,
                    "centre_nm": float(lid.split()[-1]),
                    "fwhm_nm": 0.05,
                    "snr": 100.0,
                    "flags": "",
                }
            )
    lt = pd.DataFrame(lt_rows)
    st = pd.DataFrame(st_rows, columns=["sample_id", "shot", "line_id", "intensity"])
    sm = pd.DataFrame(samples, columns=["sample_id", "role", "standard_ref"])
    sm["description"] = ""
    sm["n_shots"] = n_shots
    std = pd.DataFrame(
        [
            {
                "standard_id": s,
                "matrix": "Cu",
                "element": e,
                "mass_fraction": w,
                "u": U / 2,
                "U": U,
                "k": 2.0,
                "source": "synthetic",
            }
            for s, e, w, U in certified_rows
        ]
    )
    return lt, st, sm, std, truth


def config_dict(models=None, interferences=None, basis="ratio", **extra):
    models = models or {}
    interferences = interferences or {}
    an = []
    for el in ("Zn", "Sn", "Fe"):
        d = {"element": el, "line": LINES[el], "model": models.get(el, "linear")}
        if el in interferences:
            d["interferences"] = interferences[el]
        an.append(d)
    d = {"basis": basis, "matrix_element": "Cu", "internal_standard": LINES["Cu"], "analytes": an}
    d.update(extra)
    return d
