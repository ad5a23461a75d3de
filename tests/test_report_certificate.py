"""Certificates: one object -> JSON (schema v1), PDF (ISO/IEC 17025 items) and LIMS CSV."""

from __future__ import annotations

import csv
import io
import json
import re

import jsonschema
import pytest
from pypdf import PdfReader
from report_helpers import RUN_SHA, make_certificate
from test_report_config import DEMO

from compquant.fileio import safe_filename
from compquant.report import (
    LTECheck,
    PlasmaInfo,
    ResultRow,
    assess_conformity,
    certificate_json,
    certificate_number,
    certificate_to_dict,
    load_specification,
    render_pdf_bytes,
    write_certificate_json,
    write_lims_csv,
    write_pdf,
)
from compquant.report.jsonform import load_schema
from compquant.report.lims import COLUMNS, lims_csv
from compquant.report.numbers import choose_unit, round_sig, value_and_u
from compquant.report.pdf import escape_text
from compquant.report.safety import DEFER, SAFETY_NOTES, safety_markdown, safety_plain


def pdf_pages(data: bytes) -> list[str]:
    return [p.extract_text() for p in PdfReader(io.BytesIO(data)).pages]


def squash(s: str) -> str:
    return re.sub(r"\s+", "", s)


@pytest.fixture(scope="module")
def cert():
    c = make_certificate(figures=True)
    c.conformity = assess_conformity(load_specification(DEMO / "spec-HB58-Pb2.toml"), c.results)
    return c


@pytest.fixture(scope="module")
def rendered(cert):
    data, n = render_pdf_bytes(cert)
    return data, n, pdf_pages(data)


# ---- numbers ------------------------------------------------------------------------------------------


def test_rounding_follows_two_significant_digits_of_u():
    # JCGM 100:2008 7.2.6 (from memory of the GUM): U to at most two significant digits,
    # the value to the same decimal place
    assert value_and_u(58.237, 0.412) == ("58.24", "0.41")
    assert value_and_u(2.0494, 0.0995) == ("2.05", "0.10")  # 0.0995 -> 0.100 -> 0.10
    assert value_and_u(412.3, 61.2) == ("412", "61")
    assert value_and_u(2345.0, 123.0) == ("2350", "120")
    assert value_and_u(0.12345, None) == ("0.1235", "")
    assert round_sig(0.125, 2) == "0.13"  # half-up, common practice
    assert round_sig(3e-5 * 1e6, 2) == "30"


def test_unit_choice():
    assert choose_unit(0.5824) == "%"
    assert choose_unit(0.001) == "%"
    assert choose_unit(0.000999) == "mg/kg"
    assert choose_unit(None, lod=3e-5, below_lod=True) == "mg/kg"


def test_result_row_reported_and_flags():
    r = ResultRow("Fe", 0.000412, U=0.000061, lod=0.000015, loq=0.00005)
    rep = r.reported()
    assert (rep.unit, rep.value, rep.U, rep.lod, rep.loq) == ("mg/kg", "412", "61", "15", "50")
    low = ResultRow("Ni", None, U=None, lod=3e-5, loq=1e-4, below_lod=True)
    assert low.reported().value == "< LOD" and low.reported().lod == "30"
    assert low.all_flags() == ["below_lod"]
    mid = ResultRow("Sn", 5e-5, U=2e-5, lod=2e-5, loq=7e-5)
    assert "below_loq" in mid.all_flags()
    hi = ResultRow("Zn", 0.5, U=0.01, above_range=True)
    assert hi.all_flags() == ["above_range"] and hi.reported().value == "50.0"


def test_certificate_number_is_deterministic_and_unique():
    a = certificate_number("HMTL", RUN_SHA, "B-1", "2026-12-01")
    assert re.fullmatch(r"HMTL-20261201-[0-9A-F]{10}", a)
    assert a == certificate_number("HMTL", RUN_SHA.upper(), "B-1", "2026-12-01")
    others = {
        certificate_number("HMTL", RUN_SHA, "B-2", "2026-12-01"),
        certificate_number("HMTL", "00" * 32, "B-1", "2026-12-01"),
        certificate_number("HMTL", RUN_SHA, "B-1", "2026-12-02"),
        certificate_number("XLAB", RUN_SHA, "B-1", "2026-12-01"),
    }
    assert a not in others and len(others) == 4
    assert certificate_number("HMTL", RUN_SHA, "B-1", "2026-12-01", revision=2).endswith("-R2")


