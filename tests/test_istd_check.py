"""Internal-standard line warnings (compquant.calibrate.istd_check).

Curve of growth: the homogeneous-slab solution I ∝ 1 - exp(-τ) (common practice; Gornushkin et
al. 1999 from memory).  Level energies: from memory of the NIST Atomic Spectra Database — Al I 394.401 nm and Cu I
324.754 nm end on their atoms' ground states (Al 3s²3p ²P°₁/₂, Cu 3d¹⁰4s ²S₁/₂); Cu I 510.554 nm
ends on the metastable 3d⁹4s² ²D₅/₂ level at 1.39 eV.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from calib_synth import LINES, config_dict, make_tables
from click.testing import CliRunner

from compquant.calibrate import Calibration, calibrate, parse_calibration_section
from compquant.calibrate.istd_check import (
    InternalStandardWarning,
    curve_of_growth,
    internal_standard_warnings,
    remarks,
    self_absorbed,
)


def test_resonance_internal_standard_warns_and_suggests_non_resonance_lines():
    warns, alts = internal_standard_warnings("Al I 394.401", analyte_id="Si I 288.158")
    assert any("resonance line" in w for w in warns)
    assert alts and all(a.startswith("Al ") and a != "Al I 394.401" for a in alts)
    from compquant.atomic import load_line_list

    ll = load_line_list().set_index("line_id")
    assert all(ll.loc[a, "ei_ev"] > 0.1 for a in alts)  # none of them a resonance line
    warns, _ = internal_standard_warnings("Cu I 324.754")
    assert any("resonance" in w for w in warns)


def test_non_resonance_standard_with_matched_upper_level_is_quiet():
    # Cu I 510.554 (E_k 3.82 eV) against Zn I 472.215 is a non-resonance pair, but the upper
    # levels differ by 2.8 eV: only the temperature warning
    warns, _ = internal_standard_warnings("Cu I 510.554", analyte_id="Zn I 472.215")
    assert len(warns) == 1 and "differ by more than 1 eV" in warns[0]
    warns, alts = internal_standard_warnings("Cu I 510.554", analyte_id="Cu I 578.213")
    assert warns == [] and alts == []
    warns, _ = internal_standard_warnings("Cu I 510.554", self_absorbed={"Cu I 510.554"})
    assert any("self-absorbed" in w for w in warns)


# ------------------------------------------------------------------ curve of growth and calibrate()
RESONANCE = "Cu I 324.754"  # ends on the Cu ground state 3d¹⁰4s ²S₁/₂ (NIST ASD, from memory)


def _slab(w, tau0):
    """Homogeneous slab with a rectangular line profile: I ∝ 1 - exp(-τ), τ = τ0 w (the radiative
    transfer solution without a source gradient; common practice)."""
    return -np.expm1(-tau0 * np.asarray(w, float))


def test_curve_of_growth_slope_against_the_slab_solution():
    w = np.linspace(0.6, 0.98, 6)
    thin = curve_of_growth(3.0 * w, w)
    assert thin["slope"] == pytest.approx(1.0, abs=1e-12) and not self_absorbed(thin)
    g = curve_of_growth(_slab(w, 5.0), w)
    # d ln I / d ln w = τ e^{-τ} / (1 - e^{-τ}) of the slab, at the geometric middle of the contents
    tau = 5.0 * np.sqrt(w[0] * w[-1])
    assert g["slope"] == pytest.approx(tau * np.exp(-tau) / -np.expm1(-tau), abs=0.02)
    assert self_absorbed(g)
    assert curve_of_growth([1.0, 2.0], [0.5, 0.9]) is None  # fewer than 3 standards


def _thick_internal_standard(tau0=5.0):
    """calib_synth's run with its Cu line renamed to a resonance line and made optically thick:
    each sample's Cu intensities scaled by (1 - e^{-τ0 w}) / (τ0 w) (slab, as above)."""
    lt, st, sm, std, truth = make_tables(3)
    f = {sid: -np.expm1(-tau0 * t["Cu"]) / (tau0 * t["Cu"]) for sid, t in truth.items()}
    cu = lt["line_id"] == LINES["Cu"]
    for col in ("intensity", "u_intensity", "sd_shots"):
        lt.loc[cu, col] = lt.loc[cu, col] * lt.loc[cu, "sample_id"].map(f)
    lt.loc[cu, "line_id"] = RESONANCE
    scu = st["line_id"] == LINES["Cu"]
    st.loc[scu, "intensity"] = st.loc[scu, "intensity"] * st.loc[scu, "sample_id"].map(f)
    st.loc[scu, "line_id"] = RESONANCE
    return lt, st, sm, std


