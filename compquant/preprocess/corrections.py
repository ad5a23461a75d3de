"""Detector corrections: dark subtraction, spectral response, saturation mask, normalisation.

All functions act on float arrays ``(n_shots, n_pixels)`` and never modify
their input.  The streaming pipeline that applies them to a run is
:func:`compquant.lines.measure_run` (its chunk kernel :mod:`compquant.lines.chunk`).
"""

from __future__ import annotations

import numpy as np

from compquant.errors import MethodError

# --------------------------------------------------------------------------- dark


def dark_reference(dark_frames, statistic: str = "mean") -> np.ndarray:
    """Per-pixel dark level from ``dark_frames`` (n_dark, n_pixels): mean or median.

    The median resists cosmic-ray hits in single dark frames (common practice).
    """
    d = np.asarray(dark_frames, dtype=np.float64)
    if d.ndim == 1:
        d = d[None, :]
    if d.shape[0] == 0:
        raise ValueError("no dark frames")
    if statistic == "mean":
        return d.mean(axis=0)
    if statistic == "median":
        return np.median(d, axis=0)
    raise MethodError(
        f"unknown dark statistic {statistic!r}", where="[preprocess.dark] statistic", fix="use 'mean' or 'median'"
    )


def exposure_ratio(exposure_s: float | None, dark_exposure_s: float | None) -> float:
    """Scale factor for a dark taken at another exposure: ``t_exposure / t_dark``.

    Dark current grows linearly with integration time at fixed detector
    temperature (common practice); without both times the factor is 1.
    """
    if exposure_s is None or dark_exposure_s is None:
        return 1.0
    if not (dark_exposure_s > 0 and exposure_s > 0):
        return 1.0
    return float(exposure_s) / float(dark_exposure_s)


def subtract_dark(spectra, dark_ref, scale: float = 1.0) -> np.ndarray:
    """``S' = S - scale * D`` per pixel (D from :func:`dark_reference`)."""
    return np.asarray(spectra, dtype=np.float64) - scale * np.asarray(dark_ref, dtype=np.float64)


# --------------------------------------------------------------------------- response


def correct_response(spectra, response) -> np.ndarray:
    """``S' = S / R`` with R the relative spectral response per pixel.

    After this step spectra are proportional to spectral radiance in energy
    units (docs/architecture.md).  Pixels with R <= 0 or non-finite are set to 0
    (they carry no signal) rather than dividing by zero.
    """
    r = np.asarray(response, dtype=np.float64)
    good = np.isfinite(r) & (r > 0)
    inv = np.where(good, 1.0 / np.where(good, r, 1.0), 0.0)
    return np.asarray(spectra, dtype=np.float64) * inv


# --------------------------------------------------------------------------- saturation


def saturation_mask(raw, level: float | None, margin: float = 0.0) -> np.ndarray | None:
    """Boolean mask of pixels at or above ``level * (1 - margin)`` in the RAW counts.

    Computed before any correction (the detector clips raw counts).  ``None``
    when the run states no saturation level.
    """
    if level is None:
        return None
    raw = np.asarray(raw)
    return raw >= level * (1.0 - margin)


# --------------------------------------------------------------------------- normalisation

NORMALISATIONS = ("none", "total_area", "background", "internal_standard")


def total_area(spectra, wavelength, pixel_range: tuple[int, int] | None = None) -> np.ndarray:
    """Integrated emission per shot, ``sum_i S_i * dlambda_i`` (trapezoid rule), counts*nm."""
    s = np.asarray(spectra, dtype=np.float64)
    wl = np.asarray(wavelength, dtype=np.float64)
    if pixel_range is not None:
        a, b = pixel_range
        s, wl = s[:, a:b], wl[a:b]
    w = trapezoid_weights(wl)
    return s @ w


def trapezoid_weights(wl: np.ndarray) -> np.ndarray:
    """Trapezoid-rule weights ``w`` of a wavelength axis (nm): ``sum_i S_i w_i`` integrates S
    over the axis, ``w_i = (lambda_{i+1} - lambda_{i-1}) / 2`` (half steps at the ends)."""
    dl = np.diff(wl)
    w = np.zeros_like(wl)
    w[:-1] += dl / 2
    w[1:] += dl / 2
    return w


def normalise(spectra, factors) -> np.ndarray:
    """Divide each shot by its factor; shots with a factor <= 0 become NaN (and are rejected)."""
    f = np.asarray(factors, dtype=np.float64)
    good = np.isfinite(f) & (f > 0)
    inv = np.where(good, 1.0 / np.where(good, f, 1.0), np.nan)
    return np.asarray(spectra, dtype=np.float64) * inv[:, None]
