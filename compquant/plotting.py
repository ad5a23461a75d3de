"""The figures of compquant, one function per figure, and their matplotlib plumbing.

The spectrum, the calibration curve and the Boltzmann plot are each drawn by one function here
(:func:`spectrum_png`, :func:`calibration_figure`, :func:`boltzmann_figure`), from plain arrays, so
the certificate (:mod:`compquant.report.assemble`) and the commands (``compquant calibrate
--plots``, ``compquant cf --plots``, through :mod:`compquant.calibrate.plots` and
:mod:`compquant.cflibs.plots`) show the same figure.  Error bars of a calibration curve are
expanded uncertainties U = k·u with k = 2, as the certificate reports them (JCGM 100:2008,
6.2-6.3); Boltzmann-plot error bars are standard uncertainties u of the ordinate.  PNGs are
written without a time stamp, so the same data give the same bytes.

matplotlib is imported only when a figure is drawn, so importing compquant stays light.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from compquant.errors import OutputError
from compquant.fileio import atomic_path


def plain_text() -> None:
    """Draw every text of every figure as plain text: no mathtext, no LaTeX.

    Sample ids, line ids and names come from files; ``$\\foo$`` in one of them must print as
    typed, not be parsed as mathtext (an unknown command would stop the figure). A label meant
    as mathematics would ask for it with ``parse_math=True``; the figures here use none.
    """
    import matplotlib

    matplotlib.rcParams["text.parse_math"] = False
    matplotlib.rcParams["text.usetex"] = False


def pyplot():
    """``matplotlib.pyplot`` on the non-interactive Agg backend (no display needed), plain text."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plain_text()
    return plt


def save_png(fig, path, dpi: float | None = None) -> Path:
    """Write ``fig`` as PNG to ``path`` through :func:`compquant.fileio.atomic_path` and close it.

    ``dpi`` None keeps the figure's own resolution.  An OS error becomes
    :class:`~compquant.errors.OutputError` naming the path; the figure is closed either way.
    """
    out = Path(path)
    try:
        with atomic_path(out) as tmp:
            fig.savefig(tmp, format="png", **({} if dpi is None else {"dpi": dpi}))
    except OSError as exc:
        raise OutputError(
            f"cannot write ({exc.strerror})", where=str(out), fix="choose a writable output path"
        ) from exc
    finally:
        pyplot().close(fig)
    return out


_DPI = 150


def new_axes(figsize=(6.4, 3.2)):
    """A figure with one axes, outside pyplot (no global state; Agg canvas on save), plain text."""
    from matplotlib.figure import Figure

    plain_text()  # ids from files print as typed, never as mathtext
    fig = Figure(figsize=figsize, dpi=_DPI)
    ax = fig.add_subplot(1, 1, 1)
    return fig, ax


def figure_png(fig) -> bytes:
    """PNG bytes of a figure from :func:`new_axes`: fixed margins, no time stamp (same data, same bytes)."""
    buf = io.BytesIO()
    # fixed margins (tight_layout would draw every figure twice)
    w, h = fig.get_size_inches()
    _fixed_margins(fig)
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


#: margins of every figure in inches (left, right, bottom, top), as :func:`figure_png` sets them
_MARGINS_IN = (0.75, 0.15, 0.5, 0.3)


def _fixed_margins(fig) -> None:
    w, h = fig.get_size_inches()
    left, right, bottom, top = _MARGINS_IN
    fig.subplots_adjust(left=left / w, right=1 - right / w, bottom=bottom / h, top=1 - top / h)


#: points kept free at the bottom of the spectrum's axes for the "labels left out" note
NOTE_STRIP_PT = 10.0


