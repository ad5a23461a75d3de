"""Figures for certificates: PNG bytes from plain arrays (matplotlib, Agg backend).

Each function takes numpy arrays / lists and returns PNG bytes, so it can be
used without a run or a calibration object.  PNGs are written without a
time stamp, so the same data give the same bytes.
"""

from __future__ import annotations

import io

import numpy as np

_DPI = 150


def _new(figsize=(6.4, 3.2)):
    from matplotlib.figure import Figure  # no pyplot: no global state, Agg canvas on save

    from compquant.plotting import plain_text

    plain_text()  # ids from files print as typed, never as mathtext
    fig = Figure(figsize=figsize, dpi=_DPI)
    ax = fig.add_subplot(1, 1, 1)
    return fig, ax


def _png(fig) -> bytes:
    buf = io.BytesIO()
    # fixed margins (tight_layout would draw every figure twice)
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=0.75 / w, right=1 - 0.15 / w, bottom=0.5 / h, top=1 - 0.3 / h)
    # about 160 dots per inch as printed (full-width spectrum and half-width plots alike)
    dpi = _DPI if w > 6 else 120
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def _envelope(x, y, n_bins: int = 1500):
    """Min/max envelope of a long trace (keeps every peak at figure resolution, far fewer points)."""
    n = x.size
    if n <= 2 * n_bins:
        return x, y
    starts = np.linspace(0, n, n_bins + 1).astype(int)[:-1]
    lo = np.minimum.reduceat(y, starts)
    hi = np.maximum.reduceat(y, starts)
    xc = x[starts]
    return np.repeat(xc, 2), np.column_stack([lo, hi]).ravel()


def spectrum_png(
    wavelength_nm,
    intensity,
    lines=(),
    *,
    title: str = "",
    ylabel: str = "intensity (a.u.)",
    max_labels: int = 25,
) -> bytes:
    """Mean spectrum with the analytical lines marked.

    Parameters
    ----------
    wavelength_nm, intensity : 1-D arrays of equal length
    lines : iterable of ``(label, wavelength_nm)`` pairs, e.g. ``("Cu I 324.754", 324.754)``
    """
    wl = np.asarray(wavelength_nm, dtype=float)
    y = np.asarray(intensity, dtype=float)
    if wl.ndim != 1 or wl.shape != y.shape:
        raise ValueError("wavelength and intensity must be 1-D arrays of equal length")
    fig, ax = _new((6.8, 3.0))
    xw, yw = _envelope(wl, y)
    ax.plot(xw, yw, lw=0.6, color="#1f3b73")
    lines = list(lines)
    top = np.nanmax(y) if y.size else 1.0
    span = float(wl[-1] - wl[0]) if wl.size > 1 else 1.0
    last_w, level = None, 0
    for i, (label, w) in enumerate(sorted(lines, key=lambda t: float(t[1]))):
        w = float(w)
        ax.axvline(w, color="#b03a2e", lw=0.6, ls="--", alpha=0.8)
        if i >= max_labels:
            continue
        # labels of lines closer than 2 % of the axis are stepped down so they do not overlap
        level = level + 1 if last_w is not None and w - last_w < 0.02 * span else 0
        last_w = w
        ax.annotate(
            str(label),
            (w, top),
            xytext=(2, -2 - 48 * (level % 3)),
            textcoords="offset points",
            rotation=90,
            va="top",
            ha="left",
            fontsize=5.5,
            color="#b03a2e",
        )
    ax.set_xlabel("wavelength (nm)")
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, fontsize=9)
    ax.margins(x=0)
    ax.tick_params(labelsize=7)
    return _png(fig)


