"""Preprocessing of spectra ``(n_shots, n_pixels)``: each step a plain function over arrays.

* dark subtraction: :func:`dark_reference`, :func:`subtract_dark`, :func:`exposure_ratio`
* response correction: :func:`correct_response`
* saturation: :func:`saturation_mask`
* shot QC: :func:`qc_decide`
* baselines: :func:`snip` (Ryan et al. 1988), :func:`asls` (Eilers & Boelens 2005),
  :func:`arpls` (Baek et al. 2015), chosen by name from the registry
  :data:`~compquant.preprocess.baseline.BASELINES` (:func:`estimate_baseline`)
* normalisation: :func:`normalise`, :func:`total_area`
* wavelength shift: :func:`shift_from_lines`, :func:`shift_by_cross_correlation`

The ``[preprocess.*]`` tables of the method file are declared in
:mod:`compquant.preprocess.settings`.  The streaming pipeline that chains the steps over a run
is :func:`compquant.lines.measure_run`.
"""

from compquant.preprocess.baseline import BASELINES, arpls, asls, estimate_baseline, snip
from compquant.preprocess.corrections import (
    correct_response,
    dark_reference,
    exposure_ratio,
    normalise,
    saturation_mask,
    subtract_dark,
    total_area,
)
from compquant.preprocess.qc import QCDecision, qc_decide
from compquant.preprocess.shift import shift_by_cross_correlation, shift_from_lines

__all__ = [
    "BASELINES",
    "QCDecision",
    "arpls",
    "asls",
    "correct_response",
    "dark_reference",
    "estimate_baseline",
    "exposure_ratio",
    "normalise",
    "qc_decide",
    "saturation_mask",
    "shift_by_cross_correlation",
    "shift_from_lines",
    "snip",
    "subtract_dark",
    "total_area",
]
