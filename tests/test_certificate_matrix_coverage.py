"""The matrix by difference gets the same coverage rule as the other results.

With ``coverage = "student"`` every result's U is ``t_0.975(nu_eff) u`` (JCGM 100:2008 (GUM),
G.3-G.4); the matrix by difference (``w_m = (1 - sum w_i) / (1 + sum r_j)``) was always given
``U = 2 u, k = 2``.  Its ``nu_eff`` is Welch-Satterthwaite (GUM G.4.1, eq. G.2b) over the contents
the closure combines.  Invented numbers; t quantiles from scipy.stats.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import pandas as pd
import pytest
from scipy import stats

from compquant.calibrate.predict import closure, effective_dof, sample_rows
from compquant.workflow.certify import _complete_rows


def test_welch_satterthwaite_hand_example():
    # JCGM 100:2008 G.4.1 eq. G.2b: nu = u^4 / sum (c_i u_i)^4 / nu_i.  Two equal parts, one with
    # nu = 4, one with infinite nu: u^2 = 2, nu = 4 / (1 / 4) = 16 (hand computation)
    assert effective_dof([1.0, -1.0], [1.0, 1.0], [4.0, math.inf]) == pytest.approx(16.0)
    # one part only: its own nu (GUM G.4.1, a single component)
    assert effective_dof([0.5], [2.0], [7.0]) == pytest.approx(7.0)
    # no finite nu: infinite (then k = 2, common practice and GUM G.6.6)
    assert effective_dof([1.0, 1.0], [1.0, 1.0], [math.inf, math.inf]) == math.inf


def _curve(el, basis="ratio"):
    return SimpleNamespace(basis=basis, range_x=[0.001, 0.5], range_mass_fraction=[0.0005, 0.4], lod_x=1e-5,
                           loq_x=3e-5, interferences=[],
                           line_id=f"{el} I line")


def _closure_case(coverage):
    good = ["Zn", "Sn", "Pb"]
    preds = {"Zn": {"x": 0.40, "u": 0.006, "dof": 5.0, "budget": {}},
             "Sn": {"x": 0.02, "u": 0.0008, "dof": 8.0, "budget": {}},
             "Pb": {"x": 0.03, "u": 0.0009, "dof": math.inf, "budget": {}}}
    curves = {el: _curve(el) for el in good}
    resp = {el: pd.DataFrame({"flags": [[]]}, index=["S1"]) for el in good}
    mf: dict = {}
    rows = sample_rows("S1", "unknown", good, preds, curves, resp, 0.2, coverage, [], [], mf)
    return good, preds, rows, mf


def test_matrix_row_uses_student_coverage():
    good, preds, rows, mf = _closure_case("student")
    wm, uwm, k, dof = mf["S1"]
    # nu_eff from the closure's own Jacobian row of w_m (GUM 5.1.2 and G.4.1), by hand here
    import numpy as np

    _, _, wm2, uwm2, J = closure(good, [preds[e]["x"] for e in good], [preds[e]["u"] for e in good],
                                 np.array(["ratio"] * 3))
    parts = [(J[-1, j] * preds[e]["u"]) ** 2 for j, e in enumerate(good)]
    nu = sum(parts) ** 2 / (parts[0] ** 2 / 5.0 + parts[1] ** 2 / 8.0)
    assert (wm, uwm) == pytest.approx((wm2, uwm2))
    assert dof == pytest.approx(nu, rel=1e-9)
    assert k == pytest.approx(stats.t.ppf(0.975, nu))  # GUM G.3.4: k = t_0.975(nu_eff)
    assert 2.1 < k < 2.6  # the numbers chosen make nu_eff small: k is not 2
    # the certificate's matrix row: U = k u with that k (was U = 2 u, k = 2)
    out = _complete_rows([], {}, set(), "Cu", mf["S1"], [], "calibration", {})
    cu = [r for r in out if r.element == "Cu"][0]
    assert cu.k == pytest.approx(k) and cu.U == pytest.approx(k * uwm) and cu.u == pytest.approx(uwm)


def test_matrix_row_k2_unchanged():
    # coverage "k2" (the demo): k = 2 exactly, U = 2 u, as before (common practice, GUM 6.3.3)
    _, _, _, mf = _closure_case("k2")
    out = _complete_rows([], {}, set(), "Cu", mf["S1"], [], "calibration", {})
    cu = [r for r in out if r.element == "Cu"][0]
    assert cu.k == 2.0 and cu.U == 2.0 * cu.u
    # a (w, u) pair from an older caller still gives k = 2
    out = _complete_rows([], {}, set(), "Cu", (0.6, 0.002), [], "calibration", {})
    assert [r for r in out if r.element == "Cu"][0].U == pytest.approx(0.004)
