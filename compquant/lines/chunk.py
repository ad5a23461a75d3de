"""The chunk-level work of line measurement: a pure function over arrays.

:func:`process_chunk` takes raw counts of a block of consecutive shots, their
sample indices and a :class:`ChunkPlan` (plain numpy arrays and numbers, so it
pickles to Dask workers) and returns per-shot results; it reads no file and
keeps no state.  :func:`compquant.lines.measure_run` maps it over
``Run.read_raw`` chunks; ``compquant.parallel`` can map the same function over
chunks with Dask.

Per shot the steps are, in this order:

1. raw counts -> float64; saturated pixels ``raw >= level`` found here;
2. dark subtraction ``y - scale * D`` (:mod:`compquant.preprocess.corrections`);
3. response correction ``y / R``; masked pixels (``pixel_mask``, and NaN/inf pixels of the
   raw chunk: :class:`compquant.run.Run` returns the run's masked pixels as NaN,
   docs/run-format.md "Pixel masks") replaced by the straight line between their nearest
   unmasked neighbours, for the baseline and the total emission only; every line whose
   pixels touch one is NaN in that shot and marked masked (:func:`process_chunk`);
4. baseline removal (SNIP / AsLS / arPLS, :mod:`compquant.preprocess.baseline`);
5. window integration and, when planned, the fixed-shape linear profile amplitudes
   of fitted groups ``A = y[pixels] @ P^T``: every output column is a sparse
   per-line weight vector (:class:`StackedOperators`), so the work is linear in the
   number of lines;
6. per-shot QC quantities: total emission ``y @ t`` (trapezoid weights) and the
   mean removed baseline (for ``background`` normalisation);
7. per-sample sums of the processed spectra (for sample mean spectra), kept as exact
   fixed-point sums (:class:`compquant.exactsum.FixedPointSum`) so that they, and all that
   follows from the mean spectra, do not depend on the chunk size or the number of workers.

Two implementations give the same numbers (to round-off, <= 1e-12 relative, held by
the tests): the NumPy reference, on blocks of rows sized for the CPU cache, and the
compiled one-pass kernel of :mod:`compquant.lines.compiled` (numba, used when it
imports and the baseline is none or SNIP; ``ChunkPlan.kernel`` / ``COMPQUANT_KERNEL``
choose).  Both compute each shot on its own (per-line sparse sums, one dot product per
row for the total emission: the numbers of a shot do not depend on which other shots
share its chunk) and both add the per-sample sums on the same fixed grid, exactly.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from compquant.exactsum import FixedPointSum, row_products
from compquant.preprocess.baseline import SNIP_BLOCK_ROWS, SnipWorkspace, estimate_baseline, snip_block

#: rows per block for the AsLS / arPLS solvers (memory about 12 x rows x pixels x 8 bytes)
WHITTAKER_BLOCK_ROWS = 512

#: ``ChunkPlan.kernel`` values: "auto" (compiled when numba imports and the baseline is
#: none or SNIP, else NumPy), "numpy" (the reference), "compiled" (as auto: falls back to
#: NumPy where the compiled kernel cannot run, with the same results)
KERNELS = ("auto", "numpy", "compiled")
PRECISIONS = ("float64", "float32")


def _default_kernel() -> str:
    k = os.environ.get("COMPQUANT_KERNEL", "auto").strip().lower() or "auto"
    return k if k in KERNELS else "auto"


@dataclass
class FitProjection:
    """Fixed-shape amplitudes of one fitted group for one sample: ``A = y[pixels] @ P.T``."""

    pixels: np.ndarray  # (m,) pixel indices
    P: np.ndarray  # (n_g, m)
    cols: np.ndarray  # (n_g,) columns in the fit-result array


@dataclass
class ChunkPlan:
    """Everything :func:`process_chunk` needs, as arrays and numbers.

    ``pixel_mask`` (n_pixels,) bool marks pixels that must never enter an integral
    (dead, blanked, sentinel values): see :func:`process_chunk`.  ``kernel`` chooses the
    implementation (:data:`KERNELS`; default from ``COMPQUANT_KERNEL``, else "auto"),
    ``precision`` the compiled kernel's working precision (:data:`PRECISIONS`; the NumPy
    path always works in float64).
    """

    n_pixels: int
    dark: np.ndarray | None = None  # already scaled for exposure
    inv_response: np.ndarray | None = None
    saturation_threshold: float | None = None
    baseline: str = "none"
    baseline_params: dict = field(default_factory=dict)
    total_weights: np.ndarray | None = None  # (n_pixels,) trapezoid weights
    W: np.ndarray | None = None  # (n_pixels, n_win) shared window weights
    W_by_sample: dict[int, np.ndarray] = field(default_factory=dict)  # shifted windows
    support: np.ndarray | None = None  # (n_pixels, n_win) bool
    support_by_sample: dict[int, np.ndarray] = field(default_factory=dict)
    fit: dict[int, list[FitProjection]] = field(default_factory=dict)
    n_fit: int = 0
    fit_support: dict[int, np.ndarray] = field(default_factory=dict)  # (n_pixels, n_fit) bool
    measure_windows: bool = True
    accumulate: bool = True
    background_level: bool = True  # compute the mean removed baseline per shot
    pixel_mask: np.ndarray | None = None  # (n_pixels,) bool, True = never integrate this pixel
    kernel: str = field(default_factory=_default_kernel)
    precision: str = "float64"
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_win(self) -> int:
        return 0 if self.W is None else self.W.shape[1]


@dataclass
class ChunkResult:
    """Per-shot results of one chunk (rows in shot order) and per-sample sums.

    ``masked_window`` / ``masked_fit`` mark (shot, line) pairs whose pixels include a masked
    pixel: their intensity is NaN (None when no pixel of the chunk is masked).
    """

    window: np.ndarray | None  # (n, n_win)
    fit: np.ndarray | None  # (n, n_fit)
    sat_window: np.ndarray | None  # (n, n_win) bool, None when nothing saturated
    sat_fit: np.ndarray | None  # (n, n_fit) bool
    total: np.ndarray  # (n,) total emission after baseline removal, counts*nm
    background: np.ndarray  # (n,) mean removed baseline, counts
    sums: dict[int, FixedPointSum]  # sample index -> sum of processed spectra (exact, order-free)
    counts: dict[int, int]
    masked_window: np.ndarray | None = None  # (n, n_win) bool
    masked_fit: np.ndarray | None = None  # (n, n_fit) bool
    masked: list = field(default_factory=list)  # (row in chunk, first pixel, last pixel), inclusive


# --------------------------------------------------------------------------- per-line operators


@dataclass
class StackedOperators:
    """Per-line sparse linear maps ``out[j] = sum_k w[o, j, k] y[idx[o, j, k]]`` (k < cnt[o, j])
    for operators ``o`` (one per sample with its own windows or fits, 0 = the shared one),
    padded to a common width; ``sidx``/``scnt`` list the pixels each line touches (for the
    saturation and mask flags); ``defined[o, j]`` False gives NaN (no fit for that sample).
    Work and memory are linear in the number of lines."""

    idx: np.ndarray  # (n_ops, n_lines, K) intp
    w: np.ndarray  # (n_ops, n_lines, K)
    cnt: np.ndarray  # (n_ops, n_lines) int64
    defined: np.ndarray  # (n_ops, n_lines) bool
    sidx: np.ndarray  # (n_ops, n_lines, Ks) intp
    scnt: np.ndarray  # (n_ops, n_lines) int64
    op_of_sample: dict[int, int]
    n_win: int
    n_fit: int


def _columns_for(plan: ChunkPlan, s: int | None, n_win: int) -> list[tuple[np.ndarray, np.ndarray, np.ndarray, bool]]:
    """(pixels, weights, support pixels, defined) of every output column for sample ``s``."""
    cols = []
    if n_win:
        W = plan.W_by_sample.get(s, plan.W)
        sup = plan.support_by_sample.get(s, plan.support)
        if sup is None:
            sup = W != 0
        for j in range(n_win):
            pix = np.flatnonzero(W[:, j])
            cols.append((pix, W[pix, j], np.flatnonzero(sup[:, j]), True))
    if plan.n_fit:
        fit_cols: list = [(np.zeros(0, np.intp), np.zeros(0), np.zeros(0, np.intp), False)] * plan.n_fit
        fsup = plan.fit_support.get(s)
        for fp in plan.fit.get(s, []):
            for g, c in enumerate(np.asarray(fp.cols).tolist()):
                spix = np.flatnonzero(fsup[:, c]) if fsup is not None else np.zeros(0, np.intp)
                fit_cols[c] = (np.asarray(fp.pixels, dtype=np.intp), np.asarray(fp.P[g], dtype=np.float64), spix, True)
        cols.extend(fit_cols)
    return cols


def _stack(all_cols: list[list[tuple]]) -> tuple[np.ndarray, ...]:
    n_ops, n_lines = len(all_cols), len(all_cols[0])
    K = max([1] + [c[0].size for cols in all_cols for c in cols])
    Ks = max([1] + [c[2].size for cols in all_cols for c in cols])
    idx = np.zeros((n_ops, n_lines, K), dtype=np.intp)
    w = np.zeros((n_ops, n_lines, K))
    cnt = np.zeros((n_ops, n_lines), dtype=np.int64)
    defined = np.zeros((n_ops, n_lines), dtype=bool)
    sidx = np.zeros((n_ops, n_lines, Ks), dtype=np.intp)
    scnt = np.zeros((n_ops, n_lines), dtype=np.int64)
    for o, cols in enumerate(all_cols):
        for j, (pix, wt, spix, ok) in enumerate(cols):
            k = pix.size
            idx[o, j, :k] = pix
            idx[o, j, k:] = pix[0] if k else 0  # padding: weight 0 on one of the line's own pixels
            w[o, j, :k] = wt
            cnt[o, j] = k
            defined[o, j] = ok
            sidx[o, j, : spix.size] = spix
            scnt[o, j] = spix.size
    return idx, w, cnt, defined, sidx, scnt


def _same(a, b) -> bool:
    if isinstance(a, tuple) and isinstance(b, tuple):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    return a is b or (isinstance(a, int) and not isinstance(a, bool) and a == b)


def plan_operators(plan: ChunkPlan) -> StackedOperators:
    """The per-line operators of ``plan`` (windows then fits), built once per plan and cached."""
    n_win = plan.n_win if plan.measure_windows else 0
    # the cache holds the inputs themselves: a plan whose arrays were replaced is rebuilt
    key = (
        plan.W, plan.support, n_win, plan.n_fit, *plan.W_by_sample.items(), *plan.support_by_sample.items(),
        *plan.fit.items(), *plan.fit_support.items(),
    )  # fmt: skip
    hit = plan._cache.get("ops")
    if hit is not None and len(hit[0]) == len(key) and all(_same(a, b) for a, b in zip(hit[0], key)):
        return hit[1]
    samples = sorted(set(plan.W_by_sample) | set(plan.fit)) if (n_win or plan.n_fit) else []
    all_cols = [_columns_for(plan, None, n_win)] + [_columns_for(plan, s, n_win) for s in samples]
    if not all_cols[0]:
        all_cols = [[] for _ in all_cols]
        arrays = (
            np.zeros((len(all_cols), 0, 1), np.intp), np.zeros((len(all_cols), 0, 1)),
            np.zeros((len(all_cols), 0), np.int64), np.zeros((len(all_cols), 0), bool),
            np.zeros((len(all_cols), 0, 1), np.intp), np.zeros((len(all_cols), 0), np.int64),
        )  # fmt: skip
    else:
        arrays = _stack(all_cols)
    ops = StackedOperators(*arrays, op_of_sample={s: k + 1 for k, s in enumerate(samples)}, n_win=n_win,
                           n_fit=plan.n_fit)  # fmt: skip
    plan._cache["ops"] = (key, ops)
    return ops


# --------------------------------------------------------------------------- masked pixels


def _mask_for(plan: ChunkPlan, pixel_mask, n: int) -> tuple[np.ndarray | None, np.ndarray | None]:
    """(run mask (n_pixels,), per-shot mask (n, n_pixels)) as bool arrays or None."""
    run_mask = None if plan.pixel_mask is None else np.asarray(plan.pixel_mask, dtype=bool)
    rows = None
    if pixel_mask is not None:
        pm = np.asarray(pixel_mask, dtype=bool)
        if pm.ndim == 1:
            run_mask = pm if run_mask is None else (run_mask | pm)
        elif pm.shape == (n, plan.n_pixels):
            rows = pm
        else:
            raise ValueError("pixel_mask must be (n_pixels,) or (n_shots, n_pixels)")
    if run_mask is not None and run_mask.shape != (plan.n_pixels,):
        raise ValueError("ChunkPlan.pixel_mask must be (n_pixels,)")
    if run_mask is not None and not run_mask.any():
        run_mask = None
    if rows is not None and not rows.any():
        rows = None
    return run_mask, rows


def _repair_plan(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Masked pixels and their nearest unmasked neighbours left/right (-1: none)."""
    good = np.flatnonzero(~mask)
    mi = np.flatnonzero(mask)
    pos = np.searchsorted(good, mi)
    left = np.where(pos > 0, good[np.maximum(pos - 1, 0)] if good.size else -1, -1)
    right = np.where(pos < good.size, good[np.minimum(pos, good.size - 1)] if good.size else -1, -1)
    return mi, left, right


