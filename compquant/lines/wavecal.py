"""Wavelength calibration of one sample from reference lines.

The correction ``d(lambda) = lambda_observed - lambda_table`` (nm) is found on a
sample's mean spectrum (baseline removed) and applied by placing every line window
at ``lambda_table + d(lambda_table)`` (no resampling).  Two models:

* ``shift``:  ``d = a`` (one shift for the sample);
* ``linear``: ``d = a + b (lambda - lambda_mid)`` (shift and dispersion change across
  the range; ``lambda_mid`` = mean of the reference wavelengths).

Steps (docs/method-file.md, ``[preprocess.shift]``):

1. **Candidates.**  Every local maximum within ``search_nm`` of each reference whose
   prominence exceeds 5 x the spectrum's noise (robust SD of pixel differences / sqrt 2)
   is a candidate; its centre is the vertex of a Gaussian plus linear background fitted
   by least squares to the pixels within ``max(FWHM, 3 pixels)`` of the peak pixel (a
   window matched to the resolution), or the intensity-weighted centroid of those pixels
   when the fit fails (common practice).
2. **Consensus.**  Each candidate's offset ``c - lambda_ref`` is a vote; the offset
   with the most references holding a candidate within ``match_nm`` of it wins (ties:
   the smaller |offset|).  Then, three times: each reference takes its candidate nearest
   the model's prediction (none within ``match_nm``: not found), the model is fitted to
   the chosen centres, and references whose residual exceeds
   ``max(tolerance_nm, 3 x 1.4826 MAD)`` are rejected as outliers (MAD: median absolute
   deviation of the residuals, Hampel's rule).
3. **Neighbour check.**  A reference whose chosen peak lies nearer the predicted
   position of another catalogue line than its own has locked onto that neighbour and is
   rejected; a reference with a catalogue line of at least 10 % of its intensity within
   half a FWHM is blended and is not used.
4. **Acceptance.**  At least ``min_refs`` agreeing references (2 for ``shift``, 3 for
   ``linear``) are needed, otherwise no correction is applied (status
   ``too_few_refs``; a correction beyond ``max_shift_nm`` anywhere on the references is not
   applied either: ``shift_too_large``).  Any found reference that disagrees with the consensus by more
   than ``tolerance_nm`` sets status ``refs_disagree``.

Uncertainty of the correction: ``shift`` -- ``u(a) = s / sqrt(n)`` with ``s`` the
standard deviation of the residuals of the ``n`` used references (JCGM 100:2008, 4.2.3);
``linear`` -- the least-squares covariance ``s^2 (A^T A)^-1`` with ``s^2 = RSS / (n - 2)``
(Press et al., Numerical Recipes, 3rd ed., 15.4), ``u(d)`` evaluated at ``lambda_mid``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares
from scipy.signal import find_peaks

MODELS = ("shift", "linear")
#: candidate peaks must stand this many noise SDs above their surroundings
PROMINENCE_SIGMA = 5.0
#: a catalogue neighbour this fraction of the reference's intensity or more can blend it
BLEND_FRACTION = 0.1
#: half-width of the centring window in FWHM (the line core, above about a fifth of its peak)
HALF_WINDOW_FWHM = 0.9


@dataclass
class WavecalSettings:
    """How to calibrate (all nm)."""

    search_nm: float
    fwhm_nm: float
    pitch_nm: float
    model: str = "shift"
    min_refs: int | None = None
    tolerance_nm: float | None = None
    max_shift_nm: float | None = None

    @property
    def match_nm(self) -> float:
        return max(0.5 * self.fwhm_nm, 1.5 * self.pitch_nm, self.tol)

    @property
    def tol(self) -> float:
        return self.tolerance_nm if self.tolerance_nm else self.pitch_nm

    @property
    def need(self) -> int:
        return int(self.min_refs) if self.min_refs else (3 if self.model == "linear" else 2)


@dataclass
class RefResult:
    """One reference line: where it was found and how it was used."""

    ref_nm: float
    found_nm: float = float("nan")
    residual_nm: float = float("nan")  # found - (ref + d(ref))
    status: str = "not_found"  # used | outlier | not_found | neighbour | blended | masked


@dataclass
class WavecalResult:
    """The correction of one sample and each reference's part in it."""

    model: str
    a: float = 0.0  # shift at lambda_mid, nm
    b: float = 0.0  # dispersion change, nm per nm
    lambda_mid: float = 0.0
    u_shift_nm: float = float("nan")
    u_dispersion: float = float("nan")
    rms_nm: float = float("nan")
    status: str = "too_few_refs"  # ok | too_few_refs | shift_too_large | refs_disagree
    applied: bool = False
    refs: list[RefResult] = field(default_factory=list)

    def shift_at(self, wavelength_nm):
        """Correction d(lambda) in nm (0 when not applied)."""
        lam = np.asarray(wavelength_nm, dtype=float)
        if not self.applied:
            return np.zeros_like(lam) if lam.ndim else 0.0
        d = self.a + self.b * (lam - self.lambda_mid)
        return d if np.ndim(d) else float(d)

    @property
    def n_used(self) -> int:
        return sum(r.status == "used" for r in self.refs)

    @property
    def disagree(self) -> bool:
        return self.status != "ok"


