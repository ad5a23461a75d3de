"""The figures section of the PDF certificate: a spectrum across the frame, other figures two
per row, each with its numbered caption (ISO/IEC 17025:2017 clause 7.8.2.1 o: results may be
shown in figures; from memory of the standard).  Driver: :func:`compquant.report.pdf.render_pdf_bytes`.
"""

from __future__ import annotations

import io
from pathlib import Path

from compquant.errors import InputError
from compquant.report.certificate import Certificate
from compquant.report.pdfkit import Kit


def _figure_png(fig) -> bytes:
    """The PNG bytes of a figure item (its bytes, else its file); InputError when not a PNG."""
    png = fig.png
    if png is None and fig.path:
        try:
            png = Path(fig.path).read_bytes()
        except OSError as exc:
            raise InputError(
                f"cannot read figure ({exc.strerror})", where=fig.path, fix="check the figure path"
            ) from exc
    if png is None or not png.startswith(b"\x89PNG\r\n\x1a\n"):
        raise InputError(
            "figure is not a PNG image",
            where=fig.path or fig.title,
            fix="give PNG bytes or a .png file",
        )
    return png


def _figure_cell(kit: Kit, fig, i: int) -> tuple[bool, list]:
    """(wide, [image, caption]) of figure ``i``: a spectrum spans the frame, other figures half of it."""
    from reportlab.platypus import Image

    img = Image(io.BytesIO(_figure_png(fig)))
    wide = fig.kind == "spectrum"
    scale = (kit.frame_w if wide else kit.frame_w / 2 - 6) / img.imageWidth
    img.drawWidth = img.imageWidth * scale
    img.drawHeight = img.imageHeight * scale
    E = kit.E
    cap = kit.P(f"<b>Figure {i}.</b> {E(fig.title)}" + (f" {E(fig.caption)}" if fig.caption else ""), "caption")
    return wide, [img, cap]


def _figure_pair(kit: Kit, half: list):
    """One table row of one or two half-width figures."""
    from reportlab.platypus import Table, TableStyle

    cells = [[cell for cell in half] + ([""] if len(half) == 1 else [])]
    t = Table(cells, colWidths=[kit.frame_w / 2, kit.frame_w / 2])
    t.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 2),
                ("RIGHTPADDING", (0, 0), (-1, -1), 2),
            ]
        )
    )
    return t


def figures_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """The figures: a spectrum full width, the others two per row; the heading stays with the first."""
    from reportlab.platypus import KeepTogether

    if not cert.figures:
        return []
    out = []
    head = [kit.P(f"{sec}  Figures", "h2")]
    groups: list[list] = []  # each group: [img, cap] of one wide figure, or a row of half-width cells
    half: list = []
    for i, fig in enumerate(cert.figures, 1):
        wide, cell = _figure_cell(kit, fig, i)
        if wide:
            if half:
                groups.append([_figure_pair(kit, half)])
                half = []
            groups.append(cell)
        else:
            half.append(cell)
            if len(half) == 2:
                groups.append([_figure_pair(kit, half)])
                half = []
    if half:
        groups.append([_figure_pair(kit, half)])
    for n, group in enumerate(groups):
        out.append(KeepTogether([*(head if n == 0 else []), *group]))
    return out


__all__ = ["figures_section"]
