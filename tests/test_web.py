"""The review page (compquant.web) through Flask's test client.

Outside references: Flask/Werkzeug's own routing and test client, Jinja2's autoescaping, the
record's own audit trail (a release from the page must leave exactly the rows 'compquant record
release' leaves), SHA-256 from hashlib, and the certificate JSON read back.  The record holds
invented analyses (record_helpers): no real lab, person or material.
"""

from __future__ import annotations

import hashlib
import json
import re
import sys
from pathlib import Path

import pytest

pytest.importorskip("flask")

import sqlalchemy as sa
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).resolve().parent))

from record_helpers import fake_analysis
from report_helpers import demo_figures

from compquant.cli import main
from compquant.record import open_record
from compquant.record import schema as S
from compquant.record.states import Review
from compquant.record.store import store_analysis
from compquant.report.jsonform import write_certificate_json
from compquant.web.app import create_app

HOSTILE = '<img src=x onerror=alert(1)>"\'&'
REVIEWER = "Ines Quarrington (fictional)"


def fill_record(location, outdir: Path, *, hostile: bool = True) -> list[str]:
    """Two invented runs (the second with a figure on its first certificate) and, optionally, a run
    whose sample ids carry HTML; return the certificate numbers of the second run."""
    with open_record(location) as rec:
        store_analysis(rec, **fake_analysis(outdir / "a", "RUN-A", measured_at="2026-11-16T08:30:00Z"))
        kw = fake_analysis(outdir / "b", "RUN-B", check_value=0.0192, measured_at="2026-11-17T08:30:00Z")
        cert, out = kw["certificates"][0], kw["outputs"][0]
        fig = demo_figures()[0]
        fig.path = "figures/spectrum.png"
        (outdir / "b" / "figures").mkdir()
        (outdir / "b" / "figures" / "spectrum.png").write_bytes(fig.png)
        cert.figures = [fig]
        write_certificate_json(cert, out.json, review=Review("draft"))
        store_analysis(rec, **kw)
        if hostile:
            store_analysis(rec, **fake_analysis(outdir / "h", HOSTILE, n_samples=1,
                                                measured_at="2026-11-18T08:30:00Z"))
    return [c.number for c in kw["certificates"]]


@pytest.fixture()
def site(tmp_path):
    db = str(tmp_path / "record.sqlite")
    numbers = fill_record(db, tmp_path)
    rec = open_record(db)
    app = create_app(rec)
    app.testing = True
    yield app.test_client(), rec, numbers, db
    rec.dispose()


def token_of(client, number: str) -> str:
    page = client.get(f"/certificate/{number}").get_data(as_text=True)
    return re.search(r'name="csrf_token" value="([^"]+)"', page).group(1)


def audit_rows(rec) -> list[dict]:
    with rec.transaction() as conn:
        rows = conn.execute(sa.select(S.audit).order_by(S.audit.c.id)).mappings().all()
    return [{k: v for k, v in r.items() if k not in ("id", "at")} for r in rows]


def state_of(rec, number: str) -> str:
    with rec.transaction() as conn:
        return conn.execute(sa.select(S.certificates.c.state).where(S.certificates.c.number == number)
                            .order_by(S.certificates.c.id.desc())).scalars().first()


