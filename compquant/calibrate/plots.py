"""Figures of calibration curves (matplotlib, Agg backend; written atomically)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from compquant.calibrate.model import Curve
from compquant.fileio import atomic_path, safe_filename


def plot_curve(curve: Curve, path, unknowns=None, level: float = 0.95) -> Path:
    """PNG of one curve: standards with error bars (k = 1), fit, prediction band, unknowns.

    ``unknowns``: iterable of ``(sample_id, x, u_x, y)`` in the curve's units.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    used = [s for s in curve.standards if s["used"]]
    excl = [s for s in curve.standards if not s["used"] and np.isfinite(s.get("x", np.nan))]
    xs = [s["x"] for s in curve.standards if np.isfinite(s.get("x", np.nan))]
    xmax = max(xs + [u[1] for u in (unknowns or [])]) * 1.08
    xg = np.linspace(0.0, xmax, 200)
    yg, half = curve.band(xg, level)
    fig, ax = plt.subplots(figsize=(6.4, 4.6), dpi=110)
    ax.fill_between(xg, yg - half, yg + half, color="0.85", label=f"{level:.0%} prediction band")
    ax.plot(xg, yg, color="k", lw=1.2, label=f"fit ({curve.model}{', origin' if curve.through_origin else ''})")
    ax.errorbar(
        [s["x"] for s in used],
        [s["y"] for s in used],
        xerr=[s["u_x"] for s in used],
        yerr=[s["u_y"] for s in used],
        fmt="o",
        color="tab:blue",
        ms=5,
        capsize=2,
        label="standards (u, k = 1)",
    )
    if excl:
        ax.plot([s["x"] for s in excl], [s["y"] for s in excl], "x", color="tab:red", ms=7, label="excluded standards")
    for sid, x, ux, y in unknowns or []:
        ax.errorbar([x], [y], xerr=[ux], fmt="D", color="tab:orange", ms=5, capsize=2)
        ax.annotate(str(sid), (x, y), textcoords="offset points", xytext=(4, -10), fontsize=7)
    if unknowns:
        ax.plot([], [], "D", color="tab:orange", label="samples")
    xl = f"{curve.element} mass fraction" + (" / matrix mass fraction" if curve.basis == "ratio" else "")
    yl = f"{curve.line_id}" + (f" / {curve.internal_standard}" if curve.internal_standard else "")
    ax.set_xlabel(xl)
    ax.set_ylabel(yl)
    ax.set_title(
        f"{curve.element}: R² = {curve.r2:.5f}, n = {sum(1 for _ in used)}, LOD = {curve.lod:.3g} g/g", fontsize=9
    )
    ax.set_xlim(0, xmax)
    ax.legend(fontsize=7, loc="upper left")
    fig.tight_layout()
    out = Path(path)
    with atomic_path(out) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)
    return out


def plot_all(calibration, folder, unknowns_by_element=None) -> list[Path]:
    """One PNG per curve in ``folder`` (``<element>_<line>.png``, safe file names)."""
    folder = Path(folder)
    out = []
    for el, c in calibration.curves.items():
        name = safe_filename(f"{el}_{c.line_id}") + ".png"
        out.append(plot_curve(c, folder / name, (unknowns_by_element or {}).get(el)))
    return out


__all__ = ["plot_curve", "plot_all"]
