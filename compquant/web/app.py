"""The review page: a small Flask application over the lab's record.

Pages: the runs, one run, what awaits review, one certificate (results, figures, files, audit
trail, review forms), a sample's history, the control charts and the audit trail.  Review
actions call :func:`compquant.record.review.release`, :func:`~compquant.record.review.reject`
and :func:`~compquant.record.review.amend` exactly as ``compquant record ...`` does, so the audit
trail is the same whichever way a reviewer works.

Safety: every state-changing request is a POST carrying the session's CSRF token (a random
secret per session, compared in constant time) and, when the browser sends one, an Origin of
this server; the session cookie is SameSite=Strict and HttpOnly; templates are autoescaped; every
HTML page has a Content-Security-Policy allowing nothing but this server (no inline script);
files are found by their id or SHA-256 in the record and served only when their bytes still have
the recorded SHA-256 (see :mod:`compquant.web.data`).
"""

from __future__ import annotations

import hmac
import json
import re
import secrets
import tempfile
from pathlib import Path
from urllib.parse import urlsplit

from flask import Flask, Response, abort, flash, g, redirect, render_template, request, session, url_for

from compquant.errors import CompquantError
from compquant.record import display
from compquant.web import data, interactive

_SHA = re.compile(r"[0-9a-f]{64}")
_CSP = ("default-src 'self'; img-src 'self' data:; script-src 'self'; style-src 'self'{}; object-src 'none'; "
        "base-uri 'none'; form-action 'self'; frame-ancestors 'none'")
_MIME = {"pdf": "application/pdf", "json": "application/json"}


def _g(value, digits: int = 4) -> str:
    """A number for a table cell: ``digits`` significant digits, empty when missing."""
    if value is None or value != value:
        return ""
    try:
        return f"{float(value):.{digits}g}"
    except (TypeError, ValueError):
        return str(value)


def csrf_token() -> str:
    if "csrf" not in session:
        session["csrf"] = secrets.token_urlsafe(32)
    return session["csrf"]


def _check_post() -> None:
    """Refuse a POST without this session's token (400) or from another origin (403)."""
    if request.method != "POST":
        return
    sent, mine = request.form.get("csrf_token", ""), session.get("csrf", "")
    if not mine or not sent or not hmac.compare_digest(sent.encode(), mine.encode()):
        abort(400, "missing or wrong CSRF token: reload the page and try again")
    origin = request.headers.get("Origin")  # browsers send it with every POST (Referrer-Policy same-origin)
    if origin is not None and urlsplit(origin).netloc != request.host:
        abort(403, "request from another site")


def _headers(resp: Response) -> Response:
    resp.headers["X-Content-Type-Options"] = "nosniff"
    resp.headers["Referrer-Policy"] = "same-origin"  # "no-referrer" would make browsers send Origin: null
    resp.headers["Cache-Control"] = "no-store"
    if resp.mimetype == "text/html":
        # BokehJS styles its plots with inline <style> (the charts page only); scripts stay 'self' only
        resp.headers["Content-Security-Policy"] = _CSP.format(" 'unsafe-inline'" if g.get("bokeh") else "")
        resp.headers["X-Frame-Options"] = "DENY"
    return resp


#: host names a request may name on loopback (anything else is refused: DNS rebinding)
LOOPBACK_HOSTS = ["127.0.0.1", "localhost", "[::1]", "::1"]


def create_app(rec, trusted_hosts: list[str] | None = LOOPBACK_HOSTS) -> Flask:
    """The application over an open :class:`compquant.record.Record` (the caller keeps it open).

    ``trusted_hosts``: the host names a request's Host header may carry (400 otherwise), so that a
    web page whose name is made to resolve to 127.0.0.1 (DNS rebinding) cannot read or post to
    the page; None accepts any (only when serving on all addresses, with a warning).
    """
    app = Flask(__name__)  # templates/ and static/ beside this module
    app.config["TRUSTED_HOSTS"] = trusted_hosts
    app.secret_key = secrets.token_bytes(32)  # per start: sessions and their CSRF secrets end with the server
    app.config.update(SESSION_COOKIE_SAMESITE="Strict", SESSION_COOKIE_HTTPONLY=True, MAX_CONTENT_LENGTH=64 * 1024)
    app.jinja_env.autoescape = True
    app.jinja_env.filters["g"] = _g
    # the record's numbers and check states as the certificate prints them (compquant.record.display)
    app.jinja_env.globals.update(vu=display.value_u_text, result=display.result_text, limit=display.limit_text,
                                 check_state=display.check_state_text, bad_states=display.BAD_CHECK_STATES)
    app.jinja_env.globals.update(csrf_token=csrf_token, where=rec.where)
    app.before_request(_check_post)
    app.after_request(_headers)
    app.extensions["compquant_record"] = rec
    _pages(app, rec)
    _evidence(app, rec)
    _files(app, rec)
    _actions(app, rec)
    return app


