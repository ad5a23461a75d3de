"""Measure a method's lines in every shot and sample of a run, streaming over chunks.

Entry points
------------
* :func:`measure_run(run, method, chunk_shots=...) <measure_run>` -> :class:`LineMeasurement`
  with the line table of docs/architecture.md, the per-shot table, the shot-QC
  report per sample, the wavelength shifts found and the provenance.
* :func:`measure_lines` -- same, returning only the line table.
* :func:`mean_spectrum(run, method, sample_id) <mean_spectrum>` -- the
  preprocessed mean spectrum of a sample's accepted shots (plots, identification).

Passes over the run (each streams ``chunk_shots`` shots at a time through the
pure :func:`compquant.lines.chunk.process_chunk`):

0. only with shift correction: per-sample mean of dark- and response-corrected
   spectra, baseline removed on the mean, shift found per sample;
1. preprocessing, window integration of ``mode = "window"`` lines, per-shot QC
   quantities, per-sample sums of the processed spectra;
2. only for ``mode = "fit"`` lines: the groups are fitted by least squares on
   each sample's mean spectrum (all shots); each shot's line areas then follow
   from a linear least-squares fit with the centres and widths fixed
   (a linear projection, so the mean of the shot areas equals the area fitted
   to the mean spectrum with those shapes).

Statistics per (sample, line) over the shots accepted by shot QC:
``intensity`` = mean of per-shot intensities (after normalisation),
``sd_shots`` = their standard deviation (ddof = 1), and the standard
uncertainty of the mean (JCGM 100:2008, 4.2.3 type A)::

    window lines:   u = sd / sqrt(n)
    fitted lines:   u = sqrt( sd^2 / n + u_shape^2 )

where ``u_shape^2 = var_full(A) - var_fixed_shape(A)`` is the part of the fit
covariance due to the fitted centres and widths (the pixel-noise part is already
in the shot scatter), divided by the mean normalisation factor when spectra are
normalised.  A single-shot sample has no scatter: ``u`` is then the
pixel-noise propagation ``sigma * ||w||`` (window) or the full fit covariance
(fit) and the line is flagged ``single_shot``.  ``snr = intensity / u``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from compquant.errors import DataQualityError, MethodError
from compquant.lines.chunk import (
    ChunkPlan,
    ChunkResult,
    FitProjection,
    find_masked,
    masked_ranges,
    process_chunk,
    process_chunk_threaded,
    repair_masked,
)
from compquant.lines.fit import GroupFit, fit_group, fit_group_fixed
from compquant.lines.wavecal import WavecalResult, WavecalSettings, calibrate_wavelength, noise_sd, peak_fwhm
from compquant.lines.windows import (
    WindowWeights,
    build_window_weights,
    peak_centre_fwhm,
    support_mask,
    window_geometry,
)
from compquant.method import LineSpec, Method, parse_line_id, side_width_nm, window_width_nm
from compquant.preprocess.baseline import estimate_baseline
from compquant.preprocess.corrections import dark_reference, exposure_ratio, trapezoid_weights
from compquant.preprocess.qc import QCDecision, qc_decide
from compquant.preprocess.shift import shift_by_cross_correlation
from compquant.run.mask import describe_range

LINE_TABLE_COLUMNS = [
    "sample_id",
    "role",
    "line_id",
    "element",
    "ion",
    "wavelength_nm",
    "intensity",
    "u_intensity",
    "sd_shots",
    "n_shots",
    "centre_nm",
    "fwhm_nm",
    "snr",
    "flags",
]
SHOT_TABLE_COLUMNS = ["sample_id", "shot", "line_id", "intensity", "accepted", "saturated"]
FLAG_ORDER = (
    "saturated",
    "masked",
    "not_found",
    "overlapped",
    "low_snr",
    "shifted",
    "window_clips",
    "wavelength_refs_disagree",
    "single_shot",
)
SHIFT_TABLE_COLUMNS = [
    "sample_id",
    "shift_nm",
    "method",
    "shifted",
    "model",
    "dispersion_nm_per_nm",
    "u_shift_nm",
    "u_dispersion",
    "rms_residual_nm",
    "n_refs",
    "n_used",
    "status",
    "applied",
    "wavelength_refs_disagree",
]
REFERENCE_TABLE_COLUMNS = ["sample_id", "reference_nm", "found_nm", "residual_nm", "status"]


@dataclass
class LineMeasurement:
    """All results of :func:`measure_run`."""

    table: pd.DataFrame
    qc: pd.DataFrame
    shifts: pd.DataFrame
    provenance: dict
    line_ids: list[str]
    shot_sample: np.ndarray  # (n_shots,) sample index of each shot
    shot_number: np.ndarray  # (n_shots,)
    shot_intensity: np.ndarray  # (n_shots, n_lines), normalised
    shot_accepted: np.ndarray  # (n_shots,) bool
    shot_saturated: np.ndarray  # (n_shots, n_lines) bool
    shot_reasons: list[str]
    sample_ids: list[str]
    wavelength: np.ndarray
    mean_spectra: dict[str, np.ndarray] = field(default_factory=dict, repr=False)
    fits: dict = field(default_factory=dict, repr=False)
    references: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=REFERENCE_TABLE_COLUMNS))
    masked_pixels: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=["sample_id", "shot", "first_pixel", "last_pixel"])
    )

    @property
    def shots(self) -> pd.DataFrame:
        """Per-shot table: sample_id, shot, line_id, intensity, accepted, saturated (long form)."""
        n, k = self.shot_intensity.shape
        sid = np.asarray(self.sample_ids, dtype=object)[self.shot_sample]
        return pd.DataFrame(
            {
                "sample_id": np.repeat(sid, k),
                "shot": np.repeat(self.shot_number, k),
                "line_id": np.tile(np.asarray(self.line_ids, dtype=object), n),
                "intensity": self.shot_intensity.reshape(-1),
                "accepted": np.repeat(self.shot_accepted, k),
                "saturated": self.shot_saturated.reshape(-1),
            },
            columns=SHOT_TABLE_COLUMNS,
        )

    def rejected_shots(self) -> pd.DataFrame:
        """Shots refused by QC: sample_id, shot, reason."""
        bad = np.flatnonzero(~self.shot_accepted)
        return pd.DataFrame(
            {
                "sample_id": [self.sample_ids[self.shot_sample[i]] for i in bad],
                "shot": self.shot_number[bad],
                "reason": [self.shot_reasons[i] for i in bad],
            }
        )


# --------------------------------------------------------------------------- set-up helpers


def _pitch(wl: np.ndarray) -> float:
    return float(np.median(np.diff(wl)))


def _load_curve_csv(path, columns: tuple[str, str], where: str):
    from compquant.fileio import require_file

    p = require_file(path, "file")
    try:
        df = pd.read_csv(p)
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise MethodError(
            f"cannot read CSV ({exc})", where=f"{where}: {p}", fix=f"give a CSV with columns {columns[0]},{columns[1]}"
        ) from exc
    if not set(columns) <= set(df.columns):
        raise MethodError(
            f"CSV lacks columns {columns}",
            where=f"{where}: {p}",
            fix=f"give a CSV with columns {columns[0]},{columns[1]}",
        )
    x = pd.to_numeric(df[columns[0]], errors="coerce").to_numpy(float)
    y = pd.to_numeric(df[columns[1]], errors="coerce").to_numpy(float)
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.sum() < 2 or np.any(np.diff(x[ok]) <= 0):
        raise MethodError(
            "CSV needs >= 2 rows of finite numbers with increasing wavelength",
            where=f"{where}: {p}",
            fix="sort by wavelength and remove empty cells",
        )
    return x[ok], y[ok]


def _response_vector(run, method: Method, notes: list) -> np.ndarray | None:
    pre = method.preprocess
    if not pre.response:
        return None
    if pre.response_file:
        where = f"{method.where}: [preprocess.response] file"
        x, r = _load_curve_csv(method.resolve_path(pre.response_file), ("wavelength_nm", "response"), where)
        wl = run.wavelength
        if wl[0] < x[0] or wl[-1] > x[-1]:
            raise MethodError(
                f"response file covers {x[0]:.2f}-{x[-1]:.2f} nm, run covers {wl[0]:.2f}-{wl[-1]:.2f} nm",
                where=where,
                fix="give a response curve over the whole run range",
            )
        from compquant.run._checks import check_response

        curve = np.interp(wl, x, r)
        check_response(curve, where)  # positive, finite, a sane range: the same rule as a stored response
        return curve
    r = run.response()
    if r is None:
        notes.append("response correction asked for but the run stores no response: not applied")
    return r


def _inverse_response(r: np.ndarray | None) -> np.ndarray | None:
    if r is None:
        return None
    good = np.isfinite(r) & (r > 0)
    return np.where(good, 1.0 / np.where(good, r, 1.0), 0.0)


def _dark_vector(run, method: Method, notes: list) -> tuple[np.ndarray | None, float]:
    pre = method.preprocess
    if not pre.dark:
        return None, 1.0
    d = run.dark()
    if d is None or d.shape[0] == 0:
        explicit = ((method.raw or {}).get("preprocess") or {}).get("dark") or {}
        if isinstance(explicit, dict) and explicit.get("enabled") is True:
            # the method file itself demands dark subtraction: results without it would be wrong
            raise MethodError(
                "the run stores no dark frames, but the method requires dark subtraction "
                f"([preprocess.dark] enabled = true in {method.where})",
                where=str(run.path),
                fix="use a run recorded with dark frames, or set [preprocess.dark] enabled = false",
            )
        notes.append("dark subtraction asked for but the run stores no dark frames: not applied")
        return None, 1.0
    scale = exposure_ratio(run.exposure_s, run.dark_exposure_s) if pre.dark_scale_exposure else 1.0
    return dark_reference(d, pre.dark_statistic) * scale, scale


def _fit_groups(lines: list[LineSpec], wl: np.ndarray) -> list[list[int]]:
    """Group fit-mode lines: by their ``group`` name, else lines whose fit windows overlap."""
    pitch = _pitch(wl)
    idx = [i for i, ln in enumerate(lines) if ln.mode == "fit"]
    named: dict[str, list[int]] = {}
    auto = []
    for i in idx:
        if lines[i].group:
            named.setdefault(lines[i].group, []).append(i)
        else:
            auto.append(i)
    groups = list(named.values())
    auto.sort(key=lambda i: lines[i].wavelength_nm)
    cur: list[int] = []
    cur_hi = -np.inf
    for i in auto:
        half = 0.5 * window_width_nm(lines[i], pitch)
        lo, hi = lines[i].wavelength_nm - half, lines[i].wavelength_nm + half
        if cur and lo <= cur_hi:
            cur.append(i)
            cur_hi = max(cur_hi, hi)
        else:
            if cur:
                groups.append(cur)
            cur, cur_hi = [i], hi
    if cur:
        groups.append(cur)
    return groups


def _shift_lines_nm(method: Method) -> list[float]:
    out = []
    for ref in method.preprocess.shift_lines:
        if isinstance(ref, str):
            try:
                out.append(method.line(ref).wavelength_nm)
            except MethodError:
                out.append(parse_line_id(ref)[2])
        else:
            out.append(float(ref))
    return out


def _chunk_size(run, chunk_shots: int | None, method: Method) -> int:
    c = int(method.measure.chunk_shots if chunk_shots is None else chunk_shots)  # 0 is refused, not "default"
    if c < 1:
        raise MethodError(f"chunk size {c} is not positive", where="chunk_shots", fix="use >= 1 shot")
    limit = getattr(run, "memory_limit", None)
    if limit:  # the run's memory limit holds for the chunk buffers too (about 24 bytes per value)
        fit = int(limit) // (24 * max(1, int(run.n_pixels)))
        if fit < 1:
            from compquant.errors import ResourceLimitError

            raise ResourceLimitError(f"one shot of {run.n_pixels} pixels needs {24 * run.n_pixels} bytes to process, "
                                     f"above the memory limit of {int(limit)} bytes", where="memory limit",
                                     fix="raise COMPQUANT_MEMORY_LIMIT")
        c = min(c, fit)
    align = max(1, int(getattr(run, "chunk_rows", 1)))
    if c > align:
        c = (c // align) * align
    return c


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

        with ThreadPoolExecutor(max_workers=threads, thread_name_prefix="compquant-work") as ex:
            for start, stop, raw in _iter_raw(run, chunk):
                yield start, stop, process_chunk_threaded(raw, setup.sample_index[start:stop], plan, ex, threads)
        return
    ranges = [(a, min(run.n_shots, a + chunk)) for a in range(0, run.n_shots, chunk)]
    for (start, stop), res in zip(ranges, chunk_mapper(run, ranges, plan), strict=True):
        yield start, stop, res


def _axis_in_method_medium(run, method: Method) -> tuple[np.ndarray, str]:
    """The run's wavelength axis in the method's medium (air or vacuum).

    When the media differ the axis is converted with the Edlen (1966) / Birch & Downs
    (1994) refractive index of standard air as given by Morton (2000, ApJS 130, 403,
    eq. 8) (:mod:`compquant.atomic.airvac`); the note says so for the provenance.
    """
    from compquant.atomic.airvac import air_to_vacuum, vacuum_to_air

    wl = np.asarray(run.wavelength, dtype=np.float64)
    run_medium = getattr(run, "medium", "air")
    want = getattr(method, "medium", "air")
    if run_medium == want:
        return wl, f"run and method wavelengths both in {want}: no conversion"
    conv = vacuum_to_air(wl) if want == "air" else air_to_vacuum(wl)
    return np.asarray(conv, dtype=np.float64), (
        f"run axis converted from {run_medium} to {want} wavelengths (Edlen 1966 / Birch & Downs 1994 "
        f"refractive index of standard air, Morton 2000 eq. 8); shift at {wl[0]:.3f} nm: {conv[0] - wl[0]:+.5f} nm"
    )


# --------------------------------------------------------------------------- main driver


class _Setup:
    """Resolved, run-specific settings shared by measure_run and mean_spectrum."""

    def __init__(self, run, method: Method):
        self.notes: list[str] = []
        self.wl, self.medium_note = _axis_in_method_medium(run, method)
        method.check_run(self.wl)
        self.method = method
        self.threads = 1
        pre = method.preprocess
        self.pitch = _pitch(self.wl)
        self.corr: dict[int, WavecalResult] = {}
        self.masked_line: np.ndarray | None = None
        self.masked_ranges: list[tuple[int, int, int]] = []
        self.dark, self.dark_scale = _dark_vector(run, method, self.notes)
        self.response = _response_vector(run, method, self.notes)
        self.inv_response = _inverse_response(self.response)
        level = pre.saturation_level if pre.saturation_level is not None else run.saturation
        if pre.saturation and level is None:
            self.notes.append("run states no saturation level: saturation not checked")
        self.sat_threshold = (level * (1.0 - pre.saturation_margin)) if (pre.saturation and level) else None
        if pre.normalise == "background" and pre.baseline == "none":
            raise MethodError(
                "background normalisation needs a baseline method",
                where=f"{method.where}: [preprocess.normalise] how",
                fix="set [preprocess.baseline] method, or choose another normalisation",
            )
        self.sample_index = run.shots["sample_index"].to_numpy().astype(np.int64)
        self.shot_number = run.shots["shot"].to_numpy() if "shot" in run.shots.columns else np.arange(run.n_shots)
        self.samples = run.samples.reset_index(drop=True)
        self.sample_ids = [str(s) for s in self.samples["sample_id"]]
        self.pulse = None
        if pre.pulse_energy_normalise or pre.min_pulse_fraction > 0:
            if "pulse_energy_mj" not in run.shots.columns:
                raise MethodError(
                    "the method uses pulse energies but the run stores none",
                    where=f"{method.where}: [preprocess.qc]",
                    fix="set pulse_energy_normalise = false and min_pulse_fraction = 0",
                )
            self.pulse = run.shots["pulse_energy_mj"].to_numpy(dtype=float)
        self.lines = method.lines
        self.win_idx = [i for i, ln in enumerate(self.lines) if ln.mode == "window"]
        self.groups = _fit_groups(self.lines, self.wl)
        self.fit_idx = [i for g in self.groups for i in g]

    def shift_of(self, s: int | None, wavelength_nm: float) -> float:
        """Wavelength correction (nm) of sample ``s`` at a table wavelength (0 without one)."""
        c = self.corr.get(s) if s is not None else None
        return 0.0 if c is None else float(c.shift_at(wavelength_nm))

    def geometry(self, i: int, s: int | None = None):
        ln = self.lines[i]
        return window_geometry(
            ln.wavelength_nm + self.shift_of(s, ln.wavelength_nm),
            window_width_nm(ln, self.pitch),
            side_width_nm(ln, self.pitch),
            ln.gap_nm or 0.0,
        )

    def window_weights(self, s: int | None = None) -> WindowWeights:
        return build_window_weights(self.wl, [self.geometry(i, s) for i in self.win_idx])

    def base_plan(self) -> ChunkPlan:
        pre = self.method.preprocess
        return ChunkPlan(
            n_pixels=self.wl.size,
            dark=self.dark,
            inv_response=self.inv_response,
            saturation_threshold=self.sat_threshold,
            baseline=pre.baseline,
            baseline_params=dict(pre.baseline_params),
            total_weights=trapezoid_weights(self.wl),
            background_level=pre.normalise == "background",
        )


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


def _merge_sums(sums, counts, res: ChunkResult) -> None:
    for s, v in res.sums.items():
        if s in sums:
            sums[s] += v
        else:
            sums[s] = v.copy()
        counts[s] = counts.get(s, 0) + res.counts[s]


def measure_run(
    run, method: Method, chunk_shots: int | None = None, progress=None, chunk_mapper=None, threads: int = 1
) -> LineMeasurement:
    """Preprocess every shot of ``run`` and measure the method's lines (module docstring).

    Parameters
    ----------
    run : compquant.run.Run (open)
    method : compquant.method.Method
    chunk_shots : shots per streamed chunk (default ``[measure] chunk_shots``, 4096); peak
        memory grows about ``chunk_shots * n_pixels * 24`` bytes.
    progress : callable(n_shots_done_in_step) or None, called once per chunk and pass.
    chunk_mapper : None (serial) or ``callable(run, ranges, plan)`` yielding
        :func:`~compquant.lines.chunk.process_chunk` results in range order, e.g. on Dask
        workers (:func:`compquant.parallel.chunk_mapper`); the results are the same.
    threads : worker threads for the serial path (each chunk split into ``threads`` row
        ranges processed concurrently; numpy releases the GIL); the results are the same.

    Raises
    ------
    MethodError : a line outside the run's range, settings that do not fit the run.
    DataQualityError : every shot of a sample rejected by shot QC (names the sample).
    """
    setup = _Setup(run, method)
    setup.threads = max(1, int(threads))
    pre = method.preprocess
    chunk = _chunk_size(run, chunk_shots, method)
    n_shots = run.n_shots
    n_lines = len(setup.lines)
    # pass 0: per-sample wavelength corrections
    if pre.shift != "none":
        setup.corr.update(_find_shifts(run, setup, chunk, progress, chunk_mapper))
    shifts = {s: (c.a if c.applied else 0.0) for s, c in setup.corr.items()}
    # pass 1: preprocessing + window lines + sums
    plan = setup.base_plan()
    ww_shared = setup.window_weights(None) if setup.win_idx else None
    ww_by_sample: dict[int, WindowWeights] = {}
    setup.masked_line = np.zeros((n_shots, n_lines), dtype=bool)
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
    win = np.full((n_shots, len(setup.win_idx)), np.nan)
    sat = np.zeros((n_shots, n_lines), dtype=bool)
    total = np.empty(n_shots)
    bg = np.empty(n_shots)
    sums: dict[int, np.ndarray] = {}
    counts: dict[int, int] = {}
    for start, stop, res in _chunk_results(run, setup, chunk, plan, chunk_mapper):
        if res.window is not None:
            win[start:stop] = res.window
        if res.sat_window is not None:
            sat[start:stop, setup.win_idx] = res.sat_window
        if res.masked_window is not None:
            setup.masked_line[start:stop, setup.win_idx] = res.masked_window
        setup.masked_ranges += [(start + r, a, b) for r, a, b in res.masked]
        total[start:stop] = res.total
        bg[start:stop] = res.background
        _merge_sums(sums, counts, res)
        if progress:
            progress(stop - start)
    means = {s: sums[s] / counts[s] for s in sums}
    # pass 2: fitted groups
    fit_vals = np.full((n_shots, len(setup.fit_idx)), np.nan)
    fits: dict[tuple[int, int], GroupFit] = {}
    if setup.groups:
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
        for start, stop, res in _chunk_results(run, setup, chunk, fplan, chunk_mapper):
            fit_vals[start:stop] = res.fit
            if res.sat_fit is not None:
                sat[start:stop, setup.fit_idx] = res.sat_fit
            if res.masked_fit is not None:
                setup.masked_line[start:stop, setup.fit_idx] = res.masked_fit
            if progress:
                progress(stop - start)
    # assemble per-shot intensities in method line order
    raw_int = np.full((n_shots, n_lines), np.nan)
    if setup.win_idx:
        raw_int[:, setup.win_idx] = win
    if setup.fit_idx:
        raw_int[:, setup.fit_idx] = fit_vals
    raw_int[setup.masked_line] = np.nan  # a masked pixel never enters an integral or a fit
    setup.notes += _masked_notes(setup)
    return _aggregate(setup, run, raw_int, sat, total, bg, means, shifts, fits, ww_shared, ww_by_sample, chunk)


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


def _qc_decide(pre, qc_x: np.ndarray, pulse: np.ndarray | None, rows: np.ndarray) -> QCDecision:
    """Shot QC of one sample's shots ``rows`` with the method's [preprocess.qc] settings
    (:func:`compquant.preprocess.qc.qc_decide`)."""
    return qc_decide(
        qc_x,
        k=pre.qc_k,
        min_fraction=pre.qc_min_fraction,
        min_signal=pre.qc_min_signal,
        pulse_energy=None if pulse is None else pulse[rows],
        min_pulse_fraction=pre.min_pulse_fraction,
        enabled=pre.qc,
    )


def _all_rejected_error(setup: _Setup, run, s: int, idx: np.ndarray, dec, hits=None) -> DataQualityError:
    """The error for a sample without accepted shots; names masked pixels when they are the cause
    (``hits``: its masked ranges ``(row, first, last)``, default those found by the measurement)."""
    sid = setup.sample_ids[s]
    shot_no = np.asarray(setup.shot_number)
    rows = set(idx.tolist())
    if hits is None:
        hits = [(r, a, b) for r, a, b in setup.masked_ranges if r in rows]
    if hits:
        shown = "; ".join(
            f"shot {int(shot_no[r])}: {describe_range(a, b, setup.wl)}" for r, a, b in hits[:5]
        ) + (f"; and {len(hits) - 5} more range(s)" if len(hits) > 5 else "")
        return DataQualityError(
            f"no usable shot in sample {sid!r}: its spectra hold masked pixels (NaN, infinite, sentinel or "
            f"implausible values, or masked in the run) -- {shown}",
            where=f"{run.path}: sample {sid}",
            fix="re-export the sample's spectra from the instrument; 'compquant inspect' lists every masked range",
        )
    return DataQualityError(
        f"all {idx.size} shots of sample {sid!r} were rejected by shot QC "
        f"({', '.join(f'{k}: {v}' for k, v in sorted(dec.counts.items()))})",
        where=f"{run.path}: sample {sid}",
        fix="check the sample's spectra ('compquant plot'), or relax [preprocess.qc] "
        "(k, min_fraction, min_signal) or disable it",
    )


def _shift_row(setup: _Setup, s: int, sid: str, flag_nm: float) -> dict:
    pre = setup.method.preprocess
    c = setup.corr.get(s)
    if c is None:
        c = WavecalResult(model="shift", status="ok" if pre.shift == "none" else "too_few_refs")
    d = c.a if c.applied else 0.0
    return {
        "sample_id": sid,
        "shift_nm": d,
        "method": pre.shift,
        "shifted": bool(pre.shift != "none" and abs(d) > flag_nm),
        "model": c.model,
        "dispersion_nm_per_nm": c.b if c.applied else 0.0,
        "u_shift_nm": c.u_shift_nm,
        "u_dispersion": c.u_dispersion,
        "rms_residual_nm": c.rms_nm,
        "n_refs": len(c.refs),
        "n_used": c.n_used,
        "status": c.status,
        "applied": bool(c.applied),
        "wavelength_refs_disagree": bool(pre.shift != "none" and c.disagree),
    }


def _reference_rows(setup: _Setup, s: int, sid: str) -> list[dict]:
    c = setup.corr.get(s)
    if c is None:
        return []
    return [
        {"sample_id": sid, "reference_nm": r.ref_nm, "found_nm": r.found_nm, "residual_nm": r.residual_nm,
         "status": r.status}
        for r in c.refs
    ]


def _masked_notes(setup: _Setup, limit: int = 3) -> list[str]:
    """One note per sample with masked pixels: how many ranges, the first few by shot and pixels."""
    by_sample: dict[int, list] = {}
    for r, a, b in setup.masked_ranges:
        by_sample.setdefault(int(setup.sample_index[r]), []).append((r, a, b))
    shot_no = np.asarray(setup.shot_number)
    notes = []
    for s, items in sorted(by_sample.items()):
        shown = "; ".join(f"shot {int(shot_no[r])} {describe_range(a, b, setup.wl)}" for r, a, b in items[:limit])
        more = f"; and {len(items) - limit} more" if len(items) > limit else ""
        notes.append(f"sample {setup.sample_ids[s]!r}: {len(items)} masked pixel range(s) ({shown}{more}); "
                     "lines touching them are left out of those shots and flagged 'masked'")
    return notes


def _masked_table(setup: _Setup) -> pd.DataFrame:
    shot_no = np.asarray(setup.shot_number)
    return pd.DataFrame(
        [
            {"sample_id": setup.sample_ids[int(setup.sample_index[r])], "shot": int(shot_no[r]),
             "first_pixel": a, "last_pixel": b}
            for r, a, b in setup.masked_ranges
        ],
        columns=["sample_id", "shot", "first_pixel", "last_pixel"],
    )


def _centre_uncertainty(fwhm: float, snr: float, a: float, b: float) -> float:
    """Standard uncertainty of a measured line centre, ``FWHM / SNR`` (a conservative form of
    the centroid precision sigma / SNR of a Gaussian line, common practice); a third of the
    window stands in for an unmeasured FWHM."""
    w = fwhm if np.isfinite(fwhm) and fwhm > 0 else (b - a) / 3.0
    return float(w / snr) if np.isfinite(snr) and snr > 0 else float("inf")


def _window_clips(centre: float, fwhm: float, a: float, b: float, u_c: float) -> bool:
    """The line is wider than its window, or its half-maximum extent ``centre +- FWHM/2`` leaves
    the window, beyond twice the centre's uncertainty (docs: line flags)."""
    if not (np.isfinite(centre) and np.isfinite(fwhm)):
        return False
    m = 2.0 * u_c
    return bool(fwhm - m > (b - a) or centre - 0.5 * fwhm + m < a or centre + 0.5 * fwhm - m > b)


