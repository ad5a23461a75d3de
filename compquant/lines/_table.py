"""Rows of the line, QC, shift and reference tables of :func:`compquant.lines.measure_run`,
the line flags (docs/architecture.md) and the provenance.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from compquant.errors import DataQualityError
from compquant.lines.wavecal import WavecalResult, noise_sd, peak_fwhm
from compquant.lines.windows import (
    peak_centre_fwhm,
)
from compquant.preprocess.qc import QCDecision, qc_decide
from compquant.run.mask import describe_range

if TYPE_CHECKING:
    from compquant.lines._setup import _Setup

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


def _qc_row(pre, sid: str, role: str, idx: np.ndarray, dec) -> dict:
    return {
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


def column_stats(v: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per column of ``v`` (shots x lines): the number of finite values, their mean and their
    standard deviation (``ddof = 1``; NaN below 2 values), for every column at once.

    The same numbers, bit for bit, as ``np.mean(x)`` and ``np.std(x, ddof=1)`` of each column's
    finite values ``x`` taken alone: the columns whose values are all finite are copied to the
    contiguous rows of one array and reduced along that last axis, which NumPy sums with the same
    pairwise summation, in the same order, as a 1-D array (checked bit for bit in
    tests/test_measure_table.py for 1 to 300,001 values); the other columns are reduced one by one.
    """
    v = np.asarray(v, dtype=np.float64)
    n, n_cols = v.shape
    ok = np.isfinite(v)
    nv = ok.sum(axis=0)
    mean = np.full(n_cols, np.nan)
    sd = np.full(n_cols, np.nan)
    full = nv == n
    if n and full.any():
        rows = np.ascontiguousarray((v if full.all() else v[:, full]).T)
        mean[full] = np.mean(rows, axis=1)
        if n >= 2:
            sd[full] = np.std(rows, axis=1, ddof=1)
    for j in np.flatnonzero(~full & (nv > 0)):
        x = v[ok[:, j], j]
        mean[j] = np.mean(x)
        if x.size >= 2:
            sd[j] = np.std(x, ddof=1)
    return nv, mean, sd


class _SampleRows:
    """What the rows of one sample share: every line's expected position (table wavelength plus the
    sample's correction), the window lines' pixel-noise uncertainty (computed only when a line
    has fewer than 2 shots: it is used nowhere else), the mean normalisation factor, the fits."""

    def __init__(self, setup: _Setup, s: int, sid: str, role: str, mean_spec, ww, f_mean: float, fits,
                 flag_nm: float):
        self.setup, self.s, self.sid, self.role = setup, s, sid, role
        self.mean_spec, self.ww, self.f_mean, self.fits, self.flag_nm = mean_spec, ww, f_mean, fits, flag_nm
        self.pos = np.array([ln.wavelength_nm + setup.shift_of(s, ln.wavelength_nm) for ln in setup.lines],
                            dtype=np.float64)
        self._u_noise = False

    def u_noise_win(self):
        if self._u_noise is False:
            ok = self.ww is not None and self.mean_spec is not None
            self._u_noise = self.ww.u_noise(self.mean_spec) if ok else None
        return self._u_noise

    def overlapped(self, li: int, lo: float, hi: float) -> bool:
        """Another line's expected position inside ``[lo, hi]``."""
        ln = self.setup.lines[li]
        hits = np.flatnonzero((lo <= self.pos) & (self.pos <= hi))
        return any(self.setup.lines[j] is not ln for j in hits)


def sample_rows(ctx: _SampleRows, cols, v: np.ndarray, sv: np.ndarray, mv: np.ndarray) -> list[dict]:
    """Rows of the line table for the lines ``cols`` of one sample (:func:`_line_row`), from the
    accepted shots' values ``v``, saturation ``sv`` and masked flags ``mv`` (shots x ``cols``);
    the statistics of all the lines at once (:func:`column_stats`)."""
    nv, mean, sd = column_stats(v)
    sat_any = np.asarray(sv).any(axis=0)
    masked_any = np.asarray(mv).any(axis=0)
    return [
        _line_row(ctx, li, int(nv[j]), float(mean[j]), float(sd[j]), bool(sat_any[j]), bool(masked_any[j]))
        for j, li in enumerate(cols)
    ]


