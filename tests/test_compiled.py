"""The compiled one-pass chunk kernel against the NumPy reference path, masked pixels, sparse windows.

References outside the project: the NumPy path is itself held to pybaselines' ``smooth.snip``
(tests/test_preprocess.py); masked-pixel repair is checked against ``numpy.interp``; window
integrals against ``numpy.trapezoid`` of ``numpy.interp`` (exact for the piecewise-linear
interpolant).
"""

from __future__ import annotations

import numpy as np
import pytest

from compquant.lines import compiled
from compquant.lines.chunk import ChunkPlan, FitProjection, process_chunk, use_compiled
from compquant.lines.windows import build_window_weights, support_mask, window_geometry

NPX = 700
WL = np.linspace(300.0, 335.0, NPX)
needs_numba = pytest.mark.skipif(not compiled.available(), reason="numba not installed")


def _raw(n=61, seed=3, peak=20000.0):
    """Invented spectra: sloped continuum, 6 Gaussian lines, Poisson-like noise, uint16."""
    rng = np.random.default_rng(seed)
    y = 400 + 3 * (WL - 300) + 150 * np.exp(-0.5 * ((WL - 318) / 8) ** 2)
    for c, a in zip(np.linspace(303, 332, 6), [1.0, 0.3, 0.6, 0.05, 0.9, 0.2]):
        y = y + peak * a * np.exp(-0.5 * ((WL - c) / 0.06) ** 2)
    scale = rng.normal(1, 0.05, (n, 1))
    noisy = y * scale + np.sqrt(y) * rng.standard_normal((n, NPX))
    return np.clip(np.rint(noisy), 0, 65535).astype(np.uint16)


def _plan(baseline_params, kernel, *, sat=True, mask=False, precision="float64") -> ChunkPlan:
    rng = np.random.default_rng(7)
    centres = np.linspace(303, 332, 6) + 0.013
    geo = [window_geometry(c, 0.25, 0.12, 0.02) for c in centres]
    ww = build_window_weights(WL, geo)
    ww1 = build_window_weights(WL, [window_geometry(c + 0.03, 0.25, 0.12, 0.02) for c in centres])
    pix = np.arange(100, 140)
    fit = {
        0: [FitProjection(pixels=pix, P=rng.normal(size=(2, pix.size)), cols=np.array([0, 1]))],
        2: [FitProjection(pixels=pix + 300, P=rng.normal(size=(1, pix.size)), cols=np.array([2]))],
    }
    fsup = {s: np.zeros((NPX, 3), bool) for s in fit}
    fsup[0][pix, :2] = True
    fsup[2][pix + 300, 2] = True
    pmask = None
    if mask:
        pmask = np.zeros(NPX, bool)
        pmask[[0, 1, 250, 251, 420, NPX - 1]] = True
    return ChunkPlan(
        n_pixels=NPX,
        dark=100.0 + np.sin(WL),
        inv_response=1.0 / (0.7 + 0.3 * np.exp(-0.5 * ((WL - 320) / 10) ** 2)),
        saturation_threshold=30000.0 if sat else None,
        baseline="snip" if baseline_params is not None else "none",
        baseline_params=baseline_params or {},
        total_weights=np.gradient(WL),
        W=ww.W,
        support=support_mask(NPX, ww.support),
        W_by_sample={1: ww1.W},
        support_by_sample={1: support_mask(NPX, ww1.support)},
        fit=fit,
        n_fit=3,
        fit_support=fsup,
        pixel_mask=pmask,
        kernel=kernel,
        precision=precision,
    )


def _close(a, b, rel):
    """|a - b| <= rel x the column's largest |b| (NaN where b is NaN)."""
    assert (a is None) == (b is None)
    if a is None:
        return
    assert np.array_equal(np.isnan(a), np.isnan(b))
    mag = np.where(np.isnan(b), 0.0, np.abs(b))
    scale = mag.max(axis=0) if b.ndim == 2 else mag.max()
    assert np.all(np.nan_to_num(np.abs(a - b)) <= rel * np.maximum(scale, 1e-300))


PARAMS = [None, {"max_half_window": 10}, {"max_half_window": 7, "decreasing": True, "lls": True}]


