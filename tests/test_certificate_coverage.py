"""The coverage factor printed beside U on the certificate is the one the results used.

With ``[calibration] coverage = "student"`` each U is t_0.975(nu_eff) x u (JCGM 100:2008, G.4;
docs/method-reference.md), not 2 u.  Then no line of the certificate may call those U "k = 2":
not the results table (already handled), not the conformity table or its decision rule, not the
check-sample note.  Outside source: JCGM 100:2008, 6.2 and 7.2.3 (report U with the k used;
from memory); the PDF text is read back with pypdf.  Invented numbers (tests/report_helpers.py).
"""

from __future__ import annotations

import re

from pypdf import PdfReader
from report_helpers import make_certificate

from compquant.report.certificate import ResultRow
from compquant.report.config import ElementLimit, Specification
from compquant.report.conformity import assess_conformity
from compquant.report.jsonform import certificate_json
from compquant.report.pdf import write_pdf

K_T = 2.57  # t_0.975 for 5 degrees of freedom (scipy.stats.t.ppf(0.975, 5) = 2.5706)


def _spec():
    return Specification("demo", "G1", "guard-band", [ElementLimit("Cu", 0.57, 0.595, "%"),
                                                      ElementLimit("Pb", 0.016, 0.025, "%")])


def _cert(k: float):
    rows = [
        ResultRow("Cu", 0.58237, U=k * 0.00206, u=0.00206, k=k, lod=0.0002, loq=0.0007, line_id="Cu I 510.554"),
        ResultRow("Pb", 0.02049, U=k * 0.000405, u=0.000405, k=k, lod=0.00004, loq=0.00013, line_id="Pb I 405.781"),
    ]
    cert = make_certificate(results=rows, conformity=assess_conformity(_spec(), rows))
    cert.provenance.parameters = {"coverage": "student" if k != 2.0 else "k2"}  # as analyse records it
    return cert


def _text(cert, tmp_path) -> str:
    write_pdf(cert, tmp_path / "c.pdf")
    return " ".join(" ".join(p.extract_text() for p in PdfReader(str(tmp_path / "c.pdf")).pages).split())


def test_student_coverage_is_never_called_k_2(tmp_path):
    cert = _cert(K_T)
    assert "k = 2)" not in cert.conformity.rule_text  # the decision rule's U is the results' U
    text = _text(cert, tmp_path)
    # the standards' own certified U (k = 2) may say so; nothing about this sample's or the check's U
    bad = [m.group(0) for m in re.finditer(r".{60}k = 2(?![.\d]).{0,20}", text)
           if "standards" not in m.group(0) and "Certified value" not in m.group(0)]
    assert not bad, bad
    assert "k = 2.57" in text


def test_k_2_is_still_stated_when_used(tmp_path):
    cert = _cert(2.0)
    assert "k = 2)" in cert.conformity.rule_text
    text = _text(cert, tmp_path)
    assert "U (k = 2)" in text and "with its U (k = 2)" in text
    assert '"decision_rule_text"' in certificate_json(cert)
