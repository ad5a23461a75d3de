"""The calibration-curve figure of a :class:`~compquant.calibrate.model.Curve` (PNG).

One figure for the certificate (:func:`compquant.report.assemble.curve_figure`, one sample
marked) and for ``compquant calibrate --plots`` (:func:`plot_curve`: prediction band, excluded
standards, every unknown marked), drawn by :func:`compquant.plotting.calibration_figure`.
Error bars are expanded uncertainties U = k·u with k = 2, the coverage the certificate reports
(JCGM 100:2008, 6.2-6.3), and the legend says so.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from compquant.fileio import safe_filename
from compquant.plotting import calibration_figure, figure_png, write_png

#: coverage factor of the error bars (expanded uncertainty, as on the certificate)
K_ERROR_BARS = 2.0


def _x_scale(curve) -> tuple[float, str]:
    """Factor from the curve's content to the plotted x, and the x-axis label (% for mass fractions)."""
    if curve.basis == "ratio":
        return 1.0, f"{curve.element} / matrix mass-fraction ratio"
    return 100.0, f"{curve.element} mass fraction (%)"


def curve_figure(curve, *, sample_x=None, sample_label: str = "this sample", unknowns=(),
                 band_level: float | None = None, show_excluded: bool = False, title: str | None = None):
    """The figure of one calibration curve; None when fewer than 2 standards were used.

    Standards used with error bars U = 2u on both axes, the fitted curve, and optionally: one
    sample at content ``sample_x`` (the curve's own x: mass fraction, or ratio to the matrix),
    ``unknowns`` = ``[(name, x, u_x, y), ...]`` in the curve's own units, the prediction band of
    ``band_level`` (e.g. 0.95; :meth:`Curve.band`), the standards excluded from the fit.
    """
    used = [s for s in curve.standards if s.get("used", True)]
    if len(used) < 2:
        return None
    f, xl = _x_scale(curve)
    k = K_ERROR_BARS
    xs = np.array([float(s["x"]) for s in used]) * f
    ys = np.array([float(s["y"]) for s in used])
    xe = np.array([float(s.get("u_x", 0.0) or 0.0) for s in used]) * k * f
    ye = np.array([float(s.get("u_y", 0.0) or 0.0) for s in used]) * k
    marks = [(str(n), float(x) * f, float(y), None if ux is None else float(ux) * k * f) for n, x, ux, y in unknowns]
    lo, hi = float(xs.min()), max([float(xs.max())] + [m[1] for m in marks])
    grid = np.linspace(0.0 if lo > 0 else lo, hi * 1.08, 120)
    try:
        fit_y = np.asarray(curve.response(grid / f), float)
    except Exception:  # a curve that cannot be evaluated on the grid: draw the standards only
        fit_y = None
    band = None
    if band_level is not None and fit_y is not None:
        yg, half = curve.band(grid / f, band_level)
        band = (grid, yg - half, yg + half, f"{band_level:.0%} prediction band")
    excluded = None
    if show_excluded:
        ex = [s for s in curve.standards if not s.get("used", True) and np.isfinite(s.get("x", np.nan))]
        excluded = ([float(s["x"]) * f for s in ex], [float(s["y"]) for s in ex])
    sx = sy = None
    if sample_x is not None:
        sx = sample_x * f
        sy = float(np.asarray(curve.response(np.array([sample_x])), float)[0])
    return calibration_figure(
        xs,
        ys,
        fit_x=grid if fit_y is not None else None,
        fit_y=fit_y,
        x_err=xe,
        y_err=ye,
        labels=[str(s.get("standard_id", "")) for s in used],
        sample_x=sx,
        sample_y=sy,
        sample_label=sample_label,
        xlabel=xl,
        ylabel=f"{curve.line_id}" + (f" / {curve.internal_standard}" if curve.internal_standard else ""),
        title=title if title is not None else f"Calibration curve {curve.element} ({curve.model})",
        band=band,
        excluded=excluded,
        samples=marks,
    )


def curve_png(curve, **kw) -> bytes | None:
    """PNG bytes of :func:`curve_figure` (same arguments); None when it draws nothing."""
    fig = curve_figure(curve, **kw)
    return None if fig is None else figure_png(fig)


def plot_curve(curve, path, unknowns=None, level: float = 0.95) -> Path | None:
    """PNG of one curve for ``compquant calibrate --plots``: :func:`curve_figure` with the
    prediction band at ``level``, the excluded standards and the ``unknowns`` (``(sample_id, x,
    u_x, y)`` in the curve's units); None (nothing written) when fewer than 2 standards were used."""
    used = sum(1 for s in curve.standards if s.get("used", True))
    title = f"{curve.element}: R² = {curve.r2:.5f}, n = {used}, LOD = {curve.lod:.3g} g/g"
    png = curve_png(curve, unknowns=unknowns or (), band_level=level, show_excluded=True, title=title)
    return None if png is None else write_png(png, path)


def plot_all(calibration, folder, unknowns_by_element=None) -> list[Path]:
    """One PNG per curve in ``folder`` (``<element>_<line>.png``, safe file names)."""
    folder = Path(folder)
    out = []
    for el, c in calibration.curves.items():
        name = safe_filename(f"{el}_{c.line_id}") + ".png"
        written = plot_curve(c, folder / name, (unknowns_by_element or {}).get(el))
        if written is not None:
            out.append(written)
    return out


__all__ = ["K_ERROR_BARS", "curve_figure", "curve_png", "plot_curve", "plot_all"]