def _wider_than_window(setup: _Setup, s: int, mean_spec, lo: float, hi: float) -> bool:
    """A clear peak (> 20 noise SDs) in the window whose own FWHM, measured on the mean spectrum
    beyond the window (compquant.lines.wavecal.peak_fwhm), exceeds the window: flagged even when
    the narrow window or fit then finds no line."""
    if mean_spec is None:
        return False
    cache = setup.__dict__.setdefault("_noise", {})
    if s not in cache:
        cache[s] = noise_sd(mean_spec)
    i0 = int(np.searchsorted(setup.wl, lo))
    i1 = int(np.searchsorted(setup.wl, hi, side="right"))
    if i1 - i0 < 3 or not np.isfinite(cache[s]) or cache[s] <= 0:
        return False
    j = i0 + int(np.argmax(mean_spec[i0:i1]))
    if j in (i0, i1 - 1) or mean_spec[j] < 20.0 * cache[s]:
        return False
    w = peak_fwhm(setup.wl, mean_spec, j, max_pixels=4 * (i1 - i0))
    return bool(np.isfinite(w) and w > hi - lo)


def _line_row(setup: _Setup, s, sid, role, li, vals, sat, masked, mean_spec, u_noise_win, f_mean, fits,
              flag_nm) -> dict:
    """One row of the line table: statistics over the accepted shots and the line's flags."""
    meas, pre = setup.method.measure, setup.method.preprocess
    ln = setup.lines[li]
    ok = np.isfinite(vals)
    nv = int(ok.sum())
    flags = set()
    intensity = float(np.mean(vals[ok])) if nv else float("nan")
    sd = float(np.std(vals[ok], ddof=1)) if nv >= 2 else float("nan")
    if sat.any():
        flags.add("saturated")
    if masked.any():
        flags.add("masked")
    expected = ln.wavelength_nm + setup.shift_of(s, ln.wavelength_nm)
    if ln.mode == "window":
        k = setup.win_idx.index(li)
        if nv >= 2:
            u = sd / math.sqrt(nv)
        else:
            u = float(u_noise_win[k]) / f_mean if u_noise_win is not None else float("nan")
        g = setup.geometry(li, s)
        centre = fwhm = float("nan")
        if mean_spec is not None:
            centre, fwhm = peak_centre_fwhm(setup.wl, mean_spec, g.a, g.b)
        lo = g.left[0] if g.left else g.a
        hi = g.right[1] if g.right else g.b
        for other in setup.lines:
            if other is not ln and lo <= other.wavelength_nm + setup.shift_of(s, other.wavelength_nm) <= hi:
                flags.add("overlapped")
        win_lo, win_hi = g.a, g.b
    else:
        gi = next(gx for gx, mem in enumerate(setup.groups) if li in mem)
        gf = fits[(s, gi)]
        j = setup.groups[gi].index(li)
        var_full = float(gf.cov_areas[j, j])
        u_shape2 = max(var_full - float(gf.var_areas_linear[j]), 0.0)
        if nv >= 2:
            u = math.sqrt(sd * sd / nv + u_shape2 / (f_mean * f_mean))
        else:
            u = math.sqrt(max(var_full, 0.0)) / f_mean
        centre, fwhm = float(gf.centres[j]), float(gf.fwhm[j])
        for jj in range(len(gf.centres)):
            if jj != j and abs(gf.centres[jj] - centre) < max(gf.fwhm[j], gf.fwhm[jj]):
                flags.add("overlapped")
        if not gf.success:
            flags.add("not_found")
        win_lo, win_hi = float(setup.wl[gf.pixels[0]]), float(setup.wl[gf.pixels[-1]])
    if np.isfinite(u) and u > 0:
        snr = intensity / u
    elif u == 0 and np.isfinite(intensity) and intensity > 0:
        snr = float("inf")  # exact by construction (the normalising line itself)
    else:
        snr = float("nan")
    if nv == 0 and "masked" in flags:
        pass  # not measured: every accepted shot has a masked pixel on the line ('masked' says why)
    elif np.isnan(snr) or snr < meas.snr_detect:
        flags.add("not_found")
    elif snr < meas.snr_min:
        flags.add("low_snr")
    if "not_found" in flags or nv == 0:
        centre = fwhm = float("nan")  # a position in noise means nothing, in any mode
    well_measured = np.isfinite(snr) and snr >= meas.snr_min
    u_c = _centre_uncertainty(fwhm, snr, win_lo, win_hi)
    if well_measured and np.isfinite(centre) and abs(centre - expected) > flag_nm + 2.0 * u_c:
        flags.add("shifted")
    single = ln.mode == "window" or len(next(g for g in setup.groups if li in g)) == 1  # blends: no
    if (well_measured and _window_clips(centre, fwhm, win_lo, win_hi, u_c)) or (
        single and _wider_than_window(setup, s, mean_spec, win_lo, win_hi)
    ):
        flags.add("window_clips")
    c = setup.corr.get(s)
    if pre.shift != "none" and c is not None and c.disagree:
        flags.add("wavelength_refs_disagree")
    if nv == 1:
        flags.add("single_shot")
    return {
        "sample_id": sid,
        "role": role,
        "line_id": ln.line_id,
        "element": ln.element,
        "ion": int(ln.ion),
        "wavelength_nm": ln.wavelength_nm,
        "intensity": intensity,
        "u_intensity": u,
        "sd_shots": sd,
        "n_shots": nv,
        "centre_nm": centre,
        "fwhm_nm": fwhm,
        "snr": snr,
        "flags": ";".join(f for f in FLAG_ORDER if f in flags),
    }