def noise_sd(y: np.ndarray) -> float:
    """Robust pixel-noise SD: 1.4826 x MAD of first differences / sqrt(2) (common practice)."""
    d = np.diff(np.asarray(y, dtype=float))
    d = d[np.isfinite(d)]
    if d.size < 3:
        return float("nan")
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / np.sqrt(2.0))


def peak_fwhm(wl: np.ndarray, y: np.ndarray, j: int, max_pixels: int = 60) -> float:
    """FWHM (nm) of the peak at pixel ``j`` from its half-maximum crossings (linear
    interpolation), walking at most ``max_pixels`` each way; NaN when a side never drops."""
    half = 0.5 * y[j]
    if not np.isfinite(half) or half <= 0:
        return float("nan")
    k = j
    while k > max(0, j - max_pixels) and y[k] > half:
        k -= 1
    if y[k] > half:
        return float("nan")
    xl = wl[k] + (half - y[k]) * (wl[k + 1] - wl[k]) / (y[k + 1] - y[k])
    k = j
    while k < min(wl.size - 1, j + max_pixels) and y[k] > half:
        k += 1
    if y[k] > half:
        return float("nan")
    xr = wl[k - 1] + (half - y[k - 1]) * (wl[k] - wl[k - 1]) / (y[k] - y[k - 1])
    return float(xr - xl)


def line_centre(wl: np.ndarray, y: np.ndarray, j: int, fwhm_nm: float, pitch_nm: float) -> float:
    """Centre (nm) of the peak at pixel ``j``: Gaussian + linear background fit within
    ``0.9 x FWHM`` (at least 3 pixels) of ``j``, the FWHM being the larger of the expected one
    and the peak's own (:func:`peak_fwhm`); intensity-weighted centroid when the fit fails."""
    own = peak_fwhm(wl, y, j)
    if np.isfinite(own) and own < 4.0 * fwhm_nm:
        fwhm_nm = max(fwhm_nm, own)
    half = max(HALF_WINDOW_FWHM * fwhm_nm, 3.0 * pitch_nm)
    i0 = int(np.searchsorted(wl, wl[j] - half))
    i1 = int(np.searchsorted(wl, wl[j] + half, side="right"))
    x, v = wl[i0:i1], y[i0:i1]
    if x.size < 3 or not np.all(np.isfinite(v)):
        return float("nan")
    w = np.clip(v - v.min(), 0.0, None)
    centroid = float(np.sum(w * x) / np.sum(w)) if w.sum() > 0 else float(wl[j])
    if x.size < 6:
        return centroid
    sig0 = fwhm_nm / 2.3548
    amp0 = float(y[j] - v.min())
    scale = max(abs(amp0), 1e-300)

    def resid(p):
        return (p[0] * np.exp(-0.5 * ((x - p[1]) / p[2]) ** 2) + p[3] + p[4] * (x - wl[j]) - v) / scale

    lo = [0.0, wl[j] - half, 0.2 * sig0, -np.inf, -np.inf]
    hi = [np.inf, wl[j] + half, 3.0 * sig0 + pitch_nm, np.inf, np.inf]
    p0 = [max(amp0, 1e-12), float(wl[j]), sig0, float(v.min()), 0.0]
    p0 = np.clip(p0, np.array(lo) + 1e-15, np.array(hi) - 1e-15)
    try:
        res = least_squares(resid, p0, bounds=(lo, hi), method="trf", x_scale="jac", max_nfev=200)
    except ValueError:
        return centroid
    c = float(res.x[1])
    if not res.success or abs(c - wl[j]) > 1.5 * pitch_nm:
        return centroid
    return c


