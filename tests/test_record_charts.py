"""Control charts (ISO 7870-2) and the certificate document round trip of the record.

Control limits are checked against a worked example computed by hand from the formulas of
ISO 7870-2:2023 for a chart of individual values with moving ranges (from memory of ISO 7870-2:
CL = mean of x, MRbar = mean |x_i - x_(i-1)|, sigma = MRbar / d2 with d2 = 1.128 for n = 2, action
limits CL +/- 3 sigma = CL +/- E2 MRbar with the tabulated E2 = 2.660, warning limits +/- 2 sigma),
and for given standard values (CL = X0, limits X0 +/- 3 sigma0).  The tests for special causes
are checked on sequences built by hand to complete exactly one test at a known point.
"""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner
from record_helpers import fake_analysis
from report_helpers import make_certificate

from compquant.cli import main
from compquant.errors import MethodError
from compquant.record import open_record
from compquant.record.certdoc import certificate_from_dict
from compquant.record.charts import (
    Limits,
    build_chart,
    limits_from_certified,
    limits_from_runs,
    parse_chart_section,
    rule_violations,
)
from compquant.record.states import Review
from compquant.record.store import store_analysis
from compquant.report.jsonform import certificate_to_dict

# Worked example "eight check-sample runs" (invented values, % Zn), computed by hand:
#   x        = 20.1 19.8 20.3 20.0 19.7 20.2 20.4 19.9      sum 160.4 -> CL = 160.4 / 8 = 20.05
#   |MR|     =      0.3  0.5  0.3  0.3  0.5  0.2  0.5       sum 2.6   -> MRbar = 2.6 / 7 = 0.371428...
#   sigma    = MRbar / 1.128 = 0.329280648...
#   UCL/LCL  = 20.05 +/- 3 sigma = 21.0378419 / 19.0621581   (E2 form: 20.05 +/- 2.660 * 0.371428 = 21.038 / 19.062)
#   UWL/LWL  = 20.05 +/- 2 sigma = 20.7085613 / 19.3914387
WORKED_X = [20.1, 19.8, 20.3, 20.0, 19.7, 20.2, 20.4, 19.9]


def test_individuals_limits_match_hand_computed_iso_7870_2_example():
    lim = limits_from_runs(WORKED_X + [25.0, 26.0], n_first=8)  # later runs do not move the limits
    assert lim.n == 8
    assert lim.centre == pytest.approx(20.05, abs=1e-12)
    assert lim.mr_bar == pytest.approx(2.6 / 7, rel=1e-12)
    assert lim.sigma == pytest.approx(0.329280648, rel=1e-8)
    assert lim.action == pytest.approx((19.0621581, 21.0378419), abs=1e-7)
    assert lim.warning == pytest.approx((19.3914387, 20.7085613), abs=1e-7)
    # the tabulated E2 = 2.660 form of ISO 7870-2 agrees to its three decimals
    assert lim.action[1] == pytest.approx(20.05 + 2.660 * 2.6 / 7, abs=1e-3)


def test_limits_from_certified_value():
    # given standard value X0 = 0.0190 g/g, U = 0.0004 (k = 2): sigma0 = 0.0002 (computed by hand)
    lim = limits_from_certified(0.0190, 0.0004, k=2)
    assert lim.centre == 0.0190 and lim.sigma == pytest.approx(0.0002)
    assert lim.action == pytest.approx((0.0184, 0.0196)) and lim.warning == pytest.approx((0.0186, 0.0194))
    assert limits_from_certified(0.0190, None) is None


UNIT = Limits(0.0, 1.0, "unit")

# (test number, sequence in units of sigma from the centre line, index of the point completing it)
RULE_CASES = [
    (1, [0.0, 0.2, 3.5], 2),
    (2, [0.5] * 9, 8),
    (3, [-0.5, -0.3, -0.1, 0.1, 0.3, 0.5], 5),
    (4, [0.5, -0.5] * 7, 13),
    (5, [0.0, 2.5, 0.5, 2.2], 3),
    (6, [1.5, 1.2, 0.2, 1.8, 1.1], 4),
    (7, [0.1, 0.2, -0.1, -0.2] * 3 + [0.1, 0.2, -0.1], 14),
    (8, [1.5, -1.5, 1.6, -1.6, 1.5, -1.5, 1.6, -1.6], 7),
]