def _repair_rows(y: np.ndarray, mask: np.ndarray) -> None:
    """Masked pixels of the rows of ``y`` := the straight line between their unmasked neighbours
    (pixel-index interpolation, the formula of ``numpy.interp``); the compiled kernel does the same."""
    mi, left, right = _repair_plan(mask)
    both = (left >= 0) & (right >= 0)
    if both.any():
        L, R, i = left[both], right[both], mi[both]
        slope = (y[:, R] - y[:, L]) / (R - L).astype(np.float64)
        y[:, i] = slope * (i - L).astype(np.float64) + y[:, L]
    only_l = (left >= 0) & (right < 0)
    y[:, mi[only_l]] = y[:, left[only_l]]
    only_r = (left < 0) & (right >= 0)
    y[:, mi[only_r]] = y[:, right[only_r]]
    y[:, mi[(left < 0) & (right < 0)]] = 0.0


def find_masked(rb: np.ndarray) -> np.ndarray | None:
    """NaN/inf pixels of a raw block (the run's masked pixels arrive as NaN); None when there are none.

    One sum finds clean blocks: NaN and inf propagate through it (an overflow to inf only
    costs the full check)."""
    rb = np.asarray(rb)
    if rb.dtype.kind not in "fc" or np.isfinite(rb.sum()):
        return None
    bad = ~np.isfinite(rb)
    return bad if bad.any() else None