def _candidates(wl, y, ref, search, settings, noise, invalid) -> tuple[np.ndarray, bool]:
    i0 = int(np.searchsorted(wl, ref - search))
    i1 = int(np.searchsorted(wl, ref + search, side="right"))
    i0, i1 = max(i0, 1), min(i1, wl.size - 1)
    if i1 - i0 < 3:
        return np.zeros(0), False
    if invalid is not None and invalid[i0:i1].any():
        return np.zeros(0), True
    prom = PROMINENCE_SIGMA * noise if np.isfinite(noise) and noise > 0 else None
    pk, _ = find_peaks(y[i0 - 1 : i1 + 1], prominence=prom)
    pk = pk + i0 - 1
    pk = pk[(pk >= i0) & (pk < i1) & (y[pk] > 0)]
    cs = np.array([line_centre(wl, y, int(j), settings.fwhm_nm, settings.pitch_nm) for j in pk])
    return cs[np.isfinite(cs)], False


def _vote(cands: list[np.ndarray], refs: np.ndarray, match: float) -> float:
    offs = np.concatenate([c - r for c, r in zip(cands, refs)]) if cands else np.zeros(0)
    if offs.size == 0:
        return float("nan")
    score = np.array([sum(np.any(np.abs((c - r) - o) <= match) for c, r in zip(cands, refs)) for o in offs])
    best = np.flatnonzero(score == score.max())
    return float(offs[best[np.argmin(np.abs(offs[best]))]])


def _fit(model: str, lam: np.ndarray, d: np.ndarray, mid: float):
    if model == "shift" or lam.size < 3:
        return float(np.median(d)), 0.0
    A = np.column_stack([np.ones(lam.size), lam - mid])
    coef, *_ = np.linalg.lstsq(A, d, rcond=None)
    return float(coef[0]), float(coef[1])


def _uncertainty(res: WavecalResult, lam: np.ndarray, r: np.ndarray) -> None:
    n = lam.size
    if res.model == "shift":
        if n >= 2:
            res.u_shift_nm = float(np.std(r, ddof=1) / np.sqrt(n))
        res.rms_nm = float(np.sqrt(np.mean(r**2))) if n else float("nan")
        return
    res.rms_nm = float(np.sqrt(np.mean(r**2))) if n else float("nan")
    if n >= 3:
        A = np.column_stack([np.ones(n), lam - res.lambda_mid])
        cov = np.linalg.pinv(A.T @ A) * float(r @ r) / (n - 2)
        res.u_shift_nm = float(np.sqrt(cov[0, 0]))
        res.u_dispersion = float(np.sqrt(cov[1, 1]))


def _far_candidates(res: WavecalResult, refs, nearest, catalogue_nm, match: float) -> None:
    """A reference with no candidate near the model but a peak elsewhere in its search window:
    that peak is a known neighbour (status ``neighbour``) when it sits within ``match_nm`` of
    another catalogue line's predicted position, otherwise the reference disagrees (``outlier``)."""
    cat = np.zeros(0) if catalogue_nm is None else np.asarray(catalogue_nm, dtype=float)
    for k, rr in enumerate(res.refs):
        if rr.status != "not_found" or not np.isfinite(nearest[k]):
            continue
        others = cat[np.abs(cat - refs[k]) > 1e-6]
        if others.size and np.any(np.abs(nearest[k] - others - res.shift_at(others)) <= match):
            rr.status = "neighbour"
        else:
            rr.status = "outlier"
        rr.found_nm = float(nearest[k])
        rr.residual_nm = float(nearest[k] - refs[k] - res.shift_at(refs[k]))


def _neighbour_check(res, refs, found, catalogue, cat_int, ref_int, fwhm) -> None:
    for k, rr in enumerate(res.refs):
        if rr.status != "used" or catalogue is None or catalogue.size == 0:
            continue
        others = np.abs(catalogue - refs[k]) > 1e-6
        cat, ci = catalogue[others], (None if cat_int is None else cat_int[others])
        if ci is not None and ref_int is not None and np.isfinite(ref_int[k]):
            close = (np.abs(cat - refs[k]) < 0.5 * fwhm) & (ci >= BLEND_FRACTION * ref_int[k])
            if close.any():
                rr.status = "blended"
                continue
        own = abs(found[k] - refs[k] - res.shift_at(refs[k]))
        far = np.abs(cat - refs[k]) >= 0.5 * fwhm  # nearer ones are blends, judged above
        pred = cat[far] + res.shift_at(cat[far])
        if np.any(np.abs(found[k] - pred) < own):
            rr.status = "neighbour"


