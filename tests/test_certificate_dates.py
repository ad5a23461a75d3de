"""Dates printed on a certificate that goes through review: the date of issue is the day of release.

Outside source: ISO/IEC 17025:2017, 7.8.2.1 j) "date of issue of the report" and o) the person(s)
authorising the report (from memory of the standard): a report is issued when it is authorised,
so a certificate released by a reviewer on a later day than the analysis carries that later day
as its date of issue, and no line of it names the day of the unreviewed draft as "Date of issue"
(common practice: a draft is not an issued report).
Invented analyses (tests/record_helpers.py); the PDF text is read back with pypdf.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from pypdf import PdfReader
from record_helpers import fake_analysis

from compquant.record import open_record
from compquant.record.review import release
from compquant.record.store import store_analysis

MEASURED = "2026-11-16T08:30:00Z"  # the invented run
DRAFTED = "2026-12-01T21:00:00Z"  # the invented analysis makes its drafts then (record_helpers)
RELEASED_AT = "2026-12-04T09:15:00Z"  # the reviewer releases three days later


def _pdf_text(path) -> str:
    return "\n".join(p.extract_text() for p in PdfReader(str(path)).pages)


def _draft_and_release(tmp_path) -> tuple[dict, dict, str, str]:
    with open_record(str(tmp_path / "record.sqlite")) as rec:
        entry = store_analysis(rec, **fake_analysis(tmp_path / "out", "RUN-D", n_samples=1, measured_at=MEASURED))[0]
        draft = json.loads(Path(tmp_path / "out" / "RUN-D-S000.json").read_text("utf-8"))
        files = release(rec, entry["number"], reviewer="R. Reviewer (fictional)", role="Reviewer",
                        statement="checked", at=RELEASED_AT)
    return draft, json.loads(Path(files["json"]).read_text("utf-8")), _pdf_text(files["pdf"]), entry["number"]


def test_released_certificate_is_dated_the_day_of_release(tmp_path):
    draft, rel, text, number = _draft_and_release(tmp_path)
    # ISO/IEC 17025:2017 7.8.2.1 j): the date of issue is the day the report is authorised
    assert draft["issue_date"] == "2026-12-01" and draft["provenance"]["issued_at"] == DRAFTED
    assert rel["issue_date"] == "2026-12-04"
    assert rel["review"]["at"] == RELEASED_AT
    assert rel["number"] == number  # the identification does not change on release
    dates = re.findall(r"Date of issue:?\s*(\S+)", text)
    assert dates and set(dates) == {"2026-12-04"}, dates
    # the time the analysis made the draft is not called the time of issue on the released file
    assert "Time of issue" not in text
    assert "Draft made (UTC)" in text and DRAFTED in text


def test_draft_says_its_date_is_not_a_date_of_issue(tmp_path):
    from report_helpers import make_certificate

    from compquant.record.states import Review
    from compquant.report.pdf import write_pdf

    cert = make_certificate()
    write_pdf(cert, tmp_path / "d.pdf", review=Review("draft"))
    text = _pdf_text(tmp_path / "d.pdf")
    # common practice: every "Date of issue" on an unreleased draft says it is a draft's date
    found = re.findall(r"Date of issue:?\s*(\S+)( \(draft\))?", text)
    assert found and all(d == "2026-12-01" and mark for d, mark in found), found
    assert "Time of issue" not in text and "Draft made (UTC)" in text


def test_sample_history_gives_the_sample_s_own_time_of_measurement(tmp_path):
    """The history (record history, review page) shows when the sample was measured, the time its
    certificate gives as "Date of measurement", not the start of the run it was measured in."""
    from compquant.record.queries import sample_history

    kw = fake_analysis(tmp_path / "out", "RUN-H", n_samples=2, measured_at=MEASURED)
    # invented shot times: the run starts with the check and setup samples, the unknowns follow
    later = {"RUN-H-S000": "2026-11-16T08:47:38Z", "RUN-H-S001": "2026-11-16T08:53:54Z"}
    kw["measured"] = {**kw["measured"], **later}
    with open_record(str(tmp_path / "record.sqlite")) as rec:
        store_analysis(rec, **kw)
        for sid, t in later.items():
            hist = sample_history(rec, sid)
            assert len(hist) == 6 and set(hist["measured_at"]) == {t}, (sid, set(hist["measured_at"]))
