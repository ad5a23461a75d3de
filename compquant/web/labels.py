"""Line labels that do not overlap: greedy staggering into rows by pixel distance.

Each label is a horizontal box starting at its line's position (pixels on the plot's x axis) and
as wide as its text.  Sorted by position, each label takes the lowest row whose last label ends,
plus a gap, before this one begins; a label that fits nowhere opens a new row.  This is the
greedy ("first fit") colouring of an interval graph, which uses the fewest rows possible for
intervals taken in order of their left ends (Golumbic, *Algorithmic Graph Theory and Perfect
Graphs*, 2nd ed., Elsevier 2004, ch. 8: interval graphs are perfect and this order colours them
optimally); the rule lives in :mod:`compquant.label_rows`.  The same rule runs in the browser
after a zoom (``static/evidence.js``).
"""

from __future__ import annotations

from compquant.label_rows import stagger  # the rule, shared with the certificate's figure

#: width of one character of the label font in pixels (11 px sans-serif, typical advance ~0.6 em)
CHAR_PX = 6.6
#: height of one row of labels in pixels
ROW_PX = 14


def label_width_px(text: str, char_px: float = CHAR_PX) -> float:
    """Estimated width of a label in pixels: ``len(text) * char_px``."""
    return len(str(text)) * float(char_px)


def to_px(x, x_start: float, x_end: float, width_px: float) -> list[float]:
    """Data coordinates to pixels across a plot area ``width_px`` wide showing ``[x_start, x_end]``."""
    span = (float(x_end) - float(x_start)) or 1.0
    return [(float(v) - x_start) / span * width_px for v in x]


__all__ = ["CHAR_PX", "ROW_PX", "label_width_px", "stagger", "to_px"]
