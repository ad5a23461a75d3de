"""The back of the PDF certificate: quality control, calibration, plasma conditions, remarks,
authorisation, safety notes and provenance, one function per section.

Each section function takes the :class:`~compquant.report.pdfkit.Kit`, the certificate and the
section number, and returns its flowables (an empty list: the certificate has no such section);
the figures section is :mod:`compquant.report.pdf_figures`.
Contents after ISO/IEC 17025:2017 clauses 7.8.2.1 (q) and 7.8.3 (from memory of the standard);
check-sample scores after ISO 13528:2022; the driver is :func:`compquant.report.pdf.render_pdf_bytes`.
"""

from __future__ import annotations

from compquant.report.certificate import Certificate
from compquant.report.numbers import UNIT_FACTOR, choose_unit, finite, sci_text, value_and_u
from compquant.report.pdf_front import issue_date_text
from compquant.report.pdfkit import Kit, fmt_2dp, fmt_mf, fmt_sig
from compquant.report.release import check_state, sigma_pt_rel_of

#: the note under the check-sample table: what the scores and states mean
CHECK_NOTE = (
    "Found: value measured in this run with its U ({k_found}); Certified: the reference "
    "value with its U. En = (found - certified) / sqrt(U_found² + U_certified²); "
    "z = (found - certified) / σ_pt, with σ_pt the target standard deviation set in the "
    "method (– when none is set) (ISO 13528). "
    "Acceptance criterion: {criteria}. "
    "A check counts only when it could fail: 'cannot fail' means sqrt(U_found² + U_certified²) "
    "is not below 3 σ_pt (σ_pt from the method, else the Horwitz function in Thompson's form); "
    "'flagged' means the found value rests on a flagged line or is below the LOD; "
    "'not counted': the certified content is below the LOQ, so the check does not "
    "verify that element."
)


def _drift_text(kit: Kit, d) -> str:
    """Markup of the drift-standardisation row: applied or not, setup samples, factors."""
    E = kit.E
    if d.applied:
        dtxt = "Applied. " + E(d.description)
        if d.setup_samples:
            dtxt += "<br/>Setup samples: " + E(", ".join(d.setup_samples))
        if d.factors:
            dtxt += "<br/>Factors: " + E(", ".join(f"{k} {v:.4f}" for k, v in d.factors.items()))
        return dtxt
    return "Not applied." + (" " + E(d.description[:1].upper() + d.description[1:]) if d.description else "")


def _check_rows(cert: Certificate) -> list[list[str]]:
    """One row of texts per check-sample comparison, in the element's unit on this certificate."""
    crows = []
    el_unit = {r.element: r.display_unit() for r in cert.results if finite(r.mass_fraction) or r.below_lod}
    for ck in cert.qc.check_samples:
        unit = el_unit.get(ck.element) or choose_unit(ck.certified)
        mv, mu, _ = fmt_mf(ck.measured, ck.U_measured, unit)
        cv, cu, _ = fmt_mf(ck.certified, ck.U_certified, unit)
        crows.append(
            [
                ck.sample_id,
                ck.standard_ref,
                ck.element,
                f"{mv} ± {mu}" if mu else mv,
                f"{cv} ± {cu}" if cu else cv,
                unit,
                fmt_2dp(ck.z) or "–",
                fmt_2dp(ck.En) or "–",
                check_state(ck, sigma_pt_rel_of(cert)),
            ]
        )
    return crows


def qc_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """Drift standardisation and check samples with En and z scores (7.8.3; ISO 13528)."""
    E, P = kit.E, kit.P
    qc = cert.qc
    out = [P(f"{sec}  Quality control", "h2"), kit.kv_table([("Drift standardisation", _drift_text(kit, qc.drift))])]
    out.append(P("Check samples", "h3"))
    if qc.check_samples:
        out.append(
            kit.grid_table(
                ["Check sample", "Reference", "El.", "Found ± U", "Certified ± U", "Unit", "z", "En", "Result"],
                _check_rows(cert),
                [12, 12, 4.5, 15, 15, 6, 5.5, 5.5, 9],
                right_cols=(3, 4, 6, 7),
            )
        )
        crits = sorted({ck.criterion for ck in qc.check_samples})
        # the check's U has the coverage the run's results have (k = 2, or Student t)
        k_found = "k = 2" if cert.coverage_factors() in ([], [2.0]) else "coverage factor k as for the results"
        out.append(P(CHECK_NOTE.format(criteria=E("; ".join(crits)), k_found=k_found), "small"))
    elif not qc.not_evaluated:
        out.append(P("<i>No check sample was measured in this run.</i>"))
    for n in qc.not_evaluated:
        out.append(P("<b>Check sample measured but not evaluated:</b> " + E(n), "small"))
    for n in qc.notes:
        out.append(P(E(n), "small"))
    return out


