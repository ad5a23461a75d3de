"""The front of the PDF certificate: title block, release banner, identification, method, results
and the statement of conformity, one function per section.

Each section function takes the :class:`~compquant.report.pdfkit.Kit`, the certificate and the
section number, and returns its flowables (an empty list: the certificate has no such section).
Contents after ISO/IEC 17025:2017 clause 7.8.2.1 (a)-(o) and 7.8.6 (from memory of the
standard); the driver is :func:`compquant.report.pdf.render_pdf_bytes`.
"""

from __future__ import annotations

from compquant.report.certificate import (
    ITEM_ONLY_STATEMENT,
    LOD_STATEMENT,
    Certificate,
    flag_text,
    uncertainty_statement,
)
from compquant.report.conformity import OUTCOME_TEXT, RULES
from compquant.report.numbers import UNIT_FACTOR, finite
from compquant.report.pdfkit import Kit, fmt_mf, fmt_sig
from compquant.report.release import NOT_VALID_FOR_RELEASE

#: the banner and page-header words: the release state, in capitals
RELEASE_BLOCKED = NOT_VALID_FOR_RELEASE.upper()

#: how each quantification basis is named in the method section
BASIS_TEXT = {
    "calibration": "calibration curves from certified reference materials",
    "cf": "calibration-free (plasma physics, closure to 100 %)",
    "pls": "multivariate (PLS) calibration",
}


def is_draft(review) -> bool:
    """True for a certificate under review that no reviewer has released yet (``review``: a
    :class:`compquant.record.states.Review`, or None for a certificate made without a review state)."""
    return review is not None and review.state != "released"


def issue_date_text(cert: Certificate, review, E) -> str:
    """The date of issue as printed: on a draft marked "(draft)", since a draft is not an issued
    report (ISO/IEC 17025:2017, 7.8.2.1: the date of issue is that of the authorised report; a
    released certificate carries the day of its release, :func:`compquant.record.review.release`)."""
    return E(cert.issue_date) + (" (draft)" if is_draft(review) else "")


def title_block(kit: Kit, cert: Certificate, review=None) -> list:
    """Laboratory name and address beside the title, number, date of issue and revision (7.8.2.1 a, b, d)."""
    from reportlab.lib import colors
    from reportlab.platypus import Spacer, Table, TableStyle

    E, P = kit.E, kit.P
    lab = cert.lab
    left = [P(E(lab.name), "lab")] + [P(E(a), "body") for a in lab.address]
    contact = " · ".join(E(x) for x in (lab.phone, lab.email) if x)
    if contact:
        left.append(P(contact, "small"))
    right = [
        P(E(cert.title), "h1"),
        P(f"No. <b>{E(cert.number)}</b>", "cellr"),
        P(f"Date of issue: {issue_date_text(cert, review, E)}", "cellr"),
    ]
    if cert.revision:
        sup = f" {E(cert.supersedes)}" if cert.supersedes else " earlier issues"
        right.append(P(f"Revision {int(cert.revision)}: supersedes{sup}", "cellr"))
    t = Table([[left, right]], colWidths=[kit.frame_w * 0.55, kit.frame_w * 0.45])
    t.setStyle(
        TableStyle(
            [
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LINEBELOW", (0, 0), (-1, -1), 1.2, colors.HexColor("#1f3b73")),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 6),
            ]
        )
    )
    out = [t]
    if lab.accreditation:
        out.append(Spacer(1, 2))
        out.append(P(E(lab.accreditation), "small"))
    out.append(Spacer(1, 5))
    return out


def release_banner(kit: Kit, reasons: list[str]) -> list:
    """The red NOT VALID FOR RELEASE banner with the release rules not met (nothing when valid)."""
    from reportlab.platypus import Spacer, Table, TableStyle

    if not reasons:
        return []
    E, P = kit.E, kit.P
    rows = [[P(RELEASE_BLOCKED, "banner")]]
    rows.append(
        [
            P(
                "These results are not valid for release and must not be used for decisions. "
                "Release rules not met (docs/certificate.md):",
                "bannersmall",
            )
        ]
    )
    for why in reasons:
        rows.append([P("• " + E(why), "bannerlist")])
    bt = Table(rows, colWidths=[kit.frame_w])
    bt.setStyle(
        TableStyle(
            [
                ("BACKGROUND", (0, 0), (-1, -1), kit.red),
                ("TOPPADDING", (0, 0), (-1, -1), 4),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 5),
            ]
        )
    )
    return [bt, Spacer(1, 4)]


