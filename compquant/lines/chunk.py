"""The chunk-level work of line measurement: a pure function over arrays.

:func:`process_chunk` takes raw counts of a block of consecutive shots, their
sample indices and a :class:`ChunkPlan` (plain numpy arrays and numbers, so it
pickles to Dask workers) and returns per-shot results; it reads no file and
keeps no state.  :func:`compquant.lines.measure_run` maps it over
``Run.read_raw`` chunks; ``compquant.parallel`` can map the same function over
chunks with Dask.

Per block of rows (cache sized for SNIP) the steps are, in this order:

1. raw counts -> float64; saturated pixels ``raw >= level`` found here;
2. dark subtraction ``y - scale * D`` (:mod:`compquant.preprocess.corrections`);
3. response correction ``y / R``;
4. baseline removal (SNIP / AsLS / arPLS, :mod:`compquant.preprocess.baseline`);
5. window integration ``I = y @ W`` and, when planned, the fixed-shape linear
   profile amplitudes of fitted groups ``A = y[pixels] @ P^T``;
6. per-shot QC quantities: total emission ``y @ t`` (trapezoid weights) and the
   mean removed baseline (for ``background`` normalisation);
7. per-sample sums of the processed spectra (for sample mean spectra), kept as exact
   fixed-point sums (:class:`compquant.exactsum.FixedPointSum`) so that they, and all that
   follows from the mean spectra, do not depend on the chunk size or the number of workers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compquant.exactsum import FixedPointSum, row_products
from compquant.preprocess.baseline import SNIP_BLOCK_ROWS, SnipWorkspace, estimate_baseline, snip_block

#: rows per block for the AsLS / arPLS solvers (memory about 12 x rows x pixels x 8 bytes)
WHITTAKER_BLOCK_ROWS = 512


@dataclass
class FitProjection:
    """Fixed-shape amplitudes of one fitted group for one sample: ``A = y[pixels] @ P.T``."""

    pixels: np.ndarray  # (m,) pixel indices
    P: np.ndarray  # (n_g, m)
    cols: np.ndarray  # (n_g,) columns in the fit-result array


@dataclass
class ChunkPlan:
    """Everything :func:`process_chunk` needs, as arrays and numbers."""

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

    @property
    def n_win(self) -> int:
        return 0 if self.W is None else self.W.shape[1]


@dataclass
class ChunkResult:
    """Per-shot results of one chunk (rows in shot order) and per-sample sums."""

    window: np.ndarray | None  # (n, n_win)
    fit: np.ndarray | None  # (n, n_fit)
    sat_window: np.ndarray | None  # (n, n_win) bool, None when nothing saturated
    sat_fit: np.ndarray | None  # (n, n_fit) bool
    total: np.ndarray  # (n,) total emission after baseline removal, counts*nm
    background: np.ndarray  # (n,) mean removed baseline, counts
    sums: dict[int, FixedPointSum]  # sample index -> sum of processed spectra (exact, order-free)
    counts: dict[int, int]


def _compact(W: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    pix = np.flatnonzero(np.any(W != 0, axis=1))
    return pix, np.ascontiguousarray(W[pix])


def _sat_any(sat_block: np.ndarray, support: np.ndarray) -> np.ndarray:
    return (sat_block.astype(np.float32) @ support.astype(np.float32)) > 0


def process_chunk(raw, sample_index, plan: ChunkPlan) -> ChunkResult:
    """Preprocess and measure one chunk of shots (see module docstring). Pure function."""
    raw = np.asarray(raw)
    si = np.asarray(sample_index)
    n = raw.shape[0]
    if raw.ndim != 2 or raw.shape[1] != plan.n_pixels:
        raise ValueError("raw chunk must be (n_shots, n_pixels)")
    n_win = plan.n_win if plan.measure_windows else 0
    win = np.empty((n, n_win)) if n_win else None
    fit = np.empty((n, plan.n_fit)) if plan.n_fit else None
    sat_w = None
    sat_f = None
    total = np.empty(n)
    bg = np.zeros(n)
    sums: dict[int, np.ndarray] = {}
    counts: dict[int, int] = {}
    # SNIP: cache-sized blocks; Whittaker solvers: blocks that bound memory (about 12 arrays)
    block = SNIP_BLOCK_ROWS if plan.baseline == "snip" else WHITTAKER_BLOCK_ROWS if plan.baseline != "none" else n
    block = max(1, min(block, n))
    tw = plan.total_weights if plan.total_weights is not None else np.ones(plan.n_pixels)
    # window weights are zero outside a few pixels per line: gather those pixels only
    W_shared = _compact(plan.W) if n_win else None
    W_by_sample = {s: _compact(W) for s, W in plan.W_by_sample.items()} if n_win else {}
    ybuf = np.empty((min(block, n), plan.n_pixels))
    ws = None
    if plan.baseline == "snip":
        ws = SnipWorkspace(min(block, n), plan.n_pixels, plan.baseline_params.get("max_half_window", 20))
        snip_opts = {k: v for k, v in plan.baseline_params.items() if k in ("decreasing", "lls")}
    for r0 in range(0, n, block):
        r1 = min(n, r0 + block)
        rb = raw[r0:r1]
        y = ybuf[: r1 - r0]
        y[...] = rb  # cast to float64 (a plain copy is faster than a mixed-type subtract)
        if plan.dark is not None:
            y -= plan.dark
        sib = si[r0:r1]
        samples_here = np.unique(sib)
        sat = None
        if plan.saturation_threshold is not None and rb.max() >= plan.saturation_threshold:
            sat = rb >= plan.saturation_threshold
        if plan.inv_response is not None:
            y *= plan.inv_response
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
            if n_win:
                pix, Wc = W_by_sample.get(s, W_shared)
                win[r0:r1][rows] = row_products(ys[:, pix], Wc)
                if sat is not None:
                    if sat_w is None:
                        sat_w = np.zeros((n, n_win), dtype=bool)
                    sup = plan.support_by_sample.get(s, plan.support)
                    sat_w[r0:r1][rows] = _sat_any(sat[rows], sup)
            if plan.n_fit:
                idx = np.arange(r0, r1) if isinstance(rows, slice) else r0 + np.nonzero(rows)[0]
                fit[idx] = np.nan
                for fp in plan.fit.get(s, []):
                    fit[np.ix_(idx, fp.cols)] = row_products(ys[:, fp.pixels], fp.P.T)
                if sat is not None and s in plan.fit_support:
                    if sat_f is None:
                        sat_f = np.zeros((n, plan.n_fit), dtype=bool)
                    sat_f[r0:r1][rows] = _sat_any(sat[rows], plan.fit_support[s])
            if plan.accumulate:  # exact fixed-point sums: the same for any chunking (compquant.exactsum)
                if s in sums:
                    sums[s].add_rows(ys)
                else:
                    sums[s] = FixedPointSum.of_rows(ys)
                counts[s] = counts.get(s, 0) + (ys.shape[0])
    return ChunkResult(
        window=win, fit=fit, sat_window=sat_w, sat_fit=sat_f, total=total, background=bg, sums=sums, counts=counts
    )


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

    sums: dict[int, np.ndarray] = {}
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
    )


def process_chunk_threaded(raw, sample_index, plan: ChunkPlan, executor, parts: int) -> ChunkResult:
    """:func:`process_chunk` on ``parts`` row ranges of one chunk in a thread pool, merged.

    numpy releases the GIL inside its array loops, so the ranges run on separate cores;
    the result equals :func:`process_chunk` on the whole chunk.
    """
    n = np.shape(raw)[0]
    edges = np.linspace(0, n, max(1, parts) + 1).astype(int)
    futs = [
        executor.submit(process_chunk, raw[a:b], sample_index[a:b], plan)
        for a, b in zip(edges[:-1], edges[1:])
        if b > a
    ]
    return merge_chunk_results([f.result() for f in futs])
