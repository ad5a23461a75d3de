"""Figures for certificates: PNG bytes from plain arrays.

The figures are drawn by :mod:`compquant.plotting`, one function per figure, which the commands
use too (``compquant calibrate --plots``, ``compquant cf --plots``); this module keeps the names
the report has always offered.  PNGs are written without a time stamp, so the same data give the
same bytes.
"""

from __future__ import annotations

from compquant.plotting import boltzmann_png, calibration_png, spectrum_png

__all__ = ["spectrum_png", "calibration_png", "boltzmann_png"]