def _pages(app: Flask, rec) -> None:
    from compquant.record.queries import audit_trail, sample_history
    from compquant.record.review import awaiting_review

    @app.get("/")
    def runs():
        with rec.transaction() as conn:
            return render_template("runs.html", title="Runs in the record", runs=data.list_runs(conn))

    @app.get("/pending")
    def pending():
        return render_template("pending.html", title="Certificates awaiting review", items=awaiting_review(rec))

    @app.get("/run/<int:run_id>")
    def run(run_id: int):
        with rec.transaction() as conn:
            d = data.run_detail(conn, run_id)
        if d is None:
            abort(404)
        return render_template("run.html", title=f"Run {d['run']['file_name']}", d=d)

    @app.get("/certificate/<number>")
    def certificate(number: str):
        with rec.transaction() as conn:
            d = data.certificate_detail(conn, number)
        if d is None:
            abort(404)
        trail = audit_trail(rec, d["cert"]["base_number"]).to_dict("records")
        return render_template("cert.html", title=f"Certificate {number}", d=d, trail=trail)

    @app.get("/sample")
    def sample():
        sid = request.args.get("id", "")
        df = sample_history(rec, sid) if sid else None
        rows = [] if df is None or df.empty else df.astype(object).where(df.notna(), None).to_dict("records")
        return render_template("sample.html", title=f"Sample {sid}", rows=rows)

    @app.get("/audit")
    def audit():
        return render_template("audit.html", title="Audit trail", trail=audit_trail(rec).to_dict("records"))

    @app.get("/charts")
    def charts():
        from compquant.record.queries import drift_lines, materials

        g.bokeh = interactive.available()
        with rec.transaction() as conn:
            return render_template("charts.html", title="Control charts", checks=materials(conn),
                                   drifts=drift_lines(conn), interactive=g.bokeh)



def _evidence(app: Flask, rec) -> None:
    """A recorded sample's analysis: spectrum, line windows and fits, curves, Boltzmann plot, maps."""

    @app.get("/analysis/<int:row>")
    def analysis(row: int):
        g.bokeh = interactive.available()
        with rec.transaction() as conn:
            d = data.sample_row(conn, row)
        if d is None:
            abort(404)
        figs = (d["latest"] or {}).get("figures", [])
        static = {"spectrum": [f for f in figs if f.get("kind") == "spectrum"],
                  "boltzmann": [f for f in figs if f.get("kind") == "boltzmann"],
                  "curve": {el: [f for f in figs if f.get("kind") == "calibration" and f" {el} (" in f.get("title", "")]
                            for el in d["curves"]}}
        return render_template("analysis.html", title=f"Sample {d['sample']['sample_id']}", d=d, static=static,
                               interactive=g.bokeh)

    def item(build):
        if not interactive.available():
            abort(404)
        out = build()
        if out is None:
            abort(404)
        return Response(json.dumps(out), mimetype="application/json")  # Bokeh's key order kept

    @app.get("/analysis/<int:row>/spectrum.json")
    def spectrum_json(row: int):
        def build():
            with rec.transaction() as conn:
                hit = data.evidence_spectrum(conn, row)
            return None if hit is None else interactive.spectrum_item(*hit)
        return item(build)

    @app.get("/analysis/<int:row>/lines.json")
    def lines_json(row: int):
        def build():
            with rec.transaction() as conn:
                its = data.evidence_items(conn, row, "line")
            return interactive.lines_item(its) if its else None
        return item(build)

    @app.get("/analysis/<int:row>/curve.json")
    def curve_json(row: int):
        el, log = request.args.get("element", ""), request.args.get("scale") == "log"

        def build():
            with rec.transaction() as conn:
                curve = next((c for c in data.evidence_items(conn, row, "curve") if c["element"] == el), None)
                mark = next((m for m in data.evidence_items(conn, row, "mark") if m["element"] == el), None)
            return None if curve is None else interactive.curve_item(curve, mark, log=log)
        return item(build)

    @app.get("/analysis/<int:row>/boltzmann.json")
    def boltzmann_json(row: int):
        def build():
            with rec.transaction() as conn:
                its = data.evidence_items(conn, row, "boltzmann")
            return interactive.boltzmann_item(its[0]) if its else None
        return item(build)

    @app.get("/analysis/<int:row>/map.json")
    def map_json(row: int):
        name = request.args.get("name", "")

        def build():
            with rec.transaction() as conn:
                m = next((m for m in data.evidence_items(conn, row, "map") if m["name"] == name), None)
            return None if m is None else interactive.map_item(m)
        return item(build)


