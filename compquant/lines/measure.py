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

import os
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from compquant.lines import shotstore
from compquant.lines._passes import (
    WindowPass,
    _find_shifts,
    fit_pass,
    window_pass,
)
from compquant.lines._setup import _chunk_size, _Setup
from compquant.lines._table import (
    FLAG_ORDER,
    LINE_TABLE_COLUMNS,
    REFERENCE_TABLE_COLUMNS,
    SHIFT_TABLE_COLUMNS,
    SHOT_TABLE_COLUMNS,
    _all_rejected_error,
    _masked_notes,
    _masked_table,
    _provenance,
    _qc_decide,
    _qc_row,
    _reference_rows,
    _SampleRows,
    _shift_row,
    sample_rows,
)
from compquant.lines.mean import mean_spectrum
from compquant.lines.shotstore import ShotArray, spill_cells
from compquant.lines.shotview import ShotView
from compquant.method import Method

__all__ = [
    "FLAG_ORDER",
    "LINE_TABLE_COLUMNS",
    "REFERENCE_TABLE_COLUMNS",
    "SHIFT_TABLE_COLUMNS",
    "SHOT_TABLE_COLUMNS",
    "LineMeasurement",
    "mean_spectrum",
    "measure_lines",
    "measure_run",
]


@dataclass
class LineMeasurement:
    """All results of :func:`measure_run`.

    Statistics per (sample, line) are over the shots accepted by shot QC: ``intensity`` the
    mean of the per-shot intensities (after normalisation; energy units, docs/architecture.md),
    ``sd_shots`` their standard deviation (ddof = 1) and ``u_intensity`` the standard uncertainty
    of the mean, ``u = sd / sqrt(n)`` for window lines and ``u = sqrt(sd^2 / n + u_shape^2)`` for
    fitted lines (JCGM 100:2008, 4.2.3 type A; module docstring); ``snr = intensity / u``.

    Attributes
    ----------
    table : DataFrame
        The line table, one row per (sample, line): ``sample_id, role, line_id, element, ion,
        wavelength_nm, intensity, u_intensity, sd_shots, n_shots, centre_nm, fwhm_nm, snr, flags``
        (wavelengths in nm).
    qc : DataFrame
        The shot-QC report, one row per sample: ``sample_id, role, n_shots, n_accepted,
        n_rejected, reasons, qc_quantity, qc_median, qc_robust_sd``.
    shifts : DataFrame
        The wavelength correction found per sample (``shift_nm``, ``dispersion_nm_per_nm``, their
        uncertainties, status ...).
    provenance : dict
        Run, method and settings the numbers came from (SHA-256 of the run and method).
    line_ids : list of str
        The method's lines, in method order (the columns of the per-shot arrays).
    shot_sample, shot_number : (n_shots,) int arrays
        Sample index and shot number of each shot.
    shot_intensity : (n_shots, n_lines) float64 array
        Per-shot line intensities, normalised.
    shot_accepted : (n_shots,) bool array
        Shot-QC decision.
    shot_saturated : (n_shots, n_lines) bool array
        Whether the line's pixels were saturated in the shot (raw counts at or above the
        saturation level).
    shot_reasons : list of str
        Why each shot was rejected (empty when accepted).
    sample_ids : list of str
    wavelength : (n_pixels,) float64 array, nm
    mean_spectra : dict
        Per sample, the preprocessed mean of all its shots from the first pass (shot QC is decided
        after it); the mean of the accepted shots alone: :func:`mean_spectrum`.
    fits : dict
        Fit results of ``mode = "fit"`` line groups (:class:`compquant.lines.fit.GroupFit`), by
        ``(sample_id, group)``: ``group`` is an index into ``fit_groups``.
    fit_groups : list of list of int
        The groups of ``mode = "fit"`` lines fitted together, each the indices of its lines in
        ``line_ids`` (grouped by their ``group`` name, else by overlapping fit windows).
    references : DataFrame
        Each wavelength reference's found centre: ``sample_id, reference_nm, found_nm,
        residual_nm, status``.
    masked_pixels : DataFrame
        ``sample_id, shot, first_pixel, last_pixel`` of masked pixel ranges met.

    See Also
    --------
    measure_run : makes it.
    mean_spectrum : the mean spectrum of a sample's accepted shots.

    References
    ----------
    .. [1] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 4.2.3 (type A standard uncertainty of the mean).
    .. [2] Ryan, Clayton, Griffin, Sie & Cousens, Nucl. Instrum. Meth. B 34
       (1988) 396-402 (SNIP baseline); Morhac et al., Nucl. Instrum. Meth. A 401 (1997) 113-132
       (decreasing window).
    .. [3] Eilers & Boelens (2005), "Baseline correction with asymmetric least
       squares smoothing" (AsLS baseline); Baek, Park, Ahn & Choo, Analyst 140
       (2015) 250-257 (arPLS baseline).
    .. [4] Rousseeuw & Croux, J. Am. Stat. Assoc. 88 (1993) 1273-1283 (1.4826 MAD, shot QC).
    .. [5] Olivero & Longbothum, J. Quant. Spectrosc. Radiat. Transfer 17 (1977) 233-236
       (Voigt FWHM of fitted lines); Press et al., Numerical Recipes, 3rd ed., 15.5 (fit
       covariance).
    .. [6] compquant documentation: docs/architecture.md (line table and flags).
    """

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
    # per sample, the preprocessed mean of ALL its shots from the first pass (shot QC is decided
    # after it); the mean of the accepted shots alone: mean_spectrum()
    mean_spectra: dict[str, np.ndarray] = field(default_factory=dict, repr=False)
    fits: dict = field(default_factory=dict, repr=False)
    fit_groups: list[list[int]] = field(default_factory=list, repr=False)
    references: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=REFERENCE_TABLE_COLUMNS))
    masked_pixels: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=["sample_id", "shot", "first_pixel", "last_pixel"])
    )

    @property
    def shot_view(self) -> ShotView:
        """The per-shot table kept as the compact arrays (:class:`compquant.lines.shotview.ShotView`):
        per-sample frames of one line and row blocks of the long table, built only when asked for,
        so memory does not grow with shots x lines."""
        return ShotView(self.sample_ids, self.line_ids, self.shot_sample, self.shot_number,
                        self.shot_intensity, self.shot_accepted, self.shot_saturated)

    @property
    def shots(self) -> pd.DataFrame:
        """Per-shot table: sample_id, shot, line_id, intensity, accepted, saturated (long form).

        Built whole in memory (about 35 bytes per shot x line); the steps of the tool use
        :attr:`shot_view` instead."""
        return self.shot_view.to_frame()

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


