"""The streaming passes of line measurement over a run's chunks.

Pass 0 (:func:`_find_shifts`): per-sample wavelength correction from the mean of dark- and
response-corrected spectra (:mod:`compquant.lines.wavecal`).  Pass 1 (:func:`window_pass`):
preprocessing, window lines, per-shot QC quantities and the exact per-sample sums.  Pass 2
(:func:`fit_pass`): the fitted groups, fitted by least squares on each sample's mean spectrum
(:func:`_fit_one_group`) and projected onto each shot with the shapes fixed.  Every pass maps the
pure :func:`compquant.lines.chunk.process_chunk` over the chunks, serially, in threads or on Dask
workers (``chunk_mapper``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compquant.errors import MethodError
from compquant.lines._setup import _load_curve_csv, _Setup, _shift_lines_nm
from compquant.lines.chunk import (
    ChunkPlan,
    ChunkResult,
    FitProjection,
    merge_chunk_results,
    process_chunk,
    submit_chunk_threaded,
)
from compquant.lines.fit import GroupFit, fit_group, fit_group_fixed
from compquant.lines.wavecal import WavecalResult, WavecalSettings, calibrate_wavelength
from compquant.lines.windows import (
    WindowWeights,
    peak_centre_fwhm,
    support_mask,
)
from compquant.method import window_width_nm
from compquant.preprocess.baseline import estimate_baseline
from compquant.preprocess.shift import shift_by_cross_correlation


def _iter_raw(run, chunk: int, prefetch: bool = True):
    """Yield ``(start, stop, raw)`` chunks; with ``prefetch`` the next chunks are read and
    decompressed on every core while the caller processes the current one
    (:func:`compquant.run.fastread.iter_raw`).  Memory: three chunks of raw counts.
    """
    from compquant.run.fastread import iter_raw

    bounds = [(a, min(run.n_shots, a + chunk)) for a in range(0, run.n_shots, chunk)]
    yield from iter_raw(run, bounds, threads=None if prefetch else 0)


def _chunk_results(run, setup, chunk: int, plan: ChunkPlan, chunk_mapper=None):
    """``(start, stop, process_chunk(raw, sample_index, plan))`` for every chunk, in shot order.

    Serial by default; ``chunk_mapper(run, ranges, plan)`` (e.g. from
    :func:`compquant.parallel.chunk_mapper`) may compute the same function elsewhere and
    must yield the results in the order of ``ranges``.
    """
    if chunk_mapper is None:
        threads = setup.threads
        if threads <= 1:
            for start, stop, raw in _iter_raw(run, chunk):
                yield start, stop, process_chunk(raw, setup.sample_index[start:stop], plan)
            return
        from concurrent.futures import ThreadPoolExecutor

        # pipelined: the next chunk's row ranges are queued before this chunk's results are
        # merged and handed on, so the worker threads go on while the caller stores them (one
        # more chunk in flight; the same ranges and the same merge as process_chunk_threaded)
        with ThreadPoolExecutor(max_workers=threads, thread_name_prefix="compquant-work") as ex:
            pending = None
            for start, stop, raw in _iter_raw(run, chunk):
                futs = submit_chunk_threaded(raw, setup.sample_index[start:stop], plan, ex, threads)
                if pending is not None:
                    yield pending[0], pending[1], merge_chunk_results([f.result() for f in pending[2]])
                pending = (start, stop, futs)
            if pending is not None:
                yield pending[0], pending[1], merge_chunk_results([f.result() for f in pending[2]])
        return
    ranges = [(a, min(run.n_shots, a + chunk)) for a in range(0, run.n_shots, chunk)]
    for (start, stop), res in zip(ranges, chunk_mapper(run, ranges, plan), strict=True):
        yield start, stop, res


def _merge_sums(sums, counts, res: ChunkResult) -> None:
    for s, v in res.sums.items():
        if s in sums:
            sums[s] += v
        else:
            sums[s] = v.copy()
        counts[s] = counts.get(s, 0) + res.counts[s]


def _find_shifts(run, setup: _Setup, chunk: int, progress, chunk_mapper=None) -> dict[int, WavecalResult]:
    """Pass 0: per-sample wavelength correction from the mean of dark/response-corrected spectra."""
    pre = setup.method.preprocess
    plan = setup.base_plan()
    plan.baseline = "none"
    plan.measure_windows = False
    sums: dict[int, np.ndarray] = {}
    counts: dict[int, int] = {}
    masked_count: dict[int, np.ndarray] = {}
    for start, stop, res in _chunk_results(run, setup, chunk, plan, chunk_mapper):
        _merge_sums(sums, counts, res)
        for r, a, b in res.masked:
            s = int(setup.sample_index[start + r])
            masked_count.setdefault(s, np.zeros(setup.wl.size, dtype=np.int64))[a : b + 1] += 1
        if progress:
            progress(stop - start)
    out = {}
    for s, tot in sums.items():
        mean = tot / counts[s]
        if pre.baseline != "none":
            mean = mean - estimate_baseline(mean, pre.baseline, **pre.baseline_params)
        invalid = masked_count[s] * 2 >= counts[s] if s in masked_count else None
        out[s] = _sample_correction(setup, mean, invalid)
        c = out[s]
        if c.status != "ok":
            setup.notes.append(
                f"sample {setup.sample_ids[s]!r}: wavelength correction {c.status.replace('_', ' ')} "
                f"({c.n_used} of {len(c.refs)} references agree; correction "
                + (f"{c.a:+.5f} nm applied)" if c.applied else "not applied: windows left at table positions)")
            )
    return out


def _sample_correction(setup: _Setup, mean: np.ndarray, invalid=None) -> WavecalResult:
    """Wavelength correction of one sample's mean spectrum (lines: compquant.lines.wavecal)."""
    pre = setup.method.preprocess
    if pre.shift == "xcorr":
        x, r = _load_curve_csv(
            setup.method.resolve_path(pre.shift_reference_file),
            ("wavelength_nm", "intensity"),
            f"{setup.method.where}: [preprocess.shift] reference_file",
        )
        d = shift_by_cross_correlation(setup.wl, mean, x, r, pre.max_shift_nm)
        ok = bool(np.isfinite(d) and abs(d) <= pre.max_shift_nm)
        return WavecalResult(model="shift", a=float(d) if ok else 0.0, applied=ok, status="ok" if ok else "no_match")
    refs = _shift_lines_nm(setup.method)
    settings = WavecalSettings(
        search_nm=pre.shift_search_nm,
        fwhm_nm=_expected_fwhm(setup, mean, refs),
        pitch_nm=setup.pitch,
        model=pre.shift_model,
        min_refs=pre.shift_min_refs,
        tolerance_nm=pre.shift_tolerance_nm,
        max_shift_nm=pre.max_shift_nm,
    )
    return calibrate_wavelength(setup.wl, mean, refs, settings, catalogue_nm=_catalogue_nm(setup), invalid=invalid)