# ---- JSON -----------------------------------------------------------------------------------------


def test_json_validates_against_shipped_schema(cert):
    schema = load_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    doc = json.loads(certificate_json(cert))
    jsonschema.Draft202012Validator(schema).validate(doc)
    assert doc["schema"] == "compquant-certificate" and doc["schema_version"] == 1


def test_json_schema_rejects_broken_documents(cert):
    schema = load_schema()
    doc = json.loads(certificate_json(cert))
    doc["results"][0]["mass_fraction"] = "58 %"
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(doc, schema)
    doc = json.loads(certificate_json(cert))
    doc["surprise"] = 1
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(doc, schema)


def test_json_is_canonical_and_repeatable(cert, tmp_path):
    a = certificate_json(cert)
    b = certificate_json(cert)
    assert a == b
    write_certificate_json(cert, tmp_path / "a.json")
    write_certificate_json(cert, tmp_path / "b.json")
    assert (tmp_path / "a.json").read_bytes() == (tmp_path / "b.json").read_bytes()
    # keys sorted at every level, one trailing newline, NaN never written
    doc = json.loads(a)
    assert list(doc) == sorted(doc)
    assert a.endswith("}\n") and not a.endswith("\n\n")
    assert "NaN" not in a and "Infinity" not in a
    # a fresh object with the same inputs gives the same text
    c2 = make_certificate(figures=True)
    c2.conformity = cert.conformity
    assert certificate_json(c2) == a


def test_json_numbers(cert):
    doc = certificate_to_dict(cert)
    cu = doc["results"][0]
    assert cu["mass_fraction"] == pytest.approx(0.58237) and cu["U"] == pytest.approx(0.00412)
    assert cu["reported"] == {"unit": "%", "value": "58.24", "U": "0.41", "lod": "0.020", "loq": "0.070"}
    ni = [r for r in doc["results"] if r["element"] == "Ni"][0]
    assert ni["mass_fraction"] is None and ni["reported"]["value"] == "< LOD" and ni["below_lod"]
    assert doc["release"]["valid"] is True


# ---- PDF -----------------------------------------------------------------------------------------

REQUIRED = [  # ISO/IEC 17025:2017 7.8.2.1, 7.8.3, 7.8.6 (from memory of the standard) and DESIGN section 8
    "Certificate of analysis",  # a) title
    "Harbourside Materials Testing Laboratory",  # b) laboratory name
    "22 Ropewalk Lane",  # b) address
    "Place of work",
    "Spectrometry room S2",  # c) where the work was done
    "Client",
    "Eastwick Foundry Cooperative",  # e) client
    "Technique",
    "CU-ALLOY-LIBS, version 1.2",  # f) method
    "Sample identification",
    "B-1042",  # g) item
    "Sample description",
    "leaded brass bar offcut",  # h) description
    "Condition of the item",
    "milled surface",  # i) condition
    "Date of receipt",
    "2026-11-27",  # j)
    "Date of measurement",
    "2026-12-01T10:00:00Z",  # k)
    "Date of issue",
    "2026-12-01",  # l)
    "The results relate only to the item tested",  # n)
    "Mass fraction",
    "U (k = 2)",
    "LOD",
    "LOQ",  # o) results with units
    "Deviations from the method",  # p)
    "Authorised by",
    "Dr Morwenna Calloway",  # q)
    "approximately 95 %",  # 7.8.3 uncertainty
    "Statement of conformity",
    "Decision rule",
    "guard-band",
    "ILAC G8:09/2019",  # 7.8.6
    "Drift standardisation",
    "Check samples",
    "CHK-1",  # QC
    "CAL-2026-12-01-A",
    "CRM-B1",
    "Certified reference materials used",  # calibration
    "Flags",
    "above the calibrated range",  # flags explained
    "Elements detected but not quantified",
    "Al, Mn",
    "Figure 1.",
    "Figure 2.",
    "Safety notes",
    "Class 4",
    "IEC 60825-1",
    "ANSI Z136.1",
    "nominal hazard zone",
    "optical density",
    "interlocks",
    "beryllium",
    "cadmium",
    "chromium(VI)",
    "nickel",
    "High voltage",
    "ozone",
    "argon",
    "licensed safety officer",
    "Provenance",
    "compquant 0.1.0",
    "2026-12-01T21:00:00Z",
    RUN_SHA,
    "End of certificate",
]


