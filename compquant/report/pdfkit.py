"""The toolkit of the PDF certificate: fonts, paragraph styles, escaping, tables and number texts.

Shared by the section renderers (:mod:`compquant.report.pdf_front`, :mod:`compquant.report.pdf_back`)
and the driver (:mod:`compquant.report.pdf`).  Every user-supplied string goes through
:func:`escape_text` before it becomes Paragraph markup.
"""

from __future__ import annotations

from pathlib import Path
from xml.sax.saxutils import escape as _xml_escape

from compquant.fileio import visible_text
from compquant.report.numbers import UNIT_FACTOR, choose_unit, finite, round_sig, value_and_u

_FONTS: dict[str, str] | None = None


def escape_text(s) -> str:
    """User text -> safe reportlab Paragraph markup that renders the text literally."""
    return _xml_escape(visible_text(s), {'"': "&quot;"})


def _fonts() -> dict[str, str]:
    """Register DejaVu Sans (shipped with matplotlib) for full Unicode; fall back to Helvetica."""
    global _FONTS
    if _FONTS is not None:
        return _FONTS
    try:
        import matplotlib
        from reportlab.lib.fonts import addMapping
        from reportlab.pdfbase import pdfmetrics
        from reportlab.pdfbase.ttfonts import TTFont

        ttf = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
        names = {"normal": "CQSans", "bold": "CQSans-Bold", "italic": "CQSans-Oblique", "mono": "CQMono"}
        files = {
            "normal": "DejaVuSans.ttf",
            "bold": "DejaVuSans-Bold.ttf",
            "italic": "DejaVuSans-Oblique.ttf",
            "mono": "DejaVuSansMono.ttf",
        }
        for key, fname in files.items():
            if names[key] not in pdfmetrics.getRegisteredFontNames():
                pdfmetrics.registerFont(TTFont(names[key], str(ttf / fname)))
        addMapping("CQSans", 0, 0, "CQSans")
        addMapping("CQSans", 1, 0, "CQSans-Bold")
        addMapping("CQSans", 0, 1, "CQSans-Oblique")
        addMapping("CQSans", 1, 1, "CQSans-Bold")
        _FONTS = names
    except Exception:  # font files missing: standard PDF fonts (Latin-1 only)
        _FONTS = {
            "normal": "Helvetica",
            "bold": "Helvetica-Bold",
            "italic": "Helvetica-Oblique",
            "mono": "Courier",
        }
    return _FONTS


def missing_glyphs(text) -> str:
    """The characters of ``text`` (as printed, after :func:`visible_text`) that the certificate's
    body font cannot draw; they would print as empty boxes, so two different ids could look alike."""
    from reportlab.pdfbase import pdfmetrics

    name = _fonts()["normal"]
    shown = visible_text(text)
    if name == "Helvetica":
        return "".join(dict.fromkeys(ch for ch in shown if ord(ch) > 255))
    face = pdfmetrics.getFont(name).face
    return "".join(dict.fromkeys(ch for ch in shown if ord(ch) not in face.charToGlyph))


def _styles():
    """The paragraph styles of the certificate, by short name (one base style, the rest derived)."""
    from reportlab.lib import colors
    from reportlab.lib.enums import TA_CENTER, TA_RIGHT
    from reportlab.lib.styles import ParagraphStyle

    f = _fonts()
    base = ParagraphStyle("cq-body", fontName=f["normal"], fontSize=8.8, leading=11.2, splitLongWords=1)
    white = colors.white
    # name: (font, size, leading, further attributes); font None = the base font
    specs = {
        "small": (None, 7.4, 9.2, {}),
        "cell": (None, 7.8, 9.6, {}),
        "cellb": ("bold", 7.8, 9.6, {}),
        "cellr": (None, 7.8, 9.6, {"alignment": TA_RIGHT}),
        "mono": ("mono", 6.2, 7.8, {}),
        "h1": ("bold", 15, 18, {"alignment": TA_RIGHT}),
        "lab": ("bold", 11.5, 14, {}),
        "h2": ("bold", 10.5, 13, {"spaceBefore": 9, "spaceAfter": 3, "textColor": colors.HexColor("#1f3b73"),
                                  "keepWithNext": 1}),
        "h3": ("bold", 9, 11.5, {"spaceBefore": 5, "spaceAfter": 2, "keepWithNext": 1}),
        "banner": ("bold", 14, 17, {"alignment": TA_CENTER, "textColor": white}),
        "bannersmall": (None, 8.5, 10.5, {"alignment": TA_CENTER, "textColor": white}),
        "bannerlist": (None, 8.5, 10.5, {"leftIndent": 10, "firstLineIndent": -8, "textColor": white}),
        "end": ("bold", 10, 13, {"alignment": TA_CENTER, "spaceBefore": 12}),
        "caption": ("italic", 7.6, 9.4, {"spaceAfter": 6}),
        "statement": ("bold", 9, 11.5, {"spaceBefore": 3, "spaceAfter": 3}),
    }
    out = {"body": base}
    for name, (font, size, leading, more) in specs.items():
        if font is not None:
            more = {"fontName": f[font], **more}
        out[name] = ParagraphStyle(f"cq-{name}", parent=base, fontSize=size, leading=leading, **more)
    return out