def _line_row(ctx: _SampleRows, li: int, nv: int, intensity: float, sd: float, saturated: bool,
              masked: bool) -> dict:
    """One row of the line table: statistics over the accepted shots and the line's flags.

    ``intensity`` is the mean of the ``n`` accepted shots' values ``I_i`` and ``u_intensity`` its
    standard uncertainty, a GUM Type A evaluation (JCGM 100:2008, 4.2.3): ``u = s / sqrt(n)``
    with ``s`` the shots' standard deviation (``sd_shots``, ``ddof = 1``) for window lines,
    ``u = sqrt(s^2 / n + u_shape^2)`` for fitted lines (``u_shape^2``: the part of the fit
    covariance from centres and widths), and the pixel noise or the full fit covariance with one
    shot (flag ``single_shot``).  ``s`` holds every shot-to-shot source at once (read and photon
    noise of the pixels, plasma fluctuation); it has ``n - 1`` degrees of freedom, which the
    users of ``u`` carry (``n_shots`` is in the row): a 95 % interval is
    ``+- t_0.975(n - 1) u`` (GUM G.3), 3.18 u for 4 shots.  ``u`` is not inflated here: seeded
    studies (benchmarks/line_u_coverage.py) find it unbiased for pixel and plasma noise alike,
    ``+- 2u`` covering 86 / 92 / 95 % with 4 / 10 / 30 shots, exactly Student's P(|t| <= 2).

    ``nv``, ``intensity``, ``sd``: the number of finite accepted values, their mean and SD
    (:func:`column_stats`); ``saturated`` / ``masked``: any accepted shot saturated / masked on
    the line.
    """
    setup, s, mean_spec, f_mean = ctx.setup, ctx.s, ctx.mean_spec, ctx.f_mean
    meas, pre = setup.method.measure, setup.method.preprocess
    ln = setup.lines[li]
    flags = set()
    if saturated:
        flags.add("saturated")
    if masked:
        flags.add("masked")
    expected = float(ctx.pos[li])
    if ln.mode == "window":
        k = setup.win_idx.index(li)
        if nv >= 2:
            u = sd / math.sqrt(nv)
        else:
            u_noise_win = ctx.u_noise_win()
            u = float(u_noise_win[k]) / f_mean if u_noise_win is not None else float("nan")
        g = setup.geometry(li, s)
        centre = fwhm = float("nan")
        if mean_spec is not None:
            centre, fwhm = peak_centre_fwhm(setup.wl, mean_spec, g.a, g.b)
        lo = g.left[0] if g.left else g.a
        hi = g.right[1] if g.right else g.b
        if ctx.overlapped(li, lo, hi):
            flags.add("overlapped")
        win_lo, win_hi = g.a, g.b
    else:
        gi = next(gx for gx, mem in enumerate(setup.groups) if li in mem)
        gf = ctx.fits[(s, gi)]
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
    if math.isfinite(u) and u > 0:
        snr = intensity / u
    elif u == 0 and math.isfinite(intensity) and intensity > 0:
        snr = float("inf")  # exact by construction (the normalising line itself)
    else:
        snr = float("nan")
    if nv == 0 and "masked" in flags:
        pass  # not measured: every accepted shot has a masked pixel on the line ('masked' says why)
    elif math.isnan(snr) or snr < meas.snr_detect:
        flags.add("not_found")
    elif snr < meas.snr_min:
        flags.add("low_snr")
    if "not_found" in flags or nv == 0:
        centre = fwhm = float("nan")  # a position in noise means nothing, in any mode
    well_measured = math.isfinite(snr) and snr >= meas.snr_min
    u_c = _centre_uncertainty(fwhm, snr, win_lo, win_hi)
    if well_measured and math.isfinite(centre) and abs(centre - expected) > ctx.flag_nm + 2.0 * u_c:
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
        "sample_id": ctx.sid,
        "role": ctx.role,
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


def _provenance(setup: _Setup, run, chunk: int, ref_rows: list[dict]) -> dict:
    method = setup.method
    pre = method.preprocess
    from compquant import __version__

    return {
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
        "compquant_version": __version__,
    }
