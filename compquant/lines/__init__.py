"""Line measurement: window integration and profile fitting of a method's lines.

Public API
----------
* :func:`measure_run` -> :class:`LineMeasurement` (line table, per-shot table, QC, shifts)
* :func:`measure_lines` -> line table (pandas DataFrame, columns in docs/architecture.md)
* :func:`mean_spectrum` -> (wavelength, mean spectrum, info) of one sample
* :func:`process_chunk` / :class:`ChunkPlan` -- the pure chunk-level function (for Dask)
* :func:`calibrate_wavelength` -- per-sample wavelength calibration from reference lines
"""

from compquant.lines.chunk import ChunkPlan, ChunkResult, FitProjection, process_chunk
from compquant.lines.fit import GroupFit, fit_group, fwhm_of, profile
from compquant.lines.measure import (
    FLAG_ORDER,
    LINE_TABLE_COLUMNS,
    SHOT_TABLE_COLUMNS,
    LineMeasurement,
    mean_spectrum,
    measure_lines,
    measure_run,
)
from compquant.lines.wavecal import WavecalResult, WavecalSettings, calibrate_wavelength
from compquant.lines.windows import build_window_weights, integrate_windows, window_geometry

__all__ = [
    "FLAG_ORDER",
    "LINE_TABLE_COLUMNS",
    "SHOT_TABLE_COLUMNS",
    "ChunkPlan",
    "ChunkResult",
    "FitProjection",
    "GroupFit",
    "LineMeasurement",
    "WavecalResult",
    "WavecalSettings",
    "build_window_weights",
    "calibrate_wavelength",
    "fit_group",
    "fwhm_of",
    "integrate_windows",
    "mean_spectrum",
    "measure_lines",
    "measure_run",
    "process_chunk",
    "profile",
    "window_geometry",
]
