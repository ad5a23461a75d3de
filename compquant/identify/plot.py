"""Figure of an identification: the spectrum with the identified lines labelled by element."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from compquant.errors import OutputError
from compquant.fileio import atomic_path
from compquant.identify.core import Identification


def plot_identification(ident: Identification, output, *, title: str | None = None, max_labels: int = 40,
                        medium: str = "air", log_scale: bool = True) -> Path:
    """Write a PNG (matplotlib Agg, atomic write) of the spectrum with the found lines of every
    detected or possible species marked at their peak and labelled ``"<species> <nm>"``, one colour
    per element (matplotlib's default cycle), and unexplained peaks marked with a grey ``?``.
    At most ``max_labels`` labels (each element's three strongest lines first, then the strongest
    peaks) keep the figure readable; ``log_scale`` draws a symmetric-log intensity axis (linear up
    to 10 noise σ) when the spectrum spans more than two decades."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    wl, y = ident.wavelength, ident.spectrum
    fig, ax = plt.subplots(figsize=(12, 5), dpi=110)
    ax.plot(wl, y, lw=0.6, color="0.2", zorder=1)
    sp = ident.species
    active = sp[sp["status"] != "not detected"]
    g = ident.lines
    g = g[g["species"].isin(active["species"]) & g["found"] & (g["peak_id"] >= 0)]
    pk = ident.peaks
    heights = pk["height"].to_numpy() if len(pk) else np.zeros(0)
    g = g.assign(peak_height=heights[g["peak_id"].to_numpy()] if len(g) else [])
    g = g.sort_values("peak_height", ascending=False)
    # every element gets its three strongest lines labelled first, then the strongest of the rest
    first = g.groupby("element", sort=False).head(3)
    g = pd.concat([first, g.drop(first.index)]).head(max(max_labels, len(first)))
    cycle = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    elements = list(dict.fromkeys(active["element"]))
    colour = {el: cycle[i % len(cycle)] for i, el in enumerate(elements)}
    ymax = float(np.nanmax(y)) if y.size else 1.0
    for r in g.itertuples():
        c = colour[r.element]
        ax.plot([r.peak_centre_nm], [r.peak_height], marker="v", ms=4, color=c, zorder=3)
        ax.annotate(f"{r.species} {r.wavelength_nm:.2f}", (r.peak_centre_nm, r.peak_height), xytext=(0, 6),
                    textcoords="offset points", rotation=90, fontsize=6.5, color=c, ha="center", va="bottom")
    un = ident.unexplained_peaks
    for r in un.itertuples():
        ax.text(r.centre_nm, r.height, "?", color="0.5", fontsize=7, ha="center", va="bottom")
    for el in elements:
        st = active[active["element"] == el]["status"].iloc[0]
        ax.plot([], [], color=colour[el], marker="v", ls="", label=f"{el} ({st})")
    if elements:
        ax.legend(fontsize=7, loc="upper right", ncol=min(4, len(elements)))
    # symmetric-log intensity axis: linear up to 10 noise sigma, logarithmic above, so that the lines
    # of minor elements are visible beside the matrix lines
    lin = 10.0 * float(np.median(ident.noise)) if ident.noise.size else 1.0
    if log_scale and ymax > 100 * lin > 0:
        ax.set_yscale("symlog", linthresh=lin, linscale=0.5)
        ax.set_ylim(bottom=-lin, top=ymax * 4.0)
    else:
        ax.set_ylim(top=ymax * 1.25 if ymax > 0 else 1.0)
    ax.set_xlim(float(wl[0]), float(wl[-1]))
    ax.set_xlabel(f"wavelength / nm ({medium})")
    ax.set_ylabel("intensity (preprocessed" + (", symmetric log)" if ax.get_yscale() == "symlog" else ")"))
    ax.set_title(title or f"identified lines (T = {ident.temperature_k:.0f} K"
                 f"{' fitted' if ident.temperature_fitted else ''}, R = {ident.resolving_power:.0f})", fontsize=10)
    fig.tight_layout()
    try:
        with atomic_path(output) as tmp:
            fig.savefig(tmp, format="png")
    except OSError as exc:
        raise OutputError(f"cannot write ({exc.strerror})", where=str(output),
                          fix="choose a writable output path") from exc
    finally:
        plt.close(fig)
    return Path(output)


__all__ = ["plot_identification"]