def test_pages_load_and_show_the_record(site):
    client, rec, numbers, _ = site
    runs = client.get("/")
    assert runs.status_code == 200 and "RUN-A.h5" in runs.text and "RUN-B.h5" in runs.text
    run_b = re.search(r'href="(/run/\d+)">RUN-B.h5', runs.text).group(1)
    page = client.get(run_b).text
    # samples, the check sample with its En and criterion, the drift factor, the drafts awaiting review
    for text in ("RUN-B-S000", "CHK-1", "CRM-B2", "|En| &lt;= 1", "Pb I 405.781", *numbers):
        assert text in page, text
    cert = client.get(f"/certificate/{numbers[0]}")
    assert cert.status_code == 200
    # results with U and LOD as printed on the certificate (percent), from the recorded JSON
    doc = json.loads(client.get(re.search(r'href="(/file/\d+)">JSON', cert.text).group(1)).data)
    r0 = doc["results"][0]
    assert f"<td>{r0['element']}</td>" in cert.text
    assert f">{r0['reported']['U']}<" in cert.text and f">{r0['reported']['lod']}<" in cert.text
    img = re.search(r'<img src="(/figure/\d+/[0-9a-f]{64}\.png)"', cert.text).group(1)
    png = client.get(img)
    assert png.status_code == 200 and png.data[:8] == b"\x89PNG\r\n\x1a\n"
    assert hashlib.sha256(png.data).hexdigest() == img.split("/")[-1][:-4]
    pdf = client.get(re.search(r'href="(/file/\d+)">PDF', cert.text).group(1))
    assert pdf.status_code == 200 and pdf.mimetype == "application/pdf" and pdf.data.startswith(b"%PDF")
    assert "Content-Security-Policy" in cert.headers and "script-src 'self'" in cert.headers["Content-Security-Policy"]
    assert numbers[0] in client.get("/pending").text
    charts = client.get("/charts").text
    chart_urls = re.findall(r'<img src="([^"]+)"', charts)
    assert len(chart_urls) == 2  # the check material CRM-B2 Pb and the drift line
    for u in chart_urls:
        r = client.get(u.replace("&amp;", "&"))
        assert r.status_code == 200 and r.data[:4] == b"\x89PNG"
    if "data-chart=" in charts:  # bokeh installed: the same chart as a Bokeh JSON item, BokehJS from the package
        item = client.get(re.search(r'data-chart="([^"]+)"', charts).group(1).replace("&amp;", "&")).get_json()
        assert {"doc", "root_id", "target_id"} <= set(item)
        import bokeh

        js = client.get("/bokeh.min.js").data
        assert js == (Path(bokeh.__file__).parent / "server" / "static" / "js" / "bokeh.min.js").read_bytes()
        assert "'unsafe-inline'" in client.get("/charts").headers["Content-Security-Policy"].split("style-src")[1]
    assert "'unsafe-inline'" not in cert.headers["Content-Security-Policy"]
    assert client.get("/sample?id=RUN-B-S001").text.count("RUN-B.h5") == 6  # one row per element
    assert "issue draft" in client.get("/audit").text


def test_release_from_the_page_leaves_the_same_audit_trail_as_the_cli(tmp_path, monkeypatch):
    monkeypatch.setenv("COMPQUANT_USER", "analyst-one")
    db_cli, db_web = str(tmp_path / "cli.sqlite"), str(tmp_path / "web.sqlite")
    n_cli = fill_record(db_cli, tmp_path / "cli", hostile=False)
    n_web = fill_record(db_web, tmp_path / "web", hostile=False)
    assert n_cli == n_web
    number = n_cli[0]
    res = CliRunner().invoke(main, ["record", "release", number, "--reviewer", REVIEWER, "--role", "Quality manager",
                                    "--statement", "Checked against the method.", "--db", db_cli])
    assert res.exit_code == 0, res.output
    with open_record(db_web) as rec:
        client = create_app(rec).test_client()
        r = client.post(f"/certificate/{number}/release", data={
            "csrf_token": token_of(client, number), "reviewer": REVIEWER, "role": "Quality manager",
            "statement": "Checked against the method."})
        assert r.status_code == 303
        assert "released " + number in client.get(r.headers["Location"]).text
        web_trail = audit_rows(rec)
    with open_record(db_cli) as rec:
        cli_trail = audit_rows(rec)
    assert web_trail == cli_trail
    assert web_trail[-1]["action"] == "release" and web_trail[-1]["who"] == REVIEWER
    released = [json.loads(p.read_text("utf-8")) for p in (tmp_path / "cli" / "b" / "RUN-B-S000.json",
                                                           tmp_path / "web" / "b" / "RUN-B-S000.json")]
    for doc in released:
        assert doc["review"]["state"] == "released" and doc["authorised_by"]["name"] == REVIEWER
        doc["review"].pop("at")
    assert released[0]["review"] == released[1]["review"]


