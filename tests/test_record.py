"""The lab's record on SQLite and, when COMPQUANT_TEST_PG_URL is set, on a real PostgreSQL server.

The draft -> release -> amend cycle runs through ``analyse`` on a simulated run (invented Cu-Zn
materials, as in test_analyse); the safety tests store invented analyses (record_helpers).
Outside references: the certificate JSON schema shipped with compquant (jsonschema validates),
the PDF text read back with pypdf, SHA-256 from hashlib, and the database servers themselves
(SQLite's and PostgreSQL's triggers and transactions).
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import jsonschema
import pytest
import sqlalchemy as sa
from click.testing import CliRunner
from pypdf import PdfReader
from record_helpers import fake_analysis, pg_url
from test_analyse import DEMO, METHOD, SCENARIO, STANDARDS

from compquant.analyse import analyse
from compquant.cli import main
from compquant.errors import OutputError
from compquant.record import RecordError, open_record
from compquant.record import schema as S
from compquant.record.review import amend, awaiting_review, reject, release, verify_file
from compquant.record.states import RELEASED
from compquant.record.store import store_analysis
from compquant.report.jsonform import load_schema

ISSUED = "2026-12-01T21:00:00Z"
TESTS = Path(__file__).resolve().parent

# the same tests on an SQLite file always, and on a fresh PostgreSQL database when
# COMPQUANT_TEST_PG_URL names a server (.ci/postgres start sets it)
BACKENDS = [
    "sqlite",
    pytest.param("postgresql", marks=pytest.mark.skipif(not pg_url(), reason="COMPQUANT_TEST_PG_URL not set")),
]


def _admin_url() -> sa.engine.URL:
    url = sa.make_url(pg_url())
    return url.set(drivername="postgresql+psycopg") if url.drivername in ("postgresql", "postgres") else url


@pytest.fixture(params=BACKENDS)
def db(request, tmp_path):
    """A new, empty record location (path or URL) on each backend."""
    if request.param == "sqlite":
        yield str(tmp_path / "record.sqlite")
        return
    admin = _admin_url()
    name = f"cqtest_{uuid.uuid4().hex[:12]}"
    eng = sa.create_engine(admin, isolation_level="AUTOCOMMIT")
    with eng.connect() as c:
        c.exec_driver_sql(f'CREATE DATABASE "{name}"')
    try:
        yield admin.set(database=name).render_as_string(hide_password=False)
    finally:
        with eng.connect() as c:
            c.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        eng.dispose()


@pytest.fixture(scope="module")
def sim(tmp_path_factory):
    from compquant.simulate import load_scenario, simulate_run

    d = tmp_path_factory.mktemp("recsim")
    (d / "stds.csv").write_text(STANDARDS)
    # certificates that the release rules let through (docs/certificate.md): an optically thin plasma,
    # so the linear curve fits, and a stated z-score target, so the check sample can fail
    (d / "scenario.toml").write_text(SCENARIO.replace("self_absorption = true", "self_absorption = false"))
    (d / "method.toml").write_text(METHOD.replace('model = "linear"\n', 'model = "linear"\nsigma_pt_rel = 0.05\n', 1))
    simulate_run(load_scenario(d / "scenario.toml"), d / "run1.h5", seed=11)
    return d


def _pdf_pages(path) -> list[str]:
    return [p.extract_text() for p in PdfReader(str(path)).pages]


def _sha(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _actions(rec, subject_prefix: str) -> list[str]:
    with rec.transaction() as conn:
        rows = conn.execute(sa.select(S.audit.c.action, S.audit.c.subject).order_by(S.audit.c.id)).all()
    return [a for a, s in rows if s.startswith(subject_prefix)]


def test_draft_release_amend_cycle(sim, db, tmp_path):
    out = analyse(sim / "run1.h5", sim / "method.toml", standards=sim / "stds.csv", lab=DEMO / "lab.toml",
                  outdir=tmp_path / "out", issued_at=ISSUED, db=db)
    c0 = out.certificates[0]
    # the draft: watermark on every page, nobody named, state draft in the JSON
    pages = _pdf_pages(c0.pdf)
    assert pages and all("DRAFT" in p for p in pages)
    assert "Morwenna" not in "".join(pages)
    doc = json.loads(Path(c0.json).read_text("utf-8"))
    assert doc["review"]["state"] == "draft" and "nobody" in doc["authorised_by"]["name"]
    jsonschema.Draft202012Validator(load_schema()).validate(doc)
    draft_pdf_sha = _sha(c0.pdf)

    with open_record(db) as rec:
        waiting = {w["number"]: w for w in awaiting_review(rec)}
        assert set(waiting) == {c.number for c in out.certificates}
        assert waiting[c0.number]["flags"] == doc_flags(doc)
        rel = release(rec, c0.number, reviewer="Ines Quarrington (fictional)", role="Quality manager",
                      statement="Checked against the method and the QC records.")
        pages = _pdf_pages(rel["pdf"])
        assert not any("DRAFT" in p for p in pages)
        text = "".join(pages)
        assert "Ines Quarrington (fictional)" in text and "Quality manager" in text
        released = json.loads(Path(rel["json"]).read_text("utf-8"))
        jsonschema.Draft202012Validator(load_schema()).validate(released)
        assert released["review"]["state"] == RELEASED
        assert released["authorised_by"] == {"name": "Ines Quarrington (fictional)", "title": "Quality manager"}
        # same numbers as the reviewed draft: only the review and authorisation differ
        for k in ("results", "quality_control", "sample", "provenance", "number", "revision"):
            assert released[k] == doc[k], k
        v = verify_file(rec, rel["pdf"])
        assert v["status"] == "released" and v["reviewer"] == "Ines Quarrington (fictional)"
        assert v["run"] == "run1.h5" and v["run_sha256"] == doc["provenance"]["run_sha256"]
        assert _sha(rel["pdf"]) != draft_pdf_sha

        # a released certificate cannot be released again, nor edited in the database
        with pytest.raises(RecordError, match="released, not a draft"):
            release(rec, c0.number, reviewer="someone")
        with pytest.raises(RecordError, match="changes only by review"), rec.transaction() as conn:
            conn.execute(S.certificates.update().where(S.certificates.c.number == c0.number).values(document="{}"))
        with pytest.raises(RecordError, match="append-only"), rec.transaction() as conn:
            conn.execute(S.audit.delete())

        # amend: a new revision, a draft until released; then the earlier one is superseded
        am = amend(rec, c0.number, reason="client reference corrected")
        assert am["number"] == f"{c0.number}-R1" and am["revision"] == 1
        amended = json.loads(Path(am["json"]).read_text("utf-8"))
        assert amended["revision"] == 1 and amended["review"]["state"] == "draft"
        assert any(c0.number in r and "client reference corrected" in r for r in amended["remarks"])
        assert verify_file(rec, rel["pdf"])["status"] == "released"  # still in force until R1 is released
        rel1 = release(rec, am["number"], reviewer="Ines Quarrington (fictional)", role="Quality manager")
        assert verify_file(rec, rel["pdf"])["status"] == "superseded"
        assert verify_file(rec, rel1["pdf"])["status"] == "released"
        assert verify_file(rec, rel1["json"])["revision"] == 1
        assert _actions(rec, c0.number) == ["issue draft", "release", "amend", "supersede", "release"]
        with rec.transaction() as conn:
            who = conn.execute(sa.select(S.audit.c.who).where(S.audit.c.action == "release")).scalars().all()
        assert who == ["Ines Quarrington (fictional)"] * 2


def doc_flags(doc: dict) -> list[str]:
    return [f["flag"] for f in doc["flags_explained"]]


def test_one_byte_altered_is_not_the_released_version(sim, db, tmp_path):
    out = analyse(sim / "run1.h5", sim / "method.toml", standards=sim / "stds.csv", lab=DEMO / "lab.toml",
                  outdir=tmp_path / "out", issued_at=ISSUED, db=db, figures=False)
    c0 = out.certificates[0]
    with open_record(db) as rec:
        rel = release(rec, c0.number, reviewer="R. Reviewer (fictional)")
    for src in (rel["pdf"], rel["json"]):
        altered = tmp_path / ("altered" + Path(src).suffix)
        data = bytearray(Path(src).read_bytes())
        data[len(data) // 2] ^= 0x01  # one bit of one byte
        altered.write_bytes(bytes(data))
        r = CliRunner().invoke(main, ["record", "verify", "--db", db, src, str(altered)])
        assert r.exit_code == 1, r.output
        assert f"{src}: the released version of {c0.number}" in r.output
        assert f"{altered}: NOT the released version" in r.output
    r = CliRunner().invoke(main, ["record", "verify", "--db", db, rel["pdf"]])
    assert r.exit_code == 0, r.output
    # the other sample is still a draft: its file is reported as such
    r = CliRunner().invoke(main, ["record", "verify", "--db", db, out.certificates[1].pdf])
    assert r.exit_code == 1 and "it is the draft of" in r.output
    # analysing the same run again on the same day would reuse the released number: refused before writing
    before = _sha(rel["pdf"])
    # (the output folder already refuses to replace issued files; the record refuses the number too)
    with pytest.raises((RecordError, OutputError), match="already released|already issued"):
        analyse(sim / "run1.h5", sim / "method.toml", standards=sim / "stds.csv", lab=DEMO / "lab.toml",
                outdir=tmp_path / "out", issued_at=ISSUED, db=db, figures=False)
    assert _sha(rel["pdf"]) == before


def test_reject_and_cli_errors(db, tmp_path):
    with open_record(db) as rec:
        entries = store_analysis(rec, **fake_analysis(tmp_path / "o", "RUN-A", n_samples=2))
        n0, n1 = entries[0]["number"], entries[1]["number"]
        reject(rec, n0, reviewer="R. Reviewer (fictional)", reason="sample mislabelled")
        with pytest.raises(RecordError, match="rejected, not a draft"):
            release(rec, n0, reviewer="R. Reviewer (fictional)")
        with pytest.raises(RecordError, match="needs a reason"):
            reject(rec, n1, reviewer="R. Reviewer (fictional)", reason=" ")
        assert [w["number"] for w in awaiting_review(rec)] == [n1]
    r = CliRunner().invoke(main, ["record", "release", n0, "--reviewer", "X", "--db", db])
    assert r.exit_code == 2
    err = r.output.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: ") and "rejected, not a draft" in err[0]
    r = CliRunner().invoke(main, ["record", "pending", "--db", db])
    assert r.exit_code == 0 and n1 in r.output and n0 not in r.output
    r = CliRunner().invoke(main, ["record", "audit", n0, "--db", db])
    assert "reject" in r.output and "sample mislabelled" in r.output
    r = CliRunner().invoke(main, ["record", "history", "RUN-A-S001", "--db", db])
    assert r.exit_code == 0 and "Cu" in r.output and n1 in r.output


def test_lab_profile_without_review_issues_released(db, tmp_path):
    """[review] required = false: issued authorised by the signatory and recorded as released."""
    from compquant.record.states import initial_review
    from compquant.report import load_lab_profile

    lab = tmp_path / "lab.toml"
    lab.write_text((DEMO / "lab.toml").read_text("utf-8") + "\n[review]\nrequired = false\n", "utf-8")
    prof = load_lab_profile(lab)
    rv = initial_review(prof, True, ISSUED)
    assert rv.state == RELEASED and rv.reviewer == "Dr Morwenna Calloway (fictional)"
    assert initial_review(load_lab_profile(DEMO / "lab.toml"), True, ISSUED).state == "draft"
    assert initial_review(prof, False, ISSUED).state == "draft"  # no lab profile: nobody named
    with open_record(db) as rec:
        e = store_analysis(rec, **fake_analysis(tmp_path / "o", "RUN-B", n_samples=1, review=rv))
        assert e[0]["state"] == RELEASED
        assert verify_file(rec, tmp_path / "o" / "RUN-B-S000.json")["status"] == "released"


def test_schema_matches_migration_and_newer_schema_is_refused(db):
    from alembic.autogenerate import compare_metadata
    from alembic.migration import MigrationContext

    rec = open_record(db)
    with rec.engine.connect() as conn:
        diff = compare_metadata(MigrationContext.configure(conn), S.metadata)
    assert diff == []
    with rec.engine.begin() as conn:
        conn.exec_driver_sql("UPDATE alembic_version SET version_num = '9999'")
    rec.dispose()
    with pytest.raises(RecordError, match="newer than this compquant"):
        open_record(db)


def _runs_complete(location, n_samples: int = 4) -> tuple[int, int]:
    """(runs stored, runs whose results, certificates and audit entry are all there)."""
    with open_record(location) as rec, rec.transaction() as conn:
        runs = conn.execute(sa.select(S.runs.c.id, S.runs.c.sha256)).all()
        ok = 0
        for rid, sha in runs:
            n_res = conn.execute(sa.select(sa.func.count()).select_from(S.results).where(S.results.c.run_id == rid))
            n_cert = conn.execute(sa.select(sa.func.count()).select_from(S.certificates)
                                  .where(S.certificates.c.run_id == rid))
            n_aud = conn.execute(sa.select(sa.func.count()).select_from(S.audit)
                                 .where(S.audit.c.action == "store analysis", S.audit.c.subject == sha))
            ok += (n_res.scalar_one(), n_cert.scalar_one(), n_aud.scalar_one()) == (n_samples * 6, n_samples, 1)
    return len(runs), ok


WRITER = """
import sys
sys.path.insert(0, {tests!r})
from record_helpers import fake_analysis, pg_url
from compquant.record import open_record
from compquant.record.store import store_analysis
db, tag, n, out = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
n_samples = int(sys.argv[5]) if len(sys.argv) > 5 else 4
rec = open_record(db)
for i in range(n):
    kw = fake_analysis(out, f"{{tag}}-{{i}}", n_samples=n_samples, n_elements=6)
    print("begin", i + 1, flush=True)
    store_analysis(rec, **kw)
    print("committed", i + 1, flush=True)
