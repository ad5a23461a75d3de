"""Rows for labels that must not overlap: greedy first-fit staggering of intervals.

Each label is a horizontal interval (its left edge and width, in pixels) on a plot's x axis.
Sorted by left edge, each label takes the lowest row whose last label ends, plus a gap, before
this one begins; a label that fits nowhere opens a new row.  This is the greedy ("first fit")
colouring of an interval graph, which uses the fewest rows possible for intervals taken in order
of their left ends (Golumbic, *Algorithmic Graph Theory and Perfect Graphs*, 2nd ed., Elsevier
2004, ch. 8).  Used by the review page (:mod:`compquant.web.labels`, and ``static/evidence.js``
after a zoom) and by the certificate's spectrum figure (:func:`compquant.plotting.spectrum_figure`).
"""

from __future__ import annotations


def stagger(x_px, widths_px, gap_px: float = 4.0) -> list[int]:
    """Row (0 = top) of each label so that no two labels in a row overlap.

    Parameters
    ----------
    x_px : left edge of each label in pixels (the line's position on screen)
    widths_px : width of each label in pixels
    gap_px : free pixels kept between two labels of a row

    Returns
    -------
    list of int, the row of each label in the input order.

    References
    ----------
    Golumbic, M. C., *Algorithmic Graph Theory and Perfect Graphs*, 2nd ed. (2004), ch. 8.
    """
    xs = [float(v) for v in x_px]
    ws = [float(v) for v in widths_px]
    if len(xs) != len(ws):
        raise ValueError("one width per label")
    order = sorted(range(len(xs)), key=lambda i: xs[i])
    row_end: list[float] = []  # right edge of the last label in each row
    rows = [0] * len(xs)
    for i in order:
        for r, end in enumerate(row_end):
            if end + gap_px <= xs[i]:
                rows[i] = r
                row_end[r] = xs[i] + ws[i]
                break
        else:
            rows[i] = len(row_end)
            row_end.append(xs[i] + ws[i])
    return rows


__all__ = ["stagger"]