def test_calibrate_warns_on_a_resonance_self_absorbed_internal_standard():
    lt, st, sm, std = _thick_internal_standard()
    cfg = parse_calibration_section(config_dict(internal_standard=RESONANCE))
    with pytest.warns(InternalStandardWarning, match="resonance line") as rec:
        cal = calibrate(lt, std, cfg, shot_table=st, samples=sm, method_id="m1")
    assert len([w for w in rec if issubclass(w.category, InternalStandardWarning)]) == 1  # once per line
    diag = cal.curves["Zn"].diagnostics["internal_standard"]
    assert diag["line"] == RESONANCE
    assert any("resonance line" in w for w in diag["warnings"])
    assert any("self-absorbed" in w for w in diag["warnings"])
    assert diag["curve_of_growth"]["slope"] < 0.5
    from compquant.atomic import load_line_list

    ll = load_line_list().set_index("line_id")
    assert diag["alternatives"] and all(a.startswith("Cu I") and ll.loc[a, "ei_ev"] > 0.1
                                        for a in diag["alternatives"])
    # kept in the saved calibration and repeated as a certificate remark
    back = Calibration.from_dict(cal.to_dict())
    assert back.curves["Sn"].diagnostics["internal_standard"]["warnings"] == diag["warnings"]
    (text,) = remarks(back.curves)
    assert RESONANCE in text and diag["alternatives"][0] in text


def test_calibrate_is_quiet_on_a_thin_non_resonance_internal_standard():
    lt, st, sm, std, _ = make_tables(3)  # Cu I 510.554: lower level 1.39 eV, intensities ∝ w
    cfg = parse_calibration_section(config_dict())
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        cal = calibrate(lt, std, cfg, shot_table=st, samples=sm, method_id="m1")
    assert not [w for w in rec if issubclass(w.category, InternalStandardWarning)]
    assert all("internal_standard" not in c.diagnostics for c in cal.curves.values())


CLI_METHOD = """
[method]
id = "istd-test"
version = "1"
technique = "LIBS"
description = "synthetic test method (invented)"

[preprocess.baseline]
method = "none"

[measure]
mode = "window"
window_nm = 0.6

[[lines]]
id = "Cu I 324.754"
element = "Cu"
ion = 1
wavelength_nm = 324.754

[[lines]]
id = "Zn I 330.258"
element = "Zn"
ion = 1
wavelength_nm = 330.258

[calibration]
basis = "ratio"
matrix_element = "Cu"
internal_standard = "Cu I 324.754"

[[calibration.analytes]]
element = "Zn"
line = "Zn I 330.258"
"""


def test_cli_calibrate_prints_the_internal_standard_warning(tmp_path):
    from compquant.cli import main
    from compquant.run import write_run

    rng = np.random.default_rng(5)
    wl = np.linspace(320.0, 335.0, 1500)
    zn = {"S1": 0.03, "S2": 0.08, "S3": 0.15, "S4": 0.25, "S5": 0.35, "LOT": 0.12}
    spectra, index, samples = [], [], []
    for i, (sid, w_zn) in enumerate(zn.items()):
        w_cu = 1.0 - w_zn
        a = rng.lognormal(0, 0.05, 20)[:, None]
        sp = 100.0 + a * (8e4 * _slab(w_cu, 6.0) * np.exp(-0.5 * ((wl - 324.754) / 0.04) ** 2)
                          + 5e4 * w_zn * np.exp(-0.5 * ((wl - 330.258) / 0.04) ** 2))
        spectra.append(sp + rng.normal(0, 1.0, sp.shape))
        index += [i] * 20
        samples.append({"sample_id": sid, "role": "unknown" if sid == "LOT" else "standard",
                        "standard_ref": "" if sid == "LOT" else sid, "description": ""})
    write_run(tmp_path / "run.h5", wl, np.vstack(spectra), pd.DataFrame(samples), np.array(index))
    rows = [f"{s},Cu,{el},{v * 100:.5g},{max(v, 0.01) * 2:.5g},2,%,invented test value"
            for s, w in zn.items() if s != "LOT" for el, v in (("Zn", w), ("Cu", 1 - w))]
    (tmp_path / "std.csv").write_text("standard_id,matrix,element,mass_fraction,expanded_uncertainty,k,unit,"
                                      "source\n" + "\n".join(rows) + "\n")
    (tmp_path / "method.toml").write_text(CLI_METHOD)
    r = CliRunner().invoke(main, ["calibrate", str(tmp_path / "run.h5"), "--method", str(tmp_path / "method.toml"),
                                  "--standards", str(tmp_path / "std.csv"), "-o", str(tmp_path / "cal.json")])
    assert r.exit_code == 0, r.output
    line = next(ln for ln in r.output.splitlines() if ln.startswith("warning: InternalStandardWarning:"))
    assert "Cu I 324.754 is a resonance line" in line and "self-absorbed" in line and "consider Cu I" in line
    cal = json.loads((tmp_path / "cal.json").read_text())
    assert cal["curves"]["Zn"]["diagnostics"]["internal_standard"]["alternatives"]
