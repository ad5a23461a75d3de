"""Line labels that do not overlap: greedy staggering into rows by pixel distance.

Each label is a horizontal box starting at its line's position (pixels on the plot's x axis) and
as wide as its text.  Sorted by position, each label takes the lowest row whose last label ends,
plus a gap, before this one begins; a label that fits nowhere opens a new row.  This is the
greedy ("first fit") colouring of an interval graph, which uses the fewest rows possible for
intervals taken in order of their left ends (Golumbic, *Algorithmic Graph Theory and Perfect
Graphs*, 2nd ed., Elsevier 2004, ch. 8: interval graphs are perfect and this order colours them
optimally).  The same rule runs in the browser after a zoom (``static/evidence.js``).
"""

from __future__ import annotations

#: width of one character of the label font in pixels (11 px sans-serif, typical advance ~0.6 em)
CHAR_PX = 6.6
#: height of one row of labels in pixels
ROW_PX = 14


def label_width_px(text: str, char_px: float = CHAR_PX) -> float:
    """Estimated width of a label in pixels: ``len(text) * char_px``."""
    return len(str(text)) * float(char_px)


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


def to_px(x, x_start: float, x_end: float, width_px: float) -> list[float]:
    """Data coordinates to pixels across a plot area ``width_px`` wide showing ``[x_start, x_end]``."""
    span = (float(x_end) - float(x_start)) or 1.0
    return [(float(v) - x_start) / span * width_px for v in x]


__all__ = ["CHAR_PX", "ROW_PX", "label_width_px", "stagger", "to_px"]