def measure_run(
    run, method: Method, chunk_shots: int | None = None, progress=None, chunk_mapper=None,
    threads: int | None = None, spill: bool | None = None, spill_dir=None,
) -> LineMeasurement:
    """Preprocess every shot of ``run`` and measure the method's lines (module docstring).

    Streams ``chunk_shots`` shots at a time: dark and response correction, baseline removal (SNIP,
    AsLS or arPLS), optional wavelength-shift correction, then window integration minus a local
    linear background (``mode = "window"``) or a least-squares profile fit (``mode = "fit"``),
    shot QC (a shot is rejected when ``|x - median(x)| > k * 1.4826 * MAD(x)`` or when it fails the
    minimum-signal rule) and normalisation.  Per
    (sample, line) over the accepted shots, ``intensity`` is the mean of the per-shot intensities
    and ``u_intensity = sd / sqrt(n)`` (window lines) or ``sqrt(sd^2 / n + u_shape^2)`` (fitted
    lines), JCGM 100:2008, 4.2.3 type A.  Intensities are in the project's energy units
    (docs/architecture.md), wavelengths in nm.

    Parameters
    ----------
    run : compquant.run.Run (open)
    method : compquant.method.Method
    chunk_shots : shots per streamed chunk (default ``[measure] chunk_shots``, 4096); peak
        memory grows about ``chunk_shots * n_pixels * 24`` bytes, plus about 10 bytes per shot x line
        (the float64 ``shot_intensity`` and two bool flag arrays) unless they are spilled.
    progress : callable(n_shots_done_in_step) or None, called once per chunk and pass.
    chunk_mapper : None (serial) or ``callable(run, ranges, plan)`` yielding
        :func:`~compquant.lines.chunk.process_chunk` results in range order, e.g. on Dask
        workers (:func:`compquant.parallel.chunk_mapper`); the results are the same.
    threads : worker threads for the serial path (each chunk split into ``threads`` row
        ranges processed concurrently; numpy and the compiled kernel release the GIL); the
        results are the same.  None (default): :func:`default_threads` -- the idle cores (at
        most 8, by the load average) for a run stored uncompressed measured by the compiled
        kernel, else 1 (a gzip run's decompression already runs on the other cores,
        docs/performance.md).
    spill : write the per-shot x per-line arrays to a file as the chunks arrive and read them
        back in bounded blocks (:class:`compquant.lines.shotstore.ShotArray`), so peak memory does
        not grow with shots x lines; ``shot_intensity`` and ``shot_saturated`` are then read-only
        memory maps of the (already unlinked) file.  None (default): spill when the run has more
        than ``COMPQUANT_SPILL_CELLS`` (2,000,000) shot x line cells.  The numbers are the same.
    spill_dir : folder of the spill file (default ``COMPQUANT_SPILL_DIR``, else the system's temp dir).

    Returns
    -------
    LineMeasurement
        The line table, the per-shot arrays, the shot-QC report per sample, the wavelength shifts
        found and the provenance.

    Raises
    ------
    MethodError : a line outside the run's range, settings that do not fit the run.
    DataQualityError : every shot of a sample rejected by shot QC (names the sample).

    See Also
    --------
    mean_spectrum : the preprocessed mean spectrum of one sample.
    compquant.lines.measure_lines : the same, returning only the line table.

    References
    ----------
    .. [1] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 4.2.3 (type A standard uncertainty of the mean).
    .. [2] Ryan, Clayton, Griffin, Sie & Cousens, Nucl. Instrum. Meth. B 34
       (1988) 396-402 (SNIP baseline); Morhac et al., Nucl. Instrum. Meth. A 401 (1997) 113-132
       (decreasing window).
    .. [3] Eilers & Boelens (2005), "Baseline correction with asymmetric least
       squares smoothing" (AsLS baseline); Baek, Park, Ahn & Choo, Analyst 140
       (2015) 250-257 (arPLS baseline).
    .. [4] Rousseeuw & Croux, J. Am. Stat. Assoc. 88 (1993) 1273-1283 (1.4826 MAD, shot QC).
    .. [5] Olivero & Longbothum, J. Quant. Spectrosc. Radiat. Transfer 17 (1977) 233-236
       (Voigt FWHM of fitted lines); Press et al., Numerical Recipes, 3rd ed., 15.5 (fit
       covariance).
    .. [6] compquant documentation: docs/method-file.md (``[preprocess.*]``, ``[measure]``) and
       docs/architecture.md (line table).

    Examples
    --------
    >>> from compquant import Run, load_method, measure_run
    >>> with Run.open("demo_runs/demo-day1.h5") as run:
    ...     m = measure_run(run, load_method("demo_runs/method.toml"))
    >>> list(m.table.columns[:4])
    ['sample_id', 'role', 'line_id', 'element']
    """
    setup = _Setup(run, method)
    setup.threads = default_threads(run, setup) if threads is None else max(1, int(threads))
    chunk = _chunk_size(run, chunk_shots, method)
    hashing = _hash_in_background(run)  # the provenance's SHA-256, while the passes run
    if method.preprocess.shift != "none":  # pass 0: per-sample wavelength corrections
        setup.corr.update(_find_shifts(run, setup, chunk, progress, chunk_mapper))
    # the per-shot x per-line arrays, in memory or spilled to a file (compquant.lines.shotstore):
    # raw intensities in method line order, filled by both passes and normalised in place
    n_shots, n_lines = run.n_shots, len(setup.lines)
    spill = n_shots * n_lines > spill_cells() if spill is None else bool(spill)
    per_shot = ShotArray(n_shots, n_lines, np.float64, np.nan, spill, spill_dir)
    sat = ShotArray(n_shots, n_lines, bool, False, spill, spill_dir)
    setup.masked_line = ShotArray(n_shots, n_lines, bool, False, spill, spill_dir)
    try:
        p1 = window_pass(run, setup, chunk, per_shot, sat, progress, chunk_mapper)
        fits = fit_pass(run, setup, chunk, p1.means, per_shot, sat, progress, chunk_mapper)
        setup.notes += _masked_notes(setup)
        if hashing is not None:
            hashing.join()
        return _aggregate(setup, run, per_shot, sat, p1, fits, chunk)
    finally:
        for a in (per_shot, sat, setup.masked_line):
            a.close()


