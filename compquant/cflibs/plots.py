"""Boltzmann and Saha–Boltzmann plots of a :class:`~compquant.cflibs.result.CFResult` (PNG).

The Saha–Boltzmann (or joint Boltzmann) plot is one figure for the certificate
(:func:`compquant.report.assemble.boltzmann_figure`) and for ``compquant cf --plots``
(:func:`plot_saha_boltzmann`, with the line labels and the fitted slope written on it); the
per-species Boltzmann plot is drawn for the command only.  Both are drawn by
:func:`compquant.plotting.boltzmann_figure`.  Each line is a point with its ±u error bar
(standard uncertainty of the ordinate); the fitted lines come from the result itself, so the
figure shows exactly what was fitted.

References
----------
Ciucci, A. et al. (1999), New procedure for quantitative elemental analysis by laser-induced
plasma spectroscopy, Appl. Spectrosc. 53, 960-964 (the Boltzmann plot of calibration-free LIBS);
Tognoni, E. et al. (2010), Spectrochim. Acta B 65, 1-14 (the Saha-Boltzmann plot).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.plasma.constants import KB_EV
from compquant.plotting import boltzmann_figure, figure_png, write_png


def _value(x) -> float:
    """``x`` as a float; NaN when it is missing or not a number."""
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan


def _label(line_id: str) -> str:
    """The wavelength of a line id such as ``Cu I 324.754``, to 0.1 nm (the id itself otherwise)."""
    wl = _value(str(line_id).rsplit(" ", 1)[-1])
    return f"{wl:.1f}" if math.isfinite(wl) else str(line_id)


def saha_boltzmann_figure(result, *, detailed: bool = False):
    """The (Saha-)Boltzmann plot of the lines used, with the fitted ordinates; None below 2 lines.

    Abscissa ``x_ev`` (upper-level energy, ion lines shifted by the ionisation energy), ordinate
    ``y`` (ion lines Saha-corrected), fitted ordinate ``y_fit``, one colour per species.
    ``detailed`` (the command line) adds the line labels, nₑ in the title and the fitted slope.
    """
    lines = result.lines or []
    pts = [ln for ln in lines if math.isfinite(_value(ln.get("x_ev"))) and math.isfinite(_value(ln.get("y")))]
    if len(pts) < 2:
        return None
    E = np.array([float(p["x_ev"]) for p in pts])
    Y = np.array([float(p["y"]) for p in pts])
    yfit = np.array([_value(p.get("y_fit")) for p in pts])
    yfit[~np.isfinite(yfit)] = np.nan
    yerr = np.array([_value(p.get("u_ordinate")) for p in pts])
    yerr[~np.isfinite(yerr)] = 0.0
    sp = [str(p.get("species", "lines")) for p in pts]
    saha = str(result.fit_mode) == "saha-boltzmann"
    title = f"{'Saha-' if saha else ''}Boltzmann plot, T = {result.temperature_k:.0f} K"
    note = ""
    if detailed:
        title = f"{title} ± {result.u_temperature_k:.0f} K, sample {result.sample_id}"
        note = f"nₑ = {result.electron_density_cm3:.2e} cm⁻³ ({result.ne_method})"
        m = (result.fit or {}).get("slope_per_ev")
        if m:
            note += f"\nslope −1/kT = {m:.4f} eV⁻¹ (T = {-1 / (KB_EV * m):.0f} K)"
    return boltzmann_figure(
        E,
        Y,
        sp,
        fit_y=yfit,
        yerr=yerr,
        title=title,
        xlabel="upper level energy (eV)" + (", ions + ionisation energy" if saha else ""),
        ylabel="ln(I·λ / (g_k·A_ki))" + (" (ions Saha-corrected)" if saha else ""),
        point_labels=[_label(p.get("line_id", "")) for p in pts] if detailed else None,
        note=note,
    )


def saha_boltzmann_png(result, **kw) -> bytes | None:
    """PNG bytes of :func:`saha_boltzmann_figure` (same arguments); None when it draws nothing."""
    fig = saha_boltzmann_figure(result, **kw)
    return None if fig is None else figure_png(fig)


def species_boltzmann_figure(result):
    """Boltzmann plot per species: ln(Iλ/(g_k A_ki)) vs E_k, self-absorption corrected, each
    species with its own fitted line and temperature; None without lines."""
    lines = [ln for ln in (result.lines or []) if math.isfinite(_value(ln.get("ek_ev")))]
    if not lines:
        return None
    rows = {r["species"]: r for r in result.species}
    E = np.array([float(ln["ek_ev"]) for ln in lines])
    Y = np.array(
        [ln["ordinate"] + np.log(ln["correction_factor"]) - np.log(ln["one_point_factor"]) for ln in lines]
    )
    sp = [str(ln["species"]) for ln in lines]
    fits, labels = {}, {}
    for name in dict.fromkeys(sp):
        row = rows.get(name, {})
        if row.get("slope_per_ev") is not None:
            fits[name] = (row["slope_per_ev"], row["intercept"])
        if row.get("temperature_k"):
            labels[name] = f"{name}  T = {row['temperature_k']:.0f} ± {row['u_temperature_k']:.0f} K"
    return boltzmann_figure(
        E,
        Y,
        sp,
        fits=fits,
        yerr=np.array([float(ln["u_ordinate"]) for ln in lines]),
        title=f"Boltzmann plot per species, sample {result.sample_id}",
        species_labels=labels,
        point_labels=[_label(ln["line_id"]) for ln in lines],
    )


def plot_boltzmann(result, path) -> None:
    """Write :func:`species_boltzmann_figure` as PNG to ``path`` (nothing without lines)."""
    fig = species_boltzmann_figure(result)
    if fig is not None:
        write_png(figure_png(fig), path)


def plot_saha_boltzmann(result, path) -> None:
    """Write the certificate's (Saha-)Boltzmann plot, detailed, as PNG to ``path`` (nothing below 2 lines)."""
    png = saha_boltzmann_png(result, detailed=True)
    if png is not None:
        write_png(png, path)


__all__ = [
    "plot_boltzmann",
    "plot_saha_boltzmann",
    "saha_boltzmann_figure",
    "saha_boltzmann_png",
    "species_boltzmann_figure",
]