def fmt_mf(x, U=None, unit=None):
    """(value, U, unit) texts for a mass fraction in g/g."""
    if not finite(x):
        return "", "", unit or ""
    unit = unit or choose_unit(x)
    f = UNIT_FACTOR[unit]
    v, u = value_and_u(x * f, U * f if finite(U) else None)
    return v, u, unit


def fmt_sig(x, sig=3) -> str:
    return round_sig(x, sig) if finite(x) else ""


def fmt_2dp(x) -> str:
    return f"{x:.2f}" if finite(x) else ""

class Kit:
    """What every section renderer needs: styles, fonts, the frame width and the table helpers.

    ``P(text, style)`` makes a Paragraph of ready markup; ``E`` escapes user text; ``kv_table``
    is a two-column key/value table; ``grid_table`` a gridded table with a header row.
    """

    def __init__(self, frame_w: float):
        from reportlab.lib import colors
        from reportlab.platypus import TableStyle

        self.st = _styles()
        self.fonts = _fonts()
        self.frame_w = frame_w
        self.grid = colors.HexColor("#9aa5b8")
        self.head_bg = colors.HexColor("#e6ebf3")
        self.red = colors.HexColor("#b0171f")
        self.grid_style = TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("BACKGROUND", (0, 0), (-1, 0), self.head_bg),
                ("GRID", (0, 0), (-1, -1), 0.3, self.grid),
                ("TOPPADDING", (0, 0), (-1, -1), 1.6),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 1.8),
            ]
        )

    E = staticmethod(escape_text)

    def P(self, text, style="body"):
        from reportlab.platypus import Paragraph

        return Paragraph(text, self.st[style])

    def kv_table(self, rows, key_w=None):
        """Key/value rows (value: ready markup when a str, else escaped) under thin rules."""
        from reportlab.lib.units import mm
        from reportlab.platypus import Table, TableStyle

        key_w = 44 * mm if key_w is None else key_w
        E, P = self.E, self.P
        data = [[P(E(k), "cellb"), P(v if isinstance(v, str) else E(v), "cell")] for k, v in rows]
        t = Table(data, colWidths=[key_w, self.frame_w - key_w])
        t.setStyle(
            TableStyle(
                [
                    ("VALIGN", (0, 0), (-1, -1), "TOP"),
                    ("LINEBELOW", (0, 0), (-1, -1), 0.25, self.grid),
                    ("TOPPADDING", (0, 0), (-1, -1), 1.6),
                    ("BOTTOMPADDING", (0, 0), (-1, -1), 1.6),
                ]
            )
        )
        return t

    def grid_table(self, header, rows, widths, right_cols=()):
        """A gridded table of escaped texts; ``widths`` are relative; ``right_cols`` align right."""
        from reportlab.platypus import Table

        E, P = self.E, self.P
        data = [[P(E(h), "cellb") for h in header]]
        for r in rows:
            data.append([P(E(c), "cellr" if i in right_cols else "cell") for i, c in enumerate(r)])
        tot = sum(widths)
        t = Table(data, colWidths=[w * self.frame_w / tot for w in widths], repeatRows=1)
        t.setStyle(self.grid_style)
        return t

    def share_to_fit(self, texts, style="cell", least=0.0, most=1.0):
        """The share of the frame width a column needs to show the longest of ``texts`` on one
        line in ``style`` (with the grid's cell padding), clamped to ``[least, most]``."""
        from reportlab.pdfbase.pdfmetrics import stringWidth

        st = self.st[style]
        need = max((stringWidth(str(t), st.fontName, st.fontSize) for t in texts), default=0.0) + 2 * 6.0
        return min(max(need / self.frame_w, least), most)

    def txt_or(self, v, default="not recorded"):
        """Escaped ``v``, or ``default`` in italics when ``v`` is empty."""
        return self.E(v) if v not in (None, "") else f"<i>{default}</i>"

    def mono_sha(self, sha: str) -> str:
        """A SHA-256 under a file name: small monospaced markup (empty for no hash)."""
        return f"<br/><font size=6.5 face='{self.fonts['mono']}'>SHA-256 {self.E(sha)}</font>" if sha else ""


__all__ = ["Kit", "fmt_2dp", "fmt_mf", "fmt_sig", "escape_text", "missing_glyphs", "visible_text"]