def _stagger_line_labels(fig, ax, texts, gap_pt: float = 3.0, note: bool = False) -> int:
    """Place the vertical line labels ``texts`` (annotations hanging from the top of the spectrum)
    in rows so that no two drawn text boxes overlap; return how many were left out.

    Each label's box is measured by matplotlib's Agg renderer at row 0; its horizontal extent
    (pixels) is an interval on the wavelength axis and :func:`compquant.web.labels.stagger` (greedy
    first-fit colouring of an interval graph, Golumbic 2004, ch. 8 -- the rule of the review page)
    gives each label the lowest row free there.  Row ``r`` hangs below the longest label of rows
    ``0 .. r-1`` plus a gap, so boxes of different rows cannot meet either.  A label whose row would
    reach below the axes is removed (and counted), never printed over the axis text; when any is
    left out (or ``note``: labels are left out anyway), the rows keep clear of a strip at the
    bottom for the note that counts them.

    References
    ----------
    Golumbic, M. C., *Algorithmic Graph Theory and Perfect Graphs*, 2nd ed. (2004), ch. 8.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from compquant.label_rows import stagger

    if not texts:
        return 0
    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    renderer = canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in texts]
    pt_per_px = 72.0 / fig.dpi
    gap_px = gap_pt / pt_per_px
    rows = stagger([b.x0 for b in boxes], [b.width for b in boxes], gap_px=gap_px)
    n_rows = max(rows) + 1
    length = [max((b.height for b, r in zip(boxes, rows) if r == k), default=0.0) for k in range(n_rows)]
    ax.get_ylim()  # settles the autoscaled limits, so transData is the drawn one
    anchor = ax.transData.transform(texts[0].xy)[1]  # every label hangs from the same height (the top)
    # pixels from the anchor down to the axis; when labels must be left out, less a strip at the
    # bottom for the note that counts them
    full = anchor - ax.get_window_extent(renderer).y0 - 2.0 / pt_per_px
    strip = full - NOTE_STRIP_PT / pt_per_px
    for room in (strip,) if note else (full, strip):
        offsets, below = {}, 0.0  # below: pixels from the first row's top to this row's top
        for k in range(n_rows):
            if below + length[k] <= room:
                offsets[k] = -2.0 - below * pt_per_px
            below += length[k] + gap_px
        if len(offsets) == n_rows:
            break
    left_out = 0
    for t, r in zip(texts, rows):
        if r in offsets:
            t.xyann = (2.0, offsets[r])
        else:
            t.remove()
            left_out += 1
    return left_out


def spectrum_figure(
    wavelength_nm,
    intensity,
    lines=(),
    *,
    title: str = "",
    ylabel: str = "intensity (a.u.)",
    max_labels: int = 25,
):
    """The figure of :func:`spectrum_png` (a matplotlib ``Figure`` with the margins it is saved with).

    Line labels are vertical text hanging from the top of the spectrum; crowded ones are staggered
    into rows by :func:`_stagger_line_labels` so no two overlap (measured text boxes).
    """
    wl = np.asarray(wavelength_nm, dtype=float)
    y = np.asarray(intensity, dtype=float)
    if wl.ndim != 1 or wl.shape != y.shape:
        raise ValueError("wavelength and intensity must be 1-D arrays of equal length")
    fig, ax = new_axes((6.8, 3.0))
    xw, yw = _envelope(wl, y)
    ax.plot(xw, yw, lw=0.6, color="#1f3b73")
    lines = list(lines)
    top = np.nanmax(y) if y.size else 1.0
    texts = []
    for i, (label, w) in enumerate(sorted(lines, key=lambda t: float(t[1]))):
        w = float(w)
        ax.axvline(w, color="#b03a2e", lw=0.6, ls="--", alpha=0.8)
        if i >= max_labels:
            continue
        texts.append(ax.annotate(
            str(label),
            (w, top),
            xytext=(2, -2),
            textcoords="offset points",
            rotation=90,
            va="top",
            ha="left",
            fontsize=5.5,
            color="#b03a2e",
        ))
    ax.set_xlabel("wavelength (nm)")
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, fontsize=9)
    ax.margins(x=0)
    ax.tick_params(labelsize=7)
    _fixed_margins(fig)
    skipped = max(0, len(lines) - max_labels)
    left_out = _stagger_line_labels(fig, ax, texts, note=skipped > 0) + skipped
    if left_out:
        ax.text(0.995, 0.02, f"{left_out} line labels left out (too crowded)", transform=ax.transAxes,
                ha="right", va="bottom", fontsize=5.5, color="#b03a2e")
    return fig


def spectrum_png(
    wavelength_nm,
    intensity,
    lines=(),
    *,
    title: str = "",
    ylabel: str = "intensity (a.u.)",
    max_labels: int = 25,
) -> bytes:
    """Mean spectrum with the analytical lines marked, labels staggered so none overlap.

    Parameters
    ----------
    wavelength_nm, intensity : 1-D arrays of equal length
    lines : iterable of ``(label, wavelength_nm)`` pairs, e.g. ``("Cu I 324.754", 324.754)``

    Returns
    -------
    PNG bytes of :func:`spectrum_figure`.
    """
    return figure_png(spectrum_figure(wavelength_nm, intensity, lines, title=title, ylabel=ylabel,
                                      max_labels=max_labels))


#: one colour per species on a Boltzmann plot (ten, so that a brass's species do not share one)
SPECIES_COLOURS = ["#1f3b73", "#b03a2e", "#1e8449", "#7d3c98", "#b9770e", "#2e86c1", "#6e2c00", "#e91e63",
                   "#7f8c8d", "#17a589"]

#: legend text of the standards on a calibration curve: their error bars are U with k = 2
STANDARDS_LABEL = "standards (U, k = 2)"


def _points(ax, x, y, *, xerr=None, yerr=None, fmt="o", ms=4, color, ecolor=None, capsize=2, lw=0.8, label):
    """Points with error bars (``None``: no bar on that axis)."""
    ax.errorbar(
        x,
        y,
        xerr=None if xerr is None else np.asarray(xerr, float),
        yerr=None if yerr is None else np.asarray(yerr, float),
        fmt=fmt,
        ms=ms,
        color=color,
        ecolor=ecolor,
        capsize=capsize,
        lw=lw,
        label=label,
    )


def _mark_samples(ax, samples, label: str) -> None:
    """Samples on a calibration curve: ``(name, x, y, x_err)`` each, a diamond (named by the caller,
    with the standards, in one :func:`place_point_labels` layout)."""
    for _name, x, y, xerr in samples:
        _points(ax, [float(x)], [float(y)], xerr=None if xerr is None else [float(xerr)], fmt="D", ms=5,
                color="#b9770e", label=None)
    if samples:
        ax.plot([], [], "D", color="#b9770e", label=label)


#: upper corners tried for a legend moved clear of the data (after matplotlib's "best")
_LEGEND_CORNERS = ("upper right", "upper left")


def _drawn_boxes(ax, renderer) -> list:
    """Pixel boxes of what a legend must not cover: every marker, error bar and text of ``ax``.

    Markers are boxes of their drawn size around each point; an error bar is the box of its
    segment; texts (point labels, notes) their drawn extent.  Lines without markers (fits) and
    shaded bands are left out: a legend over a line hides no value.
    """
    from matplotlib.transforms import Bbox

    pt = ax.figure.dpi / 72.0
    boxes = []
    for line in ax.get_lines():
        if line.get_marker() in (None, "None", "", " ") or not line.get_visible():
            continue
        xy = ax.transData.transform(np.column_stack([line.get_xdata(), line.get_ydata()]).astype(float))
        r = 0.5 * line.get_markersize() * pt + 1.0
        boxes += [Bbox([[x - r, y - r], [x + r, y + r]]) for x, y in xy if np.isfinite(x) and np.isfinite(y)]
    for coll in ax.collections:
        for seg in getattr(coll, "get_segments", lambda: [])():
            xy = ax.transData.transform(np.asarray(seg, float))
            if np.isfinite(xy).all():
                boxes.append(Bbox([xy.min(axis=0) - 1.0, xy.max(axis=0) + 1.0]))
    boxes += [t.get_window_extent(renderer) for t in ax.texts if t.get_visible() and t.get_text()]
    return boxes


def place_legend_clear(ax, fontsize: float = 6.5, relabel=None):
    """A legend that covers no point, error bar or text of ``ax``; returns the Legend.

    matplotlib's ``loc="best"`` picks the place least covering the plotted lines, but may still
    sit over points and never looks at text.  Here the legend's drawn box is measured (Agg
    renderer, with the figure's final fixed margins) against :func:`_drawn_boxes`.  If it covers
    any, the top of the y range is raised until the band above everything drawn holds the
    legend in an upper corner (at most four tries; the last one is kept).  ``relabel`` (no
    arguments) re-draws texts laid out in data coordinates, such as :func:`place_point_labels`,
    after a change of the y range; the texts it adds are removed and drawn again each try.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    fig = ax.figure
    _fixed_margins(fig)
    renderer = FigureCanvasAgg(fig).get_renderer()
    n_fixed = len(ax.texts)
    if relabel is not None:
        relabel()
    for attempt in range(4):
        boxes = _drawn_boxes(ax, renderer)
        for loc in ("best",) if attempt == 0 else _LEGEND_CORNERS:
            leg = ax.legend(fontsize=fontsize, loc=loc)
            lb = leg.get_window_extent(renderer)
            if not any(lb.overlaps(b) for b in boxes):
                return leg
        axb = ax.get_window_extent(renderer)
        top = max(b.y1 for b in boxes)
        room = axb.height - (lb.height + 2.0 * fontsize * fig.dpi / 72.0)
        if room <= 0 or top <= axb.y0:
            return leg
        y0, y1 = ax.get_ylim()
        ax.set_ylim(y0, y0 + (y1 - y0) * max((top - axb.y0) / room, 1.0) * 1.02)
        if relabel is not None:
            for t in ax.texts[n_fixed:]:
                t.remove()
            relabel()
    return leg