@needs_numba
@pytest.mark.parametrize("params", PARAMS)
@pytest.mark.parametrize("mask", [False, True])
def test_compiled_equals_numpy(params, mask):
    raw = _raw()
    raw[5, 58:63] = 65535  # one shot saturates the first line
    si = np.repeat([0, 1, 2, 0], [15, 20, 16, 10])
    rows = np.zeros((raw.shape[0], NPX), bool)
    rows[9, 129] = True  # a per-shot masked pixel inside fit pixels of sample 0
    pm = rows if mask else None
    a = process_chunk(raw, si, _plan(params, "compiled", mask=mask), pixel_mask=pm)
    b = process_chunk(raw, si, _plan(params, "numpy", mask=mask), pixel_mask=pm)
    assert use_compiled(_plan(params, "compiled")) and not use_compiled(_plan(params, "numpy"))
    for name in ("window", "fit", "total", "background"):
        _close(getattr(a, name), getattr(b, name), 1e-12)
    for name in ("sat_window", "sat_fit", "masked_window", "masked_fit"):
        x, y = getattr(a, name), getattr(b, name)
        assert (x is None) == (y is None) and (x is None or np.array_equal(x, y)), name
    assert a.sat_window is not None and a.sat_window[5].any() and not a.sat_window[4].any()
    if mask:
        assert a.masked_fit[9, :2].all() and np.isnan(a.fit[9, :2]).all()
    assert a.counts == b.counts == {0: 25, 1: 20, 2: 16}
    for s in b.sums:
        _close(np.asarray(a.sums[s]), np.asarray(b.sums[s]), 1e-12)
        assert a.sums[s].n == b.sums[s].n == a.counts[s]


@needs_numba
@pytest.mark.parametrize("mask", [False, True])
def test_compiled_sums_are_the_exact_fixed_point_sums(mask):
    """Without a baseline both paths compute the same spectra bit for bit, so the kernel's
    per-sample sums (pre-rounded to the grid of compquant.exactsum, int64 accumulators) must
    equal the NumPy path's FixedPointSum exactly, in one chunk or in any split of it, and
    equal math.fsum (Python's correctly rounded sum) of the grid values."""
    import math

    from compquant.exactsum import FixedPointSum

    raw = _raw()
    si = np.repeat([0, 1, 2, 0], [15, 20, 16, 10])
    pm = np.zeros((raw.shape[0], NPX), bool)
    pm[9, 129] = True
    pm = pm if mask else None
    b = process_chunk(raw, si, _plan(None, "numpy", mask=mask), pixel_mask=pm)
    a = process_chunk(raw, si, _plan(None, "compiled", mask=mask), pixel_mask=pm)
    parts = [process_chunk(raw[i:j], si[i:j], _plan(None, "compiled", mask=mask),
                           pixel_mask=None if pm is None else pm[i:j]) for i, j in ((0, 7), (7, 40), (40, 61))]
    merged = {}
    for p in parts:
        for s, v in p.sums.items():
            merged[s] = merged[s] + v if s in merged else v.copy()
    for s in b.sums:
        for got in (a.sums[s], merged[s]):
            assert isinstance(got, FixedPointSum)
            assert np.array_equal(got.hi, b.sums[s].hi) and np.array_equal(got.lo, b.sums[s].lo)
            assert got.rest is None and b.sums[s].rest is None
    # against math.fsum of the spectra of sample 1 (unmasked pixels 5 and 300), as the kernel saw them
    plan = _plan(None, "numpy", mask=mask)
    y = (raw[si == 1].astype(np.float64) - plan.dark) * plan.inv_response
    for px in (5, 300):
        assert abs(np.asarray(a.sums[1])[px] - math.fsum(y[:, px])) <= 20 * 2.0**-41


@needs_numba
def test_compiled_sums_keep_non_finite_values_apart():
    """A NaN or huge value goes to the float channel of the sums, as in the NumPy path."""
    raw = _raw(n=6).astype(np.float64)
    raw[2, 50] = 1e300
    plan = ChunkPlan(n_pixels=NPX, kernel="compiled")
    a = process_chunk(raw, np.zeros(6, int), plan)
    b = process_chunk(raw, np.zeros(6, int), ChunkPlan(n_pixels=NPX, kernel="numpy"))
    assert a.sums[0].rest is not None and np.array_equal(np.asarray(a.sums[0]), np.asarray(b.sums[0]))
    assert np.asarray(a.sums[0])[50] == raw[:, 50].sum()


