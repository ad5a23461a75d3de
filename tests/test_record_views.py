"""What the record's views print: check states, results without a value, digits, draft times.

The record's views (``compquant record history``, the review page through Flask's test client)
and the run summary must say what the certificate says:

- a check sample whose certified content is below its LOQ is *not counted*, not "passed"
  (ISO/IEC 17025:2017, 7.7.1: monitoring results are reviewed; a comparison below the LOQ
  verifies nothing — the certificate's own rule, docs/certificate.md "Scope of a check");
- "< LOD" only for a result below the LOD; a result without a value that is not below the LOD
  is "not determined", the certificate's words (ISO/IEC 17025:2017, 7.8.2.1 c: results are
  reported with their units, no value is shown that was not measured);
- U to two significant digits and the value to the same decimal place (JCGM 100:2008, 7.2.6,
  from memory of the GUM; the certificate's rounding, compquant.report.numbers);
- a draft's time is when the draft was recorded, not a time of issue (ISO/IEC 17025:2017,
  7.8.2.1, from memory: a report is issued when it is authorised);
- revision 0003 of the record adds the check's state and LOQ; a record of revision 0002 opens,
  is upgraded with its data kept and its checks' states taken from its certificates as issued,
  and its released files still verify (Alembic's own comparison for the schema).

All data are invented (tests/record_helpers.py): no real lab, person or material.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import pytest
import sqlalchemy as sa
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).resolve().parent))

from record_helpers import fake_analysis
from test_record import db  # noqa: F401  (the SQLite / PostgreSQL record fixture)

from compquant.cli import main
from compquant.record import db as record_db
from compquant.record import open_record
from compquant.record import schema as S
from compquant.record.review import release, verify_file
from compquant.record.states import Review
from compquant.record.store import store_analysis
from compquant.report import CheckResult, ResultRow
from compquant.report.jsonform import write_certificate_json

REVIEWER = "Ines Quarrington (fictional)"


def _analysis(outdir: Path, run: str = "RUN-V") -> dict:
    """An invented run whose check sample has Fe certified at 0.06 % below its LOQ 0.096 % (as the
    demo's CHK-108) with |En| <= 1 met, Pb in scope, and whose first unknown has Cu 0.58757 +- 0.00714
    and Sn not reported (no value, not below the LOD)."""
    kw = fake_analysis(outdir, run, n_samples=2)
    fe = CheckResult("CHK-1", "CRM-B2", "Fe", 0.00077329, 0.00020458, 0.0006, 0.00005, z=None, En=0.846,
                     passed=True, loq=0.00096273)
    pb = kw["checks"][0]
    pb.U_measured, pb.loq = 5.06392e-05, 0.00044
    kw["checks"].append(fe)
    cert = kw["certificates"][0]
    cert.qc.check_samples.append(fe)  # the certificates share the run's QC
    cert.results[0] = ResultRow("Cu", 0.58757, U=0.00714, u=0.00357, lod=0.0002, loq=0.0007, line_id="Cu I 510.554")
    cert.results[3] = ResultRow("Sn", None, U=None, lod=2e-5, loq=7e-5, flags=["not_reported"],
                                line_id="Sn I 317.505")
    for c, out in zip(kw["certificates"], kw["outputs"]):
        write_certificate_json(c, out.json, review=Review("draft"))
    return kw


def _client(location):
    pytest.importorskip("flask")
    from compquant.web.app import create_app

    rec = open_record(location)
    app = create_app(rec)
    app.testing = True
    return app.test_client(), rec


def _rows(html: str) -> list[list[str]]:
    """The text of each table cell, row by row (rows with cells only)."""
    rows = [[re.sub(r"<[^>]+>", "", c).strip() for c in re.findall(r"<td[^>]*>(.*?)</td>", tr, re.S)]
            for tr in re.findall(r"<tr>(.*?)</tr>", html, re.S)]
    return [r for r in rows if r]


def _check_rows(html: str) -> dict:
    """``{element: [cells]}`` of the check-sample table rows on a page."""
    return {r[2]: r for r in _rows(html) if r[0] == "CHK-1"}


def test_check_state_is_printed_not_the_passed_field(db, tmp_path):  # noqa: F811
    kw = _analysis(tmp_path / "a")
    with open_record(db) as rec:
        store_analysis(rec, **kw)
        with rec.transaction() as conn:
            rows = {r.element: r for r in conn.execute(sa.select(S.checks))}
    # the record keeps the state the certificate prints (docs/certificate.md, "Scope of a check")
    assert rows["Fe"].passed and rows["Fe"].state == "not counted" and rows["Fe"].loq == pytest.approx(0.00096273)
    assert rows["Pb"].state == "pass"
    client, rec = _client(db)
    try:
        run_id = int(re.search(r'href="/run/(\d+)">RUN-V.h5', client.get("/").text).group(1))
        run_page = client.get(f"/run/{run_id}").text
        checks = _check_rows(run_page)
        assert checks["Fe"][-1] == "not counted" and checks["Pb"][-1] == "pass"  # common practice (above)
        assert "passed" not in run_page
        # U of the check to two significant digits, the value to the same place (JCGM 100:2008, 7.2.6)
        assert checks["Pb"][3:5] == ["0.019000", "0.000051"]  # was 0.019, 5.064e-05
        assert checks["Fe"][3:8] == ["0.00077", "0.00020", "0.000600", "0.000050", "0.00096"]
        number = kw["certificates"][0].number
        cert_page = client.get(f"/certificate/{number}").text
        cchecks = _check_rows(cert_page)
        assert cchecks["Fe"][-1] == "not counted" and cchecks["Pb"][-1] == "pass"
        assert "passed" not in cert_page
    finally:
        rec.dispose()


def test_not_determined_is_not_below_lod_and_values_are_rounded_as_on_the_certificate(db, tmp_path):  # noqa: F811
    kw = _analysis(tmp_path / "a")
    sid = kw["certificates"][0].sample.sample_id
    with open_record(db) as rec:
        store_analysis(rec, **kw)
    out = CliRunner().invoke(main, ["record", "history", sid, "--db", db])
    assert out.exit_code == 0, out.output
    lines = {ln.split()[2]: ln for ln in out.output.splitlines()[1:]}
    # "not determined" (the certificate's words), never "< LOD" beside the flag not_reported (ISO/IEC 17025, 7.8)
    assert "not determined" in lines["Sn"] and "< LOD" not in lines["Sn"] and "not_reported" in lines["Sn"]
    # U to two significant digits, the value to the same decimal place (JCGM 100:2008, 7.2.6)
    assert lines["Cu"].split()[3:5] == ["0.5876", "0.0071"]
    client, rec = _client(db)
    try:
        page = client.get(f"/sample?id={sid}").text
        row = {r[2]: r for r in _rows(page)}
        assert row["Sn"][3] == "not determined" and row["Sn"][4] == ""
        assert row["Cu"][3:5] == ["0.5876", "0.0071"]
        run_id = int(re.search(r'href="/run/(\d+)"', page).group(1))
        with rec.transaction() as conn:
            srow = conn.execute(sa.select(S.samples.c.id).where(S.samples.c.run_id == run_id,
                                                                S.samples.c.sample_id == sid)).scalar_one()
        analysis = client.get(f"/analysis/{srow}").text
        res = {r[0]: r for r in _rows(analysis)}
        assert res["Sn"][1:3] == ["not determined", ""] and res["Cu"][1:3] == ["0.5876", "0.0071"]
    finally:
        rec.dispose()


def test_review_page_says_draft_recorded_not_issued(db, tmp_path):  # noqa: F811
    kw = _analysis(tmp_path / "a")
    number = kw["certificates"][0].number
    with open_record(db) as rec:
        store_analysis(rec, **kw)
        with rec.transaction() as conn:
            created = conn.execute(sa.select(S.certificates.c.created_at).where(
                S.certificates.c.number == number)).scalar_one()
    client, rec = _client(db)
    try:
        page = client.get(f"/certificate/{number}").text
        head = page.split("</p>")[0]
        # a draft is not issued (ISO/IEC 17025:2017, 7.8.2.1, from memory)
        assert f"draft recorded {created}" in head and "issued" not in head
        release(rec, number, reviewer=REVIEWER, statement="ok", at="2026-12-05T10:00:00Z")
        head = client.get(f"/certificate/{number}").text.split("</p>")[0]
        assert f"draft recorded {created}" in head
        assert re.search(r"Released by Ines Quarrington \(fictional\)\s+at 2026-12-05T10:00:00Z "
                         r"\(time of issue\)", head)
    finally:
        rec.dispose()


def test_summary_json_gives_each_check_its_state():
    """summary.json: each check sample's state beside ``passed`` (docs/certificate.md, common practice)."""
    from types import SimpleNamespace

    from compquant.report import DriftInfo
    from compquant.workflow.outputs import _summary_head

    fe = CheckResult("CHK-108", "HRM-CA-108", "Fe", 0.000773, 0.000205, 0.0006, 5e-5, En=0.846, passed=True,
                     loq=0.000963)
    zn = CheckResult("CHK-108", "HRM-CA-108", "Zn", 0.3695, 0.0068, 0.372, 0.002, En=-0.36, passed=True, loq=0.002)
    bad = CheckResult("CHK-108", "HRM-CA-108", "Pb", 0.0130, 0.0008, 0.0100, 0.0002, En=3.6, passed=False,
                      loq=0.0004)
    method = SimpleNamespace(id="M", version="1", sha256="")
    head = _summary_head("2026-12-03T08:00:00Z", Path("run.h5"), "ab" * 32, method, "method.toml", "calibration",
                         None, [], DriftInfo(), [fe, zn, bad], [])
    states = {c["element"]: (c["passed"], c["state"]) for c in head["check_samples"]}
    assert states == {"Fe": (True, "not counted"), "Zn": (True, "pass"), "Pb": (False, "FAIL")}


# ------------------------------------------------------------------ revision 0003: the upgrade

OLD_CHECK_COLUMNS = ("id", "run_id", "sample_id", "standard_ref", "element", "measured", "U_measured", "certified",
                     "U_certified", "z", "En", "passed", "criterion")


def _record_at(location, revision: str) -> record_db.Record:
    """A record created as compquant did at ``revision`` (the migrations up to it only)."""
    from alembic import command

    engine, where, _ = record_db._engine_for(location)
    rec = record_db.Record(engine, where)
    with rec.transaction() as conn:
        command.upgrade(record_db._alembic_config(conn), revision)
        if rec.dialect == "sqlite":
            conn.exec_driver_sql(f"PRAGMA application_id = {record_db.SQLITE_APPLICATION_ID}")
        conn.execute(S.record_info.insert(), [{"key": "application", "value": record_db.APPLICATION},
                                              {"key": "created_at", "value": "2026-11-01T00:00:00Z"},
                                              {"key": "created_by", "value": "test"}])
    return rec


def store_as_before_0003(rec, kw: dict) -> None:
    """Store an analysis into a record older than revision 0003 as compquant did then: the checks
    without state and LOQ (the rest of the analysis as today's store_analysis)."""
    store_analysis(rec, **{**kw, "checks": []})
    old = sa.table("checks", *[sa.column(c) for c in OLD_CHECK_COLUMNS[1:]])
    with rec.transaction() as conn:
        run_id = conn.execute(sa.select(sa.func.max(S.runs.c.id))).scalar_one()
        conn.execute(old.insert(), [dict(run_id=run_id, sample_id=c.sample_id, standard_ref=c.standard_ref,
                                         element=c.element, measured=c.measured, U_measured=c.U_measured,
                                         certified=c.certified, U_certified=c.U_certified, z=c.z, En=c.En,
                                         passed=c.passed, criterion=c.criterion) for c in kw["checks"]])


def test_upgrade_to_0003_fills_check_states_from_the_issued_certificates(db, tmp_path, monkeypatch):  # noqa: F811
    from alembic.autogenerate import compare_metadata
    from alembic.migration import MigrationContext

    import compquant.record.queries as queries

    old = _record_at(db, "0002")
    kw = _analysis(tmp_path / "a", "RUN-OLD")
    store_as_before_0003(old, kw)
    # released as before 0003: today's chart query reads checks.state, which a 0002 record lacks;
    # the run's one point per chart cannot break a chart test, so the release then saw none
    with monkeypatch.context() as m:
        m.setattr(queries, "run_chart_violations", lambda conn, run_id: ([], False))
        released = release(old, kw["certificates"][0].number, reviewer=REVIEWER, at="2026-12-05T10:00:00Z")
    # a run without certificates: its check has no issued state to take
    bare = fake_analysis(tmp_path / "b", "RUN-BARE", n_samples=1)
    store_as_before_0003(old, {**bare, "certificates": [], "outputs": []})
    with old.transaction() as conn:
        before = {t.name: [tuple(r) for r in conn.execute(sa.select(t).order_by(*t.primary_key.columns))]
                  for t in S.TABLES if t.name not in ("checks", "audit")}
        # columns named through SQLAlchemy, so that PostgreSQL gets "U_measured" quoted
        old_checks = [tuple(r) for r in conn.execute(
            sa.select(*[sa.column(c) for c in OLD_CHECK_COLUMNS]).select_from(sa.table("checks"))
            .order_by(sa.column("id")))]
    old.dispose()

    rec = open_record(db)  # upgrades to the head revision
    try:
        assert record_db.schema_revision(rec) == "0003"
        with rec.engine.connect() as conn:  # the upgraded schema is the live one (Alembic's comparison)
            assert compare_metadata(MigrationContext.configure(conn), S.metadata) == []
        with rec.transaction() as conn:
            after = {t.name: [tuple(r) for r in conn.execute(sa.select(t).order_by(*t.primary_key.columns))]
                     for t in S.TABLES if t.name not in ("checks", "audit")}
            checks = conn.execute(sa.select(S.checks).order_by(S.checks.c.id)).mappings().all()
            last = conn.execute(sa.select(S.audit).order_by(S.audit.c.id.desc()).limit(1)).mappings().one()
        assert after == before  # no other row changed
        assert [tuple(c[k] for k in OLD_CHECK_COLUMNS) for c in checks] == old_checks
        states = {(c["sample_id"], c["element"], c["run_id"]): (c["state"], c["loq"]) for c in checks}
        run_old, run_bare = sorted({c["run_id"] for c in checks})
        # as the certificates of the run print them (their JSON's quality_control.check_samples[].state)
        assert states[("CHK-1", "Fe", run_old)] == ("not counted", pytest.approx(0.00096273))
        assert states[("CHK-1", "Pb", run_old)] == ("pass", pytest.approx(0.00044))
        assert states[("CHK-1", "Pb", run_bare)] == (None, None)
        assert last["action"] == "upgrade" and json.loads(last["detail"]) == {"from": "0002", "to": "0003"}
        # the released files still verify against the upgraded record
        assert verify_file(rec, released["json"])["status"] == "released"
        assert verify_file(rec, released["pdf"])["status"] == "released"
    finally:
        rec.dispose()
    client, rec = _client(db)
    try:
        checks_old = _check_rows(client.get(f"/run/{run_old}").text)
        assert checks_old["Fe"][-1] == "not counted"
        # no state to take: the page says so, and says only what `passed` means
        assert _check_rows(client.get(f"/run/{run_bare}").text)["Pb"][-1] == "not recorded (criterion met)"
    finally:
        rec.dispose()