def repair_masked(y: np.ndarray, bad: np.ndarray) -> None:
    """Bridge the masked pixels of each row of ``y`` in place (:func:`_repair_rows`, rows with the
    same mask together); rows without any valid pixel become NaN."""
    rows = np.flatnonzero(bad.any(axis=1))
    if rows.size == 0:
        return
    pats, inv = np.unique(bad[rows], axis=0, return_inverse=True)
    inv = np.asarray(inv).reshape(-1)
    for k, pat in enumerate(pats):
        r = rows[inv == k]
        if pat.all():
            y[r] = np.nan
            continue
        block = y[r]
        _repair_rows(block, pat)
        y[r] = block


def masked_ranges(bad: np.ndarray, row_offset: int = 0) -> list[tuple[int, int, int]]:
    """``(row, first, last)`` inclusive pixel runs of a (rows, pixels) bool mask."""
    out = []
    for i in np.flatnonzero(bad.any(axis=1)):
        m = np.concatenate([[0], bad[i].astype(np.int8), [0]])
        d = np.diff(m)
        for a, b in zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1):
            out.append((int(i) + row_offset, int(a), int(b)))
    return out


# --------------------------------------------------------------------------- the two paths


def use_compiled(plan: ChunkPlan) -> bool:
    """Whether :func:`process_chunk` runs the compiled kernel for ``plan``."""
    if plan.kernel == "numpy" or plan.baseline not in ("none", "snip"):
        return False
    from compquant.lines import compiled

    return compiled.available()


