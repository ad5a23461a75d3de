"""Wavelength shift of a spectrum against known line positions or a reference spectrum.

The shift ``delta = lambda_observed - lambda_reference`` (nm) is found on a
sample's mean spectrum and applied by placing every line window at
``lambda_table + delta`` (no resampling of the spectra, so no interpolation
smoothing).  Two estimators:

* reference lines: each line's peak pixel in a search window, refined to
  sub-pixel position by the vertex of the parabola through the peak pixel and
  its two neighbours (common practice); ``delta`` is the median over lines;
* cross-correlation with a reference spectrum resampled onto the run's axis,
  maximised over integer lags within ``max_shift_nm`` and refined by the same
  three-point parabola.
"""

from __future__ import annotations

import numpy as np


def _parabolic_vertex(ym1: float, y0: float, yp1: float) -> float:
    """Offset in samples of the vertex of the parabola through (-1, ym1), (0, y0), (1, yp1)."""
    den = ym1 - 2.0 * y0 + yp1
    if den >= 0 or not np.isfinite(den):
        return 0.0
    return float(np.clip(0.5 * (ym1 - yp1) / den, -0.5, 0.5))


def line_peak_position(wavelength, spectrum, centre_nm: float, half_window_nm: float) -> float:
    """Sub-pixel position (nm) of the highest point within ``centre +- half_window``; NaN if none."""
    wl = np.asarray(wavelength, dtype=np.float64)
    y = np.asarray(spectrum, dtype=np.float64)
    i0 = int(np.searchsorted(wl, centre_nm - half_window_nm))
    i1 = int(np.searchsorted(wl, centre_nm + half_window_nm, side="right"))
    if i1 - i0 < 3:
        return float("nan")
    j = i0 + int(np.argmax(y[i0:i1]))
    if j <= 0 or j >= wl.size - 1:
        return float("nan")
    off = _parabolic_vertex(y[j - 1], y[j], y[j + 1])
    step = wl[j + 1] - wl[j] if off > 0 else wl[j] - wl[j - 1]
    return float(wl[j] + off * step)


def shift_from_lines(wavelength, spectrum, lines_nm, half_window_nm: float = 0.1) -> tuple[float, list]:
    """Median shift (nm) of the reference lines, and each line's individual shift."""
    shifts = []
    for c in lines_nm:
        pos = line_peak_position(wavelength, spectrum, float(c), half_window_nm)
        shifts.append(pos - float(c))
    arr = np.array(shifts, dtype=np.float64)
    finite = arr[np.isfinite(arr)]
    return (float(np.median(finite)) if finite.size else float("nan")), shifts


def shift_by_cross_correlation(wavelength, spectrum, ref_wavelength, ref_spectrum, max_shift_nm: float = 0.2) -> float:
    """Shift (nm) maximising the correlation of ``spectrum`` with the reference spectrum.

    Positive when the spectrum's features sit at longer wavelength than the
    reference's.  Both spectra are mean-centred; the reference is linearly
    interpolated onto the run's wavelength axis (outside its range: zero).
    """
    wl = np.asarray(wavelength, dtype=np.float64)
    y = np.asarray(spectrum, dtype=np.float64)
    ref = np.interp(wl, np.asarray(ref_wavelength, float), np.asarray(ref_spectrum, float), left=np.nan, right=np.nan)
    ok = np.isfinite(ref) & np.isfinite(y)
    if ok.sum() < 8:
        return float("nan")
    a = np.where(ok, y - y[ok].mean(), 0.0)
    b = np.where(ok, ref - ref[ok].mean(), 0.0)
    step = float(np.median(np.diff(wl)))
    max_lag = max(1, int(np.ceil(max_shift_nm / step)))
    lags = np.arange(-max_lag, max_lag + 1)
    n = a.size
    cc = np.empty(lags.size)
    for k, lag in enumerate(lags):  # a handful of lags, each a vector dot product
        if lag >= 0:
            cc[k] = np.dot(a[lag:], b[: n - lag])
        else:
            cc[k] = np.dot(a[: n + lag], b[-lag:])
    j = int(np.argmax(cc))
    off = _parabolic_vertex(cc[j - 1], cc[j], cc[j + 1]) if 0 < j < cc.size - 1 else 0.0
    return float((lags[j] + off) * step)
