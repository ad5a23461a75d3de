"""Preprocessing of spectra ``(n_shots, n_pixels)``: each step a function and a sklearn-style step.

* dark subtraction: :func:`dark_reference`, :func:`subtract_dark`, :class:`DarkSubtraction`
* response correction: :func:`correct_response`, :class:`ResponseCorrection`
* saturation: :func:`saturation_mask`, :class:`SaturationMask`
* shot QC: :func:`qc_decide`, :class:`ShotQC`
* baselines: :func:`snip` (Ryan et al. 1988), :func:`asls` (Eilers & Boelens 2005),
  :func:`arpls` (Baek et al. 2015), :class:`BaselineRemoval`
* normalisation: :func:`normalise`, :func:`total_area`, :class:`Normalisation`
* wavelength shift: :func:`shift_from_lines`, :func:`shift_by_cross_correlation`

The streaming pipeline that chains them over a run is :func:`compquant.lines.measure_run`.
"""

from compquant.preprocess.baseline import BaselineRemoval, arpls, asls, estimate_baseline, snip
from compquant.preprocess.corrections import (
    DarkSubtraction,
    Normalisation,
    ResponseCorrection,
    SaturationMask,
    correct_response,
    dark_reference,
    exposure_ratio,
    normalise,
    saturation_mask,
    subtract_dark,
    total_area,
)
from compquant.preprocess.qc import QCDecision, ShotQC, qc_decide
from compquant.preprocess.shift import shift_by_cross_correlation, shift_from_lines

__all__ = [
    "BaselineRemoval",
    "DarkSubtraction",
    "Normalisation",
    "QCDecision",
    "ResponseCorrection",
    "SaturationMask",
    "ShotQC",
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
