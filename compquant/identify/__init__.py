"""Qualitative analysis: which elements are in a sample, and which analyte lines they disturb.

- :func:`find_peaks`, :func:`noise_sigma`, :func:`local_noise_sigma` -- peak detection on a
  preprocessed mean spectrum (:mod:`compquant.identify.peaks`);
- :func:`identify_spectrum` -> :class:`Identification` -- element identification against the
  line database with an LTE estimate of relative intensities (:mod:`compquant.identify.core`);
- :class:`IdentifySettings`, :func:`settings_from_method` -- the ``[identify]`` table of a method.

Rules, tolerances and their sources: ``docs/identification.md``.
"""

from __future__ import annotations

from compquant.identify.core import (
    SPECIES_COLUMNS,
    STATUSES,
    Identification,
    element_summary,
    estimate_resolving_power,
    identify_spectrum,
    matching_tolerance,
    relative_line_strength,
)
from compquant.identify.peaks import find_peaks, local_noise_sigma, noise_sigma
from compquant.identify.settings import IdentifySettings, settings_from_dict, settings_from_method

__all__ = [
    "SPECIES_COLUMNS",
    "STATUSES",
    "Identification",
    "IdentifySettings",
    "element_summary",
    "estimate_resolving_power",
    "find_peaks",
    "identify_spectrum",
    "local_noise_sigma",
    "matching_tolerance",
    "noise_sigma",
    "relative_line_strength",
    "settings_from_dict",
    "settings_from_method",
]