#: label offsets tried in turn (points from the marker): right-above first, then rows below and above
_LABEL_OFFSETS = [(3, 3), (3, -9), (3, 10), (3, -16), (3, 17), (3, -23), (3, 24)]


def place_point_labels(ax, x, y, labels, fontsize: float = 5.5) -> list[str]:
    """Name points without overlapping labels; returns the names left out.

    Each label is a box of its text's estimated size (``0.55 * fontsize`` points per character,
    ``1.2 * fontsize`` high) beside its point.  Points are taken in order of their x position and
    each label takes the first offset of ``_LABEL_OFFSETS`` whose box overlaps no label placed
    before and no point's marker (a 2.5 pt box around each point; greedy first fit, as for the
    line labels of the review page: ``compquant.web.labels``), inside the axes.
    A label that fits nowhere is left out rather than printed over another; the figure says how
    many were left out (their values are in the certificate's calibration table).
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    ax.autoscale_view()
    to_px = ax.transData.transform
    frame = ax.get_window_extent()  # labels stay inside the axes, clear of the tick labels
    pt = ax.figure.dpi / 72.0  # pixels per point
    ok = np.isfinite(x) & np.isfinite(y)
    r = 2.5 * pt  # the markers too: a label printed over a point hides it
    placed: list[tuple[float, float, float, float]] = [
        (u - r, v - r, u + r, v + r) for u, v in (to_px(xy) for xy in zip(x[ok], y[ok]))
    ]
    left_out: list[str] = []
    for i in sorted(np.flatnonzero(ok), key=lambda k: (x[k], y[k])):
        text = str(labels[i])
        w, h = 0.55 * fontsize * len(text) * pt, 1.2 * fontsize * pt
        px, py = to_px((x[i], y[i]))
        w_pt = w / pt  # then the same rows on the left of the point (near the right edge)
        for dx, dy in _LABEL_OFFSETS + [(-dx - w_pt, dy) for dx, dy in _LABEL_OFFSETS]:
            box = (px + dx * pt, py + dy * pt, px + dx * pt + w, py + dy * pt + h)
            inside = frame.x0 <= box[0] and box[2] <= frame.x1 and frame.y0 <= box[1] and box[3] <= frame.y1
            if inside and all(box[2] <= b[0] or b[2] <= box[0] or box[3] <= b[1] or b[3] <= box[1] for b in placed):
                placed.append(box)
                ax.annotate(text, (x[i], y[i]), xytext=(dx, dy), textcoords="offset points", fontsize=fontsize)
                break
        else:
            left_out.append(text)
    if left_out:
        ax.text(0.02, 0.97, f"{len(left_out)} crowded label(s) left out", transform=ax.transAxes, ha="left",
                va="top", fontsize=5.5, color="0.35")
    return left_out


def calibration_figure(
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
    band=None,
    excluded=None,
    samples=(),
    samples_label: str = "samples",
    standards_label: str = STANDARDS_LABEL,
):
    """Calibration curve: standards (with error bars), the fitted curve and the sample(s) marked.

    ``x_std``/``y_std`` are the standards' certified values and measured responses, ``x_err`` /
    ``y_err`` the half-lengths of their error bars (the caller passes U = 2u and says so in
    ``standards_label``); ``fit_x``/``fit_y`` sample the fitted curve; ``sample_x``/``sample_y``
    place one sample (value found, response).  For the command line: ``band`` = ``(x, lo, hi,
    label)`` shades a prediction band, ``excluded`` = ``(x, y)`` marks standards left out of the
    fit, ``samples`` = ``[(name, x, y, x_err), ...]`` marks several samples.  Returns the
    matplotlib Figure (:func:`figure_png` gives its PNG).
    """
    xs = np.asarray(x_std, dtype=float)
    ys = np.asarray(y_std, dtype=float)
    if xs.shape != ys.shape:
        raise ValueError("x_std and y_std must have equal length")
    fig, ax = new_axes((4.6, 3.2))
    if band is not None:
        bx, lo, hi, blabel = band
        ax.fill_between(np.asarray(bx, float), lo, hi, color="0.88", lw=0, label=blabel)
    _points(ax, xs, ys, xerr=x_err, yerr=y_err, color="#1f3b73", ecolor="#7f8fa6", label=standards_label)
    if excluded is not None and len(excluded[0]):
        ax.plot(excluded[0], excluded[1], "x", color="#b03a2e", ms=6, label="excluded standards")
    if fit_x is not None and fit_y is not None:
        ax.plot(np.asarray(fit_x, float), np.asarray(fit_y, float), "-", color="#444444", lw=1, label="fit")
    if sample_x is not None and sample_y is not None:
        sx, sy = float(sample_x), float(sample_y)
        _points(ax, [sx], [sy], xerr=None if sample_xerr is None else [float(sample_xerr)], fmt="D", ms=6,
                color="#b03a2e", capsize=3, lw=None, label=sample_label)
        ax.axhline(sy, color="#b03a2e", lw=0.5, ls=":")
        ax.axvline(sx, color="#b03a2e", lw=0.5, ls=":")
    _mark_samples(ax, list(samples), samples_label)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, fontsize=9)
    ax.tick_params(labelsize=7)
    # last: the label boxes (standards and samples in one layout) are laid out on the final axis limits
    samples = list(samples)
    lx = np.concatenate([xs if labels is not None else [], [float(m[1]) for m in samples]])
    ly = np.concatenate([ys if labels is not None else [], [float(m[2]) for m in samples]])
    names = (list(labels) if labels is not None else []) + [str(m[0]) for m in samples]
    place_legend_clear(ax, relabel=(lambda: place_point_labels(ax, lx, ly, names)) if names else None)
    return fig


def calibration_png(x_std, y_std, **kw) -> bytes:
    """PNG bytes of :func:`calibration_figure` (same arguments)."""
    return figure_png(calibration_figure(x_std, y_std, **kw))


def boltzmann_figure(
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
    species_labels=None,
    point_labels=None,
    note: str = "",
):
    """Boltzmann plot: ``ln(I λ / (g_k A_ki))`` against upper-level energy, one colour per species.

    ``fits`` maps a species name to ``(slope_per_eV, intercept)``, or ``fit_y`` gives the fitted
    ordinate of every point (joined per species); the plasma temperature is
    ``T = -1 / (k_B · slope)`` with ``k_B`` in eV/K (architecture contract: energy-unit intensities).
    ``yerr``: standard uncertainties u of the ordinates.  ``species_labels`` maps a species to its
    legend text, ``point_labels`` names each point, ``note`` is written in the upper right corner.
    Returns the matplotlib Figure (:func:`figure_png` gives its PNG).

    References
    ----------
    Tognoni, E. et al. (2010), Calibration-free laser-induced breakdown spectroscopy: state of the
    art, Spectrochim. Acta B 65, 1-14 (the Boltzmann and Saha-Boltzmann plots).
    """
    E = np.asarray(upper_energy_eV, dtype=float)
    Y = np.asarray(ordinate, dtype=float)
    if E.shape != Y.shape:
        raise ValueError("energies and ordinates must have equal length")
    sp = np.asarray(species if species is not None else ["lines"] * len(E), dtype=object)
    fig, ax = new_axes((4.6, 3.2))
    colours = SPECIES_COLOURS
    for i, name in enumerate(dict.fromkeys(sp.tolist())):
        m = sp == name
        c = colours[i % len(colours)]
        lab = (species_labels or {}).get(name, str(name))
        _points(ax, E[m], Y[m], yerr=None if yerr is None else np.asarray(yerr, float)[m], color=c, label=lab)
        if fits and name in fits:
            slope, icpt = fits[name]
            xx = np.linspace(E[m].min(), E[m].max(), 2)
            ax.plot(xx, slope * xx + icpt, "-", color=c, lw=1)
        if fit_y is not None:
            fy = np.asarray(fit_y, dtype=float)[m]
            order = np.argsort(E[m])
            ok = np.isfinite(fy[order])
            ax.plot(E[m][order][ok], fy[order][ok], "-", color=c, lw=1)
    if note:
        ax.text(0.98, 0.97, note, transform=ax.transAxes, ha="right", va="top", fontsize=6)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, fontsize=8)
    ax.tick_params(labelsize=7)
    relabel = None if point_labels is None else (lambda: place_point_labels(ax, E, Y, list(point_labels), fontsize=5))
    place_legend_clear(ax, relabel=relabel)
    return fig


def boltzmann_png(upper_energy_eV, ordinate, species=None, **kw) -> bytes:
    """PNG bytes of :func:`boltzmann_figure` (same arguments)."""
    return figure_png(boltzmann_figure(upper_energy_eV, ordinate, species, **kw))


def write_png(png: bytes, path) -> Path:
    """Write PNG bytes to ``path`` atomically; an OS error becomes :class:`~compquant.errors.OutputError`."""
    from compquant.fileio import output_error, write_bytes_atomic

    out = Path(path)
    try:
        write_bytes_atomic(out, png)
    except OSError as exc:
        raise output_error(exc, out) from exc
    return out


__all__ = [
    "SPECIES_COLOURS",
    "STANDARDS_LABEL",
    "boltzmann_figure",
    "boltzmann_png",
    "calibration_figure",
    "calibration_png",
    "figure_png",
    "new_axes",
    "plain_text",
    "pyplot",
    "save_png",
    "spectrum_png",
    "write_png",
]
