"""Rule negative-net: an analyte line whose net is significantly negative in a sample (a side window
holds another line) gets the flag ``negative_net`` and a Type B uncertainty component
(compquant.calibrate.negnet, docs/calibration.md sec. 3).  Synthetic line tables of known truth
(invented data, tests/calib_synth.py)."""

from __future__ import annotations

import math

import pytest
from calib_synth import LINES, config_dict, make_tables

from compquant.calibrate import calibrate, parse_calibration_section
from compquant.calibrate.apply import quantify
from compquant.calibrate.negnet import (
    NegativeNetWarning,
    interfering_candidates,
    negative_net,
    widen_negative_net,
)

ZN, CU = LINES["Zn"], LINES["Cu"]
SENS_ZN, SENS_CU = 1000.0, 50.0  # calib_synth defaults: ratio y = 20 w_Zn / w_Cu without the bias
BIAS_STD = 0.5  # background over-estimate of the standards, response (ratio) units: b * I_Cu per shot
BIAS_UNK = 0.4  # the unknown's: departs from the standards' by 0.1 (half its own smallest size, below)
W_UNK = 0.01  # the unknown's true Zn mass fraction


def test_significance_threshold():
    # one-sided 3-sigma decision on the line's own u (common practice)
    assert negative_net(-3.01, 1.0)
    assert not negative_net(-3.0, 1.0)  # strictly below -3u
    assert not negative_net(-2.0, 1.0) and not negative_net(5.0, 1.0)
    assert not negative_net(float("nan"), 1.0) and not negative_net(-10.0, 0.0) and not negative_net(None, 1.0)


def test_widen_arithmetic():
    p = {"x": 0.02, "u": 0.01, "dof": 10.0, "dydx": 2.0, "budget": {"repeatability": 1e-4}}
    r = {"net": -30.0, "u_net": 1.0, "per_net": 0.01}
    q = widen_negative_net(p, r)
    e = 30.0 * 0.01  # the smallest background error the sample carries, response units (arithmetic)
    u_bg = e / math.sqrt(3.0) / 2.0  # rectangular half-width e (GUM 4.3.7: a / sqrt(3)), through 1/f'
    assert q["budget"]["background"] == pytest.approx(u_bg**2, rel=1e-12)
    assert q["u"] == pytest.approx(math.sqrt(0.01**2 + u_bg**2), rel=1e-12)
    # Welch-Satterthwaite with an infinite-dof Type B part (GUM G.4.1): nu' = nu (u'^2 / u^2)^2
    assert q["dof"] == pytest.approx(10.0 * ((0.01**2 + u_bg**2) / 0.01**2) ** 2, rel=1e-12)
    assert q["x"] == p["x"]
    # a net within its noise: unchanged
    assert widen_negative_net(p, {"net": -2.0, "u_net": 1.0, "per_net": 0.01}) is p


def test_candidate_line_named():
    # Cu I 467.479 nm lies 0.53 nm blue of Zn I 468.014 nm (NIST Atomic Spectra Database wavelengths,
    # from memory); in a copper alloy it is the strong neighbour, Fe I 467.885 nm a weak one
    cand = interfering_candidates("Zn I 468.014", {"Cu": 0.75, "Zn": 0.2, "Fe": 0.005})
    assert cand and cand[0].startswith("Cu I 467.479") and "blue" in cand[0]


def _biased_tables(bias_unk=BIAS_UNK):
    """calib_synth tables with a background over-estimate on the Zn line proportional to the Cu line
    shot by shot (the wing of a matrix line in a side window): b * I_Cu subtracted from every Zn
    shot, b = BIAS_STD for every sample but the unknown UNK-1 (b = ``bias_unk``).  Small matrix
    scatter (0.1 %) and a weighted curve, as in the demo: the curve's own u is small."""
    lt, st, sm, std, truth = make_tables(
        3, n_unknowns=2, matrix_rsd=0.001, unknown_contents=[{"Zn": W_UNK, "Sn": 0.006, "Fe": 0.003},
                                           {"Zn": 0.20, "Sn": 0.018, "Fe": 0.007}])
    st = st.copy()
    lt = lt.copy()
    for sid in lt["sample_id"].unique():
        b = bias_unk if sid == "UNK-1" else BIAS_STD
        mz = (st["sample_id"] == sid) & (st["line_id"] == ZN)
        cu = st[(st["sample_id"] == sid) & (st["line_id"] == CU)].sort_values("shot")["intensity"].to_numpy()
        st.loc[mz, "intensity"] = st.loc[mz].sort_values("shot")["intensity"].to_numpy() - b * cu
        shots = st.loc[mz, "intensity"].to_numpy()
        row = (lt["sample_id"] == sid) & (lt["line_id"] == ZN)
        lt.loc[row, "intensity"] = shots.mean()
        lt.loc[row, "sd_shots"] = shots.std(ddof=1)
        lt.loc[row, "u_intensity"] = shots.std(ddof=1) / math.sqrt(shots.size)
    return lt, st, sm, std, truth


