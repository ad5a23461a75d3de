"""The PDF form of a certificate (reportlab platypus).

Covers ISO/IEC 17025:2017 clause 7.8.2.1 (a) title, (b) laboratory name and
address, (c) where the work was done, (d) unique identification on every page,
page x of y and a clear end, (e) client, (f) method, (g)-(i) item
identification, description and condition, (j) date of receipt, (k) date of
measurement, (l) date of issue, (n) statement that results relate only to the
item tested, (o) results with units, (p) deviations, (q) who authorised it;
7.8.3 (measurement uncertainty, QC, flags) and 7.8.6 (statement of conformity
with its decision rule).  (From memory of ISO/IEC 17025:2017 clause 7.8.)

Every user-supplied string goes through :func:`escape_text`: markup characters
are escaped and control / format characters are shown as ``\\xNN`` or
``\\uNNNN``, so a sample id like ``<b>x</b>`` or one holding a BiDi override
prints literally and cannot change the document.
"""

from __future__ import annotations

import io
from functools import partial
from pathlib import Path

from compquant.fileio import atomic_path, visible_text
from compquant.report import pdf_back, pdf_figures, pdf_front
from compquant.report.certificate import Certificate
from compquant.report.pdf_back import authorisation_rows
from compquant.report.pdf_front import RELEASE_BLOCKED
from compquant.report.pdfkit import Kit, escape_text, missing_glyphs

#: page size and margins of the certificate (points; A4)
MARGIN_MM = 17


#: watermark text on every page of a certificate that has not been released
DRAFT_WATERMARK = "DRAFT"


def draw_review_watermark(canvas, review, page_w: float, page_h: float, font: str) -> None:
    """The DRAFT watermark across the page, for any review state other than ``released``.

    ``review`` is a :class:`compquant.record.states.Review` (or None: nothing drawn, the
    certificate predates the review step).
    """
    if review is None or review.state == "released":
        return
    from reportlab.lib import colors

    canvas.saveState()
    canvas.setFillColor(colors.HexColor("#b0171f"))
    canvas.setFillAlpha(0.16)
    canvas.setFont(font, 120)
    canvas.translate(page_w / 2, page_h / 2)
    canvas.rotate(52)
    canvas.drawCentredString(0, -40, DRAFT_WATERMARK)
    canvas.setFillAlpha(0.55)
    canvas.setFont(font, 13)
    canvas.drawCentredString(0, -70, "not reviewed - not authorised for release")
    canvas.restoreState()


def _numbered_sections(review) -> list:
    """The numbered sections in order; each returns its flowables, an empty list when absent."""
    return [
        partial(pdf_front.identification, review=review),
        pdf_front.method_section,
        pdf_front.results_section,
        pdf_front.conformity_section,
        pdf_back.qc_section,
        pdf_back.calibration_section,
        pdf_back.plasma_section,
        pdf_back.remarks_section,
        partial(pdf_back.authorisation_section, review=review),
        pdf_figures.figures_section,
        pdf_back.safety_section,
        partial(pdf_back.provenance_section, review=review),
    ]


def certificate_story(cert: Certificate, kit: Kit, review=None) -> list:
    """Every flowable of the certificate: title block, release banner, then the numbered sections
    (a section the certificate does not have takes no number)."""
    story = pdf_front.title_block(kit, cert, review) + pdf_front.release_banner(kit, cert.release_reasons())
    sec = 1
    for section in _numbered_sections(review):
        part = section(kit, cert, sec)
        if part:
            story += part
            sec += 1
    return story


