"""End-to-end: a small synthetic run file -> compquant calibrate -> compquant quantify (invented data)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
from click.testing import CliRunner

from compquant.cli import main
from compquant.run import write_run

LINES = {"Zn": 481.053, "Sn": 486.000, "Fe": 495.760, "Cu": 510.554}
SENS = {"Zn": 4000.0, "Sn": 3000.0, "Fe": 5000.0, "Cu": 800.0}
METHOD = """
[method]
id = "cli-test"
version = "1"
technique = "LIBS"
description = "synthetic test method"

[preprocess.baseline]
method = "none"

[measure]
mode = "window"
window_nm = 0.8

[[lines]]
id = "Zn I 481.053"
element = "Zn"
ion = 1
wavelength_nm = 481.053

[[lines]]
id = "Sn I 486.000"
element = "Sn"
ion = 1
wavelength_nm = 486.000

[[lines]]
id = "Fe I 495.760"
element = "Fe"
ion = 1
wavelength_nm = 495.760

[[lines]]
id = "Cu I 510.554"
element = "Cu"
ion = 1
wavelength_nm = 510.554

[calibration]
basis = "ratio"
matrix_element = "Cu"
internal_standard = "Cu I 510.554"
outliers = "flag"

[[calibration.analytes]]
element = "Zn"
line = "Zn I 481.053"

[[calibration.analytes]]
element = "Sn"
line = "Sn I 486.000"
model = "weighted"

[[calibration.analytes]]
element = "Fe"
line = "Fe I 495.760"

[calibration.pls]
analytes = ["Zn"]
half_width_nm = 0.4
max_components = 3
"""

STDS = {"S1": (0.02, 0.002, 0.001), "S2": (0.05, 0.006, 0.004), "S3": (0.10, 0.010, 0.002),
        "S4": (0.15, 0.015, 0.008), "S5": (0.25, 0.020, 0.006), "S6": (0.35, 0.030, 0.010)}
OTHERS = [("BLANK", "blank", "CU-PURE", (0.0, 0.0, 0.0)), ("CHK", "check", "S7", (0.12, 0.012, 0.005)),
          ("SET-H", "setup", "", (0.30, 0.025, 0.009)), ("SET-L", "setup", "", (0.03, 0.003, 0.0015)),
          ("LOT-1", "unknown", "", (0.08, 0.004, 0.003)), ("LOT-2", "unknown", "", (0.20, 0.018, 0.007))]


def _write(tmp_path, seed=0, scale=1.0):
    rng = np.random.default_rng(seed)
    wl = np.linspace(478.0, 514.0, 1800)
    samples, comps = [], []
    for sid, c in STDS.items():
        samples.append({"sample_id": sid, "role": "standard", "standard_ref": sid, "description": ""})
        comps.append(c)
    for sid, role, ref, c in OTHERS:
        samples.append({"sample_id": sid, "role": role, "standard_ref": ref, "description": ""})
        comps.append(c)
    n_shots = 15
    spectra, index = [], []
    for i, c in enumerate(comps):
        w = dict(zip(("Zn", "Sn", "Fe"), c))
        w["Cu"] = 1 - sum(c)
        A = rng.lognormal(0, 0.1, n_shots)[:, None] * scale
        sp = np.full((n_shots, wl.size), 200.0)
        for el, lam in LINES.items():
            sp += A * SENS[el] * w[el] * 100 * np.exp(-0.5 * ((wl - lam) / 0.05) ** 2)
        sp += rng.normal(0, 2.0, sp.shape)
        spectra.append(sp)
        index += [i] * n_shots
    write_run(tmp_path / "run.h5", wl, np.vstack(spectra), pd.DataFrame(samples), np.array(index))
    rows = []
    for sid, c in list(STDS.items()) + [("S7", (0.12, 0.012, 0.005))]:
        for el, v in zip(("Zn", "Sn", "Fe"), c):
            rows.append(f"{sid},Cu,{el},{v * 100:.5g},{v * 2:.5g},2,%,invented test value")
        rows.append(f"{sid},Cu,Cu,{(1 - sum(c)) * 100:.5g},0.1,2,%,invented test value")
    rows.append("CU-PURE,Cu,Cu,99.99,0.01,2,%,invented test value")
    (tmp_path / "std.csv").write_text("standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,"
                                      "unit,source\n" + "\n".join(rows) + "\n")
    (tmp_path / "method.toml").write_text(METHOD)


def test_calibrate_and_quantify_cli(tmp_path):
    _write(tmp_path)
    r = CliRunner().invoke(main, ["calibrate", str(tmp_path / "run.h5"), "--method",
                                  str(tmp_path / "method.toml"), "--standards", str(tmp_path / "std.csv"),
                                  "-o", str(tmp_path / "cal.json"), "--plots", str(tmp_path / "plots")])
    assert r.exit_code == 0, r.output
    assert "analyte" in r.output and "R2" in r.output and "Zn I 481.053" in r.output
    assert "PLS Zn" in r.output and "RMSECV" in r.output
    cal = json.loads((tmp_path / "cal.json").read_text())
    assert set(cal["curves"]) == {"Zn", "Sn", "Fe"}
    assert len(list((tmp_path / "plots").glob("*.png"))) == 3
    r2 = CliRunner().invoke(main, ["quantify", str(tmp_path / "run.h5"), "--calibration",
                                   str(tmp_path / "cal.json"), "-o", str(tmp_path / "res.csv")])
    assert r2.exit_code == 0, r2.output
    res = pd.read_csv(tmp_path / "res.csv")
    lot = res[(res.sample_id == "LOT-1") & (res.element == "Zn") & (res.basis == "calibration")].iloc[0]
    assert abs(lot.mass_fraction / 0.08 - 1) < 0.05
    assert (tmp_path / "res-checks.csv").exists()
    prov = json.loads((tmp_path / "res-provenance.json").read_text())
    assert prov["drift"]["applied"] is False
    assert "pls" in set(res.basis)


def test_cli_errors_are_one_line(tmp_path):
    _write(tmp_path)
    (tmp_path / "bad.csv").write_text("standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,"
                                      "unit,source\nS1,Cu,Zq,1,0.1,2,%,x\n")
    r = CliRunner().invoke(main, ["calibrate", str(tmp_path / "run.h5"), "--method",
                                  str(tmp_path / "method.toml"), "--standards", str(tmp_path / "bad.csv"),
                                  "-o", str(tmp_path / "cal.json")])
    assert r.exit_code == 2
    assert "error:" in r.output and "Zq" in r.output and "line 2" in r.output
    assert not (tmp_path / "cal.json").exists()
