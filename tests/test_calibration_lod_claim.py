"""A "< LOD" result states a limit that its own measurement supports.

The method's LOD is 3 s_blank / slope (IUPAC 3σ from the blank's scatter).  A sample whose own
standard uncertainty at its level is larger (matrix, curve, background terms) can have a true
content well above that LOD while its estimate lies below it: demo day 2 printed LOT-2612-H Zn
"< LOD (0.090 %)" for a true 0.288 % (estimate 0.034 %, U 0.274 %).  The limit printed is then the
upper end of the result's expanded interval, w + U, flagged ``lod_from_result`` (docs/calibration.md
sec. 8).  Invented numbers; the rule is checked by arithmetic.
"""

from __future__ import annotations

from types import SimpleNamespace as NS

import pandas as pd
import pytest

from compquant.calibrate.predict import sample_rows


def _rows(x, u):
    curve = NS(basis="intensity", lod_x=0.0009, loq_x=0.0030, range_x=(0.0, 0.5), range_mass_fraction=(0.0, 0.5),
               interferences=[], line_id="Zn I 468.014")
    preds = {"Zn": {"x": x, "u": u, "dof": 50.0, "budget": {"repeatability": u**2}}}
    resp = {"Zn": pd.DataFrame({"flags": [[]]}, index=["S1"])}
    return sample_rows("S1", "unknown", ["Zn"], preds, {"Zn": curve}, resp, 0.10, "k2", [], [], {})[0]


def test_below_lod_with_a_small_u_keeps_the_method_lod():
    r = _rows(0.0002, 0.0002)  # w + U = 0.0006 below the LOD 0.0009
    assert r["below_lod"] and r["lod"] == pytest.approx(0.0009) and r["loq"] == pytest.approx(0.0030)
    assert "lod_from_result" not in r["flags"]


def test_below_lod_with_a_large_u_states_the_upper_end_of_its_interval():
    r = _rows(0.000343, 0.00137)  # the demo case: w + U = 0.00308 > LOD 0.0009
    assert r["below_lod"] and "lod_from_result" in r["flags"].split(";")
    assert r["lod"] == pytest.approx(0.000343 + 2 * 0.00137, rel=1e-6)  # w + U, k = 2 (u through the closure)
    assert r["loq"] >= r["lod"]
    assert 0.00288 < r["lod"]  # the true content (demo truth-day2.csv) is inside the stated limit


def test_a_detected_result_is_unchanged():
    r = _rows(0.0040, 0.0020)
    assert not r["below_lod"] and r["lod"] == pytest.approx(0.0009) and "lod_from_result" not in r["flags"]
