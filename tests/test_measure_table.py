"""The line table's statistics, made for all the lines of a sample at once, against NumPy line by line.

Reference outside the vectorised path: ``np.mean`` and ``np.std(ddof=1)`` of ONE line's finite
accepted values taken alone (NumPy's own 1-D reductions, as the table computed them line by line
before), compared bit for bit; the window weights' own pixel-noise uncertainty
(``WindowWeights.u_noise``, JCGM 100:2008 eq. 10) for a single-shot sample.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from _lines_data import LINES, WL, method, spectrum

from compquant.lines import measure_run
from compquant.lines._setup import _Setup
from compquant.lines._table import column_stats
from compquant.run import Run, write_run

AREAS = {"Cu I 324.754": 400.0, "Cu I 327.396": 250.0, "Zn I 330.259": 30.0, "Zn I 334.502": 60.0}


def _bits(x) -> np.ndarray:
    return np.asarray(x, dtype=np.float64).view(np.int64)


@pytest.mark.parametrize("n", [1, 2, 3, 7, 8, 9, 17, 128, 129, 4095, 8191, 8192, 8193, 20000, 65537, 300001])
def test_column_stats_equal_numpy_per_column_bit_for_bit(n):
    rng = np.random.default_rng(n)
    v = rng.standard_normal((n, 5)) * 10.0 ** rng.integers(-3, 9, size=5) + rng.standard_normal(5) * 1e4
    if n >= 3:
        v[rng.integers(0, n, 2), 1] = np.nan  # a masked shot on line 1
        v[0, 3] = np.inf
    v[:, 4] = np.nan if n < 5 else v[:, 4]
    nv, mean, sd = column_stats(v)
    for j in range(v.shape[1]):
        x = v[:, j][np.isfinite(v[:, j])]  # what the table used line by line
        assert nv[j] == x.size
        ref_mean = float(np.mean(x)) if x.size else float("nan")
        ref_sd = float(np.std(x, ddof=1)) if x.size >= 2 else float("nan")
        assert _bits(mean[j]) == _bits(ref_mean) or (math.isnan(mean[j]) and math.isnan(ref_mean)), (n, j)
        assert _bits(sd[j]) == _bits(ref_sd) or (math.isnan(sd[j]) and math.isnan(ref_sd)), (n, j)


def test_column_stats_of_no_shots():
    nv, mean, sd = column_stats(np.zeros((0, 3)))
    assert nv.tolist() == [0, 0, 0] and np.isnan(mean).all() and np.isnan(sd).all()


@pytest.fixture(scope="module")
def run_path(tmp_path_factory):
    """Two samples of 60 shots (one with a masked pixel range on a line in 3 shots) and a single-shot
    sample (invented data)."""
    rng = np.random.default_rng(7)
    base = spectrum(AREAS)
    n = 121
    x = base * rng.normal(1.0, 0.03, (n, 1)) + rng.normal(0, 1.0, (n, WL.size)) * np.sqrt(np.maximum(base, 1)) + 100
    samples = [{"sample_id": s, "role": "unknown", "standard_ref": "", "description": "invented"}
               for s in ("A", "B", "ONE")]  # fmt: skip
    idx = np.repeat([0, 1, 2], [60, 60, 1])
    j = int(np.searchsorted(WL, LINES["Cu I 327.396"]))
    masked = [(r, j - 1, j + 1, "cosmic ray") for r in (61, 70, 99)]
    p = tmp_path_factory.mktemp("table") / "t.h5"
    return write_run(p, WL, x, samples, idx, dark=100 + rng.normal(0, 1.0, (4, WL.size)), dtype="float64",
                     masked_ranges=masked)  # fmt: skip


@pytest.mark.parametrize("fit", [False, True])
def test_table_statistics_equal_numpy_line_by_line(run_path, fit):
    lines = [{"id": k} for k in LINES]
    if fit:
        lines[2] = {"id": "Zn I 330.259", "mode": "fit", "fwhm_nm": 0.04}
    m = method(lines=lines)
    with Run.open(run_path) as run:
        lm = measure_run(run, m)
    t = lm.table
    for _, row in t.iterrows():
        s = lm.sample_ids.index(row.sample_id)
        j = lm.line_ids.index(row.line_id)
        acc = (lm.shot_sample == s) & lm.shot_accepted
        vals = np.asarray(lm.shot_intensity)[acc, j]
        x = vals[np.isfinite(vals)]
        assert row.n_shots == x.size
        assert _bits(row.intensity) == _bits(float(np.mean(x)))
        if x.size >= 2:
            sd = float(np.std(x, ddof=1))
            assert _bits(row.sd_shots) == _bits(sd)
            if m.lines[j].mode == "window":
                assert _bits(row.u_intensity) == _bits(sd / math.sqrt(x.size))  # GUM 4.2.3
        else:
            assert math.isnan(row.sd_shots)
    b = t[(t.sample_id == "B") & (t.line_id == "Cu I 327.396")].iloc[0]
    assert b.n_shots == 57 and "masked" in b["flags"]  # the 3 masked shots left out of that line only
    assert (t[(t.sample_id == "B") & (t.line_id != "Cu I 327.396")].n_shots == 60).all()


def test_single_shot_uncertainty_is_the_pixel_noise_propagation(run_path):
    """With one shot, u of a window line is ``sigma * ||w||`` of the sample's mean spectrum
    (computed only for such samples now)."""
    m = method()
    with Run.open(run_path) as run:
        lm = measure_run(run, m)
        ww = _Setup(run, m).window_weights(None)
    u_ref = ww.u_noise(lm.mean_spectra["ONE"])
    one = lm.table[lm.table.sample_id == "ONE"]
    assert (one.n_shots == 1).all() and one["flags"].str.contains("single_shot").all()
    assert np.array_equal(_bits(one.u_intensity.to_numpy()), _bits(u_ref))
