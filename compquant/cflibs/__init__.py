"""Calibration-free LIBS analysis (Ciucci et al. 1999, Appl. Spectrosc. 53, 960).

Line table + atomic data → plasma temperature and electron density (Boltzmann and
Saha–Boltzmann plots, Stark widths), LTE checks, self-absorption correction, composition by
closure, Monte Carlo uncertainty.  See ``docs/calibration-free.md``.
"""

from __future__ import annotations

from compquant.cflibs.analysis import CFWarning, analyse_cf, analyse_cf_samples, run_intensity_basis
from compquant.cflibs.atomicdata import PackageAtomicData, TableAtomicData, default_atomic_data
from compquant.cflibs.onepoint import OnePointCalibration, one_point_calibration
from compquant.cflibs.result import CFResult, ElementResult, results_table
from compquant.cflibs.settings import CFSettings

__all__ = [
    "CFResult",
    "CFSettings",
    "CFWarning",
    "ElementResult",
    "OnePointCalibration",
    "PackageAtomicData",
    "TableAtomicData",
    "analyse_cf",
    "analyse_cf_samples",
    "default_atomic_data",
    "one_point_calibration",
    "results_table",
    "run_intensity_basis",
]
