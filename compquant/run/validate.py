"""Validation of a run beyond its structure: data findings and a summary.

:meth:`Run.open` already refuses runs whose *structure* is broken (format
name or version, missing datasets, shapes, wavelength order, sample table).
:func:`validate_run` adds what can only be seen in the data, streaming the
spectra in chunks: masked pixels (NaN, infinite, sentinel or implausible values, and
pixels masked in the file; listed by pixel range, reason and shot), negative or all-zero shots,
saturated pixels per sample, samples without shots, and missing dark frames
or standards.  Findings are warnings or errors; an error means the run cannot
give a trustworthy result as it is.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from compquant.errors import CompquantError, ResourceLimitError
from compquant.run.format import DEFAULT_CHUNK_SHOTS
from compquant.run.mask import (
    REASON_NONFINITE,
    REASON_SENTINEL,
    REASON_STORED,
    describe_range,
    describe_shots,
    pixel_ranges,
    reason_codes,
)
from compquant.run.reader import Run


@dataclass(frozen=True)
class Finding:
    """One validation finding."""

    level: str  # "error" | "warning" | "info"
    where: str
    message: str

    def to_dict(self) -> dict:
        return asdict(self)


def scan_spectra(run: Run, chunk_shots: int = DEFAULT_CHUNK_SHOTS) -> dict:
    """Stream over all shots once and count, per sample, masked values (non-finite, sentinel or
    implausible values, and pixels masked in the file), negative and all-zero shots, and
    saturated pixels (value >= the run's saturation level).

    Returns a dict of per-sample integer arrays (index = sample row), run totals, and
    ``masked``: per sample a list of ``(first_pixel, last_pixel, reason, shot numbers)``.
    """
    n_s = len(run.samples)
    idx_all = run.shots["sample_index"].to_numpy()
    shot_no = run.shots["shot"].to_numpy()
    out = {k: np.zeros(n_s, dtype=np.int64) for k in
           ("nonfinite_values", "masked_values", "negative_shots", "zero_shots", "saturated_pixels",
            "saturated_shots")}
    masked: list[dict] = [{} for _ in range(n_s)]
    total_min, total_max = np.inf, -np.inf
    if chunk_shots < 1:
        raise ResourceLimitError(f"chunk size {chunk_shots} is not positive", where="chunk_shots",
                                 fix="use a chunk size of at least 1 shot")
    for start in range(0, run.n_shots, int(chunk_shots)):
        stop = min(run.n_shots, start + int(chunk_shots))
        raw = run.read_raw(start, stop, masked=False)
        block = np.asarray(raw, dtype=np.float64)
        idx = idx_all[start:stop]
        bad = run.mask_rows(np.arange(start, stop), raw)
        finite = np.isfinite(block)
        if bad is not None:
            np.add.at(out["masked_values"], idx, bad.sum(axis=1))
            _collect_masked(masked, block, raw, bad, run, np.arange(start, stop), idx, shot_no)
        good = finite if bad is None else (finite & ~bad)
        np.add.at(out["nonfinite_values"], idx, (~finite).sum(axis=1))
        clean = np.where(good, block, 0.0)
        neg = (clean < 0).any(axis=1) & (clean.sum(axis=1) < 0)
        zero = good.all(axis=1) & (clean == 0).all(axis=1)
        np.add.at(out["negative_shots"], idx, neg.astype(np.int64))
        np.add.at(out["zero_shots"], idx, zero.astype(np.int64))
        if run.saturation is not None:
            sat = (clean >= run.saturation).sum(axis=1)
            np.add.at(out["saturated_pixels"], idx, sat)
            np.add.at(out["saturated_shots"], idx, (sat > 0).astype(np.int64))
        if good.any():
            total_min = min(total_min, float(clean[good].min()))
            total_max = max(total_max, float(clean[good].max()))
    out["min_value"] = total_min if np.isfinite(total_min) else None
    out["max_value"] = total_max if np.isfinite(total_max) else None
    out["masked"] = [[(a, b, r, sorted(shots)) for (a, b, r), shots in sorted(m.items())] for m in masked]
    return out


def _collect_masked(masked, block, raw, bad, run: Run, rows, idx, shot_no) -> None:
    """Add the masked pixel ranges of a block to ``masked[sample][(first, last, reason)] -> shots``.

    Rows with the same pattern of reasons are grouped (np.unique), so a dead pixel in every
    shot costs one range computation per block.
    """
    codes = reason_codes(raw, bad)
    if not run.mask.empty:
        stored = run.mask.rows(rows)
        if stored is not None:
            codes[stored] = 3
    hit = np.flatnonzero(bad.any(axis=1))
    pats, inv = np.unique(codes[hit], axis=0, return_inverse=True)
    names = {1: REASON_NONFINITE, 2: REASON_SENTINEL, 3: REASON_STORED}
    for k, pat in enumerate(pats):
        members = hit[np.asarray(inv).reshape(-1) == k]
        for code, reason in names.items():
            for a, b in pixel_ranges(pat == code):
                for i in members:
                    masked[int(idx[i])].setdefault((a, b, reason), set()).add(int(shot_no[rows[i]]))


def masked_findings(run: Run, scan: dict, limit: int = 8) -> list[Finding]:
    """One warning per sample with masked pixels, listing pixel ranges, reasons and shots."""
    out = []
    for i, row in run.samples.iterrows():
        items = scan["masked"][i]
        if not items:
            continue
        parts = [f"{describe_range(a, b, run.wavelength)} {reason} in {describe_shots(shots)}"
                 for a, b, reason, shots in items[:limit]]
        more = f"; and {len(items) - limit} more range(s)" if len(items) > limit else ""
        out.append(Finding("warning", f"{run.path}: sample {row['sample_id']!r}",
                           f"{int(scan['masked_values'][i])} masked pixel values: " + "; ".join(parts) + more
                           + " (never integrated or fitted: lines touching them are flagged 'masked' or not measured)"))
    return out


def validate_open_run(run: Run, chunk_shots: int = DEFAULT_CHUNK_SHOTS) -> tuple[list[Finding], dict]:
    """Findings and the scan summary of an already opened run."""
    where = str(run.path)
    findings: list[Finding] = []
    scan = scan_spectra(run, chunk_shots)
    roles = run.samples["role"].tolist()
    for i, row in run.samples.iterrows():
        sid = row["sample_id"]
        sw = f"{where}: sample {sid!r}"
        if row["n_shots"] == 0:
            findings.append(Finding("warning", sw, "has no shots"))
        elif row["n_shots"] == 1:
            findings.append(Finding("warning", sw, "has a single shot: uncertainties come from the fit alone"))
        if scan["masked_values"][i] and scan["masked_values"][i] >= row["n_shots"] * run.n_pixels:
            findings.append(Finding("error", sw, "every pixel of every shot is masked (NaN, infinite, sentinel "
                                                 "or implausible values); re-export the run from the instrument"))
        if scan["zero_shots"][i]:
            findings.append(Finding("warning", sw, f"{int(scan['zero_shots'][i])} shots are all zero "
                                                   "(shot QC will reject them)"))
        if scan["negative_shots"][i]:
            findings.append(Finding("warning", sw, f"{int(scan['negative_shots'][i])} shots have a negative "
                                                   "total: is the dark already subtracted twice?"))
        if scan["saturated_shots"][i]:
            frac = scan["saturated_shots"][i] / max(1, row["n_shots"])
            level = "error" if frac == 1.0 and row["n_shots"] > 0 else "warning"
            findings.append(Finding(level, sw, f"{int(scan['saturated_pixels'][i])} saturated pixels in "
                                               f"{int(scan['saturated_shots'][i])} of {int(row['n_shots'])} "
                                               "shots (lines touching them are flagged)"))
    findings += masked_findings(run, scan)
    if run._dark is None:
        findings.append(Finding("warning", where, "no dark frames: dark subtraction is not possible "
                                                  "(only baseline removal will act)"))
    if run.saturation is None:
        findings.append(Finding("info", where, "no saturation level stated: saturated lines cannot be flagged"))
    if "standard" not in roles:
        findings.append(Finding("info", where, "no certified standards in this run: quantify with a saved "
                                               "calibration or calibration-free"))
    if "blank" not in roles:
        findings.append(Finding("info", where, "no blank: LOD will come from the calibration residuals"))
    return findings, scan


def validate_run(path, memory_limit_bytes: int | None = None,
                 chunk_shots: int = DEFAULT_CHUNK_SHOTS) -> list[Finding]:
    """Validate a run file; structural problems come back as a single error finding.

    Opening the run (:meth:`Run.open`) already refuses runs whose structure is broken; this adds
    what can only be seen in the data, streaming the spectra in chunks of ``chunk_shots`` shots:
    masked pixels (NaN, infinite, sentinel or implausible values, and pixels masked in the file;
    listed by pixel range, reason and shot), negative or all-zero shots, saturated pixels per
    sample, samples without shots, and missing dark frames or standards.

    Parameters
    ----------
    path : str or path-like
        The run file.
    memory_limit_bytes : int, optional
        Memory limit of the reader, bytes (default ``COMPQUANT_MEMORY_LIMIT``).
    chunk_shots : int
        Shots read at a time.

    Returns
    -------
    list of Finding
        Each with ``level`` (``"error"``, ``"warning"`` or ``"info"``), ``where`` and ``message``;
        an error means the run cannot give a trustworthy result as it is.  A run that cannot be
        opened gives one error finding (its ``CompquantError`` message) instead of an exception.

    See Also
    --------
    Run : the reader and its structural checks.
    compquant.run.validate.summarise_run : the JSON-ready summary (``compquant inspect``).

    References
    ----------
    .. [1] The HDF Group, HDF5 file format specification (Hierarchical Data Format, version 5),
       and the HDF5 Dimension Scale specification.
    .. [2] NeXus International Advisory Committee (NIAC), NeXus "NXdata" base class (attributes
       ``signal``, ``axes``, ``<axis>_indices``).
    .. [3] compquant documentation: docs/run-format.md ("What the validator adds").

    Examples
    --------
    >>> from compquant import validate_run
    >>> [f.level for f in validate_run("demo_runs/demo-day1.h5") if f.level == "error"]
    []
    """
    try:
        with Run.open(path, memory_limit_bytes) as run:
            findings, _ = validate_open_run(run, chunk_shots)
            return findings
    except CompquantError as exc:
        return [Finding("error", exc.where or str(path), exc.what + (f"; {exc.fix}" if exc.fix else ""))]


def summarise_run(run: Run, chunk_shots: int = DEFAULT_CHUNK_SHOTS) -> dict:
    """A JSON-ready summary of an opened run: settings, axis, samples, saturation, findings."""
    findings, scan = validate_open_run(run, chunk_shots)
    samples = []
    for i, row in run.samples.iterrows():
        samples.append({
            "sample_id": row["sample_id"],
            "role": row["role"],
            "standard_ref": row["standard_ref"] or None,
            "description": row["description"],
            "n_shots": int(row["n_shots"]),
            "saturated_pixels": int(scan["saturated_pixels"][i]),
            "saturated_shots": int(scan["saturated_shots"][i]),
            "masked_values": int(scan["masked_values"][i]),
            "masked": [{"first_pixel": a, "last_pixel": b, "first_nm": float(run.wavelength[a]),
                        "last_nm": float(run.wavelength[b]), "reason": r, "shots": shots}
                       for a, b, r, shots in scan["masked"][i]],
        })
    dark = run._dark
    return {
        "path": str(run.path),
        "format": run.attrs.get("format"),
        "format_version": run.format_version,
        "created": run.attrs.get("created"),
        "instrument": run.instrument,
        "acquisition": run.acquisition,
        "wavelength": {
            "min_nm": float(run.wavelength[0]),
            "max_nm": float(run.wavelength[-1]),
            "n_pixels": run.n_pixels,
            "medium": run.medium,
            "mean_step_nm": float(np.mean(np.diff(run.wavelength))),
        },
        "spectra": {
            "n_shots": run.n_shots,
            "dtype": str(run.spectra_dtype),
            "saturation": run.saturation,
            "exposure_s": run.exposure_s,
            "min_value": scan["min_value"],
            "max_value": scan["max_value"],
            "masked_if": run.value_limits.describe(),
        },
        "dark": None if dark is None else {"n_frames": int(dark.shape[0]), "exposure_s": run.dark_exposure_s},
        "response": run._response is not None,
        "rastered": run.has_positions,
        "samples": samples,
        "findings": [f.to_dict() for f in findings],
    }


__all__ = ["Finding", "masked_findings", "scan_spectra", "summarise_run", "validate_open_run", "validate_run"]