def calibrate_wavelength(wl, y, refs_nm, settings: WavecalSettings, catalogue_nm=None,
                         catalogue_intensity=None, ref_intensity=None, invalid=None) -> WavecalResult:
    """Wavelength correction of one spectrum from reference lines (module docstring).

    Parameters
    ----------
    wl, y : axis (nm) and baseline-removed mean spectrum of one sample
    refs_nm : table wavelengths of the reference lines (same medium as ``wl``)
    catalogue_nm, catalogue_intensity : other known lines (for the neighbour check) and,
        optionally, their relative intensities (for the blend check)
    ref_intensity : relative intensities of the references (same scale as the catalogue's)
    invalid : (n_pixels,) bool, pixels masked in the sample (a reference touching one is not used)
    """
    wl = np.asarray(wl, dtype=float)
    y = np.asarray(y, dtype=float)
    refs = np.asarray(refs_nm, dtype=float)
    res = WavecalResult(model=settings.model, lambda_mid=float(np.mean(refs)) if refs.size else 0.0,
                        refs=[RefResult(float(r)) for r in refs])
    noise = noise_sd(y)
    cands = []
    for k, r in enumerate(refs):
        c, hit_mask = _candidates(wl, y, r, settings.search_nm, settings, noise, invalid)
        cands.append(c)
        if hit_mask:
            res.refs[k].status = "masked"
    match = settings.match_nm
    a0 = _vote([c for c in cands if c.size], [r for c, r in zip(cands, refs) if c.size], match)
    if not np.isfinite(a0):
        return res
    a, b = a0, 0.0
    found = np.full(refs.size, np.nan)
    nearest = np.full(refs.size, np.nan)  # nearest candidate, also when beyond match_nm
    for _ in range(3):
        pred = refs + a + b * (refs - res.lambda_mid)
        use = np.zeros(refs.size, dtype=bool)
        for k, c in enumerate(cands):
            if res.refs[k].status == "masked" or not c.size:
                continue
            j = int(np.argmin(np.abs(c - pred[k])))
            nearest[k] = c[j]
            found[k] = c[j] if abs(c[j] - pred[k]) <= match else np.nan
            use[k] = np.isfinite(found[k])
        if use.sum() == 0:
            return res
        a, b = _fit(settings.model, refs[use], found[use] - refs[use], res.lambda_mid)
        r = found - refs - (a + b * (refs - res.lambda_mid))
        mad = np.median(np.abs(r[use] - np.median(r[use])))
        keep = use & (np.abs(r) <= max(settings.tol, 3.0 * 1.4826 * mad))
        if keep.sum() >= 1:
            a, b = _fit(settings.model, refs[keep], found[keep] - refs[keep], res.lambda_mid)
    r = found - refs - (a + b * (refs - res.lambda_mid))
    for k, rr in enumerate(res.refs):
        if rr.status == "masked":
            continue
        rr.found_nm, rr.residual_nm = float(found[k]), float(r[k])
        rr.status = "not_found" if not np.isfinite(found[k]) else ("used" if abs(r[k]) <= settings.tol else "outlier")
    res.a, res.b, res.applied = a, b, True
    _far_candidates(res, refs, nearest, catalogue_nm, match)
    _neighbour_check(res, refs, found, None if catalogue_nm is None else np.asarray(catalogue_nm, float),
                     None if catalogue_intensity is None else np.asarray(catalogue_intensity, float),
                     None if ref_intensity is None else np.asarray(ref_intensity, float), settings.fwhm_nm)
    _finish(res, refs, found, settings)
    return res


def _finish(res: WavecalResult, refs, found, settings: WavecalSettings) -> None:
    used = np.array([rr.status == "used" for rr in res.refs], dtype=bool)
    if used.sum() >= 1:
        res.a, res.b = _fit(settings.model, refs[used], found[used] - refs[used], res.lambda_mid)
        if settings.model == "linear" and used.sum() < 3:
            res.b = 0.0
    for k, rr in enumerate(res.refs):
        if np.isfinite(rr.found_nm):
            rr.residual_nm = float(rr.found_nm - refs[k] - res.a - res.b * (refs[k] - res.lambda_mid))
    lam = refs[used]
    _uncertainty(res, lam, np.array([res.refs[k].residual_nm for k in np.flatnonzero(used)]))
    too_big = settings.max_shift_nm is not None and refs.size and np.any(
        np.abs(res.a + res.b * (refs - res.lambda_mid)) > settings.max_shift_nm)
    if used.sum() < settings.need:
        res.status, res.applied = "too_few_refs", False
    elif too_big:
        res.status, res.applied = "shift_too_large", False
    elif any(rr.status == "outlier" for rr in res.refs):
        res.status = "refs_disagree"
    else:
        res.status = "ok"


__all__ = [
    "MODELS",
    "RefResult",
    "WavecalResult",
    "WavecalSettings",
    "calibrate_wavelength",
    "line_centre",
    "noise_sd",
]
