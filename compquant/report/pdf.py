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
import unicodedata
from pathlib import Path
from xml.sax.saxutils import escape as _xml_escape

from compquant.errors import InputError
from compquant.fileio import atomic_path
from compquant.report.certificate import (
    ITEM_ONLY_STATEMENT,
    LOD_STATEMENT,
    Certificate,
    flag_text,
    uncertainty_statement,
)
from compquant.report.conformity import OUTCOME_TEXT, RULES
from compquant.report.jsonform import RELEASE_BLOCKED
from compquant.report.numbers import UNIT_FACTOR, choose_unit, finite, round_sig, sci_text, value_and_u

_FONTS: dict[str, str] | None = None


def visible_text(s) -> str:
    """Replace control, format, surrogate and unassigned characters by visible escapes."""
    out = []
    for ch in str(s):
        cat = unicodedata.category(ch)
        if cat in ("Cc", "Cf", "Cs", "Co", "Cn", "Zl", "Zp"):
            o = ord(ch)
            out.append(f"\\x{o:02x}" if o < 256 else f"\\u{o:04x}")
        else:
            out.append(ch)
    return "".join(out)


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
    from reportlab.lib import colors
    from reportlab.lib.enums import TA_CENTER, TA_RIGHT
    from reportlab.lib.styles import ParagraphStyle

    f = _fonts()
    base = ParagraphStyle("cq-body", fontName=f["normal"], fontSize=8.8, leading=11.2, splitLongWords=1)
    return {
        "body": base,
        "small": ParagraphStyle("cq-small", parent=base, fontSize=7.4, leading=9.2),
        "cell": ParagraphStyle("cq-cell", parent=base, fontSize=7.8, leading=9.6),
        "cellb": ParagraphStyle("cq-cellb", parent=base, fontName=f["bold"], fontSize=7.8, leading=9.6),
        "cellr": ParagraphStyle("cq-cellr", parent=base, fontSize=7.8, leading=9.6, alignment=TA_RIGHT),
        "mono": ParagraphStyle("cq-mono", parent=base, fontName=f["mono"], fontSize=6.2, leading=7.8),
        "h1": ParagraphStyle("cq-h1", parent=base, fontName=f["bold"], fontSize=15, leading=18, alignment=TA_RIGHT),
        "lab": ParagraphStyle("cq-lab", parent=base, fontName=f["bold"], fontSize=11.5, leading=14),
        "h2": ParagraphStyle(
            "cq-h2",
            parent=base,
            fontName=f["bold"],
            fontSize=10.5,
            leading=13,
            spaceBefore=9,
            spaceAfter=3,
            textColor=colors.HexColor("#1f3b73"),
            keepWithNext=1,
        ),
        "h3": ParagraphStyle(
            "cq-h3",
            parent=base,
            fontName=f["bold"],
            fontSize=9,
            leading=11.5,
            spaceBefore=5,
            spaceAfter=2,
            keepWithNext=1,
        ),
        "banner": ParagraphStyle(
            "cq-banner",
            parent=base,
            fontName=f["bold"],
            fontSize=14,
            leading=17,
            alignment=TA_CENTER,
            textColor=colors.white,
        ),
        "bannersmall": ParagraphStyle(
            "cq-bannersmall",
            parent=base,
            fontSize=8.5,
            leading=10.5,
            alignment=TA_CENTER,
            textColor=colors.white,
        ),
        "end": ParagraphStyle(
            "cq-end",
            parent=base,
            fontName=f["bold"],
            fontSize=10,
            leading=13,
            alignment=TA_CENTER,
            spaceBefore=12,
        ),
        "caption": ParagraphStyle(
            "cq-caption", parent=base, fontName=f["italic"], fontSize=7.6, leading=9.4, spaceAfter=6
        ),
        "statement": ParagraphStyle(
            "cq-statement",
            parent=base,
            fontName=f["bold"],
            fontSize=9,
            leading=11.5,
            spaceBefore=3,
            spaceAfter=3,
        ),
    }


def _fmt_mf(x, U=None, unit=None):
    """(value, U, unit) texts for a mass fraction in g/g."""
    if not finite(x):
        return "", "", unit or ""
    unit = unit or choose_unit(x)
    f = UNIT_FACTOR[unit]
    v, u = value_and_u(x * f, U * f if finite(U) else None)
    return v, u, unit


def _fmt(x, sig=3) -> str:
    return round_sig(x, sig) if finite(x) else ""