def standards_tables(kit: Kit, standards, per_table: int = 7) -> list:
    """Certified values as a matrix: one row per standard, one column per element (value over ± U)."""
    from reportlab.platypus import Table

    E, P, frame_w = kit.E, kit.P, kit.frame_w
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
                v, u, _ = fmt_mf(sv.mass_fraction, sv.U, units[el])
                row.append(P(E(v) + (f"<br/><font size=6.6>± {E(u)}</font>" if u else ""), "cellr"))
            data.append(row)
        first = frame_w * 0.16
        t = Table(data, colWidths=[first] + [(frame_w - first) / len(els)] * len(els), repeatRows=1)
        t.setStyle(kit.grid_style)
        out.append(t)
    ks = sorted({f"{sv.k:g}" for sv in standards if finite(sv.k)})
    srcs = sorted({sv.source for sv in standards if sv.source})
    note = "Certified value, with its expanded uncertainty U below" + (f" (k = {', '.join(ks)})" if ks else "")
    note += "."
    if srcs:
        note += " Source: " + "; ".join(srcs) + "."
    out.append(P(E(note), "small"))
    return out


def _curve_row(cv) -> list[str]:
    """Texts of one calibration curve: element, line, internal standard, model, range, n, R², LOD basis."""
    unit = choose_unit(cv.range_high if finite(cv.range_high) else cv.range_low)
    f = UNIT_FACTOR[unit]
    rng = (
        f"{fmt_sig(cv.range_low * f) if finite(cv.range_low) else '?'} to "
        f"{fmt_sig(cv.range_high * f) if finite(cv.range_high) else '?'} {unit}"
    )
    return [
        cv.element,
        cv.line_id,
        cv.internal_standard or "none",
        cv.model,
        rng,
        "" if cv.n_standards is None else str(cv.n_standards),
        f"{cv.r_squared:.4f}" if finite(cv.r_squared) else "",
        cv.lod_basis,
    ]


def calibration_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """Calibration id and date, its file, the curves and the certified reference materials used."""
    cal = cert.calibration
    if cal is None:
        return []
    E, P = kit.E, kit.P
    out = [P(f"{sec}  Calibration", "h2")]
    krows = [("Calibration", E(cal.calibration_id)), ("Established", E(cal.created))]
    if cal.description:
        krows.append(("Description", E(cal.description)))
    if cal.file_name or cal.file_sha256:
        krows.append(("Calibration file", E(cal.file_name) + kit.mono_sha(cal.file_sha256)))
    out.append(kit.kv_table(krows))
    if cal.curves:
        out.append(P("Calibration curves", "h3"))
        out.append(
            kit.grid_table(
                ["El.", "Line", "Internal standard", "Model", "Calibrated range", "n", "R²", "LOD basis"],
                [_curve_row(cv) for cv in cal.curves],
                [6, 15, 13, 15, 17, 5, 8, 21],
            )
        )
    if cal.standards:
        out.append(P("Certified reference materials used", "h3"))
        out.extend(standards_tables(kit, cal.standards))
    return out


def plasma_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """Plasma temperature and electron density with U (k = 2) and the LTE checks (calibration-free)."""
    pl = cert.plasma
    if pl is None:
        return []
    E, P = kit.E, kit.P
    out = [P(f"{sec}  Plasma conditions (calibration-free analysis)", "h2")]
    tv, tu = value_and_u(pl.temperature_K, pl.U_temperature_K)
    prow = [("Excitation temperature T", f"{E(tv)} K" + (f" ± {E(tu)} K (U, k = 2)" if tu else ""))]
    if finite(pl.electron_density_cm3):
        nv = sci_text(pl.electron_density_cm3, 2)
        nu = f" ± {sci_text(pl.U_electron_density_cm3, 2)}" if finite(pl.U_electron_density_cm3) else ""
        prow.append(("Electron density nₑ", E(f"{nv}{nu} cm⁻³") + (" (U, k = 2)" if nu else "")))
    if pl.method:
        prow.append(("Diagnostics", E(pl.method)))
    out.append(kit.kv_table(prow))
    if pl.lte_checks:
        out.append(P("Checks of local thermodynamic equilibrium", "h3"))
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
        out.append(
            kit.grid_table(
                ["Check", "Criterion", "Value", "Limit", "Result"], rows, [18, 34, 17, 17, 10], right_cols=(2, 3)
            )
        )
    return out