#: most threads :func:`default_threads` gives (each splits a chunk of 4,096 shots)
MAX_DEFAULT_THREADS = 8


def default_threads(run, setup) -> int:
    """Threads of the serial path when ``measure_run(threads=None)``.

    The cores that are idle, ``clamp(int(cores + 1 - load), 1, min(cores, 8))`` with ``load``
    the 1-minute load average (counting this process's own thread, as GNU make's
    ``--load-average`` limits its jobs), when the run's spectra are stored unfiltered
    (:func:`compquant.run.fastread.stored_unfiltered`: reading is a copy, the per-shot kernel
    is the work) and the compiled kernel runs (one shot at a time: any split of a chunk gives
    the same bits); otherwise 1, because decompressing a gzip run already keeps the other cores
    busy (:mod:`compquant.run.fastread`) and the NumPy path's blocks are not split by default.
    Measured 2026-12-02 on a 2-core machine shared with other jobs (load average 5-8): a second
    kernel thread there gave 0.8-1.0x the wall time of one and 3-30 % more CPU, so threads are
    only worth starting on cores nobody else uses (docs/performance.md).
    Inside a Dask worker (one per core already) it is 1.  ``COMPQUANT_THREADS`` (an integer
    >= 1) overrides.  The numbers never depend on it.
    """
    env = os.environ.get("COMPQUANT_THREADS", "").strip()
    if env.isdigit() and int(env) >= 1:
        return int(env)
    from compquant.lines.chunk import use_compiled
    from compquant.run.fastread import stored_unfiltered

    if not (stored_unfiltered(run) and use_compiled(setup.base_plan())) or _in_dask_worker():
        return 1
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # not on Linux
        cores = os.cpu_count() or 1
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):  # no load average on this system: assume idle cores
        load = 0.0
    return max(1, min(MAX_DEFAULT_THREADS, cores, int(cores + 1 - load)))