def _aggregate(
    setup: _Setup, run, raw_int, sat, total, bg, means, shifts, fits, ww_shared, ww_by_sample, chunk
) -> LineMeasurement:
    method = setup.method
    pre = method.preprocess
    n_shots, n_lines = raw_int.shape
    line_ids = [ln.line_id for ln in setup.lines]
    # per-shot normalisation factors
    factor = np.ones(n_shots)
    if pre.normalise == "total_area":
        factor = total.copy()
    elif pre.normalise == "background":
        factor = bg.copy()
    elif pre.normalise == "internal_standard":
        factor = raw_int[:, line_ids.index(pre.normalise_line)].copy()
    pulse_f = np.ones(n_shots)
    if pre.pulse_energy_normalise:
        e = setup.pulse
        ref = float(np.nanmedian(e)) if np.isfinite(e).any() else np.nan
        pulse_f = e / ref if np.isfinite(ref) and ref > 0 else np.ones(n_shots)
        factor = factor * pulse_f
    with np.errstate(divide="ignore", invalid="ignore"):
        good_f = np.isfinite(factor) & (factor > 0)
        inten = np.where(good_f[:, None], raw_int / np.where(good_f, factor, 1.0)[:, None], np.nan)
        qc_x = total / np.where(np.isfinite(pulse_f) & (pulse_f > 0), pulse_f, np.nan)
        if pre.qc_quantity != "total":
            qc_x = raw_int[:, line_ids.index(pre.qc_quantity)] / pulse_f
    qc_x = np.where(good_f, qc_x, np.nan)
    accepted = np.zeros(n_shots, dtype=bool)
    reasons = [""] * n_shots
    qc_rows, rows, shift_rows, ref_rows = [], [], [], []
    flag_nm = pre.shift_flag_nm if pre.shift_flag_nm else setup.pitch
    for s, sid in enumerate(setup.sample_ids):
        role = str(setup.samples["role"].iloc[s])
        idx = np.flatnonzero(setup.sample_index == s)
        if idx.size == 0:
            continue
        dec = _qc_decide(pre, qc_x[idx], setup.pulse, idx)
        accepted[idx] = dec.accepted
        for j, i in enumerate(idx):
            reasons[i] = dec.reasons[j]
        qc_rows.append(
            {
                "sample_id": sid,
                "role": role,
                "n_shots": int(idx.size),
                "n_accepted": int(dec.accepted.sum()),
                "n_rejected": dec.n_rejected,
                "reasons": ";".join(f"{k}={v}" for k, v in sorted(dec.counts.items())),
                "qc_quantity": pre.qc_quantity,
                "qc_median": dec.median,
                "qc_robust_sd": dec.robust_sd,
            }
        )
        if not dec.accepted.any():
            raise _all_rejected_error(setup, run, s, idx, dec)
        shift_rows.append(_shift_row(setup, s, sid, flag_nm))
        ref_rows += _reference_rows(setup, s, sid)
        acc = idx[dec.accepted]
        mean_spec = means.get(s)
        ww = ww_by_sample.get(s, ww_shared)
        u_noise_win = ww.u_noise(mean_spec) if (ww is not None and mean_spec is not None) else None
        f_mean = float(np.mean(factor[acc])) if pre.normalise != "none" or pre.pulse_energy_normalise else 1.0
        for li in range(len(setup.lines)):
            rows.append(
                _line_row(setup, s, sid, role, li, inten[acc, li], sat[acc, li], setup.masked_line[acc, li],
                          mean_spec, u_noise_win, f_mean, fits, flag_nm)
            )
    table = pd.DataFrame(rows, columns=LINE_TABLE_COLUMNS)
    prov = {
        "run_path": str(run.path),
        "run_sha256": run.sha256(),
        **method.provenance(),
        "settings_sha256": method.settings_digest(),
        "chunk_shots": chunk,
        "dark": "none" if setup.dark is None else f"{pre.dark_statistic} of dark frames x {setup.dark_scale:.6g}",
        "response": "none" if setup.response is None else (pre.response_file or "run response"),
        "saturation_threshold": setup.sat_threshold,
        "baseline": pre.baseline,
        "baseline_params": dict(pre.baseline_params),
        "normalise": pre.normalise,
        "pulse_energy_normalise": pre.pulse_energy_normalise,
        "shift": pre.shift,
        "shift_model": pre.shift_model,
        "medium": {"method": setup.method.medium, "run": getattr(run, "medium", "air"), "note": setup.medium_note},
        "masked_ranges": len(setup.masked_ranges),
        "wavelength_references": ref_rows,
        "qc": {
            "enabled": pre.qc,
            "quantity": pre.qc_quantity,
            "k": pre.qc_k,
            "min_fraction": pre.qc_min_fraction,
            "min_signal": pre.qc_min_signal,
        },
        "notes": list(setup.notes),
    }
    from compquant import __version__

    prov["compquant_version"] = __version__
    return LineMeasurement(
        table=table,
        qc=pd.DataFrame(qc_rows),
        shifts=pd.DataFrame(shift_rows, columns=SHIFT_TABLE_COLUMNS),
        references=pd.DataFrame(ref_rows, columns=REFERENCE_TABLE_COLUMNS),
        masked_pixels=_masked_table(setup),
        provenance=prov,
        line_ids=line_ids,
        shot_sample=setup.sample_index,
        shot_number=np.asarray(setup.shot_number),
        shot_intensity=inten,
        shot_accepted=accepted,
        shot_saturated=sat,
        shot_reasons=reasons,
        sample_ids=setup.sample_ids,
        wavelength=setup.wl,
        mean_spectra={setup.sample_ids[s]: m for s, m in means.items()},
        fits={(setup.sample_ids[s], g): f for (s, g), f in fits.items()},
    )