def _expected_fwhm(setup: _Setup, mean: np.ndarray, refs: list[float]) -> float:
    """Line FWHM for the reference windows: stated in the method, else the median measured
    FWHM of the references' peaks, else 3 pixels (common practice)."""
    m = setup.method
    stated = [ln.fwhm_nm for ln in m.lines if ln.fwhm_nm and any(abs(ln.wavelength_nm - r) < 1e-6 for r in refs)]
    if stated or m.measure.fwhm_nm:
        return float(stated[0] if stated else m.measure.fwhm_nm)
    s = m.preprocess.shift_search_nm
    fw = [peak_centre_fwhm(setup.wl, mean, r - s, r + s)[1] for r in refs]
    fw = [f for f in fw if np.isfinite(f) and f > 0]
    return float(np.median(fw)) if fw else 3.0 * setup.pitch


def _catalogue_nm(setup: _Setup) -> np.ndarray:
    """Known line positions for the neighbour check: the method's lines and the shipped line
    list (docs/atomic-data.md), in the method's medium."""
    from compquant.atomic import load_line_list
    from compquant.atomic.airvac import air_to_vacuum

    own = [ln.wavelength_nm for ln in setup.lines]
    try:
        listed = load_line_list()["wavelength_nm"].to_numpy(dtype=float)
    except Exception:
        listed = np.zeros(0)
    if getattr(setup.method, "medium", "air") == "vacuum":
        listed = np.asarray(air_to_vacuum(listed), dtype=float)
    cat = np.unique(np.concatenate([np.asarray(own, dtype=float), listed]))
    return cat[(cat >= setup.wl[0]) & (cat <= setup.wl[-1])]


def _column_index(cols: list[int]):
    """``cols`` as a slice when they are consecutive (a view on assignment), else the list."""
    if cols and cols == list(range(cols[0], cols[0] + len(cols))):
        return slice(cols[0], cols[0] + len(cols))
    return cols


def _fit_one_group(setup: _Setup, mean: np.ndarray, members: list[int], s: int) -> GroupFit:
    m = setup.method.measure
    lines = [setup.lines[i] for i in members]
    centres = np.array([ln.wavelength_nm + setup.shift_of(s, ln.wavelength_nm) for ln in lines])
    fw = [ln.fwhm_nm for ln in lines if ln.fwhm_nm]
    fwhm0 = float(fw[0]) if fw else 3.0 * setup.pitch
    halves = [0.5 * window_width_nm(ln, setup.pitch) for ln in lines]
    lo = min(c - h for c, h in zip(centres, halves))
    hi = max(c + h for c, h in zip(centres, halves))
    # at least 3 pixels of continuum each side for the linear background
    lo = max(setup.wl[0], lo - 3 * setup.pitch)
    hi = min(setup.wl[-1], hi + 3 * setup.pitch)
    max_off = m.max_offset_nm if m.max_offset_nm else max(0.5 * fwhm0, 1.5 * setup.pitch)
    kind = lines[0].profile or m.profile
    try:
        fixed = fit_group_fixed(setup.wl, mean, centres, lo_nm=lo, hi_nm=hi, kind=kind, fwhm=fwhm0)
        snr = np.abs(fixed.areas) / np.sqrt(np.maximum(np.diag(fixed.cov_areas), 1e-300))
        if not np.any(snr >= m.snr_detect):
            return fixed  # nothing detected: keep the table shapes, no free fit of noise
        return fit_group(
            setup.wl,
            mean,
            centres,
            lo_nm=lo,
            hi_nm=hi,
            kind=kind,
            shared_width=m.shared_width,
            fwhm0=fwhm0,
            max_offset_nm=max_off,
            max_fwhm_nm=max(hi - lo, 4 * fwhm0),
        )
    except ValueError as exc:
        ids = ", ".join(ln.line_id for ln in lines)
        raise MethodError(
            f"cannot fit lines {ids}: {exc}",
            where=f"{setup.method.where}: [[lines]] {ids}",
            fix="widen window_nm so the fit window holds more pixels than parameters",
        ) from exc