@needs_numba
@pytest.mark.parametrize("dtype", [">u2", "float16", "int32", "float32"])
def test_compiled_takes_every_storage_dtype(dtype):
    raw = _raw(n=6).astype(dtype)  # big-endian and half precision are converted, others used as stored
    si = np.zeros(6, int)
    a = process_chunk(raw, si, _plan({"max_half_window": 10}, "compiled"))
    b = process_chunk(raw, si, _plan({"max_half_window": 10}, "numpy"))
    _close(a.window, b.window, 1e-12)
    _close(a.total, b.total, 1e-12)


@needs_numba
def test_compiled_float32_accuracy():
    raw = _raw()
    si = np.zeros(raw.shape[0], int)
    p = {"max_half_window": 10}
    a = process_chunk(raw, si, _plan(p, "compiled", precision="float32"))
    b = process_chunk(raw, si, _plan(p, "numpy"))
    _close(a.window, b.window, 1e-5)  # single precision: about 6e-8 per operation (IEEE 754 binary32)
    assert not np.array_equal(a.window, b.window)


@pytest.mark.parametrize("kernel", ["numpy", pytest.param("compiled", marks=needs_numba)])
def test_masked_pixels_never_enter_an_integral(kernel):
    raw = _raw(n=8).astype(np.float64)
    ww = build_window_weights(WL, [window_geometry(c, 0.25, 0.12, 0.02) for c in np.linspace(303, 332, 6) + 0.013])
    hit = ww.support[2][3]  # a pixel inside line 2's window
    mask = np.zeros(NPX, bool)
    mask[[hit, 10, 11]] = True
    bad = raw.copy()
    bad[:, mask] = 3.4e38  # sentinel of a dead pixel
    plan = ChunkPlan(n_pixels=NPX, W=ww.W, support=support_mask(NPX, ww.support), pixel_mask=mask, kernel=kernel)
    res = process_chunk(bad, np.zeros(8, int), plan)
    # the repaired spectra equal numpy.interp over the unmasked pixels (pixel index as abscissa)
    good = np.flatnonzero(~mask)
    ref = np.array([np.interp(np.arange(NPX), good, r[good]) for r in raw])
    assert np.allclose(res.sums[0], ref.sum(axis=0), rtol=1e-12)
    assert np.isnan(res.window[:, 2]).all() and res.masked_window[:, 2].all()
    others = [0, 1, 3, 4, 5]
    assert not res.masked_window[:, others].any()
    assert np.allclose(res.window[:, others], (ref @ ww.W)[:, others], rtol=1e-12)


def test_numpy_fallback_without_numba(monkeypatch):
    monkeypatch.setattr(compiled, "_KERNEL", None)
    monkeypatch.setattr(compiled, "_IMPORT_ERROR", "No module named 'numba'")
    plan = _plan({"max_half_window": 10}, "compiled")
    assert not compiled.available() and not use_compiled(plan)
    raw = _raw(n=5)
    res = process_chunk(raw, np.zeros(5, int), plan)
    ref = process_chunk(raw, np.zeros(5, int), _plan({"max_half_window": 10}, "numpy"))
    assert np.array_equal(res.window, ref.window)


def test_sparse_window_weights_match_trapezoid_and_scale_linearly():
    rng = np.random.default_rng(5)
    y = rng.normal(100, 10, NPX)
    geo = [window_geometry(c, 0.31, 0.0, 0.0) for c in np.linspace(302, 333, 200)]
    ww = build_window_weights(WL, geo)
    for g, val in zip(geo[::37], ww.integrate(y)[::37]):
        xs = np.concatenate([[g.a], WL[(WL > g.a) & (WL < g.b)], [g.b]])
        assert val == pytest.approx(np.trapezoid(np.interp(xs, WL, y), xs), rel=1e-12)  # numpy reference
    # per-line storage: each line keeps only its own pixels, however many lines there are
    assert max(p.size for p in ww.pixels) <= 0.31 / (WL[1] - WL[0]) + 3
    assert np.allclose(ww.integrate(y), y @ ww.W, rtol=1e-12)