def test_reject_and_amend_from_the_page(site):
    client, rec, numbers, _ = site
    r = client.post(f"/certificate/{numbers[1]}/reject", data={
        "csrf_token": token_of(client, numbers[1]), "reviewer": REVIEWER, "reason": "smeared sample"})
    assert r.status_code == 303
    assert state_of(rec, numbers[1]) == "rejected"
    # an error of the record (reason missing) is shown on the page; nothing changes
    before = audit_rows(rec)
    r = client.post(f"/certificate/{numbers[0]}/reject", data={
        "csrf_token": token_of(client, numbers[0]), "reviewer": REVIEWER, "reason": " "}, follow_redirects=True)
    assert "error: " in r.text and "needs a reason" in r.text and audit_rows(rec) == before
    client.post(f"/certificate/{numbers[0]}/release", data={"csrf_token": token_of(client, numbers[0]),
                                                             "reviewer": REVIEWER})
    r = client.post(f"/certificate/{numbers[0]}/amend", data={
        "csrf_token": token_of(client, numbers[0]), "reason": "client reference corrected"})
    assert r.headers["Location"].endswith(f"/certificate/{numbers[0]}-R1")
    assert state_of(rec, f"{numbers[0]}-R1") == "draft"
    assert [a["action"] for a in audit_rows(rec) if a["subject"].startswith(numbers[0])] == [
        "issue draft", "release", "amend"]


def test_forged_posts_are_refused(site):
    client, rec, numbers, _ = site
    before = audit_rows(rec)
    url = f"/certificate/{numbers[0]}/release"
    form = {"reviewer": "mallory", "role": "", "statement": ""}
    assert client.post(url, data=form).status_code == 400  # no token
    token_of(client, numbers[0])  # the session now has a secret
    assert client.post(url, data={**form, "csrf_token": "forged"}).status_code == 400
    other = create_app(rec).test_client()  # another session's (and another server start's) token
    assert client.post(url, data={**form, "csrf_token": token_of(other, numbers[0])}).status_code == 400
    good = token_of(client, numbers[0])
    assert client.post(url, data={**form, "csrf_token": good},
                       headers={"Origin": "http://evil.example"}).status_code == 403
    assert client.post(url, data={**form, "csrf_token": good}, headers={"Origin": "null"}).status_code == 403
    assert client.get(url).status_code == 405  # no state change by GET
    # DNS rebinding: a page whose name resolves to 127.0.0.1 names its own host
    assert client.get("/", headers={"Host": "attacker.example:8765"}).status_code == 400
    assert client.post(url, data={**form, "csrf_token": good}, headers={
        "Host": "attacker.example:8765", "Origin": "http://attacker.example:8765"}).status_code == 400
    assert audit_rows(rec) == before and state_of(rec, numbers[0]) == "draft"


@pytest.mark.parametrize("url", [
    "/file/../../../../etc/passwd", "/file/%2e%2e/%2e%2e/etc/passwd", "/figure/1/..%2F..%2Fetc%2Fpasswd.png",
    "/figure/1/../../../etc/passwd", "/certificate/..%2F..%2F..%2Fetc%2Fpasswd", "/static/../../etc/passwd",
    "/etc/passwd", "/file/999", "/file/-1", "/run/999", "/figure/1/" + "0" * 64 + ".png",
    "/chart/check.png?material=../../etc&element=passwd", "/chart/..%2F..%2Fetc%2Fpasswd.png",
    "/certificate/NOT-A-NUMBER",
])
def test_paths_from_the_url_never_reach_a_file(site, url):
    client = site[0]
    assert client.get(url).status_code == 404