"""


def _writer(location, tag, n, out, n_samples=4) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS.parent), str(TESTS)]))
    return subprocess.Popen([sys.executable, "-c", WRITER.format(tests=str(TESTS)), location, tag, str(n), str(out),
                             str(n_samples)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)


def test_two_writers_at_once(db, tmp_path):
    open_record(db).dispose()  # created once: the two writers race on the data, not on the schema
    procs = [_writer(db, tag, 6, tmp_path / tag) for tag in ("A", "B")]
    for p in procs:
        out, err = p.communicate(timeout=240)
        assert p.returncode == 0, err
        assert out.split()[-1] == "6"
    assert _runs_complete(db) == (12, 12)


def test_kill_during_writes_loses_nothing_committed(db, tmp_path):
    open_record(db).dispose()
    p = _writer(db, "K", 400, tmp_path / "k", n_samples=60)  # each store ~0.1-0.2 s: 360 results, 60 certificates
    committed = 0
    while True:
        line = p.stdout.readline()
        assert line, p.stderr.read()
        word, i = line.split()
        if word == "committed":
            committed = int(i)
        elif committed >= 3:
            break  # store number committed + 1 has begun
    time.sleep(0.03)  # inside that store's transaction
    p.send_signal(signal.SIGKILL)
    rest = p.stdout.read()
    p.wait(timeout=30)
    committed = max([committed] + [int(x.split()[1]) for x in rest.splitlines() if x.startswith("committed")])
    n_runs, n_ok = _runs_complete(db, n_samples=60)
    # every committed store is there and whole, the one killed is there whole or not at all
    assert n_runs == n_ok and committed <= n_runs <= committed + 1
    if not db.startswith("postgresql"):
        import sqlite3

        with sqlite3.connect(db) as con:
            assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    with open_record(db) as rec:  # and the record takes the next analysis as usual
        store_analysis(rec, **fake_analysis(tmp_path / "after", "AFTER", n_samples=60, n_elements=6))
    assert _runs_complete(db, n_samples=60) == (n_runs + 1, n_runs + 1)


def test_damaged_and_foreign_files_give_one_line_errors(tmp_path):
    import sqlite3

    good = tmp_path / "record.sqlite"
    with open_record(good) as rec:
        store_analysis(rec, **fake_analysis(tmp_path / "o", "RUN-D", n_samples=3))
    cases = {}
    text = tmp_path / "notes.txt"
    text.write_text("these are not the records you are looking for\n" * 10)
    cases[text] = "not an SQLite database"
    foreign = tmp_path / "other.sqlite"
    with sqlite3.connect(foreign) as con:
        con.execute("CREATE TABLE inventory (item TEXT)")
    cases[foreign] = "another program|other tables"
    foreign2 = tmp_path / "other2.sqlite"
    with sqlite3.connect(foreign2) as con:
        con.execute("PRAGMA application_id = 1234")
        con.execute("CREATE TABLE t (x)")
    cases[foreign2] = "another program"
    damaged = tmp_path / "damaged.sqlite"
    data = bytearray(good.read_bytes())
    page = 4096
    for i in range(page, len(data)):  # every page after the first (schema header kept) overwritten
        data[i] = 0xA5
    damaged.write_bytes(bytes(data))
    cases[damaged] = "malformed|damaged|not a database"
    truncated = tmp_path / "truncated.sqlite"
    truncated.write_bytes(good.read_bytes()[:50])
    cases[truncated] = "not an SQLite database"
    for path, msg in cases.items():
        before = _sha(path)
        r = CliRunner().invoke(main, ["record", "pending", "--db", str(path)])
        assert r.exit_code == 2, (path, r.output)
        lines = r.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: "), r.output
        import re

        assert re.search(msg, lines[0]), lines[0]
        assert _sha(path) == before  # never reset or changed


def test_export_whole_record(db, tmp_path):
    import pandas as pd

    with open_record(db) as rec:
        store_analysis(rec, **fake_analysis(tmp_path / "o", "RUN-E", n_samples=3, n_elements=5))
    r = CliRunner().invoke(main, ["record", "export", str(tmp_path / "exp"), "--db", db])
    assert r.exit_code == 0, r.output
    man = json.loads((tmp_path / "exp" / "manifest.json").read_text())
    assert set(man["tables"]) == {t.name for t in S.TABLES}
    assert man["tables"]["results"]["rows"] == 15 and man["schema_revision"] == "0003"
    res = pd.read_csv(tmp_path / "exp" / "results.csv")
    assert sorted(res["element"].unique()) == sorted("Cu Zn Pb Sn Fe".split())
    for t in man["tables"].values():
        assert _sha(tmp_path / "exp" / t["file"]) == t["sha256"]


def test_record_location_option_env_and_default(tmp_path, monkeypatch):
    from compquant.record.db import default_location, resolve

    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    monkeypatch.delenv("COMPQUANT_DB", raising=False)
    if sys.platform.startswith("linux"):
        assert default_location() == tmp_path / "xdg" / "compquant" / "record.sqlite"
    assert resolve(None) == str(default_location())
    monkeypatch.setenv("COMPQUANT_DB", str(tmp_path / "env.sqlite"))
    assert resolve(None) == str(tmp_path / "env.sqlite")
    assert resolve(tmp_path / "opt.sqlite") == str(tmp_path / "opt.sqlite")
    r = CliRunner().invoke(main, ["record", "info"])
    assert r.exit_code == 0 and "env.sqlite" in r.output and (tmp_path / "env.sqlite").is_file()


def test_release_refused_when_not_valid_or_chart_blocks(db, tmp_path):
    chart = {"limits": "certified", "block_release": True}
    with open_record(db) as rec:
        # check value 0.0199 against 0.0190 +/- 0.0004 (k = 2): sigma 0.0002, 4.5 sigma off -> test 1
        e = store_analysis(rec, **fake_analysis(tmp_path / "o", "RUN-F", n_samples=1, check_value=0.0199,
                                                chart_section=chart))
        w = awaiting_review(rec)[0]
        assert w["chart_blocks"] and "test 1" in w["chart"][0]
        with pytest.raises(RecordError, match="blocks release"):
            release(rec, e[0]["number"], reviewer="R. Reviewer (fictional)")
    r = CliRunner().invoke(main, ["record", "pending", "--db", db])
    assert "BLOCKED" in r.output and "test 1 broken" in r.output




def test_postgres_app_role_cannot_touch_the_triggers(db, tmp_path):
    """docs/record.md: a workstation login with SELECT/INSERT (+ UPDATE on certificates) works and
    can neither delete from the audit trail nor drop its trigger (PostgreSQL's own privileges)."""
    if not db.startswith("postgresql"):
        pytest.skip("PostgreSQL roles")
    open_record(db).dispose()  # schema set up by the owner
    owner = sa.create_engine(db, isolation_level="AUTOCOMMIT")
    with owner.connect() as c:
        c.exec_driver_sql("DO $$ BEGIN IF NOT EXISTS (SELECT FROM pg_roles WHERE rolname = 'cqtest_app') "
                          "THEN CREATE ROLE cqtest_app LOGIN; END IF; END $$")
        c.exec_driver_sql("GRANT SELECT, INSERT ON ALL TABLES IN SCHEMA public TO cqtest_app")
        c.exec_driver_sql("GRANT UPDATE ON certificates TO cqtest_app")
        c.exec_driver_sql("GRANT USAGE ON ALL SEQUENCES IN SCHEMA public TO cqtest_app")
    app = sa.make_url(db).set(username="cqtest_app").render_as_string(hide_password=False)
    try:
        with open_record(app) as rec:
            e = store_analysis(rec, **fake_analysis(tmp_path / "o", "RUN-R", n_samples=1))
            assert release(rec, e[0]["number"], reviewer="R. Reviewer (fictional)")["review"]["state"] == RELEASED
            for sql, why in (("DROP TRIGGER audit_append_only ON audit", "must be owner"),
                             ("DELETE FROM audit", "permission denied")):
                with pytest.raises(sa.exc.DBAPIError, match=why), rec.engine.begin() as c:
                    c.exec_driver_sql(sql)
    finally:
        with owner.connect() as c:
            c.exec_driver_sql("REASSIGN OWNED BY cqtest_app TO CURRENT_USER")
            c.exec_driver_sql("DROP OWNED BY cqtest_app")
        owner.dispose()