def test_pdf_has_every_required_item(cert, rendered):
    data, n, pages = rendered
    assert data.startswith(b"%PDF-")
    text = "\n".join(pages)
    flat = " ".join(text.split())
    missing = [item for item in REQUIRED if item not in flat and squash(item) not in squash(text)]
    assert not missing, missing
    assert "NOT VALID FOR RELEASE" not in text


def test_pdf_numbering_on_every_page_and_clear_end(cert, rendered):
    data, n, pages = rendered
    assert n == len(pages) >= 2
    for i, t in enumerate(pages, 1):
        assert f"Page {i} of {n}" in t
        assert cert.number in t
    assert "End of certificate" in pages[-1]
    assert all("End of certificate" not in t for t in pages[:-1])


def test_pdf_numbers_equal_json(cert, rendered):
    _, _, pages = rendered
    text = "\n".join(pages)
    doc = certificate_to_dict(cert)
    lines = [ln.strip() for ln in text.splitlines()]
    for r in doc["results"]:
        rep = r["reported"]
        i = lines.index(r["element"])  # the results table is the first table with one element per cell
        row = lines[i : i + 8]
        assert rep["value"] in row and rep["unit"] in row, (r["element"], row)
        for key in ("U", "lod", "loq"):
            if rep[key]:
                assert rep[key] in row, (r["element"], key, row)
    for ck in doc["quality_control"]["check_samples"]:
        assert f"{ck['En']:.2f}" in text and f"{ck['z']:.2f}" in text


def test_failed_check_sample_marks_first_page_not_valid():
    c = make_certificate(check_passed=False)
    assert not c.valid_for_release
    data, _n = render_pdf_bytes(c)
    pages = pdf_pages(data)
    assert "NOT VALID FOR RELEASE" in pages[0]
    assert "check sample failed: CHK-1 (CRM-B2), Pb: |En| <= 1 not met" in " ".join(pages[0].split())
    doc = certificate_to_dict(c)
    # the release state's words come from compquant.report.release (one name per state)
    assert doc["release"] == {
        "valid": False,
        "status": "not valid for release",
        "reasons": ["check sample failed: CHK-1 (CRM-B2), Pb: |En| <= 1 not met"],
        "rules": ["check-failed"],
    }
    assert "not valid for release" in lims_csv([c])


def test_failed_lte_criterion_marks_not_valid_and_shows_plasma():
    pl = PlasmaInfo(
        9100.0,
        400.0,
        1.2e17,
        0.3e17,
        "Boltzmann plot of Fe I; Stark width of H alpha",
        [
            LTECheck("McWhirter", "n_e >= 1.6e12 T^0.5 dE^3", 1.2e17, 2.9e16, "cm⁻³", True),
            LTECheck("Boltzmann plot linearity", "R² >= 0.9", 0.71, 0.9, "", False),
        ],
    )
    c = make_certificate(calibration=None, plasma=pl)
    data, _ = render_pdf_bytes(c)
    pages = pdf_pages(data)
    assert "NOT VALID FOR RELEASE" in pages[0]
    text = " ".join("\n".join(pages).split())
    for item in (
        "Plasma conditions",
        "9100 K ± 400 K",
        "1.2×10¹⁷",
        "2.90×10¹⁶",
        "McWhirter",
        "NOT MET",
        "LTE criterion not met: Boltzmann plot linearity",
    ):
        assert item in text, item
    jsonschema.validate(json.loads(certificate_json(c)), load_schema())


HOSTILE = [
    "../x",
    "../../etc/passwd",
    "He said \"hi\" 'q'",
    "<b>bold</b> & <i>co</i> &amp;",
    "ctl\x00\x07\x1b[31m\ttab",
    "A" * 300,
    "\u202eevil.pdf",
    ".hidden",
    "CON",
]