def process_chunk(raw, sample_index, plan: ChunkPlan, pixel_mask=None) -> ChunkResult:
    """Preprocess and measure one chunk of shots (see module docstring). Pure function.

    ``pixel_mask``: None, (n_pixels,) or (n_shots, n_pixels) bool, added to
    ``plan.pixel_mask``.  A masked pixel never enters an integral: after dark and response
    correction its value is replaced by the straight line between the nearest unmasked
    pixels of the same shot (so the baseline, the total emission and the sums do not see
    it), it is not tested for saturation, and every line whose pixels (window, bracketing
    and side pixels, or fit pixels) include it is NaN for that shot and marked in
    ``masked_window`` / ``masked_fit``.

    The compiled kernel (:mod:`compquant.lines.compiled`) and the NumPy path give the same
    numbers to round-off (``plan.kernel``, :func:`use_compiled`).
    """
    raw = np.asarray(raw)
    si = np.asarray(sample_index)
    n = raw.shape[0]
    if raw.ndim != 2 or raw.shape[1] != plan.n_pixels:
        raise ValueError("raw chunk must be (n_shots, n_pixels)")
    run_mask, row_mask = _mask_for(plan, pixel_mask, n)
    bad = find_masked(raw)
    masked = []
    if bad is not None:  # the run's masked pixels (NaN) join the per-shot mask
        row_mask = bad if row_mask is None else (row_mask | bad)
        masked = masked_ranges(bad)
    ops = plan_operators(plan)
    if use_compiled(plan):
        vals, satf, maskf, total, bg, sums, counts = _compiled_chunk(raw, si, plan, ops, run_mask, row_mask)
    else:
        vals, satf, maskf, total, bg, sums, counts = _numpy_chunk(raw, si, plan, ops, run_mask, row_mask)
    nw = ops.n_win
    if row_mask is not None or run_mask is not None:  # a shot with no valid pixel gives no number at all
        full = np.zeros((n, plan.n_pixels), dtype=bool) if row_mask is None else row_mask
        dead = (full | run_mask).all(axis=1) if run_mask is not None else full.all(axis=1)
        if dead.any():
            total[dead] = np.nan
            bg[dead] = np.nan
            if vals is not None:
                vals[dead] = np.nan

    def part(a, lo, hi):
        return None if a is None or hi == lo else a[:, lo:hi]

    return ChunkResult(
        window=part(vals, 0, nw),
        fit=part(vals, nw, nw + ops.n_fit),
        sat_window=part(satf, 0, nw),
        sat_fit=part(satf, nw, nw + ops.n_fit),
        total=total,
        background=bg,
        sums=sums,
        counts=counts,
        masked_window=part(maskf, 0, nw),
        masked_fit=part(maskf, nw, nw + ops.n_fit),
        masked=masked,
    )