@pytest.mark.parametrize("test_no,seq,where", RULE_CASES, ids=[f"test{c[0]}" for c in RULE_CASES])
def test_tests_for_special_causes(test_no, seq, where):
    v = rule_violations(seq, UNIT)
    assert v[where] == [test_no]
    assert all(not hits for hits in v[:where])  # nothing before the completing point
    assert not any(test_no in hits for hits in rule_violations(seq[:where], UNIT))  # one point short: not yet
    assert rule_violations(seq, UNIT, rules=[r for r in range(1, 9) if r != test_no])[where] == []


def test_chart_section_is_validated():
    assert parse_chart_section(None).limits == "first-runs"
    s = parse_chart_section({"limits": "certified", "first_runs": 10, "rules": [1, 5], "block_release": True})
    assert s.rules == (1, 5) and s.first_runs == 10 and s.block_release
    for bad in ({"limits": "median"}, {"first_runs": 1}, {"rules": [9]}, {"block_release": "yes"}, {"k": 0},
                {"colour": "red"}):
        with pytest.raises(MethodError):
            parse_chart_section(bad)


def test_chart_command_writes_png_and_csv_with_the_limits(tmp_path):
    import pandas as pd

    db = str(tmp_path / "rec.sqlite")
    with open_record(db) as rec:
        for i, x in enumerate(WORKED_X):
            store_analysis(rec, **fake_analysis(tmp_path / "o", f"R{i}", n_samples=1, check_value=x / 1000,
                                                drift=1 + (i % 3) / 100, measured_at=f"2026-11-{10 + i:02d}T08:00:00Z",
                                                chart_section={"first_runs": 8}))
    r = CliRunner().invoke(main, ["record", "chart", "-o", str(tmp_path / "charts"), "--db", db])
    assert r.exit_code == 0, r.output
    csv = pd.read_csv(tmp_path / "charts" / "check-CRM-B2-Pb.csv")
    assert list(csv["value"] * 1000) == pytest.approx(WORKED_X)
    assert csv["centre"].iloc[0] * 1000 == pytest.approx(20.05)
    assert csv["upper_action"].iloc[0] * 1000 == pytest.approx(21.0378419, abs=1e-6)
    png = (tmp_path / "charts" / "check-CRM-B2-Pb.png").read_bytes()
    assert png.startswith(b"\x89PNG\r\n\x1a\n")
    drift = pd.read_csv(tmp_path / "charts" / "drift-Pb_I_405.781-6b1a4992.csv")
    assert list(drift["value"]) == pytest.approx([1 + (i % 3) / 100 for i in range(8)])


def test_series_in_run_order_one_point_per_run_file():
    ch = build_chart("t", "check", {}, [{"run_id": i, "value": v} for i, v in enumerate(WORKED_X)],
                     parse_chart_section({"first_runs": 8}))
    assert ch.limits.centre == pytest.approx(20.05) and not any(ch.violations)


RELEASED_REVIEW = Review("released", "A. Reviewer", "QM", "2026-12-02T08:00:00Z", "checked")


@pytest.mark.parametrize("review", [None, Review("draft"), RELEASED_REVIEW])
def test_certificate_document_round_trip(review):
    """The record re-renders a released certificate from its JSON: nothing may change on the way."""
    cert = make_certificate("B-1042")
    doc = json.loads(json.dumps(certificate_to_dict(cert, review)))
    back = certificate_to_dict(certificate_from_dict(doc), review)
    assert json.loads(json.dumps(back)) == doc
    blocked = json.loads(json.dumps(certificate_to_dict(make_certificate("B-1", check_passed=False,
                                                                         release_blocks=["other reason"]))))
    assert certificate_to_dict(certificate_from_dict(blocked)) == blocked
