"""Reproducible per-sample sums (issue 20, item 6): the same numbers for any chunking or order."""

from __future__ import annotations

import math

import numpy as np
import pytest
from _lines_data import LINES, make_run, method

from compquant.exactsum import FixedPointSum, row_products
from compquant.lines import measure_run
from compquant.preprocess.baseline import _difference_penalty_bands
from compquant.run import Run


def _data(n=300, m=17, seed=4):
    rng = np.random.default_rng(seed)
    # counts-like values over six decades, both signs (dark-subtracted noise)
    return rng.normal(0, 1, (n, m)) * 10.0 ** rng.uniform(-2, 4, (n, m))


def test_sum_is_the_same_for_every_grouping_and_order():
    y = _data()
    ref = FixedPointSum.of_rows(y).value()
    rng = np.random.default_rng(0)
    for _ in range(20):
        perm = rng.permutation(len(y))
        cuts = np.sort(rng.choice(np.arange(1, len(y)), size=rng.integers(1, 30), replace=False))
        acc = FixedPointSum(y.shape[1])
        for part in np.split(y[perm], cuts):
            acc += FixedPointSum.of_rows(part)
        assert np.array_equal(acc.value(), ref)


def test_sum_agrees_with_math_fsum():
    # reference: math.fsum (Shewchuk's exactly rounded summation, Python standard library);
    # the fixed grid 2**-40 rounds each value by at most 4.6e-13
    y = _data()
    got = FixedPointSum.of_rows(y).value()
    want = np.array([math.fsum(y[:, j]) for j in range(y.shape[1])])
    assert np.all(np.abs(got - want) <= len(y) * 2.0**-41 + 1e-15 * np.abs(want))


def test_non_finite_and_huge_values_are_carried():
    y = np.array([[1.0, np.nan, 2.0**45, np.inf], [2.0, 1.0, 1.0, 1.0]])
    v = FixedPointSum.of_rows(y).value()
    assert v[0] == 3.0 and np.isnan(v[1]) and v[2] == 2.0**45 + 1 and v[3] == np.inf


def test_row_products_match_matmul_and_do_not_depend_on_row_count():
    rng = np.random.default_rng(1)
    a, b, t = rng.normal(size=(64, 40)), rng.normal(size=(40, 5)), rng.normal(size=40)
    full, full_t = row_products(a, b), row_products(a, t)
    # reference: numpy matmul (BLAS), equal to round-off
    assert np.allclose(full, a @ b, rtol=1e-13, atol=1e-12)
    assert np.allclose(full_t, a @ t, rtol=1e-13, atol=1e-12)
    for m in (1, 3, 37):
        assert np.array_equal(row_products(a[:m], b), full[:m])
        assert np.array_equal(row_products(a[:m], t), full_t[:m])


@pytest.mark.parametrize("n,d", [(50, 1), (50, 2), (60, 3)])
def test_penalty_bands_equal_dense_difference_matrix(n, d):
    # reference: D = np.diff(I, d) (numpy's d-th order difference), P = D^T D dense
    D = np.diff(np.eye(n), d, axis=0)
    P = D.T @ D
    bands = _difference_penalty_bands(n, d)
    for k in range(d + 1):
        assert np.allclose(bands[k, : n - k], np.diagonal(P, -k), atol=0)


def test_line_table_identical_for_any_chunk_size(tmp_path):
    # shift from the mean spectra, then fitted lines on the shifted positions: the mean spectra
    # (per-sample sums) feed both, so any rounding difference in them would show in the table
    p = tmp_path / "r.h5"
    areas = {"Cu I 324.754": 400.0, "Cu I 327.396": 250.0, "Zn I 330.259": 30.0, "Zn I 334.502": 60.0}
    make_run(p, [("A", "standard", 23, areas), ("B", "unknown", 9, areas), ("C", "blank", 11, {})])
    m = method(
        lines=[{"id": k, "mode": "fit" if k.startswith("Zn") else "window", "fwhm_nm": 0.04} for k in LINES],
        preprocess={
            "baseline": {"method": "snip", "max_half_window": 25},
            "shift": {"method": "lines", "lines": ["Cu I 324.754", "Cu I 327.396"]},
        },
    )
    with Run.open(p) as run:
        got = [measure_run(run, m, chunk_shots=c) for c in (4096, 7, 5, 1)]
        threaded = measure_run(run, m, threads=3)
    for lm in got[1:] + [threaded]:
        assert lm.table.equals(got[0].table)
        assert lm.shots.equals(got[0].shots)