def test_a_file_altered_on_disk_is_not_served(site, tmp_path):
    client, rec, numbers, _ = site
    page = client.get(f"/certificate/{numbers[0]}").text
    url = re.search(r'href="(/file/\d+)">JSON', page).group(1)
    assert client.get(url).status_code == 200
    p = tmp_path / "b" / "RUN-B-S000.json"
    p.write_bytes(p.read_bytes().replace(b"0.100", b"0.900"))
    assert client.get(url).status_code == 404


def test_hostile_sample_id_is_escaped(site):
    client = site[0]
    for url in ["/", "/pending", "/audit", "/sample?id=" + HOSTILE]:
        page = client.get(url, query_string=None).text
        assert "<img src=x" not in page, url
    runs = client.get("/").text
    run_h = re.findall(r'href="(/run/\d+)"', runs)[0]  # newest first: the hostile run
    page = client.get(run_h).text
    assert "&lt;img src=x onerror=alert(1)&gt;" in page and "<img src=x" not in page
    number = re.search(r'href="/certificate/([^"]+)"', page).group(1)
    assert "<img src=x" not in client.get(f"/certificate/{number}").text


def test_command_binds_loopback_and_warns_on_another_host(tmp_path, monkeypatch):
    import werkzeug.serving

    calls = []

    class FakeServer:
        port = 8765

        def serve_forever(self):
            raise KeyboardInterrupt

        def server_close(self):
            calls.append("closed")

    def fake_make_server(host, port, app, threaded, fd):
        calls.append((host, port))
        return FakeServer()

    monkeypatch.setattr(werkzeug.serving, "make_server", fake_make_server)
    db = str(tmp_path / "r.sqlite")
    res = CliRunner().invoke(main, ["review", "--db", db, "--port", "0"])
    assert res.exit_code == 0 and calls[0] == ("127.0.0.1", 0) and "warning" not in res.output
    assert "http://127.0.0.1:8765/" in res.output
    res = CliRunner().invoke(main, ["review", "--db", db, "--host", "0.0.0.0", "--port", "0"])
    assert res.exit_code == 0 and calls[-2] == ("0.0.0.0", 0) and calls[-1] == "closed"
    assert "warning: serving on 0.0.0.0" in res.output


def test_charts_fall_back_to_png_without_bokeh(site, monkeypatch):
    import compquant.web.interactive as interactive

    monkeypatch.setattr(interactive, "available", lambda: False)
    client = site[0]
    page = client.get("/charts")
    assert "data-chart=" not in page.text and "<script" not in page.text
    assert page.text.count('<img src="/chart/') == 2
    assert "'unsafe-inline'" not in page.headers["Content-Security-Policy"]
    assert client.get("/chart/check.json?material=CRM-B2&element=Pb").status_code == 404
    assert client.get("/bokeh.min.js").status_code == 404


def test_port_in_use_is_one_error_line(tmp_path):
    import socket

    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        port = busy.getsockname()[1]
        res = CliRunner().invoke(main, ["review", "--db", str(tmp_path / "r.sqlite"), "--port", str(port)])
    assert res.exit_code == 2
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: --host/--port: cannot listen on 127.0.0.1:")


def test_the_command_serves_the_page_on_loopback(tmp_path):
    """The real command in a process: it prints its address, serves the runs page, refuses other hosts."""
    import os
    import subprocess
    import urllib.error
    import urllib.request

    db = str(tmp_path / "record.sqlite")
    fill_record(db, tmp_path, hostile=False)
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parent.parent)}
    proc = subprocess.Popen([sys.executable, "-m", "compquant", "review", "--db", db, "--port", "0"],
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, env=env)
    try:
        line = proc.stdout.readline()
        url = re.search(r"http://127\.0\.0\.1:\d+/", line).group(0)
        with urllib.request.urlopen(url, timeout=20) as r:
            assert r.status == 200 and "RUN-B.h5" in r.read().decode("utf-8")
        req = urllib.request.Request(url, headers={"Host": "attacker.example"})
        with pytest.raises(urllib.error.HTTPError) as err:
            urllib.request.urlopen(req, timeout=20)
        assert err.value.code == 400
    finally:
        proc.terminate()
        proc.wait(20)
