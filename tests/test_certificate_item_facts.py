"""The item's condition and date of receipt are printed only where they are the item's.

ISO/IEC 17025:2017, 7.8.2.1 e) and f) (from memory: the condition of the item and its date of
receipt are facts of the item).  The lab profile serves every run; its ``[samples]`` values were
printed on every certificate, so the demo's day-2 lots (measured 2026-12-07) showed "Date of
receipt 2026-11-13" with nothing to support it.  Now ``[samples]`` names the runs it is true of,
and any other certificate says "not recorded for this item".  Invented lab and runs.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from pypdf import PdfReader
from report_helpers import make_certificate
from test_report_config import LAB_OK

from compquant.errors import ConfigError
from compquant.report.config import load_lab_profile
from compquant.report.pdf import write_pdf

DEMO = Path(__file__).resolve().parents[1] / "demo_runs"
LAB = LAB_OK + """[samples]
condition = "coupons, milled"
received = 2026-11-13
"""
SHA = "ab" * 32


def _lab(tmp_path, text):
    p = tmp_path / "lab.toml"
    p.write_text(text, "utf-8")
    return p


def test_samples_without_runs_is_refused(tmp_path):
    # a receipt date that would go on every certificate of every run: a clear error, how to fix
    with pytest.raises(ConfigError) as ei:
        load_lab_profile(_lab(tmp_path, LAB))
    msg = ei.value.one_line()
    assert "[samples]" in msg and "runs" in ei.value.fix


def test_samples_hold_only_for_the_runs_named(tmp_path):
    lab = load_lab_profile(_lab(tmp_path, LAB + f'runs = ["day1.h5", "{SHA.upper()}"]\n'))
    assert lab.sample_facts("day1.h5", "") == ("coupons, milled", "2026-11-13")
    assert lab.sample_facts("renamed.h5", SHA) == ("coupons, milled", "2026-11-13")  # by SHA-256
    assert lab.sample_facts("day2.h5", "cd" * 32) == ("", "")  # another run: not recorded


def test_demo_profile_covers_day_1_only():
    # the demo lots of the calibration day were received 2026-11-13; the routine day's were not recorded
    lab = load_lab_profile(DEMO / "lab.toml")
    assert lab.sample_facts("demo-day1.h5", "")[1] == "2026-11-13"
    assert lab.sample_facts("demo-day2.h5", "") == ("", "")


def test_pdf_says_not_recorded_for_this_item(tmp_path):
    cert = make_certificate()
    cert.sample.condition = cert.sample.received = ""
    write_pdf(cert, tmp_path / "c.pdf")
    text = " ".join(" ".join(p.extract_text() for p in PdfReader(str(tmp_path / "c.pdf")).pages).split())
    assert "Condition of the item not recorded for this item" in text
    assert "Date of receipt not recorded for this item" in text