def _compiled_chunk(raw, si, plan: ChunkPlan, ops: StackedOperators, run_mask, row_mask):
    from compquant.lines import compiled

    npx = plan.n_pixels
    samples, slot = np.unique(si, return_inverse=True)
    op_of_row = np.array([ops.op_of_sample.get(int(s), 0) for s in samples], dtype=np.int64)[slot]
    empty = np.zeros(0)
    bp = plan.baseline_params
    snip = plan.baseline == "snip"
    geo = {
        "dark": empty if plan.dark is None else np.ascontiguousarray(plan.dark, dtype=np.float64),
        "inv_resp": empty if plan.inv_response is None else np.ascontiguousarray(plan.inv_response, dtype=np.float64),
        "sat_thr": float(plan.saturation_threshold) if plan.saturation_threshold is not None else 0.0,
        "use_sat": plan.saturation_threshold is not None,
        "mask_run": np.zeros(0, bool) if run_mask is None else np.ascontiguousarray(run_mask),
        "mask_rows": np.zeros((0, 0), bool) if row_mask is None else np.ascontiguousarray(row_mask),
        "m": min(int(bp.get("max_half_window", 20)), (npx - 1) // 2) if snip else 0,
        "decreasing": bool(bp.get("decreasing", False)),
        "lls": bool(bp.get("lls", False)),
        "do_base": snip,
        "want_bg": bool(plan.background_level),
        "accumulate": bool(plan.accumulate),
        "tw": np.ascontiguousarray(plan.total_weights if plan.total_weights is not None else np.ones(npx), float),
    }
    dt = raw.dtype
    if dt.kind not in "uif" or (dt.kind == "f" and dt.itemsize < 4) or not dt.isnative:
        raw = raw.astype(np.float64)  # e.g. big-endian or float16 storage: numba takes native types
    out = compiled.run_kernel(raw, slot.astype(np.int64), op_of_row, geo, ops, samples.size, plan.precision)
    sums, counts = {}, {}
    if plan.accumulate:
        per = np.bincount(slot, minlength=samples.size)
        for k, s in enumerate(samples.tolist()):
            sums[int(s)] = out["sums"][k]
            counts[int(s)] = int(per[k])
    return out["vals"], out["sat"], out["mask"], out["total"], out["bg"], sums, counts


def _numpy_chunk(raw, si, plan: ChunkPlan, ops: StackedOperators, run_mask, row_mask):
    n = raw.shape[0]
    n_lines = ops.cnt.shape[1]
    vals = np.empty((n, n_lines))
    satf = None
    maskf = None
    total = np.empty(n)
    bg = np.zeros(n)
    sums: dict[int, FixedPointSum] = {}
    counts: dict[int, int] = {}
    # SNIP: cache-sized blocks; Whittaker solvers: blocks that bound memory (about 12 arrays)
    block = SNIP_BLOCK_ROWS if plan.baseline == "snip" else WHITTAKER_BLOCK_ROWS if plan.baseline != "none" else n
    block = max(1, min(block, n))
    tw = plan.total_weights if plan.total_weights is not None else np.ones(plan.n_pixels)
    ybuf = np.empty((min(block, n), plan.n_pixels))
    ws = None
    if plan.baseline == "snip":
        ws = SnipWorkspace(min(block, n), plan.n_pixels, plan.baseline_params.get("max_half_window", 20))
        snip_opts = {k: v for k, v in plan.baseline_params.items() if k in ("decreasing", "lls")}
    k_valid = np.arange(ops.sidx.shape[2])
    for r0 in range(0, n, block):
        r1 = min(n, r0 + block)
        rb = raw[r0:r1]
        y = ybuf[: r1 - r0]
        y[...] = rb  # cast to float64 (a plain copy is faster than a mixed-type subtract)
        if plan.dark is not None:
            y -= plan.dark
        sib = si[r0:r1]
        samples_here = np.unique(sib)
        mb = None
        if row_mask is not None:
            mb = row_mask[r0:r1] | run_mask if run_mask is not None else row_mask[r0:r1]
        elif run_mask is not None:
            mb = np.broadcast_to(run_mask, y.shape)
        sat = None
        if plan.saturation_threshold is not None and rb.max() >= plan.saturation_threshold:
            sat = rb >= plan.saturation_threshold
            if mb is not None:
                sat &= ~mb
        if plan.inv_response is not None:
            y *= plan.inv_response
        if mb is not None:
            if row_mask is None:
                _repair_rows(y, run_mask)
            else:
                for r in np.flatnonzero(mb.any(axis=1)):
                    _repair_rows(y[r : r + 1], mb[r])
        if plan.baseline == "snip":
            base = snip_block(y, ws, **snip_opts)
        elif plan.baseline != "none":
            base = estimate_baseline(y, plan.baseline, **plan.baseline_params)
        if plan.baseline != "none":
            if plan.background_level:
                bg[r0:r1] = base.mean(axis=1)
            y -= base
        total[r0:r1] = row_products(y, tw)
        for s in samples_here:
            s = int(s)
            rows = slice(None) if samples_here.size == 1 else (sib == s)
            ys = y[rows]
            o = ops.op_of_sample.get(s, 0)
            if n_lines:
                v = (ys[:, ops.idx[o]] * ops.w[o]).sum(axis=2)
                v[:, ~ops.defined[o]] = np.nan
                valid = k_valid < ops.scnt[o][:, None]
                if sat is not None:
                    if satf is None:
                        satf = np.zeros((n, n_lines), dtype=bool)
                    satf[r0:r1][rows] = (sat[rows][:, ops.sidx[o]] & valid).any(axis=2)
                if mb is not None:
                    if maskf is None:
                        maskf = np.zeros((n, n_lines), dtype=bool)
                    hit = (mb[rows][:, ops.sidx[o]] & valid).any(axis=2)
                    maskf[r0:r1][rows] = hit
                    v[hit] = np.nan
                vals[r0:r1][rows] = v
            if plan.accumulate:  # exact fixed-point sums: the same for any chunking (compquant.exactsum)
                if s in sums:
                    sums[s].add_rows(ys)
                else:
                    sums[s] = FixedPointSum.of_rows(ys)
                counts[s] = counts.get(s, 0) + (ys.shape[0])
    return vals, satf, maskf, total, bg, sums, counts


def merge_chunk_results(parts: list[ChunkResult]) -> ChunkResult:
    """One :class:`ChunkResult` from results of consecutive row ranges (in order)."""
    if len(parts) == 1:
        return parts[0]
    ns = [p.total.shape[0] for p in parts]

    def cat(name):
        arrs = [getattr(p, name) for p in parts]
        return None if arrs[0] is None else np.concatenate(arrs, axis=0)

    def cat_sat(name, width_from):
        arrs = [getattr(p, name) for p in parts]
        if all(a is None for a in arrs):
            return None
        width = next(a.shape[1] for a in arrs if a is not None)
        return np.concatenate(
            [a if a is not None else np.zeros((n, width), dtype=bool) for a, n in zip(arrs, ns)], axis=0
        )

    sums: dict[int, FixedPointSum] = {}
    counts: dict[int, int] = {}
    for p in parts:
        for s, v in p.sums.items():
            sums[s] = sums[s] + v if s in sums else v.copy()
            counts[s] = counts.get(s, 0) + p.counts[s]
    return ChunkResult(
        window=cat("window"),
        fit=cat("fit"),
        sat_window=cat_sat("sat_window", "window"),
        sat_fit=cat_sat("sat_fit", "fit"),
        total=cat("total"),
        background=cat("background"),
        sums=sums,
        counts=counts,
        masked_window=cat_sat("masked_window", "window"),
        masked_fit=cat_sat("masked_fit", "fit"),
        masked=[(r + off, a, b) for p, off in zip(parts, np.cumsum([0] + ns[:-1])) for r, a, b in p.masked],
    )


def submit_chunk_threaded(raw, sample_index, plan: ChunkPlan, executor, parts: int, pixel_mask=None) -> list:
    """Submit :func:`process_chunk` on ``parts`` row ranges of one chunk to ``executor`` and return
    the futures, in row order (:func:`process_chunk_threaded` waits for them and merges them).
    A caller can submit the next chunk's ranges before it collects this one's, so that the threads
    never wait for the caller between chunks."""
    n = np.shape(raw)[0]
    edges = np.linspace(0, n, max(1, parts) + 1).astype(int)
    plan_operators(plan)  # build the cached operators once, before the threads share the plan

    def mask_of(a, b):
        return pixel_mask if pixel_mask is None or np.ndim(pixel_mask) < 2 else pixel_mask[a:b]

    return [
        executor.submit(process_chunk, raw[a:b], sample_index[a:b], plan, mask_of(a, b))
        for a, b in zip(edges[:-1], edges[1:])
        if b > a
    ]


def process_chunk_threaded(raw, sample_index, plan: ChunkPlan, executor, parts: int, pixel_mask=None) -> ChunkResult:
    """:func:`process_chunk` on ``parts`` row ranges of one chunk in a thread pool, merged.

    numpy and the compiled kernel release the GIL, so the ranges run on separate cores;
    the result equals :func:`process_chunk` on the whole chunk.
    """
    futs = submit_chunk_threaded(raw, sample_index, plan, executor, parts, pixel_mask)
    return merge_chunk_results([f.result() for f in futs])