def calibration_png(
    x_std,
    y_std,
    *,
    fit_x=None,
    fit_y=None,
    x_err=None,
    y_err=None,
    labels=None,
    sample_x=None,
    sample_y=None,
    sample_xerr=None,
    sample_label: str = "sample",
    xlabel: str = "certified mass fraction (%)",
    ylabel: str = "intensity ratio",
    title: str = "",
) -> bytes:
    """Calibration curve: standards (with error bars), the fitted curve and the sample marked.

    ``x_std``/``y_std`` are the standards' certified values and measured responses; ``fit_x``/``fit_y``
    sample the fitted curve; ``sample_x``/``sample_y`` place the sample (value found, response).
    """
    xs = np.asarray(x_std, dtype=float)
    ys = np.asarray(y_std, dtype=float)
    if xs.shape != ys.shape:
        raise ValueError("x_std and y_std must have equal length")
    fig, ax = _new((4.6, 3.2))
    ax.errorbar(
        xs,
        ys,
        xerr=None if x_err is None else np.asarray(x_err, float),
        yerr=None if y_err is None else np.asarray(y_err, float),
        fmt="o",
        ms=4,
        color="#1f3b73",
        ecolor="#7f8fa6",
        capsize=2,
        lw=0.8,
        label="standards",
    )
    if labels is not None:
        for xi, yi, lab in zip(xs, ys, labels):
            ax.annotate(str(lab), (xi, yi), xytext=(3, 3), textcoords="offset points", fontsize=5.5)
    if fit_x is not None and fit_y is not None:
        ax.plot(np.asarray(fit_x, float), np.asarray(fit_y, float), "-", color="#444444", lw=1, label="fit")
    if sample_x is not None and sample_y is not None:
        sx, sy = float(sample_x), float(sample_y)
        ax.errorbar(
            [sx],
            [sy],
            xerr=None if sample_xerr is None else [float(sample_xerr)],
            fmt="D",
            ms=6,
            color="#b03a2e",
            capsize=3,
            label=sample_label,
        )
        ax.axhline(sy, color="#b03a2e", lw=0.5, ls=":")
        ax.axvline(sx, color="#b03a2e", lw=0.5, ls=":")
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, fontsize=9)
    ax.legend(fontsize=6.5, loc="best")
    ax.tick_params(labelsize=7)
    return _png(fig)


def boltzmann_png(
    upper_energy_eV,
    ordinate,
    species=None,
    *,
    fits=None,
    fit_y=None,
    yerr=None,
    title: str = "",
    xlabel: str = "upper level energy E_k (eV)",
    ylabel: str = "ln(I·λ / (g_k·A_ki))",
) -> bytes:
    """Boltzmann plot: ``ln(I λ / (g_k A_ki))`` against upper-level energy, one colour per species.

    ``fits`` maps a species name to ``(slope_per_eV, intercept)``, or ``fit_y`` gives the fitted
    ordinate of every point (joined per species); the plasma temperature is
    ``T = -1 / (k_B · slope)`` with ``k_B`` in eV/K (architecture contract: energy-unit intensities).
    """
    E = np.asarray(upper_energy_eV, dtype=float)
    Y = np.asarray(ordinate, dtype=float)
    if E.shape != Y.shape:
        raise ValueError("energies and ordinates must have equal length")
    sp = np.asarray(species if species is not None else ["lines"] * len(E), dtype=object)
    fig, ax = _new((4.6, 3.2))
    colours = ["#1f3b73", "#b03a2e", "#1e8449", "#7d3c98", "#b9770e", "#2e86c1"]
    for i, name in enumerate(dict.fromkeys(sp.tolist())):
        m = sp == name
        c = colours[i % len(colours)]
        ax.errorbar(
            E[m],
            Y[m],
            yerr=None if yerr is None else np.asarray(yerr, float)[m],
            fmt="o",
            ms=4,
            color=c,
            capsize=2,
            lw=0.8,
            label=str(name),
        )
        if fits and name in fits:
            slope, icpt = fits[name]
            xx = np.linspace(E[m].min(), E[m].max(), 2)
            ax.plot(xx, slope * xx + icpt, "-", color=c, lw=1)
        if fit_y is not None:
            fy = np.asarray(fit_y, dtype=float)[m]
            order = np.argsort(E[m])
            ok = np.isfinite(fy[order])
            ax.plot(E[m][order][ok], fy[order][ok], "-", color=c, lw=1)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, fontsize=9)
    ax.legend(fontsize=6.5)
    ax.tick_params(labelsize=7)
    return _png(fig)


__all__ = ["spectrum_png", "calibration_png", "boltzmann_png"]
