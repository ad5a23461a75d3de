"""Preprocessing steps checked against outside references (pybaselines, numpy, scipy)."""

from __future__ import annotations

import numpy as np
import pytest
from pybaselines import Baseline
from scipy.stats import median_abs_deviation

from compquant.preprocess import (
    BASELINES,
    arpls,
    asls,
    correct_response,
    dark_reference,
    estimate_baseline,
    exposure_ratio,
    qc_decide,
    saturation_mask,
    shift_by_cross_correlation,
    shift_from_lines,
    snip,
    subtract_dark,
)
from compquant.preprocess.baseline import lls_forward, lls_inverse
from compquant.preprocess.qc import MAD_TO_SD

X = np.linspace(200.0, 800.0, 1500)


def _spectra(n=4, seed=1):
    """Invented spectra: curved continuum, 25 Gaussian lines, Gaussian noise."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        y = 500 + 0.4 * (X - 200) + 250 * np.sin(X / 90)
        for c in rng.uniform(210, 790, 25):
            y = y + rng.uniform(100, 6000) * np.exp(-0.5 * ((X - c) / 0.6) ** 2)
        out.append(y + rng.normal(0, 8, X.size))
    return np.array(out)


Y = _spectra()
REF = Baseline(X)


@pytest.mark.parametrize(
    "kw",
    [
        {"max_half_window": 20},
        {"max_half_window": 12, "decreasing": True},
        {"max_half_window": 1},
        {"max_half_window": 40},
    ],
)
def test_snip_equals_pybaselines(kw):
    # reference: pybaselines 1.2 smooth.snip (same edge padding); agreement to round-off (1e-12)
    ref = np.array([REF.snip(y, **kw)[0] for y in Y])
    got = snip(Y, **kw)
    assert np.max(np.abs(got - ref)) <= 1e-12 * np.max(np.abs(ref))


def test_snip_lls_equals_pybaselines_on_transformed_data():
    # pybaselines docs: apply the LLS transform, SNIP, then the inverse (Ryan et al. 1988)
    ref = np.array([lls_inverse(REF.snip(lls_forward(y), max_half_window=15)[0]) for y in Y])
    got = snip(Y, 15, lls=True)
    assert np.max(np.abs(got - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_lls_round_trip():
    y = np.array([0.0, 1.0, 10.0, 1e3, 6e4])
    assert np.allclose(lls_inverse(lls_forward(y)), y, rtol=1e-10, atol=1e-9)


def test_snip_rows_independent_of_blocking():
    a = snip(Y, 20, block_rows=1)
    b = snip(Y, 20, block_rows=64)
    # equal up to round-off of the edge-line fit (BLAS may sum in another order)
    assert np.allclose(a, b, rtol=1e-13, atol=0)
    assert np.allclose(snip(Y[2], 20), a[2], rtol=1e-13, atol=0)


@pytest.mark.parametrize("lam,p", [(1e6, 0.01), (1e4, 0.05)])
def test_asls_equals_pybaselines(lam, p):
    # reference: pybaselines.whittaker.asls; stated tolerance 1e-6 of the data scale (banded
    # Cholesky here vs LAPACK banded solver there: round-off grows with lam)
    ref = np.array([REF.asls(y, lam=lam, p=p)[0] for y in Y])
    got = asls(Y, lam=lam, p=p)
    assert np.max(np.abs(got - ref)) <= 1e-6 * np.max(np.abs(Y))


@pytest.mark.parametrize("lam", [1e5, 1e7])
def test_arpls_equals_pybaselines(lam):
    # reference: pybaselines.whittaker.arpls; stated tolerance 1e-6 of the data scale
    ref = np.array([REF.arpls(y, lam=lam)[0] for y in Y])
    got = arpls(Y, lam=lam)
    assert np.max(np.abs(got - ref)) <= 1e-6 * np.max(np.abs(Y))


def test_whittaker_diff_order_3():
    ref = REF.asls(Y[0], lam=1e7, p=0.02, diff_order=3)[0]
    got = asls(Y[:1], lam=1e7, p=0.02, diff_order=3)[0]
    assert np.max(np.abs(got - ref)) <= 1e-6 * np.max(np.abs(Y[0]))


def test_dark_reference_and_exposure():
    rng = np.random.default_rng(3)
    d = rng.normal(100, 5, (7, 50))
    assert np.allclose(dark_reference(d, "mean"), np.mean(d, axis=0))
    assert np.allclose(dark_reference(d, "median"), np.median(d, axis=0))
    # dark current scales linearly with exposure (common practice)
    assert exposure_ratio(2.0, 0.5) == 4.0
    assert exposure_ratio(None, 0.5) == 1.0
    got = subtract_dark(np.full((2, 50), 100.0), dark_reference(d, "median"), exposure_ratio(1.0, 2.0))
    assert np.allclose(got, 100.0 - 0.5 * np.median(d, axis=0))


def test_response_correction_zero_pixels():
    r = np.array([1.0, 0.5, 0.0, np.nan])
    s = np.array([[2.0, 2.0, 2.0, 2.0]])
    assert np.allclose(correct_response(s, r), [[2.0, 4.0, 0.0, 0.0]])


def test_saturation_mask():
    raw = np.array([[10, 65535, 65534], [65535, 0, 1]], dtype=np.uint16)
    assert saturation_mask(raw, None) is None
    assert saturation_mask(raw, 65535).tolist() == [[False, True, False], [True, False, False]]
    assert saturation_mask(raw, 65535, margin=0.01).sum() == 3


def test_qc_mad_matches_scipy_and_rejects_outliers():
    rng = np.random.default_rng(5)
    x = rng.normal(1000, 20, 200)
    x[[3, 50]] = [2000, 300]  # outliers
    x[7] = 5.0  # misfire
    med, rsd = float(np.median(x)), float(MAD_TO_SD * np.median(np.abs(x - np.median(x))))
    # scipy.stats.median_abs_deviation(scale="normal") is the same robust SD estimate
    assert rsd == pytest.approx(median_abs_deviation(x, scale="normal"), rel=1e-3)
    dec = qc_decide(x, k=5, min_fraction=0.1)
    assert dec.median == pytest.approx(med)
    assert set(np.flatnonzero(~dec.accepted)) == {3, 7, 50}
    assert dec.reasons[7] == "low_signal" and dec.reasons[3] == "outlier"
    assert dec.counts == {"outlier": 2, "low_signal": 1}
    assert qc_decide(x, enabled=False).accepted.all()


def test_qc_pulse_energy_rule():
    x = np.full(10, 100.0)
    e = np.full(10, 50.0)
    e[2] = 10.0
    dec = qc_decide(x, pulse_energy=e, min_pulse_fraction=0.5)
    assert dec.reasons[2] == "low_pulse_energy" and dec.accepted.sum() == 9


def test_shift_by_cross_correlation_recovers_known_shift():
    wl = np.linspace(300, 310, 2001)  # 0.005 nm pixels

    def spec(d):
        y = np.zeros_like(wl)
        for c, a in ((301.2, 1.0), (303.7, 0.5), (306.1, 2.0), (308.8, 0.7)):
            y += a * np.exp(-0.5 * ((wl - c - d) / 0.02) ** 2)
        return y

    for true in (0.0, 0.0123, -0.031):
        got = shift_by_cross_correlation(wl, spec(true), wl, spec(0.0), max_shift_nm=0.1)
        assert got == pytest.approx(true, abs=0.1 * 0.005)  # within a tenth of a pixel
        d, each = shift_from_lines(wl, spec(true), [301.2, 306.1], half_window_nm=0.06)
        assert d == pytest.approx(true, abs=0.1 * 0.005)
        assert len(each) == 2


# pybaselines' name of each registered estimator (outside reference for the registry's defaults)
_PYBASELINES = {"snip": "snip", "asls": "asls", "arpls": "arpls"}


@pytest.mark.parametrize("name", [n for n in BASELINES if n != "none"])
def test_baseline_registry_entry_meets_its_contract(name):
    """Each registry entry: keyword parameters = its declared settings, defaults as declared,
    a baseline per row, rows independent; at its defaults it equals pybaselines' estimator of the
    same name called with those values (pybaselines 1.2, tolerance 1e-6 of the data scale)."""
    import inspect

    entry = BASELINES[name]
    sig = inspect.signature(entry.function)
    for s in entry.params:
        assert s.key in sig.parameters
        if sig.parameters[s.key].default is not inspect.Parameter.empty:
            assert sig.parameters[s.key].default == s.default, s.key
    kw = {s.key: s.default for s in entry.params}
    got = estimate_baseline(Y, name, **kw)
    assert got.shape == Y.shape and got.dtype == np.float64
    assert np.allclose(estimate_baseline(Y[1:2], name, **kw)[0], got[1], rtol=1e-12, atol=1e-9)
    # lls = false is the plain estimator (pybaselines has no such keyword: the transform is applied outside)
    ref_kw = {k: v for k, v in kw.items() if k != "lls"}
    ref = np.array([getattr(REF, _PYBASELINES[name])(y, **ref_kw)[0] for y in Y])
    assert np.max(np.abs(got - ref)) <= 1e-6 * np.max(np.abs(Y))
    assert estimate_baseline(Y, "none") is None


@pytest.mark.parametrize("name", list(BASELINES))
def test_method_file_takes_each_registered_baseline_and_only_its_keys(name):
    """[preprocess.baseline] accepts every registry entry with its declared keys (defaults filled in
    from the entry) and refuses a key that belongs to another entry only."""
    from compquant.errors import MethodError
    from compquant.method import method_from_dict

    entry = BASELINES[name]
    doc = {"method": {"id": "m"}, "lines": [{"id": "Cu I 324.754"}],
           "preprocess": {"baseline": {"method": name, **{s.key: s.default for s in entry.params}}}}
    m = method_from_dict(doc)
    assert m.preprocess.baseline == name and m.preprocess.baseline_params == {s.key: s.default for s in entry.params}
    foreign = sorted({s.key for e in BASELINES.values() for s in e.params} - set(entry.keys))
    if foreign:
        doc["preprocess"]["baseline"][foreign[0]] = 1
        with pytest.raises(MethodError, match=f"does not apply to method '{name}'"):
            method_from_dict(doc)