def _in_dask_worker() -> bool:
    """True inside a Dask worker (each worker process has its core: no extra kernel threads)."""
    import sys

    dist = sys.modules.get("distributed")
    if dist is None:
        return False
    try:
        dist.get_worker()
    except (ValueError, AttributeError):
        return False
    return True


def _hash_in_background(run):
    """Start ``run.sha256()`` (cached by the run) in a thread: hashing releases the GIL, so the
    file's SHA-256 for the provenance costs no time on the critical path (about 2.4 ms per MB,
    0.8 s of client CPU for a 340 MB run on Dask workers).  None when the run has no ``sha256``."""
    if not callable(getattr(run, "sha256", None)) or hasattr(run, "_sha"):
        return None
    import threading

    def work():
        try:
            run.sha256()
        except Exception:  # the provenance step calls it again and reports the error there
            pass

    t = threading.Thread(target=work, name="compquant-sha256", daemon=True)
    t.start()
    return t


def measure_lines(
    run, method: Method, chunk_shots: int | None = None, progress=None, chunk_mapper=None, threads: int | None = None
) -> pd.DataFrame:
    """The line table of :func:`measure_run` (docs/architecture.md columns)."""
    return measure_run(
        run, method, chunk_shots=chunk_shots, progress=progress, chunk_mapper=chunk_mapper, threads=threads
    ).table


