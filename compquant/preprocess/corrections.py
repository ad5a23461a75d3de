"""Detector corrections: dark subtraction, spectral response, saturation mask, normalisation.

All functions act on float arrays ``(n_shots, n_pixels)`` and never modify
their input.  Each has a scikit-learn-style step object (parameters in
``__init__``, ``fit``/``transform``) so steps can sit in an
:class:`sklearn.pipeline.Pipeline`.
"""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin

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


class DarkSubtraction(BaseEstimator, TransformerMixin):
    """Subtract the per-pixel dark level, scaled by ``exposure_s / dark_exposure_s``."""

    def __init__(
        self,
        dark_frames=None,
        statistic: str = "mean",
        exposure_s: float | None = None,
        dark_exposure_s: float | None = None,
    ):
        self.dark_frames = dark_frames
        self.statistic = statistic
        self.exposure_s = exposure_s
        self.dark_exposure_s = dark_exposure_s

    def fit(self, X=None, y=None):
        if self.dark_frames is None:
            raise ValueError("DarkSubtraction needs dark_frames")
        self.dark_ = dark_reference(self.dark_frames, self.statistic)
        self.scale_ = exposure_ratio(self.exposure_s, self.dark_exposure_s)
        return self

    def transform(self, X):
        return subtract_dark(X, self.dark_, self.scale_)


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


class ResponseCorrection(BaseEstimator, TransformerMixin):
    """Divide by the relative spectral response (from the run or a separate file)."""

    def __init__(self, response=None):
        self.response = response

    def fit(self, X=None, y=None):
        if self.response is None:
            raise ValueError("ResponseCorrection needs a response curve")
        self.response_ = np.asarray(self.response, dtype=np.float64)
        return self

    def transform(self, X):
        return correct_response(X, self.response_)


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


class SaturationMask(BaseEstimator):
    """Find saturated pixels in raw counts; the mask travels to line measurement."""

    def __init__(self, level: float | None = None, margin: float = 0.0):
        self.level = level
        self.margin = margin

    def fit(self, X=None, y=None):
        return self

    def mask(self, X) -> np.ndarray:
        m = saturation_mask(X, self.level, self.margin)
        return np.zeros(np.shape(X), dtype=bool) if m is None else m


# --------------------------------------------------------------------------- normalisation

NORMALISATIONS = ("none", "total_area", "background", "internal_standard")


def total_area(spectra, wavelength, pixel_range: tuple[int, int] | None = None) -> np.ndarray:
    """Integrated emission per shot, ``sum_i S_i * dlambda_i`` (trapezoid rule), counts*nm."""
    s = np.asarray(spectra, dtype=np.float64)
    wl = np.asarray(wavelength, dtype=np.float64)
    if pixel_range is not None:
        a, b = pixel_range
        s, wl = s[:, a:b], wl[a:b]
    w = _trapezoid_weights(wl)
    return s @ w


def _trapezoid_weights(wl: np.ndarray) -> np.ndarray:
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


class Normalisation(BaseEstimator, TransformerMixin):
    """Normalise each shot by total area (``"total_area"``) or mean baseline (``"background"``).

    ``"internal_standard"`` needs a line intensity per shot and is applied by
    :mod:`compquant.lines` after window integration; ``transform`` with a
    ``factors`` array does the division for any of them.
    """

    def __init__(self, how: str = "none", wavelength=None):
        self.how = how
        self.wavelength = wavelength

    def fit(self, X=None, y=None):
        if self.how not in NORMALISATIONS:
            raise MethodError(
                f"unknown normalisation {self.how!r}",
                where="[preprocess.normalise] how",
                fix=f"use one of {NORMALISATIONS}",
            )
        return self

    def factors(self, X, baseline=None) -> np.ndarray:
        X = np.asarray(X, dtype=np.float64)
        if self.how == "none":
            return np.ones(X.shape[0])
        if self.how == "total_area":
            wl = self.wavelength if self.wavelength is not None else np.arange(X.shape[1], dtype=float)
            return total_area(X, wl)
        if self.how == "background":
            if baseline is None:
                raise ValueError("background normalisation needs the removed baseline")
            return np.asarray(baseline).mean(axis=1)
        raise ValueError("internal-standard normalisation needs line intensities")

    def transform(self, X, factors=None):
        f = self.factors(X) if factors is None else factors
        return normalise(X, f)
