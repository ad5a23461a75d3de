"""The compiled SNIP of the one-pass kernel (tiled clipping, one-instruction minimum) against references.

References outside the compiled code: the NumPy clipping steps
(:func:`compquant.preprocess.baseline.clip_padded`, ``numpy.add`` / ``numpy.minimum``: the
reference path, which tests/test_preprocess.py holds to pybaselines), and pybaselines 1.2
``Baseline.snip`` (Ryan et al. 1988; same edge padding), to round-off (1e-12 relative).
SNIP's ``min`` and ``(a + b) * 0.5`` are exact operations of IEEE 754 arithmetic, so a
reordered or tiled evaluation that gives each pixel the same expression must give the same
bits: the clipping is compared bit for bit (common practice for exactness claims).
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

from compquant.lines import compiled
from compquant.lines.chunk import ChunkPlan, process_chunk, process_chunk_threaded
from compquant.lines.windows import build_window_weights, support_mask, window_geometry
from compquant.preprocess.baseline import clip_padded, snip

pytestmark = pytest.mark.skipif(not compiled.available(), reason="numba not installed")


def _bits(a: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(a).view(np.int64)


def _padded_rows(npad: int, seed: int) -> np.ndarray:
    """Invented padded rows: noise, peaks, flat saturated plateaus, zeros, negative values, huge values."""
    rng = np.random.default_rng(seed)
    x = np.arange(npad)
    rows = [
        rng.normal(500.0, 40.0, npad),
        400 + 2000 * np.exp(-0.5 * ((x - npad / 3) / 1.5) ** 2) + rng.normal(0, 5, npad),
        np.minimum(65535.0, 3000 + 90000 * np.exp(-0.5 * ((x - npad / 2) / 4.0) ** 2)),  # saturated plateau
        np.zeros(npad),
        rng.normal(0.0, 1.0, npad) - 3.0,  # negative (dark-subtracted noise)
        np.where(rng.random(npad) < 0.1, -0.0, 0.0),  # signed zeros
        rng.normal(0.0, 1e307, npad),  # sums overflow to +-inf
        rng.integers(0, 4, npad).astype(float),  # many equal values
    ]
    return np.array(rows)


def _numpy_clip(b: np.ndarray, m: int, decreasing: bool) -> np.ndarray:
    ref = b.copy()
    clip_padded(ref, np.empty_like(ref), m, decreasing=decreasing)
    return ref


@pytest.mark.parametrize("npad", [3, 8, 41, 1001, 4116, 9001])
@pytest.mark.parametrize("m", [1, 2, 10, 20])
@pytest.mark.parametrize("decreasing", [False, True])
def test_tiled_clipping_is_the_numpy_clipping_bit_for_bit(npad, m, decreasing):
    m = min(m, (npad - 1) // 2)
    if m < 1:
        pytest.skip("no clipping step fits")
    b = _padded_rows(npad, seed=npad + m)
    ref = _numpy_clip(b, m, decreasing)
    from compquant.lines import _kernels

    for tile in (1, 7, 64, 2048, npad):
        for safe in (True, False):  # the fast minimum is used on finite rows only; both agree there
            out = np.full_like(b, np.nan)
            _kernels.clip_padded_rows(b, out, m, decreasing, tile, safe)
            assert np.array_equal(_bits(out[:, m : npad - m]), _bits(ref[:, m : npad - m])), (tile, safe)


@pytest.mark.parametrize("tile", [1, 5, 300, 2048])
def test_tiled_clipping_propagates_nan_and_inf_as_numpy_minimum(tile):
    from compquant.lines import _kernels

    npad, m = 517, 10
    b = _padded_rows(npad, seed=11)
    b[0, 100] = np.nan
    b[1, [3, 250]] = np.inf
    b[4, 400] = -np.inf
    b[7, npad - 2] = np.nan
    ref = _numpy_clip(b, m, False)
    out = np.full_like(b, 7.0)
    _kernels.clip_padded_rows(b, out, m, False, tile, True)
    assert np.array_equal(out[:, m : npad - m], ref[:, m : npad - m], equal_nan=True)
    # the row's own choice (snip_row): the NaN-safe selection on non-finite rows
    got = compiled.snip_baseline(b, m, tile=tile)
    assert np.array_equal(np.isnan(got), np.isnan(snip(b, m)))


@pytest.mark.parametrize("n", [5, 64, 1001, 4096])
@pytest.mark.parametrize("m", [1, 10, 20])
@pytest.mark.parametrize("decreasing", [False, True])
def test_compiled_snip_equals_numpy_snip(n, m, decreasing):
    y = _padded_rows(n, seed=3 * n + m)[[0, 1, 2, 4, 7]]
    ref = snip(y, m, decreasing=decreasing)
    for tile in (3, 2048):
        got = compiled.snip_baseline(y, m, decreasing=decreasing, tile=tile)
        # round-off only, from the edge line's least-squares fit (summed in another order) ...
        assert np.max(np.abs(got - ref)) <= 1e-12 * np.max(np.abs(ref))
        # ... which reaches only pixels within sum(p) = m(m+1)/2 of the ends: the rest is bit for bit
        mm = min(m, (n - 1) // 2)
        h = mm * (mm + 1) // 2
        if n > 2 * h:
            assert np.array_equal(_bits(got[:, h : n - h]), _bits(ref[:, h : n - h]))


@pytest.mark.parametrize(
    "kw", [{"max_half_window": 10}, {"max_half_window": 20}, {"max_half_window": 12, "decreasing": True}]
)
def test_compiled_snip_equals_pybaselines(kw):
    # reference: pybaselines 1.2 Baseline.snip (same edge padding, extrapolate mode); round-off 1e-12
    from pybaselines import Baseline

    n = 2049
    x = np.linspace(300.0, 400.0, n)
    rng = np.random.default_rng(5)
    ys = [
        800 + 2 * (x - 300) + sum(a * np.exp(-0.5 * ((x - c) / 0.2) ** 2) for c, a in [(320, 9e3), (361.3, 2e4)])
        + rng.normal(0, 20, n)
        for _ in range(4)
    ]
    ref = np.array([Baseline(x).snip(y, **kw)[0] for y in ys])
    got = compiled.snip_baseline(np.array(ys), kw["max_half_window"], decreasing=kw.get("decreasing", False))
    assert np.max(np.abs(got - ref)) <= 1e-12 * np.max(np.abs(ref))


NPX = 1031  # odd length


def _chunk_plan(kernel: str, m: int) -> ChunkPlan:
    wl = np.linspace(300.0, 340.0, NPX)
    geo = [window_geometry(c, 0.3, 0.15, 0.03) for c in np.linspace(303.0, 337.0, 9)]
    ww = build_window_weights(wl, geo)
    return ChunkPlan(
        n_pixels=NPX,
        dark=50.0 + np.cos(wl),
        inv_response=1.0 / (0.8 + 0.2 * np.sin(wl / 7.0) ** 2),
        saturation_threshold=65000.0,
        baseline="snip",
        baseline_params={"max_half_window": m},
        total_weights=np.gradient(wl),
        W=ww.W,
        support=support_mask(NPX, ww.support),
        kernel=kernel,
    )


def _raw_chunk(n: int) -> np.ndarray:
    """Invented uint16 shots: lines, saturated pixels (65535), all-zero shots (negative after dark)."""
    rng = np.random.default_rng(9)
    wl = np.linspace(300.0, 340.0, NPX)
    lines = [(310.02, 4e4), (325.5, 9e4)]
    base = 300 + 3 * (wl - 300) + sum(a * np.exp(-0.5 * ((wl - c) / 0.05) ** 2) for c, a in lines)
    raw = base * rng.normal(1.0, 0.05, (n, 1)) + rng.normal(0, 15, (n, NPX))
    raw = np.clip(np.rint(raw), 0, 65535).astype(np.uint16)
    raw[3] = 0
    raw[7, 500:520] = 65535
    return raw


@pytest.mark.parametrize("m", [3, 10, 25])
def test_kernel_threads_and_blocks_give_the_same_bits_and_the_numpy_numbers(m):
    raw = _raw_chunk(37)
    si = np.repeat(np.arange(3), [12, 13, 12])
    ref = process_chunk(raw, si, _chunk_plan("numpy", m))
    one = process_chunk(raw, si, _chunk_plan("compiled", m))
    scale = np.max(np.abs(ref.window), axis=0)
    assert np.max(np.abs(one.window - ref.window) / scale) <= 1e-12
    assert np.array_equal(one.sat_window, ref.sat_window)
    assert one.sat_window[7].any()
    plan = _chunk_plan("compiled", m)
    with ThreadPoolExecutor(max_workers=3) as ex:
        for parts in (2, 3, 5):
            got = process_chunk_threaded(raw, si, plan, ex, parts)
            for name in ("window", "total", "background"):
                assert np.array_equal(_bits(getattr(got, name)), _bits(getattr(one, name))), (parts, name)
            for s in one.sums:
                assert np.array_equal(got.sums[s].hi, one.sums[s].hi) and np.array_equal(got.sums[s].lo, one.sums[s].lo)