def _files(app: Flask, rec) -> None:
    @app.get("/file/<int:file_id>")
    def file(file_id: int):
        with rec.transaction() as conn:
            hit = data.certificate_file(conn, file_id)
        if hit is None:
            abort(404)
        body, fmt, name = hit
        resp = Response(body, mimetype=_MIME[fmt])
        safe = re.sub(r"[^A-Za-z0-9._-]", "_", name)
        resp.headers["Content-Disposition"] = f'inline; filename="{safe}"'
        return resp

    @app.get("/figure/<int:cert_id>/<sha>.png")
    def figure(cert_id: int, sha: str):
        if not _SHA.fullmatch(sha):
            abort(404)
        with rec.transaction() as conn:
            png = data.figure_png(conn, cert_id, sha)
        if png is None:
            abort(404)
        return Response(png, mimetype="image/png")

    def find_chart():
        from compquant.record.queries import check_chart, drift_chart, drift_lines, latest_settings, materials

        kind = request.view_args["kind"]
        with rec.transaction() as conn:
            settings = latest_settings(conn)
            if kind == "check":
                key = (request.args.get("material", ""), request.args.get("element", ""))
                ch = check_chart(conn, *key, settings) if key in materials(conn) else None
            elif kind == "drift" and request.args.get("line", "") in drift_lines(conn):
                ch = drift_chart(conn, request.args["line"], settings)
            else:
                ch = None
        if ch is None or not ch.points:
            abort(404)
        return ch

    @app.get("/chart/<kind>.png")
    def chart_png(kind: str):
        from compquant.record.charts import draw_chart

        ch = find_chart()
        with tempfile.TemporaryDirectory(prefix="compquant-chart-") as tmp:
            draw_chart(ch, Path(tmp) / "chart.png")
            return Response((Path(tmp) / "chart.png").read_bytes(), mimetype="image/png")

    @app.get("/chart/<kind>.json")
    def chart_json(kind: str):
        if not interactive.available():
            abort(404)
        # json.dumps keeps Bokeh's key order (Flask's JSON sorts keys, and BokehJS needs each
        # object defined before it is referenced)
        return Response(json.dumps(interactive.chart_item(find_chart())), mimetype="application/json")

    @app.get("/bokeh.min.js")
    def bokehjs():
        if not interactive.available():
            abort(404)
        return Response(interactive.bokehjs_file().read_bytes(), mimetype="text/javascript")


def _review_step(number: str, step, ok_text: str, then=None):
    """Run one review step; an error of the record becomes a message on the certificate's page.

    ``then(result)`` names the certificate to show afterwards (default: ``number``).
    """
    try:
        out = step()
    except CompquantError as exc:
        flash(f"error: {exc.one_line()}", "error")
        return redirect(url_for("certificate", number=number), code=303)
    flash(ok_text, "ok")
    return redirect(url_for("certificate", number=then(out) if then else number), code=303)


def _actions(app: Flask, rec) -> None:
    from compquant.record.review import amend, reject, release

    def field(name: str) -> str:
        return request.form.get(name, "")

    def release_(number: str):
        return _review_step(number, lambda: release(rec, number, reviewer=field("reviewer"), role=field("role"),
                                                    statement=field("statement")),
                            f"released {number}")

    def reject_(number: str):
        return _review_step(number, lambda: reject(rec, number, reviewer=field("reviewer"), reason=field("reason")),
                            f"rejected {number}")

    def amend_(number: str):
        return _review_step(number, lambda: amend(rec, number, reason=field("reason")),
                            f"amended {number}: the new revision is a draft awaiting review",
                            then=lambda out: out["number"])

    app.add_url_rule("/certificate/<number>/release", "release", release_, methods=["POST"])
    app.add_url_rule("/certificate/<number>/reject", "reject", reject_, methods=["POST"])
    app.add_url_rule("/certificate/<number>/amend", "amend", amend_, methods=["POST"])