def identification(kit: Kit, cert: Certificate, sec: int, review=None) -> list:
    """Certificate, client and item identification, dates and place of work (7.8.2.1 c, e, g-l)."""
    E, P = kit.E, kit.P
    s, c, lab = cert.sample, cert.client, cert.lab
    client = E(c.name) if c.name else "<i>not stated</i>"
    if c.address:
        client += "<br/>" + "<br/>".join(E(a) for a in c.address)
    id_rows = [("Certificate number", f"<b>{E(cert.number)}</b>")]
    if cert.supersedes:
        why = ": " + E(cert.revision_reason) if cert.revision_reason else ""
        id_rows.append(("Supersedes", E(cert.supersedes) + why))
    id_rows += [
        ("Client", client),
        ("Client reference", kit.txt_or(c.reference, "none")),
        ("Sample identification", f"<b>{E(s.sample_id)}</b>"),
        ("Sample description", kit.txt_or(s.description, "none given")),
        ("Condition of the item", kit.txt_or(s.condition, "not recorded for this item")),
        ("Date of receipt", kit.txt_or(s.received, "not recorded for this item")),
        ("Date of measurement", kit.txt_or(s.measured)),
        ("Date of issue", issue_date_text(cert, review, E)),
        ("Place of work", E(lab.site) if lab.site else "at the laboratory address above"),
    ]
    if s.run_file:
        shots = f"; {int(s.n_shots)} shots" if s.n_shots is not None else ""
        id_rows.append(("Measurement run", E(s.run_file) + E(shots)))
    return [P(f"{sec}  Identification", "h2"), kit.kv_table(id_rows)]


def method_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """Technique, method and version, quantification basis, instrument, method file, deviations (7.8.2.1 f, p)."""
    E = kit.E
    m = cert.method
    mrows = [
        ("Technique", E(m.technique)),
        ("Method", f"{E(m.method_id)}, version {E(m.version)}"),
    ]
    if m.description:
        mrows.append(("Description", E(m.description)))
    mrows.append(("Quantification", E(BASIS_TEXT.get(m.basis, m.basis))))
    if m.instrument:
        mrows.append(("Instrument", E(m.instrument)))
    if m.file_name or m.file_sha256:
        mrows.append(("Method file", E(m.file_name) + kit.mono_sha(m.file_sha256)))
    devs = "<br/>".join("• " + E(d) for d in cert.deviations) if cert.deviations else "none"
    mrows.append(("Deviations from the method", devs))
    return [kit.P(f"{sec}  Method", "h2"), kit.kv_table(mrows)]


def _results_rows(cert: Certificate, k_all_2: bool) -> list[list[str]]:
    """One row of texts per result (ResultRow.reported() does the rounding and the unit)."""
    rows = []
    for r in cert.results:
        rep = r.reported()
        rows.append(
            [
                r.element,
                rep.value,
                (rep.U + ("" if k_all_2 or not finite(r.k) else f" (k = {r.k:.2f})")) if rep.U else "–",
                rep.unit,
                rep.lod or "–",
                rep.loq or "–",
                r.line_id.replace(";", "; "),
                ", ".join(r.all_flags()),
            ]
        )
    return rows