def test_negative_net_result_flagged_and_covered():
    lt, st, sm, std, truth = _biased_tables()
    cfg = parse_calibration_section(config_dict(models={"Zn": "weighted"}))
    with pytest.warns(NegativeNetWarning, match=r"Zn I 481\.053.*STD-1"):
        cal = calibrate(lt, std, cfg, shot_table=st, samples=sm, run_sha256="run-a")
    # the lowest standard (2 % Zn: y = 20 x - 0.5 < 0) carries the negative net, and is on the curve
    assert [s["standard_id"] for s in cal.curves["Zn"].diagnostics["negative_net"]["standards"]] == ["STD-1"]
    q = quantify((lt, st, sm), cal, run_sha256="run-a")
    r = q.results.set_index(["sample_id", "element"])
    unk = r.loc[("UNK-1", "Zn")]
    net = lt[(lt.sample_id == "UNK-1") & (lt.line_id == ZN)].iloc[0]
    cu = lt[(lt.sample_id == "UNK-1") & (lt.line_id == CU)].iloc[0]
    assert net.intensity < -3 * net.u_intensity  # the constructed case: y = 20 x - 0.4 < 0 at x = 0.0101
    assert "negative_net" in unk["flags"].split(";")
    w_true = truth["UNK-1"]["Zn"]
    # the departure of the unknown's background error (0.1 in ratio units) biases it by 0.1 / 20 in x,
    # about +50 % (arithmetic of the construction): far beyond the curve's own u, within U with the rule
    assert unk["mass_fraction"] / w_true - 1 > 0.3
    assert abs(unk["mass_fraction"] - w_true) <= unk["U"]
    # the added component (arithmetic): e = |net| / I_Cu (paired shots), u_bg = e / (sqrt(3) f'), in x;
    # through the closure w = x w_Cu, and w_Cu is close to 1 - sum of the analytes
    c = cal.curves["Zn"]
    e = abs(net.intensity) / cu.intensity
    u_bg_x = e / (math.sqrt(3.0) * c.beta[c.terms.index("x")])
    assert unk["u"] >= 0.95 * u_bg_x * (1 - 0.01 - 0.006 - 0.003)
    # the blank (no Zn) carries the standards' background error: its line cannot show absence, so no
    # "< LOD" claim (a negative-net line over-estimates the background: docs/calibration.md sec. 3);
    # its value is given with U, which covers the true 0 (arithmetic of the construction)
    blank = r.loc[("BLANK", "Zn")]
    assert "negative_net" in blank["flags"] and not blank["below_lod"] and "below_lod" not in blank["flags"]
    assert abs(blank["mass_fraction"]) <= blank["U"]
    # the other unknown (positive net) is untouched
    other = r.loc[("UNK-2", "Zn")]
    assert "negative_net" not in str(other["flags"]) and abs(other["mass_fraction"] / 0.20 - 1) < 0.05


def test_same_background_as_standards_is_still_right():
    # when the unknown carries the standards' background error the curve removes it: the value is
    # within its U (which is larger than without the rule: the data cannot show the two errors equal)
    lt, st, sm, std, truth = _biased_tables(bias_unk=BIAS_STD)
    with pytest.warns(NegativeNetWarning):
        cal = calibrate(lt, std, parse_calibration_section(config_dict(models={"Zn": "weighted"})), shot_table=st,
                        samples=sm)
    r = quantify((lt, st, sm), cal).results.set_index(["sample_id", "element"])
    unk = r.loc[("UNK-1", "Zn")]
    assert "negative_net" in unk["flags"]
    assert abs(unk["mass_fraction"] - truth["UNK-1"]["Zn"]) <= unk["U"]


def test_response_carries_net_and_scale():
    # the response table gives the analyte line's own net and u (the line table's) and the factor from
    # net intensity to response units: 1 / mean internal-standard intensity of the paired shots (ratio
    # of means, GUM 5.1.2 as in docs/calibration.md sec. 3), 1 for the intensity basis (arithmetic)
    from compquant.calibrate.response import sample_responses

    lt, st, sm, std, truth = make_tables(0)
    ratio = sample_responses(lt, ZN, CU, st)
    inten = sample_responses(lt, ZN, None, st)
    for sid in ("STD-1", "UNK-1"):
        zn = lt[(lt.sample_id == sid) & (lt.line_id == ZN)].iloc[0]
        cu = st[(st.sample_id == sid) & (st.line_id == CU)]["intensity"].mean()
        assert ratio.loc[sid, "net"] == zn.intensity and ratio.loc[sid, "u_net"] == zn.u_intensity
        assert ratio.loc[sid, "per_net"] == pytest.approx(1.0 / cu, rel=1e-12)
        assert ratio.loc[sid, "y"] == pytest.approx(zn.intensity * ratio.loc[sid, "per_net"], rel=1e-9)
        assert inten.loc[sid, "per_net"] == 1.0
