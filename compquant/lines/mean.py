"""The preprocessed mean spectrum of one sample (:func:`mean_spectrum`), for plots and identification."""

from __future__ import annotations

import numpy as np

from compquant.lines._passes import _sample_correction
from compquant.lines._setup import _chunk_size, _Setup
from compquant.lines._table import _all_rejected_error, _qc_decide
from compquant.lines.chunk import (
    ChunkPlan,
    find_masked,
    masked_ranges,
    repair_masked,
)
from compquant.lines.windows import (
    build_window_weights,
)
from compquant.method import Method
from compquant.preprocess.baseline import estimate_baseline


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

    The mean is ``S(lambda) = (1/n) sum_i s_i(lambda)`` over the ``n`` accepted shots ``i``
    (shot QC rejects a shot when ``|x - median(x)| > k * 1.4826 * MAD(x)`` or when it fails the
    minimum-signal rule), in the project's energy
    units (docs/architecture.md); it is what plots and :func:`compquant.identify_spectrum` use.

    Parameters
    ----------
    run : compquant.run.Run (open)
    method : compquant.method.Method
    sample_id : str
        The sample (a ``sample_id`` of ``run.samples``).
    chunk_shots : int, optional
        Shots read at a time (default ``[measure] chunk_shots``).

    Returns
    -------
    wavelength : (n_pixels,) float64 array, nm
    mean : (n_pixels,) float64 array
    info : dict
        ``n_shots``, ``n_accepted``, ``shift_nm``.

    Raises
    ------
    InputError
        No such sample in the run.
    DataQualityError
        Every shot of the sample rejected by shot QC.

    See Also
    --------
    measure_run : the line measurement over every sample.
    compquant.identify_spectrum : identify the elements in the mean spectrum.

    References
    ----------
    .. [1] Ryan, Clayton, Griffin, Sie & Cousens, Nucl. Instrum. Meth. B 34
       (1988) 396-402 (SNIP baseline); Eilers & Boelens (2005), "Baseline
       correction with asymmetric least squares smoothing"; Baek, Park, Ahn & Choo, Analyst 140 (2015) 250-257 (arPLS).
    .. [2] Rousseeuw & Croux, J. Am. Stat. Assoc. 88 (1993) 1273-1283 (1.4826 MAD, shot QC).
    .. [3] compquant documentation: docs/method-file.md (``[preprocess.*]``).

    Examples
    --------
    >>> from compquant import Run, load_method, mean_spectrum
    >>> with Run.open("demo_runs/demo-day1.h5") as run:
    ...     wl, mean, info = mean_spectrum(run, load_method("demo_runs/method.toml"), "HRM-CA-101")
    >>> wl.shape == mean.shape, sorted(info)[:2]
    (True, ['n_accepted', 'n_shots'])
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