def _fmt_2dp(x) -> str:
    return f"{x:.2f}" if finite(x) else ""


def _standards_tables(standards, P, E, frame_w, table_style, per_table: int = 7) -> list:
    """Certified values as a matrix: one row per standard, one column per element (value over ± U)."""
    from reportlab.platypus import Table

    elements = list(dict.fromkeys(sv.element for sv in standards))
    ids = list(dict.fromkeys(sv.standard_id for sv in standards))
    by = {(sv.standard_id, sv.element): sv for sv in standards}
    units = {}
    for el in elements:
        vals = [sv.mass_fraction for sv in standards if sv.element == el and finite(sv.mass_fraction)]
        units[el] = choose_unit(max(vals) if vals else None)
    out = []
    for k in range(0, len(elements), per_table):
        els = elements[k : k + per_table]
        data = [[P("Standard", "cellb")] + [P(E(f"{el} ({units[el]})"), "cellb") for el in els]]
        for sid in ids:
            row = [P(E(sid), "cell")]
            for el in els:
                sv = by.get((sid, el))
                if sv is None:
                    row.append(P("–", "cellr"))
                    continue
                v, u, _ = _fmt_mf(sv.mass_fraction, sv.U, units[el])
                row.append(P(E(v) + (f"<br/><font size=6.6>± {E(u)}</font>" if u else ""), "cellr"))
            data.append(row)
        first = frame_w * 0.16
        t = Table(data, colWidths=[first] + [(frame_w - first) / len(els)] * len(els), repeatRows=1)
        t.setStyle(table_style)
        out.append(t)
    ks = sorted({f"{sv.k:g}" for sv in standards if finite(sv.k)})
    srcs = sorted({sv.source for sv in standards if sv.source})
    note = "Certified value, with its expanded uncertainty U below" + (f" (k = {', '.join(ks)})" if ks else "")
    note += "."
    if srcs:
        note += " Source: " + "; ".join(srcs) + "."
    out.append(P(E(note), "small"))
    return out


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


def authorisation_rows(cert: Certificate, review, E) -> list[tuple[str, str]]:
    """Rows of the authorisation block (ISO/IEC 17025:2017, 7.8.2.1 o) for the review state.

    No review (None): the lab profile's signatory, as before the review step existed.  A draft
    names nobody; a released certificate names its reviewer, role, time and statement.
    """
    if review is None:
        sig = cert.signatory
        return [
            ("Authorised by", f"<b>{E(sig.name)}</b>, {E(sig.title)}"),
            ("Signature", "<br/>______________________________"),
            ("Date of issue", E(cert.issue_date)),
        ]
    if review.state != "released":
        return [
            ("Review state", f"<b>{E(review.state.upper())}</b>: not reviewed, not authorised for release"),
            ("Authorised by", "<i>nobody yet: a certificate is authorised when a reviewer releases it</i>"),
            ("Date of issue", E(cert.issue_date) + " (draft)"),
        ]
    rows = [
        ("Authorised by", f"<b>{E(review.reviewer)}</b>" + (f", {E(review.role)}" if review.role else "")),
        ("Released (UTC)", E(review.at)),
    ]
    if review.statement:
        rows.append(("Statement", E(review.statement)))
    rows.append(("Date of issue", E(cert.issue_date)))
    return rows