class PageDecoration:
    """Header and footer of every page: lab, number, release state, sample, page x of y, watermark."""

    def __init__(self, cert: Certificate, review, kit: Kit, page_size, margin: float):
        from reportlab.lib.units import mm

        self.review, self.kit, self.margin = review, kit, margin
        self.page_w, self.page_h = page_size
        self.number = visible_text(cert.number)
        self.blocked = bool(cert.release_reasons())
        self.header_left = visible_text(cert.lab.name)[:70]
        sample_short = visible_text(cert.sample.sample_id)
        self.sample_short = sample_short[:45] + "..." if len(sample_short) > 48 else sample_short
        self.mm = mm

    def draw(self, canvas, page: int, n_pages: int) -> None:
        """Draw the decoration of page ``page`` of ``n_pages`` on ``canvas``."""
        from reportlab.lib import colors

        fonts, mm, margin, page_w = self.kit.fonts, self.mm, self.margin, self.page_w
        draw_review_watermark(canvas, self.review, page_w, self.page_h, fonts["bold"])
        canvas.saveState()
        canvas.setFont(fonts["normal"], 7.2)
        canvas.setFillColor(colors.HexColor("#333333"))
        y = self.page_h - 10 * mm
        canvas.drawString(margin, y, self.header_left)
        canvas.drawRightString(page_w - margin, y, f"No. {self.number}")
        canvas.setStrokeColor(self.kit.grid)
        canvas.setLineWidth(0.4)
        canvas.line(margin, y - 2.2 * mm, page_w - margin, y - 2.2 * mm)
        if self.blocked:
            canvas.setFillColor(self.kit.red)
            canvas.setFont(fonts["bold"], 7.2)
            canvas.drawCentredString(page_w / 2, y, RELEASE_BLOCKED)
            canvas.setFillColor(colors.HexColor("#333333"))
            canvas.setFont(fonts["normal"], 7.2)
        yb = 10 * mm
        canvas.line(margin, yb + 3.6 * mm, page_w - margin, yb + 3.6 * mm)
        canvas.drawString(margin, yb, f"No. {self.number} · sample {self.sample_short}")
        canvas.drawRightString(page_w - margin, yb, f"Page {page} of {n_pages}")
        canvas.restoreState()


def _canvas_class(decoration: PageDecoration, pages_seen: list):
    """A reportlab canvas that holds its pages back until the end, so each page can say "of n"."""
    from reportlab.pdfgen import canvas as rl_canvas

    class _Canvas(rl_canvas.Canvas):
        def __init__(self, *a, **kw):
            super().__init__(*a, **kw)
            self._pages = []

        def showPage(self):
            self._pages.append(dict(self.__dict__))
            self._startPage()

        def save(self):
            n = len(self._pages)
            pages_seen[0] = n
            for state in self._pages:
                self.__dict__.update(state)
                decoration.draw(self, self._pageNumber, n)
                super().showPage()
            super().save()

    return _Canvas


def render_pdf_bytes(cert: Certificate, review=None) -> tuple[bytes, int]:
    """Render the certificate; return ``(pdf_bytes, n_pages)``.

    ``review`` (a :class:`compquant.record.states.Review`, optional) sets the authorisation
    block and, unless released, the DRAFT watermark on every page.
    """
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm
    from reportlab.platypus import SimpleDocTemplate

    cert.validate()
    margin = MARGIN_MM * mm
    kit = Kit(A4[0] - 2 * margin)
    story = certificate_story(cert, kit, review)
    pages_seen = [0]
    canvas_class = _canvas_class(PageDecoration(cert, review, kit, A4, margin), pages_seen)
    number, lab_name, pv = visible_text(cert.number), visible_text(cert.lab.name), cert.provenance
    buf = io.BytesIO()
    doc = SimpleDocTemplate(
        buf,
        pagesize=A4,
        leftMargin=margin,
        rightMargin=margin,
        topMargin=18 * mm,
        bottomMargin=19 * mm,
        invariant=1,
        title=f"Certificate of analysis {number}",
        author=lab_name,
        subject=f"sample {visible_text(cert.sample.sample_id)[:100]}",
        creator=f"{pv.software} {pv.version}",
    )
    doc.build(story, canvasmaker=canvas_class)
    return buf.getvalue(), pages_seen[0]


def write_pdf(cert: Certificate, path, review=None) -> int:
    """Render the certificate to ``path`` atomically; return the number of pages (``review``: see
    :func:`render_pdf_bytes`)."""
    data, n = render_pdf_bytes(cert, review)
    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(data)
    return n


__all__ = [
    "DRAFT_WATERMARK",
    "RELEASE_BLOCKED",
    "PageDecoration",
    "authorisation_rows",
    "certificate_story",
    "draw_review_watermark",
    "escape_text",
    "missing_glyphs",
    "render_pdf_bytes",
    "visible_text",
    "write_pdf",
]