def remarks_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """The certificate's remarks, one bullet each (nothing without remarks)."""
    if not cert.remarks:
        return []
    return [kit.P(f"{sec}  Remarks", "h2")] + [kit.P("• " + kit.E(rm)) for rm in cert.remarks]


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
            ("Date of issue", issue_date_text(cert, review, E)),
        ]
    rows = [
        ("Authorised by", f"<b>{E(review.reviewer)}</b>" + (f", {E(review.role)}" if review.role else "")),
        ("Released (UTC)", E(review.at)),
    ]
    if review.statement:
        rows.append(("Statement", E(review.statement)))
    rows.append(("Date of issue", E(cert.issue_date)))
    return rows


def authorisation_section(kit: Kit, cert: Certificate, sec: int, review=None) -> list:
    """The authorisation block, kept on one page (``review``: see :func:`authorisation_rows`)."""
    from reportlab.platypus import KeepTogether

    auth = [kit.P(f"{sec}  Authorisation", "h2"), kit.kv_table(authorisation_rows(cert, review, kit.E))]
    return [KeepTogether(auth)]


def safety_section(kit: Kit, cert: Certificate, sec: int) -> list:
    """The safety notes of laser and plasma work (compquant.report.safety)."""
    from reportlab.platypus import Spacer

    out = [kit.P(f"{sec}  Safety notes", "h2")]
    for n in cert.safety_notes:
        out.append(kit.P(f"<b>{kit.E(n.title)}.</b> {kit.E(n.text)}", "small"))
        out.append(Spacer(1, 2))
    return out


def issued_at_label(issued_at: str, review) -> str:
    """The label of ``provenance.issued_at``: "Time of issue (UTC)" when the certificate was issued
    then (no review state, or released at that very time), else "Draft made (UTC)"."""
    if review is None or (review.state == "released" and review.at == issued_at):
        return "Time of issue (UTC)"
    return "Draft made (UTC)"


def provenance_section(kit: Kit, cert: Certificate, sec: int, review=None) -> list:
    """Software and version, time of issue, SHA-256 of the run and every input file, parameters.

    ``provenance.issued_at`` is the time the analysis made the certificate.  It is the time of
    issue only when no reviewer released it later (no review step, or issued released under
    ``[review] required = false``); otherwise it is the time the draft was made, and the release
    time is in the authorisation block.
    """
    from reportlab.platypus import Spacer, Table, TableStyle

    E, P, frame_w = kit.E, kit.P, kit.frame_w
    pv = cert.provenance
    out = [P(f"{sec}  Provenance", "h2")]
    out.append(
        kit.kv_table(
            [
                ("Software", E(f"{pv.software} {pv.version}")),
                (issued_at_label(pv.issued_at, review), E(pv.issued_at)),
                ("Run file SHA-256", f"<font face='{kit.fonts['mono']}' size=6.8>{E(pv.run_sha256)}</font>"),
            ]
        )
    )
    if pv.files:
        data = [[P("Role", "cellb"), P("File", "cellb"), P("SHA-256", "cellb")]]
        data += [[P(E(f.role), "cell"), P(E(f.name), "cell"), P(E(f.sha256), "mono")] for f in pv.files]
        t = Table(data, colWidths=[frame_w * 0.15, frame_w * 0.30, frame_w * 0.55], repeatRows=1)
        t.setStyle(
            TableStyle(
                [
                    ("VALIGN", (0, 0), (-1, -1), "TOP"),
                    ("GRID", (0, 0), (-1, -1), 0.3, kit.grid),
                    ("BACKGROUND", (0, 0), (-1, 0), kit.head_bg),
                ]
            )
        )
        out.append(Spacer(1, 3))
        out.append(t)
    if pv.parameters:
        ptxt = "; ".join(f"{k} = {v}" for k, v in sorted(pv.parameters.items()))
        out.append(Spacer(1, 3))
        out.append(P("Parameters: " + E(ptxt), "small"))
    out.append(P(f"End of certificate {E(cert.number)}", "end"))
    return out


__all__ = [
    "CHECK_NOTE",
    "authorisation_rows",
    "authorisation_section",
    "calibration_section",
    "plasma_section",
    "issued_at_label",
    "provenance_section",
    "qc_section",
    "remarks_section",
    "safety_section",
    "standards_tables",
]