def render_pdf_bytes(cert: Certificate, review=None) -> tuple[bytes, int]:
    """Render the certificate; return ``(pdf_bytes, n_pages)``.

    ``review`` (a :class:`compquant.record.states.Review`, optional) sets the authorisation
    block and, unless released, the DRAFT watermark on every page.
    """
    from reportlab.lib import colors
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm
    from reportlab.pdfgen import canvas as rl_canvas
    from reportlab.platypus import (
        Image,
        KeepTogether,
        Paragraph,
        SimpleDocTemplate,
        Spacer,
        Table,
        TableStyle,
    )

    cert.validate()
    st = _styles()
    fonts = _fonts()
    E = escape_text
    reasons = cert.release_reasons()
    blocked = bool(reasons)
    number = visible_text(cert.number)
    page_w, page_h = A4
    margin = 17 * mm
    frame_w = page_w - 2 * margin
    grid = colors.HexColor("#9aa5b8")
    head_bg = colors.HexColor("#e6ebf3")
    red = colors.HexColor("#b0171f")

    def P(text, style="body"):
        return Paragraph(text, st[style])

    def kv_table(rows, key_w=44 * mm):
        data = [[P(E(k), "cellb"), P(v if isinstance(v, str) else E(v), "cell")] for k, v in rows]
        t = Table(data, colWidths=[key_w, frame_w - key_w])
        t.setStyle(
            TableStyle(
                [
                    ("VALIGN", (0, 0), (-1, -1), "TOP"),
                    ("LINEBELOW", (0, 0), (-1, -1), 0.25, grid),
                    ("TOPPADDING", (0, 0), (-1, -1), 1.6),
                    ("BOTTOMPADDING", (0, 0), (-1, -1), 1.6),
                ]
            )
        )
        return t

    grid_style = TableStyle(
        [
            ("VALIGN", (0, 0), (-1, -1), "TOP"),
            ("BACKGROUND", (0, 0), (-1, 0), head_bg),
            ("GRID", (0, 0), (-1, -1), 0.3, grid),
            ("TOPPADDING", (0, 0), (-1, -1), 1.6),
            ("BOTTOMPADDING", (0, 0), (-1, -1), 1.8),
        ]
    )

    def grid_table(header, rows, widths, right_cols=()):
        data = [[P(E(h), "cellb") for h in header]]
        for r in rows:
            data.append([P(E(c), "cellr" if i in right_cols else "cell") for i, c in enumerate(r)])
        tot = sum(widths)
        t = Table(data, colWidths=[w * frame_w / tot for w in widths], repeatRows=1)
        t.setStyle(grid_style)
        return t

    def txt_or(v, default="not recorded"):
        return E(v) if v not in (None, "") else f"<i>{default}</i>"

    story = []
    # ---- title block -----------------------------------------------------------------------
    lab = cert.lab
    left = [P(E(lab.name), "lab")] + [P(E(a), "body") for a in lab.address]
    contact = " · ".join(E(x) for x in (lab.phone, lab.email) if x)
    if contact:
        left.append(P(contact, "small"))
    right = [
        P(E(cert.title), "h1"),
        Paragraph(f"No. <b>{E(cert.number)}</b>", st["cellr"]),
        Paragraph(f"Date of issue: {E(cert.issue_date)}", st["cellr"]),
    ]
    if cert.revision:
        right.append(Paragraph(f"Revision {int(cert.revision)}: replaces earlier issues", st["cellr"]))
    t = Table([[left, right]], colWidths=[frame_w * 0.55, frame_w * 0.45])
    t.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LINEBELOW", (0, 0), (-1, -1), 1.2, colors.HexColor("#1f3b73")),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 6),
            ]
        )
    )
    story.append(t)
    if lab.accreditation:
        story.append(Spacer(1, 2))
        story.append(P(E(lab.accreditation), "small"))
    story.append(Spacer(1, 5))
    if blocked:
        rows = [[P(RELEASE_BLOCKED, "banner")]]
        rows.append(
            [
                P(
                    "Quality-control criteria were not met; these results must not be released "
                    "or used for decisions. Reasons: " + E("; ".join(reasons)),
                    "bannersmall",
                )
            ]
        )
        bt = Table(rows, colWidths=[frame_w])
        bt.setStyle(
            TableStyle(
                [
                    ("BACKGROUND", (0, 0), (-1, -1), red),
                    ("TOPPADDING", (0, 0), (-1, -1), 4),
                    ("BOTTOMPADDING", (0, 0), (-1, -1), 5),
                ]
            )
        )
        story.append(bt)
        story.append(Spacer(1, 4))

    # ---- 1 identification ---------------------------------------------------------------
    s = cert.sample
    c = cert.client
    story.append(P("1  Identification", "h2"))
    client = E(c.name) if c.name else "<i>not stated</i>"
    if c.address:
        client += "<br/>" + "<br/>".join(E(a) for a in c.address)
    id_rows = [
        ("Certificate number", f"<b>{E(cert.number)}</b>"),
        ("Client", client),
        ("Client reference", txt_or(c.reference, "none")),
        ("Sample identification", f"<b>{E(s.sample_id)}</b>"),
        ("Sample description", txt_or(s.description, "none given")),
        ("Condition of the item", txt_or(s.condition)),
        ("Date of receipt", txt_or(s.received)),
        ("Date of measurement", txt_or(s.measured)),
        ("Date of issue", E(cert.issue_date)),
        ("Place of work", E(lab.site) if lab.site else "at the laboratory address above"),
    ]
    if s.run_file:
        shots = f"; {int(s.n_shots)} shots" if s.n_shots is not None else ""
        id_rows.append(("Measurement run", E(s.run_file) + E(shots)))
    story.append(kv_table(id_rows))

    # ---- 2 method -------------------------------------------------------------------------------
    m = cert.method
    story.append(P("2  Method", "h2"))
    basis = {
        "calibration": "calibration curves from certified reference materials",
        "cf": "calibration-free (plasma physics, closure to 100 %)",
        "pls": "multivariate (PLS) calibration",
    }.get(m.basis, m.basis)
    mrows = [
        ("Technique", E(m.technique)),
        ("Method", f"{E(m.method_id)}, version {E(m.version)}"),
    ]
    if m.description:
        mrows.append(("Description", E(m.description)))
    mrows.append(("Quantification", E(basis)))
    if m.instrument:
        mrows.append(("Instrument", E(m.instrument)))
    if m.file_name or m.file_sha256:
        mrows.append(
            (
                "Method file",
                E(m.file_name)
                + (
                    f"<br/><font size=6.5 face='{fonts['mono']}'>SHA-256 {E(m.file_sha256)}</font>"
                    if m.file_sha256
                    else ""
                ),
            )
        )
    devs = "<br/>".join("• " + E(d) for d in cert.deviations) if cert.deviations else "none"
    mrows.append(("Deviations from the method", devs))
    story.append(kv_table(mrows))

    # ---- 3 results --------------------------------------------------------------------------------
    story.append(P("3  Results", "h2"))
    rows = []
    k_all_2 = cert.coverage_factors() in ([], [2.0])
    for r in cert.results:
        rep = r.reported()
        fl = ", ".join(r.all_flags())
        rows.append(
            [
                r.element,
                rep.value,
                (rep.U + ("" if k_all_2 or not finite(r.k) else f" (k = {r.k:.2f})")) if rep.U else "–",
                rep.unit,
                rep.lod or "–",
                rep.loq or "–",
                r.line_id.replace(";", "; "),
                fl,
            ]
        )
    if rows:
        story.append(
            grid_table(
                ["Element", "Mass fraction", "U (k = 2)" if k_all_2 else "U", "Unit", "LOD", "LOQ", "Line", "Flags"],
                rows,
                [11, 14, 12, 8, 10, 10, 17, 20],
                right_cols=(1, 2, 4, 5),
            )
        )
    else:
        story.append(P("<i>No element was quantified.</i>"))
    story.append(Spacer(1, 3))
    story.append(P(E(uncertainty_statement(cert.coverage_factors())), "small"))
    story.append(P(E(LOD_STATEMENT), "small"))
    if any(r.basis == "cf" for r in cert.results):
        story.append(
            P(
                "Calibration-free results have no blank-based LOD or LOQ (shown as –); each value "
                "rests on the lines listed.",
                "small",
            )
        )
    if cert.qc.blank:
        story.append(P("s_blank for LOD and LOQ from " + E(cert.qc.blank), "small"))
    flags = cert.flags_used()
    if flags:
        story.append(P("Flags", "h3"))
        story.append(grid_table(["Flag", "Meaning"], [[f, flag_text(f)] for f in flags], [18, 82]))
    story.append(P("Elements detected but not quantified", "h3"))
    story.append(P(E(", ".join(cert.detected_not_quantified)) if cert.detected_not_quantified else "none"))
    story.append(Spacer(1, 4))
    story.append(P(E(ITEM_ONLY_STATEMENT), "statement"))

    sec = 4
    # ---- 4 conformity ------------------------------------------------------------------------------
    if cert.conformity is not None:
        cs = cert.conformity
        story.append(P(f"{sec}  Statement of conformity", "h2"))
        sec += 1
        srows = [("Specification", E(cs.specification)), ("Grade", E(cs.grade))]
        if cs.source:
            srows.append(("Source", E(cs.source)))
        srows.append(("Decision rule", f"<b>{E(cs.rule)}</b>: " + E(cs.rule_text or RULES.get(cs.rule, ""))))
        story.append(kv_table(srows))
        story.append(Spacer(1, 3))
        crow = []
        by_el = {r.element: r for r in cert.results}
        for e in cs.elements:
            f = UNIT_FACTOR.get(e.unit, 100.0)
            lo = f"{e.lower * f:.6g}" if e.lower is not None else "–"
            hi = f"{e.upper * f:.6g}" if e.upper is not None else "–"
            r = by_el.get(e.element)
            if e.outcome == "remainder":
                val, uu = "remainder", ""
            elif r is None:
                val, uu = "not determined", ""
            elif r.below_lod:
                lod = _fmt(r.lod * f, 2) if finite(r.lod) else ""
                val, uu = f"< LOD ({lod})", ""
            else:
                val, uu, _ = _fmt_mf(r.mass_fraction, r.U, e.unit)
            crow.append([e.element, e.unit, lo, hi, val, uu or "–", e.outcome])
        story.append(
            grid_table(
                ["Element", "Unit", "Min", "Max", "Result", "U (k = 2)", "Outcome"],
                crow,
                [10, 8, 11, 11, 16, 12, 20],
                right_cols=(2, 3, 4, 5),
            )
        )
        story.append(P(E(cs.statement), "statement"))
        story.append(P(E(f"Outcome '{cs.outcome}': {OUTCOME_TEXT.get(cs.outcome, cs.outcome)}."), "small"))

    # ---- quality control ----------------------------------------------------------------------------
    qc = cert.qc
    story.append(P(f"{sec}  Quality control", "h2"))
    sec += 1
    d = qc.drift
    if d.applied:
        dtxt = "Applied. " + E(d.description)
        if d.setup_samples:
            dtxt += "<br/>Setup samples: " + E(", ".join(d.setup_samples))
        if d.factors:
            dtxt += "<br/>Factors: " + E(", ".join(f"{k} {v:.4f}" for k, v in d.factors.items()))
    else:
        dtxt = "Not applied." + (" " + E(d.description[:1].upper() + d.description[1:]) if d.description else "")
    story.append(kv_table([("Drift standardisation", dtxt)]))
    story.append(P("Check samples", "h3"))
    if qc.check_samples:
        crows = []
        for ck in qc.check_samples:
            unit = choose_unit(ck.certified)
            mv, mu, _ = _fmt_mf(ck.measured, ck.U_measured, unit)
            cv, cu, _ = _fmt_mf(ck.certified, ck.U_certified, unit)
            crows.append(
                [
                    ck.sample_id,
                    ck.standard_ref,
                    ck.element,
                    f"{mv} ± {mu}" if mu else mv,
                    f"{cv} ± {cu}" if cu else cv,
                    unit,
                    _fmt_2dp(ck.z) or "–",
                    _fmt_2dp(ck.En) or "–",
                    "pass" if ck.passed else "FAIL",
                ]
            )
        story.append(
            grid_table(
                ["Check sample", "Reference", "El.", "Found ± U", "Certified ± U", "Unit", "z", "En", "Result"],
                crows,
                [12, 12, 4.5, 15, 15, 7, 6, 6, 7],
                right_cols=(3, 4, 6, 7),
            )
        )
        crits = sorted({ck.criterion for ck in qc.check_samples})
        story.append(
            P(
                "Found: value measured in this run with its U (k = 2); Certified: the reference "
                "value with its U. En = (found - certified) / sqrt(U_found² + U_certified²); "
                "z = (found - certified) / σ_pt, with σ_pt the target standard deviation set in the "
                "method (– when none is set) (ISO 13528). "
                "Acceptance criterion: " + E("; ".join(crits)) + ".",
                "small",
            )
        )
    else:
        story.append(P("<i>No check sample was measured in this run.</i>"))
    for n in qc.notes:
        story.append(P(E(n), "small"))

    # ---- calibration / plasma --------------------------------------------------------------------------
    if cert.calibration is not None:
        cal = cert.calibration
        story.append(P(f"{sec}  Calibration", "h2"))
        sec += 1
        krows = [("Calibration", E(cal.calibration_id)), ("Established", E(cal.created))]
        if cal.description:
            krows.append(("Description", E(cal.description)))
        if cal.file_name or cal.file_sha256:
            krows.append(
                (
                    "Calibration file",
                    E(cal.file_name)
                    + (
                        f"<br/><font size=6.5 face='{fonts['mono']}'>SHA-256 {E(cal.file_sha256)}</font>"
                        if cal.file_sha256
                        else ""
                    ),
                )
            )
        story.append(kv_table(krows))
        if cal.curves:
            story.append(P("Calibration curves", "h3"))
            rows = []
            for cv in cal.curves:
                unit = choose_unit(cv.range_high if finite(cv.range_high) else cv.range_low)
                f = UNIT_FACTOR[unit]
                rng = (
                    f"{_fmt(cv.range_low * f) if finite(cv.range_low) else '?'} to "
                    f"{_fmt(cv.range_high * f) if finite(cv.range_high) else '?'} {unit}"
                )
                rows.append(
                    [
                        cv.element,
                        cv.line_id,
                        cv.internal_standard or "none",
                        cv.model,
                        rng,
                        "" if cv.n_standards is None else str(cv.n_standards),
                        f"{cv.r_squared:.4f}" if finite(cv.r_squared) else "",
                        cv.lod_basis,
                    ]
                )
            story.append(
                grid_table(
                    ["El.", "Line", "Internal standard", "Model", "Calibrated range", "n", "R²", "LOD basis"],
                    rows,
                    [6, 15, 13, 15, 17, 5, 8, 21],
                )
            )
        if cal.standards:
            story.append(P("Certified reference materials used", "h3"))
            story.extend(_standards_tables(cal.standards, P, E, frame_w, grid_style))
    if cert.plasma is not None:
        pl = cert.plasma
        story.append(P(f"{sec}  Plasma conditions (calibration-free analysis)", "h2"))
        sec += 1
        tv, tu = value_and_u(pl.temperature_K, pl.U_temperature_K)
        prow = [("Excitation temperature T", f"{E(tv)} K" + (f" ± {E(tu)} K (U, k = 2)" if tu else ""))]
        if finite(pl.electron_density_cm3):
            nv = sci_text(pl.electron_density_cm3, 2)
            nu = f" ± {sci_text(pl.U_electron_density_cm3, 2)}" if finite(pl.U_electron_density_cm3) else ""
            prow.append(("Electron density nₑ", E(f"{nv}{nu} cm⁻³") + (" (U, k = 2)" if nu else "")))
        if pl.method:
            prow.append(("Diagnostics", E(pl.method)))
        story.append(kv_table(prow))
        if pl.lte_checks:
            story.append(P("Checks of local thermodynamic equilibrium", "h3"))
            rows = [
                [
                    c.name,
                    c.criterion,
                    f"{sci_text(c.value, 3)} {c.unit}".strip(),
                    f"{sci_text(c.limit, 3)} {c.unit}".strip(),
                    "met" if c.passed else "NOT MET",
                ]
                for c in pl.lte_checks
            ]
            story.append(
                grid_table(
                    ["Check", "Criterion", "Value", "Limit", "Result"],
                    rows,
                    [18, 34, 17, 17, 10],
                    right_cols=(2, 3),
                )
            )

    if cert.remarks:
        story.append(P(f"{sec}  Remarks", "h2"))
        sec += 1
        for rm in cert.remarks:
            story.append(P("• " + E(rm)))

    # ---- authorisation ----------------------------------------------------------------------------------
    auth = [P(f"{sec}  Authorisation", "h2"), kv_table(authorisation_rows(cert, review, E))]
    sec += 1
    story.append(KeepTogether(auth))

    # ---- figures ----------------------------------------------------------------------------------------
    if cert.figures:
        fig_head = [P(f"{sec}  Figures", "h2")]
        sec += 1
        half = []  # small figures go two per row

        def flush_half():
            nonlocal fig_head
            if not half:
                return
            cells = [[cell for cell in half] + ([""] if len(half) == 1 else [])]
            t = Table(cells, colWidths=[frame_w / 2, frame_w / 2])
            t.setStyle(
                TableStyle(
                    [
                        ("VALIGN", (0, 0), (-1, -1), "TOP"),
                        ("LEFTPADDING", (0, 0), (-1, -1), 2),
                        ("RIGHTPADDING", (0, 0), (-1, -1), 2),
                    ]
                )
            )
            story.append(KeepTogether([*fig_head, t]))
            fig_head = []
            half.clear()

        for i, fig in enumerate(cert.figures, 1):
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
            img = Image(io.BytesIO(png))
            wide = fig.kind == "spectrum"
            scale = (frame_w if wide else frame_w / 2 - 6) / img.imageWidth
            img.drawWidth = img.imageWidth * scale
            img.drawHeight = img.imageHeight * scale
            cap = P(f"<b>Figure {i}.</b> {E(fig.title)}" + (f" {E(fig.caption)}" if fig.caption else ""), "caption")
            if wide:
                flush_half()
                story.append(KeepTogether([*fig_head, img, cap]))
                fig_head = []
            else:
                half.append([img, cap])
                if len(half) == 2:
                    flush_half()
        flush_half()

    # ---- safety -----------------------------------------------------------------------------------------
    story.append(P(f"{sec}  Safety notes", "h2"))
    sec += 1
    for n in cert.safety_notes:
        story.append(P(f"<b>{E(n.title)}.</b> {E(n.text)}", "small"))
        story.append(Spacer(1, 2))

    # ---- provenance ---------------------------------------------------------------------------------------
    pv = cert.provenance
    story.append(P(f"{sec}  Provenance", "h2"))
    story.append(
        kv_table(
            [
                ("Software", E(f"{pv.software} {pv.version}")),
                ("Time of issue (UTC)", E(pv.issued_at)),
                ("Run file SHA-256", f"<font face='{fonts['mono']}' size=6.8>{E(pv.run_sha256)}</font>"),
            ]
        )
    )
    if pv.files:
        rows = [[f.role, f.name, f.sha256] for f in pv.files]
        data = [[P("Role", "cellb"), P("File", "cellb"), P("SHA-256", "cellb")]]
        data += [[P(E(a), "cell"), P(E(b), "cell"), P(E(h), "mono")] for a, b, h in rows]
        t = Table(data, colWidths=[frame_w * 0.15, frame_w * 0.30, frame_w * 0.55], repeatRows=1)
        t.setStyle(
            TableStyle(
                [
                    ("VALIGN", (0, 0), (-1, -1), "TOP"),
                    ("GRID", (0, 0), (-1, -1), 0.3, grid),
                    ("BACKGROUND", (0, 0), (-1, 0), head_bg),
                ]
            )
        )
        story.append(Spacer(1, 3))
        story.append(t)
    if pv.parameters:
        ptxt = "; ".join(f"{k} = {v}" for k, v in sorted(pv.parameters.items()))
        story.append(Spacer(1, 3))
        story.append(P("Parameters: " + E(ptxt), "small"))

    story.append(P(f"End of certificate {E(cert.number)}", "end"))

    # ---- page decoration: header, footer, page x of y ---------------------------------------------------
    header_left = visible_text(lab.name)[:70]
    sample_short = visible_text(s.sample_id)
    if len(sample_short) > 48:
        sample_short = sample_short[:45] + "..."

    pages_seen = [0]

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
                self._decorate(n)
                super().showPage()
            super().save()

        def _decorate(self, n):
            pg = self._pageNumber
            draw_review_watermark(self, review, page_w, page_h, fonts["bold"])
            self.saveState()
            self.setFont(fonts["normal"], 7.2)
            self.setFillColor(colors.HexColor("#333333"))
            y = page_h - 10 * mm
            self.drawString(margin, y, header_left)
            self.drawRightString(page_w - margin, y, f"No. {number}")
            self.setStrokeColor(grid)
            self.setLineWidth(0.4)
            self.line(margin, y - 2.2 * mm, page_w - margin, y - 2.2 * mm)
            if blocked:
                self.setFillColor(red)
                self.setFont(fonts["bold"], 7.2)
                self.drawCentredString(page_w / 2, y, RELEASE_BLOCKED)
                self.setFillColor(colors.HexColor("#333333"))
                self.setFont(fonts["normal"], 7.2)
            yb = 10 * mm
            self.line(margin, yb + 3.6 * mm, page_w - margin, yb + 3.6 * mm)
            self.drawString(margin, yb, f"No. {number} · sample {sample_short}")
            self.drawRightString(page_w - margin, yb, f"Page {pg} of {n}")
            self.restoreState()

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
        author=visible_text(lab.name),
        subject=f"sample {visible_text(s.sample_id)[:100]}",
        creator=f"{pv.software} {pv.version}",
    )
    doc.build(story, canvasmaker=_Canvas)
    return buf.getvalue(), pages_seen[0]


def write_pdf(cert: Certificate, path, review=None) -> int:
    """Render the certificate to ``path`` atomically; return the number of pages (``review``: see
    :func:`render_pdf_bytes`)."""
    data, n = render_pdf_bytes(cert, review)
    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(data)
    return n


__all__ = ["escape_text", "visible_text", "render_pdf_bytes", "write_pdf", "draw_review_watermark",
           "authorisation_rows", "DRAFT_WATERMARK"]