def measure_lines(
    run, method: Method, chunk_shots: int | None = None, progress=None, chunk_mapper=None, threads: int = 1
) -> pd.DataFrame:
    """The line table of :func:`measure_run` (docs/architecture.md columns)."""
    return measure_run(
        run, method, chunk_shots=chunk_shots, progress=progress, chunk_mapper=chunk_mapper, threads=threads
    ).table


def mean_spectrum(
    run, method: Method, sample_id: str, chunk_shots: int | None = None
) -> tuple[np.ndarray, np.ndarray, dict]:
    """Preprocessed mean spectrum of the accepted shots of one sample.

    Returns ``(wavelength, mean, info)``: ``wavelength`` corrected for the
    sample's shift (``lambda - delta``) when shift correction is on, ``mean``
    the mean over QC-accepted shots of the dark-, response- and
    baseline-corrected spectra (not normalised), and ``info`` with
    ``n_shots``, ``n_accepted``, ``shift_nm``.  Reads only that sample's shots.
    Shot QC is that of :func:`measure_run`; when its quantity is a line, the line's
    window integral at the table position is used.
    """
    setup = _Setup(run, method)
    pre = method.preprocess
    s = setup.sample_ids.index(sample_id) if sample_id in setup.sample_ids else None
    if s is None:
        from compquant.errors import InputError

        raise InputError(
            f"no sample {sample_id!r} in this run", where=str(run.path), fix="list the samples with 'compquant inspect'"
        )
    rows = np.flatnonzero(setup.sample_index == s)
    plan = setup.base_plan()
    plan.measure_windows = False
    plan.accumulate = False
    chunk = _chunk_size(run, chunk_shots, method)
    spectra_sum = np.zeros(setup.wl.size)
    totals = np.empty(rows.size)
    # the sample's shots may not be contiguous: read runs of consecutive rows.  Two passes
    # (QC quantities, then the sum of accepted shots) keep memory at one chunk.
    breaks = np.flatnonzero(np.diff(rows) != 1) + 1
    pieces = [seg[a : a + chunk] for seg in np.split(rows, breaks) for a in range(0, seg.size, chunk)]
    qc_weights = plan.total_weights
    if pre.qc_quantity != "total":
        # QC on a line: its window integral at the table position (fit-mode lines too)
        li = [ln.line_id for ln in setup.lines].index(pre.qc_quantity)
        qc_weights = build_window_weights(setup.wl, [setup.geometry(li, None)]).W[:, 0]
    pos = 0
    hits: list = []  # masked ranges (row, first, last), for the error when no shot is usable
    for sub in pieces:
        raw = run.read_raw(int(sub[0]), int(sub[-1]) + 1)
        bad = find_masked(raw)
        if bad is not None:
            hits += [(int(sub[r]), a, b) for r, a, b in masked_ranges(bad)]
        y = _preprocessed(raw, plan)
        totals[pos : pos + sub.size] = y @ qc_weights
        pos += sub.size
    qc_x = totals
    if pre.pulse_energy_normalise and setup.pulse is not None:
        e = setup.pulse
        qc_x = totals / (e[rows] / np.nanmedian(e))
    dec = _qc_decide(pre, qc_x, setup.pulse, rows)
    if not dec.accepted.any():
        raise _all_rejected_error(setup, run, s, rows, dec, hits)
    pos = 0
    for sub in pieces:
        m = dec.accepted[pos : pos + sub.size]
        pos += sub.size
        if not m.any():
            continue
        y = _preprocessed(run.read_raw(int(sub[0]), int(sub[-1]) + 1), plan)
        spectra_sum += y[m].sum(axis=0)
    mean = spectra_sum / dec.accepted.sum()
    d = 0.0
    wl = setup.wl
    if pre.shift != "none":
        c = _sample_correction(setup, mean)
        if c.applied:
            d = float(c.a)
            wl = setup.wl - np.asarray(c.shift_at(setup.wl))
    return wl, mean, {"n_shots": int(rows.size), "n_accepted": int(dec.accepted.sum()), "shift_nm": d}


def _preprocessed(raw, plan: ChunkPlan) -> np.ndarray:
    y = np.asarray(raw).astype(np.float64, copy=True)
    bad = find_masked(np.asarray(raw))
    if plan.dark is not None:
        y -= plan.dark
    if plan.inv_response is not None:
        y *= plan.inv_response
    if bad is not None:  # bridged after dark and response, as process_chunk does
        repair_masked(y, bad)
    if plan.baseline != "none":
        y -= estimate_baseline(y, plan.baseline, **plan.baseline_params)
    return y