@dataclass
class WindowPass:
    """What pass 1 gives besides the per-shot x per-line arrays: per-shot QC quantities, the
    sample means (exact sums over all shots / counts) and the window weights used."""

    total: np.ndarray  # (n_shots,) total emission
    background: np.ndarray | None  # (n_shots,) mean removed baseline (background normalisation only)
    means: dict[int, np.ndarray]
    ww_shared: WindowWeights | None
    ww_by_sample: dict[int, WindowWeights]


def window_pass(run, setup: _Setup, chunk: int, per_shot, sat, progress=None, chunk_mapper=None) -> WindowPass:
    """Pass 1: preprocessing, window lines (into the window columns of ``per_shot``, ``sat`` and
    ``setup.masked_line``: :class:`compquant.lines.shotstore.ShotArray`), QC quantities, sums."""
    plan = setup.base_plan()
    ww_shared = setup.window_weights(None) if setup.win_idx else None
    ww_by_sample: dict[int, WindowWeights] = {}
    if setup.win_idx:
        plan.W = ww_shared.W
        plan.support = support_mask(setup.wl.size, ww_shared.support)
        for s, c in setup.corr.items():
            if c.applied:
                ww = setup.window_weights(s)
                ww_by_sample[s] = ww
                plan.W_by_sample[s] = ww.W
                plan.support_by_sample[s] = support_mask(setup.wl.size, ww.support)
    else:
        plan.measure_windows = False
    win_cols = _column_index(setup.win_idx)
    n_shots = run.n_shots
    total = np.empty(n_shots)
    bg = np.empty(n_shots) if setup.method.preprocess.normalise == "background" else None
    sums: dict[int, np.ndarray] = {}
    counts: dict[int, int] = {}
    for start, stop, res in _chunk_results(run, setup, chunk, plan, chunk_mapper):
        if res.window is not None:  # a masked pixel never enters an integral: NaN there
            per_shot.write(start, stop, win_cols, res.window, res.masked_window)
        if res.sat_window is not None:
            sat.write(start, stop, win_cols, res.sat_window)
        if res.masked_window is not None:
            setup.masked_line.write(start, stop, win_cols, res.masked_window)
        setup.masked_ranges += [(start + r, a, b) for r, a, b in res.masked]
        total[start:stop] = res.total
        if bg is not None:
            bg[start:stop] = res.background
        _merge_sums(sums, counts, res)
        if progress:
            progress(stop - start)
    means = {s: sums[s] / counts[s] for s in sums}
    return WindowPass(total, bg, means, ww_shared, ww_by_sample)


def fit_pass(run, setup: _Setup, chunk: int, means, per_shot, sat, progress=None, chunk_mapper=None) -> dict:
    """Pass 2: each fitted group fitted on each sample's mean spectrum, then every shot's areas
    with the shapes fixed (into the fit columns); returns the fits by ``(sample, group)``."""
    fits: dict[tuple[int, int], GroupFit] = {}
    if not setup.groups:
        return fits
    fplan = setup.base_plan()
    fplan.measure_windows = False
    fplan.accumulate = False
    fplan.n_fit = len(setup.fit_idx)
    col_of = {i: k for k, i in enumerate(setup.fit_idx)}
    for s, mean in means.items():
        projs = []
        fsup = np.zeros((setup.wl.size, fplan.n_fit), dtype=bool)
        for g, members in enumerate(setup.groups):
            gf = _fit_one_group(setup, mean, members, s)
            fits[(s, g)] = gf
            cols = np.array([col_of[i] for i in members])
            projs.append(FitProjection(pixels=gf.pixels, P=gf.projection(), cols=cols))
            fsup[np.ix_(gf.pixels, cols)] = True
        fplan.fit[s] = projs
        fplan.fit_support[s] = fsup
    fit_cols = _column_index(setup.fit_idx)
    for start, stop, res in _chunk_results(run, setup, chunk, fplan, chunk_mapper):
        per_shot.write(start, stop, fit_cols, res.fit, res.masked_fit)
        if res.sat_fit is not None:
            sat.write(start, stop, fit_cols, res.sat_fit)
        if res.masked_fit is not None:
            setup.masked_line.write(start, stop, fit_cols, res.masked_fit)
        if progress:
            progress(stop - start)
    return fits