def results_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """Results with U and k, LOD, LOQ, flags explained, elements not quantified, item-only statement (7.8.2.1 n, o)."""
    from reportlab.platypus import Spacer

    E, P = kit.E, kit.P
    out = [P(f"{sec}  Results", "h2")]
    k_all_2 = cert.coverage_factors() in ([], [2.0])
    rows = _results_rows(cert, k_all_2)
    if rows:
        base = [11, 14, 12, 8, 10, 10, 17]  # relative widths; the Flags column fits its longest flag name
        flag = kit.share_to_fit([f for r in rows for f in r[-1].split(", ")], least=20 / 102, most=0.34)
        out.append(
            kit.grid_table(
                ["Element", "Mass fraction", "U (k = 2)" if k_all_2 else "U", "Unit", "LOD", "LOQ", "Line", "Flags"],
                rows,
                [b / sum(base) * (1.0 - flag) for b in base] + [flag],
                right_cols=(1, 2, 4, 5),
            )
        )
    else:
        out.append(P("<i>No element was quantified.</i>"))
    out.append(Spacer(1, 3))
    out.append(P(E(uncertainty_statement(cert.coverage_factors())), "small"))
    out.append(P(E(LOD_STATEMENT), "small"))
    if any(r.basis == "cf" for r in cert.results):
        out.append(
            P(
                "Calibration-free results have no blank-based LOD or LOQ (shown as –); each value "
                "rests on the lines listed.",
                "small",
            )
        )
    if cert.qc.blank:
        out.append(P("s_blank for LOD and LOQ from " + E(cert.qc.blank), "small"))
    flags = cert.flags_used()
    if flags:
        out.append(P("Flags", "h3"))
        key = kit.share_to_fit(flags, least=0.18, most=0.35)  # a flag's name on one line
        out.append(kit.grid_table(["Flag", "Meaning"], [[f, flag_text(f)] for f in flags], [key, 1.0 - key]))
    out.append(P("Elements detected but not quantified", "h3"))
    out.append(P(E(", ".join(cert.detected_not_quantified)) if cert.detected_not_quantified else "none"))
    out.append(Spacer(1, 4))
    out.append(P(E(ITEM_ONLY_STATEMENT), "statement"))
    return out


def _conformity_result(e, r, k_all_2: bool = True) -> tuple[str, str]:
    """(result, U) texts of one element of a specification, in the specification's unit (U with
    its coverage factor when the certificate's results do not all use k = 2)."""
    f = UNIT_FACTOR.get(e.unit, 100.0)
    if e.outcome == "remainder":
        return "remainder", ""
    if r is None:
        return "not determined", ""
    if r.below_lod:
        lod = fmt_sig(r.lod * f, 2) if finite(r.lod) else ""
        return f"< LOD ({lod})", ""
    val, uu, _ = fmt_mf(r.mass_fraction, r.U, e.unit)
    if uu and not k_all_2 and finite(r.k):
        uu += f" (k = {r.k:.2f})"
    return val, uu


def conformity_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """Statement of conformity with its specification and decision rule (7.8.6; ILAC G8:09/2019)."""
    from reportlab.platypus import Spacer

    cs = cert.conformity
    if cs is None:
        return []
    E, P = kit.E, kit.P
    out = [P(f"{sec}  Statement of conformity", "h2")]
    srows = [("Specification", E(cs.specification)), ("Grade", E(cs.grade))]
    if cs.source:
        srows.append(("Source", E(cs.source)))
    srows.append(("Decision rule", f"<b>{E(cs.rule)}</b>: " + E(cs.rule_text or RULES.get(cs.rule, ""))))
    out.append(kit.kv_table(srows))
    out.append(Spacer(1, 3))
    crow = []
    by_el = {r.element: r for r in cert.results}
    k_all_2 = cert.coverage_factors() in ([], [2.0])
    for e in cs.elements:
        f = UNIT_FACTOR.get(e.unit, 100.0)
        lo = f"{e.lower * f:.6g}" if e.lower is not None else "–"
        hi = f"{e.upper * f:.6g}" if e.upper is not None else "–"
        val, uu = _conformity_result(e, by_el.get(e.element), k_all_2)
        crow.append([e.element, e.unit, lo, hi, val, uu or "–", e.outcome])
    out.append(
        kit.grid_table(
            ["Element", "Unit", "Min", "Max", "Result", "U (k = 2)" if k_all_2 else "U", "Outcome"],
            crow,
            [10, 8, 11, 11, 16, 12, 20],
            right_cols=(2, 3, 4, 5),
        )
    )
    out.append(P(E(cs.statement), "statement"))
    out.append(P(E(f"Outcome '{cs.outcome}': {OUTCOME_TEXT.get(cs.outcome, cs.outcome)}."), "small"))
    return out


__all__ = [
    "BASIS_TEXT",
    "RELEASE_BLOCKED",
    "conformity_section",
    "identification",
    "is_draft",
    "issue_date_text",
    "method_section",
    "release_banner",
    "results_section",
    "title_block",
]
