"""Calibration-free LIBS analysis (Ciucci et al. 1999, Appl. Spectrosc. 53, 960).

Line table + atomic data → plasma temperature and electron density (Boltzmann and
Saha–Boltzmann plots, Stark widths), LTE checks, self-absorption correction, composition by
closure, Monte Carlo uncertainty.  See ``docs/calibration-free.md``.
"""

from __future__ import annotations
