"""One results contract for calibrated and calibration-free results (issue 19, item 5).

Both routes give their rows through ``to_frame()`` with the same declared columns, order and
dtypes (compquant.results), and a ``summary()`` text in the manner of statsmodels' results
classes.  Outside references: the GUM (JCGM 100:2008, 6.2.1: U = k u), the results-table
columns of docs/architecture.md (from the project's published contract), and the known truth of
the invented synthetic data (tests/calib_synth.py, tests/cf_hand.py).
"""

from __future__ import annotations

import warnings

import cf_hand
import numpy as np
import pandas as pd
import pytest
from calib_synth import config_dict, make_tables

from compquant import results as contract
from compquant.calibrate import calibrate, parse_calibration_section, quantify
from compquant.cflibs import analyse_cf, results_table

# the results-table columns as docs/architecture.md ("Results") states them, plus role and dof
DOCUMENTED = ["sample_id", "element", "mass_fraction", "u", "U", "k", "lod", "loq", "below_lod", "flags",
              "basis", "line_id"]


@pytest.fixture(scope="module")
def calibrated():
    lt, st, sm, std, truth = make_tables(1)
    cal = calibrate(lt, std, parse_calibration_section(config_dict()), shot_table=st, samples=sm,
                    run_sha256="run-a", method_id="m1", method_sha256="h1")
    return quantify((lt, st, sm), cal, run_sha256="run-a"), truth


@pytest.fixture(scope="module")
def calibration_free():
    w = {"Fe": 0.70, "Cr": 0.18, "Ni": 0.12}
    lt = cf_hand.line_table(w, 11500.0, 4.0e16)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = analyse_cf(lt, atomic=cf_hand.atomic(), settings={"fit": "saha-boltzmann", "mc_draws": 50},
                       instrument={"instrument_fwhm_nm": 0.05})
    return r, w


def test_declared_columns_are_the_documented_ones():
    assert contract.CORE_COLUMNS == DOCUMENTED  # docs/architecture.md, "Results"
    assert contract.RESULT_COLUMNS == DOCUMENTED + ["role", "dof"]
    assert contract.column("mass_fraction").unit == "g/g"  # docs: mass fractions are g/g inside
    assert contract.column("U").unit == contract.column("u").unit == "g/g"
    with pytest.raises(KeyError):
        contract.column("concentration")


def test_both_routes_share_columns_and_dtypes(calibrated, calibration_free):
    q, _ = calibrated
    r, _ = calibration_free
    fq, fr = q.to_frame(), r.to_frame()
    assert list(fq.columns) == list(fr.columns) == contract.RESULT_COLUMNS
    assert list(fq.dtypes.astype(str)) == list(fr.dtypes.astype(str)) == [c.dtype for c in contract.COLUMNS]
    # the two tables stack into one without any column changing type
    both = pd.concat([fq, fr], ignore_index=True)
    assert list(both.dtypes.astype(str)) == [c.dtype for c in contract.COLUMNS]
    assert set(both["basis"]) == {"calibration", "cf"}
    # the calibration-free route has no role and no degrees of freedom of its own
    assert (fr["role"] == "").all() and fr["dof"].isna().all()
    # the legacy tables keep their columns: 14 calibrated, the 12 core columns calibration-free
    assert list(q.results.columns) == contract.RESULT_COLUMNS
    assert list(results_table([r]).columns) == contract.CORE_COLUMNS


def test_frames_keep_the_numbers(calibrated, calibration_free):
    q, truth = calibrated
    r, w = calibration_free
    fq = q.to_frame()
    np.testing.assert_array_equal(fq["mass_fraction"].to_numpy(), q.results["mass_fraction"].to_numpy(float))
    # GUM (JCGM 100:2008) 6.2.1: U = k u
    np.testing.assert_allclose(fq["U"], fq["k"] * fq["u"], rtol=1e-12)
    fr = r.to_frame().set_index("element")
    np.testing.assert_allclose(fr["U"], fr["k"] * fr["u"], rtol=1e-12)
    for el, wt in w.items():  # the invented truth of cf_hand's line table
        assert fr.loc[el, "mass_fraction"] == pytest.approx(wt, rel=1e-6)
    unk = fq[fq["role"] == "unknown"]
    tv = np.array([truth[s][e] for s, e in zip(unk.sample_id, unk.element)])
    assert np.all(np.abs(unk["mass_fraction"] / tv - 1) < 0.1)  # calib_synth's known contents


def test_summaries_show_the_results(calibrated, calibration_free):
    q, _ = calibrated
    r, _ = calibration_free
    sq = q.summary()
    assert "Calibrated results" in sq and "check samples:" in sq and "3 of 3 passed" in sq
    first = q.results.iloc[0]
    assert str(first["sample_id"]) in sq and f"{100 * first['mass_fraction']:.4g}" in sq
    sr = r.summary()
    assert "Calibration-free" in sr and f"{r.temperature_k:.0f}" in sr
    for e in r.elements:
        assert f"{100 * e.mass_fraction:.4g}" in sr


def test_empty_tables_keep_the_contract():
    empty = contract.to_frame(pd.DataFrame())
    assert list(empty.columns) == contract.RESULT_COLUMNS and len(empty) == 0
    assert list(empty.dtypes.astype(str)) == [c.dtype for c in contract.COLUMNS]
    assert list(results_table([]).columns) == contract.CORE_COLUMNS