@pytest.mark.parametrize("sid", HOSTILE)
def test_hostile_sample_ids(sid, tmp_path):
    c = make_certificate(sample_id=sid)
    stem = safe_filename(sid)
    assert "/" not in stem and not stem.startswith(".") and stem not in (".", "..") and len(stem) <= 80
    pdf_path = tmp_path / f"{stem}.pdf"
    n = write_pdf(c, pdf_path)
    assert pdf_path.parent == tmp_path and sorted(p.name for p in tmp_path.iterdir()) == [pdf_path.name]
    pages = pdf_pages(pdf_path.read_bytes())
    assert len(pages) == n
    text = "\n".join(pages)
    shown = escape_text(sid)  # what the PDF shows: markup literal, controls as \xNN
    visible = shown.replace("&lt;", "<").replace("&gt;", ">").replace("&quot;", '"').replace("&amp;", "&")
    assert squash(visible) in squash(text)
    if "<b>" in sid:
        assert "<b>bold</b>" in text and "&amp;" in text
    if "\x07" in sid:
        assert "\\x07" in text and "\x07" not in text
    if "\u202e" in sid:
        assert "\\u202e" in text and "\u202e" not in text
    # JSON keeps the exact id, and validates
    doc = json.loads(certificate_json(c))
    assert doc["sample"]["sample_id"] == sid
    jsonschema.validate(doc, load_schema())


def test_escape_text():
    assert escape_text("<b>&") == "&lt;b&gt;&amp;"
    assert escape_text('"x"') == "&quot;x&quot;"
    assert escape_text("a\x00b\u200bc") == "a\\x00b\\u200bc"


# ---- CSV ------------------------------------------------------------------------------------------


def test_lims_csv(tmp_path):
    certs = [
        make_certificate(sample_id="B-1"),
        make_certificate(sample_id='=HYPERLINK("x")'),
        make_certificate(sample_id="B-3", check_passed=False),
    ]
    p = tmp_path / "lims.csv"
    write_lims_csv(certs, p)
    raw = p.read_bytes()
    assert b"\r\n" in raw
    rows = list(csv.DictReader(io.StringIO(raw.decode("utf-8"))))
    assert list(rows[0]) == COLUMNS
    assert len(rows) == sum(len(c.results) for c in certs)
    doc = certificate_to_dict(certs[0])
    for r, jr in zip(rows[: len(doc["results"])], doc["results"]):
        rep = jr["reported"]
        assert r["element"] == jr["element"] and r["unit"] == rep["unit"]
        assert r["value"] == ("" if jr["below_lod"] else rep["value"])
        assert (r["U"], r["LOD"], r["LOQ"], r["k"]) == (rep["U"], rep["lod"], rep["loq"], "2")
        assert r["flag"] == ";".join(jr["flags"])
        assert r["certificate_number"] == doc["number"]
    assert rows[len(doc["results"])]["sample_id"].startswith("'=")  # no formula injection
    assert {r["release"] for r in rows[-len(certs[2].results) :]} == {"not valid for release"}


# ---- safety --------------------------------------------------------------------------------------------


def test_safety_notes_cover_the_hazards_and_defer():
    md = safety_markdown()
    for word in (
        "Class 4",
        "IEC 60825-1",
        "ANSI Z136.1",
        "laser safety officer",
        "nominal hazard zone",
        "optical density",
        "interlocks",
        "lead",
        "cadmium",
        "beryllium",
        "chromium(VI)",
        "nickel",
        "exhaust",
        "High voltage",
        "flashlamp",
        "spark",
        "ultraviolet",
        "ozone",
        "argon",
        "asphyxiation",
        "restricted entry",
    ):
        assert word.lower() in md.lower(), word
    assert all(DEFER in n.text for n in SAFETY_NOTES)
    plain = safety_plain(width=60)
    assert max(len(line) for line in plain.splitlines()) <= 60
    assert md.count("- **") == len(SAFETY_NOTES)


def test_student_coverage_factor_is_stated():
    from scipy import stats

    k = float(stats.t.ppf(0.975, 6))  # reference: Student t, 6 effective degrees of freedom (GUM G.4)
    c = make_certificate(results=[ResultRow("Cu", 0.58, U=k * 0.002, u=0.002, k=k, lod=1e-4, loq=3e-4)])
    doc = certificate_to_dict(c)
    assert "Student t" in doc["statements"]["uncertainty"]
    data, _ = render_pdf_bytes(c)
    text = " ".join("\n".join(pdf_pages(data)).split())
    assert f"(k = {k:.2f})" in text and "Student t" in text and k == pytest.approx(2.447, abs=1e-3)


