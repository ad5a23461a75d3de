"""Boltzmann and Saha–Boltzmann plots of a :class:`~compquant.cflibs.result.CFResult` (PNG).

Each line is a labelled point with its ±u error bar; the fitted lines are drawn from the
result itself (per-species slopes for the Boltzmann plot, the joint fit for the
Saha–Boltzmann plot), so the figure shows exactly what was fitted.
"""

from __future__ import annotations

import numpy as np

from compquant.cflibs.constants import K_B_EV
from compquant.plotting import pyplot, save_png


def _label(line_id: str) -> str:
    sp, wl = line_id.rsplit(" ", 1)
    return f"{float(wl):.1f}"


def plot_boltzmann(result, path, dpi: int = 110) -> None:
    """Boltzmann plot per species: ln(Iλ/(g_k A_ki)) vs E_k, SA-corrected, own fit per species."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(7.0, 4.8))
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    sp_rows = {r["species"]: r for r in result.species}
    for k, sp in enumerate(sorted({ln["species"] for ln in result.lines})):
        c = colours[k % len(colours)]
        ls = [ln for ln in result.lines if ln["species"] == sp]
        x = np.array([ln["ek_ev"] for ln in ls])
        y = np.array([ln["ordinate"] + np.log(ln["correction_factor"]) - np.log(ln["one_point_factor"])
                      for ln in ls])
        u = np.array([ln["u_ordinate"] for ln in ls])
        row = sp_rows.get(sp, {})
        lab = sp
        if row.get("temperature_k"):
            lab += f"  T = {row['temperature_k']:.0f} ± {row['u_temperature_k']:.0f} K"
        ax.errorbar(x, y, yerr=u, fmt="o", color=c, ms=4, capsize=2, label=lab)
        for xi, yi, ln in zip(x, y, ls):
            ax.annotate(_label(ln["line_id"]), (xi, yi), fontsize=6, xytext=(3, 3), textcoords="offset points")
        if row.get("slope_per_ev") is not None:
            xx = np.linspace(x.min() - 0.2, x.max() + 0.2, 2)
            ax.plot(xx, row["intercept"] + row["slope_per_ev"] * xx, "-", color=c, lw=1)
    ax.set_xlabel("upper-level energy $E_k$ (eV)", parse_math=True)
    ax.set_ylabel(r"$\ln(I\lambda / g_k A_{ki})$", parse_math=True)
    ax.set_title(f"Boltzmann plot, sample {result.sample_id}", fontsize=10)
    ax.legend(fontsize=7)
    fig.tight_layout()
    save_png(fig, path, dpi=dpi)


def plot_saha_boltzmann(result, path, dpi: int = 110) -> None:
    """Saha–Boltzmann (or joint Boltzmann) plot: shifted ordinates vs shifted energies, joint fit."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(7.0, 4.8))
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    groups = result.fit.get("groups", [])
    inter = dict(zip(groups, result.fit.get("intercepts", [])))
    m = result.fit.get("slope_per_ev")
    sb = result.fit_mode == "saha-boltzmann"
    for k, g in enumerate(groups):
        c = colours[k % len(colours)]
        ls = [ln for ln in result.lines if (ln["element"] if sb else ln["species"]) == g]
        if not ls:
            continue
        x = np.array([ln["x_ev"] for ln in ls])
        y = np.array([ln["y"] for ln in ls])
        u = np.array([ln["u_ordinate"] for ln in ls])
        neutral = np.array([ln["ion"] == 1 for ln in ls])
        ax.errorbar(x[neutral], y[neutral], yerr=u[neutral], fmt="o", color=c, ms=4, capsize=2,
                    label=f"{g} I" if sb else g)
        if sb and np.any(~neutral):
            ax.errorbar(x[~neutral], y[~neutral], yerr=u[~neutral], fmt="s", color=c, ms=4, capsize=2,
                        label=f"{g} II (Saha-shifted)")
        for xi, yi, ln in zip(x, y, ls):
            ax.annotate(_label(ln["line_id"]) + ("" if ln["ion"] == 1 else " II"), (xi, yi), fontsize=6,
                        xytext=(3, 3), textcoords="offset points")
        if m is not None and g in inter:
            xx = np.linspace(x.min() - 0.3, x.max() + 0.3, 2)
            ax.plot(xx, inter[g] + m * xx, "-", color=c, lw=1)
    T = result.temperature_k
    ax.set_xlabel("$E_k$ (+ ionisation energy for ion lines) (eV)" if sb else "$E_k$ (eV)", parse_math=True)
    ax.set_ylabel(r"$\ln(I\lambda/g_kA_{ki})$ (ion lines − Saha term)" if sb else r"$\ln(I\lambda/g_kA_{ki})$",
                  parse_math=True)
    ax.set_title(f"{'Saha–Boltzmann' if sb else 'Joint Boltzmann'} plot, sample {result.sample_id}: "
                 f"T = {T:.0f} ± {result.u_temperature_k:.0f} K, "
                 f"nₑ = {result.electron_density_cm3:.2e} cm⁻³ ({result.ne_method})", fontsize=9)
    if m is not None:
        ax.text(0.98, 0.97, f"slope −1/kT = {m:.4f} eV⁻¹ (T = {-1 / (K_B_EV * m):.0f} K)",
                transform=ax.transAxes, ha="right", va="top", fontsize=7)
    ax.legend(fontsize=7)
    fig.tight_layout()
    save_png(fig, path, dpi=dpi)


__all__ = ["plot_boltzmann", "plot_saha_boltzmann"]