def _shot_factors(setup: _Setup, per_shot, total, bg) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Per-shot normalisation factor (``[preprocess] normalise``, times the pulse-energy factor when
    asked) and the pulse-energy factor alone, from the raw intensities; None stands for a factor
    of 1 for every shot (no per-shot vector is kept: dividing by 1 changes no number)."""
    pre = setup.method.preprocess
    factor = None
    if pre.normalise == "total_area":
        factor = total.copy()
    elif pre.normalise == "background":
        factor = bg.copy()
    elif pre.normalise == "internal_standard":
        factor = per_shot.column(_line_index(setup, pre.normalise_line))
    pulse_f = None
    if pre.pulse_energy_normalise:
        e = setup.pulse
        ref = float(np.nanmedian(e)) if np.isfinite(e).any() else np.nan
        pulse_f = e / ref if np.isfinite(ref) and ref > 0 else np.ones(per_shot.shape[0])
        factor = pulse_f.copy() if factor is None else factor * pulse_f
    return factor, pulse_f


def _line_index(setup: _Setup, line_id: str) -> int:
    return [ln.line_id for ln in setup.lines].index(line_id)


def _qc_quantity(setup: _Setup, per_shot, total, pulse_f, good_f) -> np.ndarray:
    """The shot-QC quantity per shot (``[preprocess.qc] quantity``: the total or one line's raw
    intensity, over the pulse-energy factor; ``pulse_f`` None: 1); NaN where the normalisation
    factor is unusable (``good_f`` None: every factor is usable)."""
    pre = setup.method.preprocess
    with np.errstate(divide="ignore", invalid="ignore"):
        if pre.qc_quantity != "total":
            qc_x = per_shot.column(_line_index(setup, pre.qc_quantity))
            if pulse_f is not None:
                qc_x /= pulse_f
        elif pulse_f is not None:
            qc_x = total / np.where(np.isfinite(pulse_f) & (pulse_f > 0), pulse_f, np.nan)
        else:
            qc_x = total  # read only from here on
    return qc_x if good_f is None else np.where(good_f, qc_x, np.nan)


def _normalise_in_place(per_shot: ShotArray, factor: np.ndarray) -> np.ndarray:
    """Divide each shot's raw intensities by its factor, in place (NaN for shots whose factor is not
    finite and positive); returns the mask of usable factors.  Same arithmetic as
    ``np.where(good, raw / np.where(good, factor, 1), nan)``, without a shots x lines temporary."""
    good_f = np.isfinite(factor) & (factor > 0)
    div = np.where(good_f, factor, 1.0)

    def fn(block, a, b):
        with np.errstate(divide="ignore", invalid="ignore"):
            np.divide(block, div[a:b, None], out=block)
        block[~good_f[a:b]] = np.nan

    per_shot.update_rows(fn)
    return good_f


def _line_blocks(n_lines: int, n_rows: int) -> list[range]:
    """Line columns in blocks of at most ``shotstore.BLOCK_BYTES`` of float64 for ``n_rows`` rows."""
    step = max(1, shotstore.BLOCK_BYTES // (8 * max(1, n_rows)))
    return [range(a, min(n_lines, a + step)) for a in range(0, n_lines, step)]


def _per_sample(setup: _Setup, run, inten, sat, qc_x, factor, means, fits, ww_shared, ww_by_sample):
    """Shot QC and the line-table rows of every sample: ``(accepted, reasons, qc_rows, rows,
    shift_rows, ref_rows)``.  DataQualityError when a sample has no accepted shot.  The rows of a
    sample's lines are made together (:func:`compquant.lines._table.sample_rows`: the statistics of
    every line at once, the same numbers as line by line)."""
    pre = setup.method.preprocess
    n_shots = inten.shape[0]
    accepted = np.zeros(n_shots, dtype=bool)
    reasons = np.full(n_shots, "", dtype=object)
    qc_rows, rows, shift_rows, ref_rows = [], [], [], []
    flag_nm = pre.shift_flag_nm if pre.shift_flag_nm else setup.pitch
    roles = [str(r) for r in setup.samples["role"]]
    for s, sid in enumerate(setup.sample_ids):
        role = roles[s]
        idx = np.flatnonzero(setup.sample_index == s)
        if idx.size == 0:
            continue
        dec = _qc_decide(pre, qc_x[idx], setup.pulse, idx)
        accepted[idx] = dec.accepted
        reasons[idx] = dec.reasons
        qc_rows.append(_qc_row(pre, sid, role, idx, dec))
        if not dec.accepted.any():
            raise _all_rejected_error(setup, run, s, idx, dec)
        shift_rows.append(_shift_row(setup, s, sid, flag_nm))
        ref_rows += _reference_rows(setup, s, sid)
        acc = idx[dec.accepted]
        f_mean = float(np.mean(factor[acc])) if pre.normalise != "none" or pre.pulse_energy_normalise else 1.0
        ctx = _SampleRows(setup, s, sid, role, means.get(s), ww_by_sample.get(s, ww_shared), f_mean, fits, flag_nm)
        for cols in _line_blocks(len(setup.lines), acc.size):
            sel = slice(cols.start, cols.stop)
            rows += sample_rows(ctx, cols, inten.take(acc, sel), sat.take(acc, sel), setup.masked_line.take(acc, sel))
    return accepted, reasons.tolist(), qc_rows, rows, shift_rows, ref_rows


def _aggregate(setup: _Setup, run, per_shot: ShotArray, sat: ShotArray, p1: WindowPass, fits,
               chunk) -> LineMeasurement:
    """Normalise the per-shot intensities (in place: ``per_shot`` becomes the result's
    ``shot_intensity``), run shot QC and build the line table of every sample."""
    total, means = p1.total, p1.means
    factor, pulse_f = _shot_factors(setup, per_shot, total, p1.background)
    good_f = None if factor is None else np.isfinite(factor) & (factor > 0)
    qc_x = _qc_quantity(setup, per_shot, total, pulse_f, good_f)  # from the raw intensities
    if factor is not None:
        _normalise_in_place(per_shot, factor)
    accepted, reasons, qc_rows, rows, shift_rows, ref_rows = _per_sample(
        setup, run, per_shot, sat, qc_x, factor, means, fits, p1.ww_shared, p1.ww_by_sample)
    return LineMeasurement(
        table=pd.DataFrame(rows, columns=LINE_TABLE_COLUMNS),
        qc=pd.DataFrame(qc_rows),
        shifts=pd.DataFrame(shift_rows, columns=SHIFT_TABLE_COLUMNS),
        references=pd.DataFrame(ref_rows, columns=REFERENCE_TABLE_COLUMNS),
        masked_pixels=_masked_table(setup),
        provenance=_provenance(setup, run, chunk, ref_rows),
        line_ids=[ln.line_id for ln in setup.lines],
        shot_sample=setup.sample_index,
        shot_number=np.asarray(setup.shot_number),
        shot_intensity=per_shot.result(),
        shot_accepted=accepted,
        shot_saturated=sat.result(),
        shot_reasons=reasons,
        sample_ids=setup.sample_ids,
        wavelength=setup.wl,
        mean_spectra={setup.sample_ids[s]: m for s, m in means.items()},
        fits={(setup.sample_ids[s], g): f for (s, g), f in fits.items()},
        fit_groups=[list(g) for g in setup.groups],
    )
