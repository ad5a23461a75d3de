"""Synthetic spectra of known composition for the identification tests (invented test data).

Noiseless radiance comes from the project's forward model
(:func:`compquant.plasma.forward.synthesize`); noise from the project's
detector model (:class:`compquant.simulate.detector.Detector`: Poisson
photoelectrons, read noise, bias), averaged over a few shots as the
preprocessing would, with the bias removed by the mean of dark frames.
"""

from __future__ import annotations

import functools

import numpy as np

from compquant.atomic import partition_function
from compquant.plasma.forward import LineSet, synthesize
from compquant.simulate.detector import Detector

#: the test axis: 0.025 nm pixels, R = 4000 (FWHM 3-7 pixels)
WL_MIN, WL_MAX, PITCH, R = 240.0, 700.0, 0.025, 4000.0


def axis(lo: float = WL_MIN, hi: float = WL_MAX, pitch: float = PITCH) -> np.ndarray:
    return np.arange(lo, hi, pitch)


def pf_with_bare_ions(species: str, T):
    """Partition function of :mod:`compquant.atomic`, with U = 1 for a bare nucleus (H II) — a
    bare ion has a single state (common practice)."""
    if species == "H II":
        return np.ones_like(np.asarray(T, dtype=float))
    return partition_function(species, T)


def radiance(wl, composition: dict, T: float = 9000.0, ne: float = 1e16, R_: float = R, lines_frame=None):
    """Optically thin, continuum-free forward-model radiance (W m^-2 sr^-1 per pixel)."""
    lines = None if lines_frame is None else LineSet.from_frame(lines_frame.reset_index(drop=True))
    return synthesize(wl, composition, T, ne, resolving_power=R_, continuum=False, lines=lines,
                      partition_function=pf_with_bare_ions)


@functools.lru_cache(maxsize=8)
def _cached(key):
    wl_lo, wl_hi, pitch, comp, T, ne = key
    return radiance(axis(wl_lo, wl_hi, pitch), dict(comp), T, ne)


def cached_radiance(composition: dict, T: float = 9000.0, ne: float = 1e16, lo=WL_MIN, hi=WL_MAX, pitch=PITCH):
    return _cached((lo, hi, pitch, tuple(sorted(composition.items())), T, ne))


def observe(rad, seed: int, peak_pe: float = 5.0e4, n_shots: int = 8, read_noise: float = 4.0):
    """Mean of ``n_shots`` detector exposures of ``rad`` minus the mean dark frame (counts).

    ``peak_pe`` photoelectrons fall on the brightest pixel; noise is Poisson plus read noise.
    """
    rng = np.random.default_rng(seed)
    det = Detector(photoelectrons_per_radiance=peak_pe / float(np.max(rad)), read_noise_counts=read_noise,
                   bias_counts=500.0)
    mean_pe = det.mean_photoelectrons(np.broadcast_to(rad, (n_shots, rad.size)), 1.0)
    shots = det.digitise(mean_pe, 0.0, rng).astype(float)
    dark = det.dark_frames(n_shots, rad.size, 0.0, rng).astype(float)
    return shots.mean(0) - dark.mean(0)