def test_json_reader_round_trip(cert, tmp_path):
    from compquant.report.jsonform import read_certificate_json

    write_certificate_json(cert, tmp_path / "c.json")
    assert read_certificate_json(tmp_path / "c.json") == json.loads(certificate_json(cert))


def test_lab_and_client_texts_are_literal_too():
    from compquant.report import ClientInfo, LabInfo

    c = make_certificate(
        lab=LabInfo("<font size=40>Big</font> & Co", ["1 <i>Road</i>"], "acc \x1b[2J"),
        client=ClientInfo("<para>X</para>", [], "ref <br/>"),
    )
    text = "\n".join(pdf_pages(render_pdf_bytes(c)[0]))
    for s in ("<font size=40>Big</font> & Co", "1 <i>Road</i>", "acc \\x1b[2J", "<para>X</para>", "ref <br/>"):
        assert s in text, s


def test_flag_names_fit_their_column_on_one_line():
    """The Flags table's first column is wide enough for the longest flag name used, so a name
    such as ``interference_corrected`` is not split mid-word (it was at the former fixed 18 %).
    Line breaking is reportlab's own (Paragraph.wrap); common practice for table layout."""
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm

    from compquant.report.pdf import MARGIN_MM
    from compquant.report.pdfkit import Kit

    kit = Kit(A4[0] - 2 * MARGIN_MM * mm)
    flags = ["low_snr", "interference_corrected", "by_difference"]
    share = kit.share_to_fit(flags, least=0.18, most=0.35)
    table = kit.grid_table(["Flag", "Meaning"], [[f, "text"] for f in flags], [share, 1.0 - share])
    table.wrapOn(None, kit.frame_w, 500)
    col_w = table._colWidths[0] - 12.0  # the cell's left and right padding, 6 pt each
    for row in table._cellvalues[1:]:
        para = row[0][0] if isinstance(row[0], (list, tuple)) else row[0]
        para.wrap(col_w, 500)
        assert len(para.blPara.lines) == 1, para.text
    narrow = kit.grid_table(["Flag", "Meaning"], [[f, "text"] for f in flags], [18, 82])
    long_cell = narrow._cellvalues[2][0]
    long_cell = long_cell[0] if isinstance(long_cell, (list, tuple)) else long_cell
    long_cell.wrap(narrow._colWidths[0] - 12.0, 500)
    assert len(long_cell.blPara.lines) > 1  # the former layout split it: the check can fail


def test_every_flag_the_analysis_sets_has_plain_words_and_fits_on_one_line():
    """Every flag name the code sets (``flags.append("…")`` / ``flags.add("…")`` in compquant/)
    has plain words on the certificate (an analyst does not read flag names; common practice:
    ISO/IEC 17025:2017 7.8.2.1 asks for information needed to interpret the results), and the
    longest name fits the Flags table's and the results table's Flags column on one line
    (reportlab's own Paragraph.wrap)."""
    import re
    from pathlib import Path

    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm

    import compquant
    from compquant.report.certificate import FLAG_TEXT
    from compquant.report.pdf import MARGIN_MM
    from compquant.report.pdfkit import Kit

    root = Path(compquant.__file__).parent
    set_by_code = set()
    for f in root.rglob("*.py"):
        src = f.read_text(encoding="utf-8")
        set_by_code |= set(re.findall(r'flags?\.(?:append|add)\(\s*"([a-z_]+)"', src))
    assert len(set_by_code) > 20  # the scan finds the flags (else the check below is empty)
    assert sorted(set_by_code - set(FLAG_TEXT)) == []
    kit = Kit(A4[0] - 2 * MARGIN_MM * mm)
    longest = max(FLAG_TEXT, key=len)
    for least, most in ((0.18, 0.35), (20 / 102, 0.34)):  # Flags table; results table (pdf_front)
        share = kit.share_to_fit([longest], least=least, most=most)
        table = kit.grid_table(["Flag", "Meaning"], [[longest, "text"]], [share, 1.0 - share])
        table.wrapOn(None, kit.frame_w, 500)
        cell = table._cellvalues[1][0]
        cell = cell[0] if isinstance(cell, (list, tuple)) else cell
        cell.wrap(table._colWidths[0] - 12.0, 500)
        assert len(cell.blPara.lines) == 1, (longest, most)
