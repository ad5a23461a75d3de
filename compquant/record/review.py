"""Review and release: what awaits review, release, reject, amend, and checking a file.

Every step is one transaction that changes the certificate's state and appends to the audit
trail (who, when, what, why); the database's triggers refuse any other change, so a released
certificate cannot be edited and nothing in the audit trail can be edited or deleted.

- :func:`awaiting_review`: drafts with their flags, the reasons they are not valid for release
  and the control-chart tests their run broke;
- :func:`release`: renders the final PDF and JSON from the recorded draft with the reviewer's
  authorisation (name, role, time, statement) and the day of release as date of issue into the
  draft's folder (the released files replace the draft files there; the draft's hashes stay in
  the record), and supersedes the revision an amendment replaces;
- :func:`reject`: a draft is rejected with a reason;
- :func:`amend`: a new revision of a released certificate (ISO/IEC 17025:2017, 7.8.8), issued as
  a draft that names the revision it replaces and why; releasing it supersedes the earlier one;
- :func:`verify_file`: whether a PDF or JSON file is the released version of a certificate.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
from pathlib import Path

import sqlalchemy as sa

from compquant.fileio import atomic_path, require_file, sha256_file, write_text_atomic
from compquant.record import schema as S
from compquant.record.db import Record, RecordError, current_user, now_utc
from compquant.record.states import DRAFT, REJECTED, RELEASED, SUPERSEDED, Review

C = S.certificates


def _cert_row(conn, number: str, rec: Record):
    row = conn.execute(sa.select(C).where(C.c.number == number).order_by(C.c.id.desc())).mappings().first()
    if row is None:
        raise RecordError(f"no certificate {number!r} in the record", where=rec.where,
                          fix="see 'compquant record pending' or 'compquant record history'")
    return row


def _need(cond: bool, rec: Record, number: str, what: str, fix: str) -> None:
    if not cond:
        raise RecordError(what, where=f"{rec.where}: {number}", fix=fix)


def awaiting_review(rec: Record) -> list[dict]:
    """Drafts awaiting review, oldest first, with flags, failed rules and broken chart tests."""
    from compquant.record.queries import run_chart_violations

    out = []
    with rec.transaction() as conn:
        rows = conn.execute(sa.select(C, S.runs.c.file_name, S.runs.c.analysed_at).join(S.runs)
                            .where(C.c.state == DRAFT).order_by(C.c.id)).mappings().all()
        cache: dict[int, tuple[list[str], bool]] = {}
        for r in rows:
            if r["run_id"] not in cache:
                cache[r["run_id"]] = run_chart_violations(conn, r["run_id"])
            chart_msgs, blocking = cache[r["run_id"]]
            out.append({
                "number": r["number"], "revision": r["revision"], "sample_id": r["sample_id"], "run": r["file_name"],
                "analysed_at": r["analysed_at"], "flags": json.loads(r["flags"]), "reasons": json.loads(r["reasons"]),
                "valid_for_release": bool(r["valid_for_release"]), "chart": chart_msgs, "chart_blocks": blocking,
            })
    return out


def _load_figures(cert, row, rec: Record) -> None:
    """Attach the recorded figures' PNG bytes, each checked against its SHA-256 in the record."""
    shas = {f["path"]: f["sha256"] for f in json.loads(row["figures"])}
    folder = Path(row["folder"])
    for fig in cert.figures:
        if not fig.path:
            continue
        p = folder / fig.path
        try:
            data = p.read_bytes()
        except OSError as exc:
            raise RecordError(f"figure of the draft cannot be read ({exc.strerror})", where=str(p),
                              fix="restore the analysis output folder, or re-run analyse") from exc
        if hashlib.sha256(data).hexdigest() != shas.get(fig.path):
            raise RecordError("figure differs from the one recorded with the draft", where=str(p),
                              fix="restore the analysis output folder, or re-run analyse")
        fig.png = data


def _render(cert, review: Review) -> tuple[bytes, str]:
    from compquant.report.jsonform import certificate_json
    from compquant.report.pdf import render_pdf_bytes

    pdf, _ = render_pdf_bytes(cert, review)
    return pdf, certificate_json(cert, review)


def _place_figures(cert, folder: Path) -> None:
    """The certificate's figures at their relative paths under ``folder`` (the JSON names them there)."""
    for fig in cert.figures:
        if not fig.path or fig.png is None:
            continue
        target = folder / fig.path
        if target.is_file() and target.read_bytes() == fig.png:
            continue
        target.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(target) as tmp:
            Path(tmp).write_bytes(fig.png)


def _write_files(conn, cid: int, kind: str, folder: Path, stem: str, pdf: bytes, text: str, cert=None) -> dict:
    folder.mkdir(parents=True, exist_ok=True)
    if cert is not None:
        _place_figures(cert, folder)
    pdf_path, json_path = folder / f"{stem}.pdf", folder / f"{stem}.json"
    with atomic_path(pdf_path) as tmp:
        Path(tmp).write_bytes(pdf)
    write_text_atomic(json_path, text)
    at = now_utc()
    conn.execute(S.certificate_files.insert(), [
        dict(certificate_id=cid, kind=kind, format="pdf", sha256=hashlib.sha256(pdf).hexdigest(),
             path=str(pdf_path.resolve()), written_at=at),
        dict(certificate_id=cid, kind=kind, format="json", sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
             path=str(json_path.resolve()), written_at=at),
    ])
    return {"pdf": str(pdf_path), "json": str(json_path)}


def release_day(at: str) -> str:
    """The UTC day (YYYY-MM-DD) of a release time given as ISO 8601 (``...Z`` or with an offset;
    without one it is taken as UTC)."""
    try:
        t = _dt.datetime.fromisoformat(str(at).strip().replace("Z", "+00:00"))
    except ValueError as exc:
        raise RecordError(f"release time {at!r} is not ISO 8601", where="release",
                          fix="give the time as YYYY-MM-DDTHH:MM:SSZ") from exc
    if t.tzinfo is not None:
        t = t.astimezone(_dt.timezone.utc)
    return t.date().isoformat()


def release(rec: Record, number: str, *, reviewer: str, role: str = "", statement: str = "",
            outdir=None, at: str | None = None, who: str | None = None) -> dict:
    """Release a draft (see the module docstring); return the written files and the review."""
    from compquant.record.certdoc import certificate_from_dict
    from compquant.record.queries import run_chart_violations

    if not reviewer.strip():
        raise RecordError("a release needs the reviewer's name", where=number, fix="give --reviewer NAME")
    at = at or now_utc()
    day = release_day(at)
    with rec.transaction() as conn:
        row = _cert_row(conn, number, rec)
        _need(row["state"] == DRAFT, rec, number, f"certificate is {row['state']}, not a draft awaiting review",
              "only drafts are released; amend a released certificate for a new revision")
        reasons = json.loads(row["reasons"])
        _need(bool(row["valid_for_release"]), rec, number, "not valid for release: " + "; ".join(reasons),
              "reject it with a reason and re-analyse after the cause is fixed")
        chart_msgs, blocking = run_chart_violations(conn, row["run_id"])
        _need(not blocking, rec, number, "a control-chart test is broken and the method blocks release: "
              + "; ".join(chart_msgs), "reject it with a reason, investigate the check material's chart")
        cert = certificate_from_dict(json.loads(row["document"]))
        # the report is issued when it is authorised (ISO/IEC 17025:2017, 7.8.2.1): the released
        # files carry the day of release as date of issue; the recorded draft keeps its own
        cert.issue_date = day
        _load_figures(cert, row, rec)
        review = Review(RELEASED, reviewer.strip(), role.strip(), at, statement.strip())
        pdf, text = _render(cert, review)
        res = conn.execute(C.update().where(C.c.id == row["id"], C.c.state == DRAFT).values(
            state=RELEASED, reviewer=review.reviewer, reviewer_role=review.role, reviewed_at=at,
            statement=review.statement))
        _need(res.rowcount == 1, rec, number, "changed by another reviewer meanwhile", "see its state and try again")
        if row["supersedes"] is not None:
            conn.execute(C.update().where(C.c.id == row["supersedes"]).values(state=SUPERSEDED))
            rec.audit(conn, "supersede", _number_of(conn, row["supersedes"]), f"replaced by {number}",
                      who=who or review.reviewer, at=at)
        rec.audit(conn, "release", number, review.statement, who=who or review.reviewer, at=at,
                  detail={"certificate_id": row["id"], "authorised_by": review.reviewer, "role": review.role,
                          "chart": chart_msgs})
        folder = Path(outdir) if outdir is not None else Path(row["folder"])
        files = _write_files(conn, row["id"], RELEASED, folder, row["stem"], pdf, text, cert)
    return {"number": number, "review": review.as_dict(), **files}


def _number_of(conn, cid: int) -> str:
    return conn.execute(sa.select(C.c.number).where(C.c.id == cid)).scalar_one()


def reject(rec: Record, number: str, *, reviewer: str, reason: str, who: str | None = None) -> None:
    """Reject a draft with a reason (the draft stays in the record, state ``rejected``)."""
    if not reason.strip():
        raise RecordError("a rejection needs a reason", where=number, fix='give --reason "..."')
    if not reviewer.strip():
        raise RecordError("a rejection needs the reviewer's name", where=number, fix="give --reviewer NAME")
    at = now_utc()
    with rec.transaction() as conn:
        row = _cert_row(conn, number, rec)
        _need(row["state"] == DRAFT, rec, number, f"certificate is {row['state']}, not a draft awaiting review",
              "only drafts are rejected")
        res = conn.execute(C.update().where(C.c.id == row["id"], C.c.state == DRAFT).values(
            state=REJECTED, reviewer=reviewer.strip(), reviewed_at=at, statement=reason.strip()))
        _need(res.rowcount == 1, rec, number, "changed by another reviewer meanwhile", "see its state and try again")
        rec.audit(conn, "reject", number, reason.strip(), who=who or reviewer.strip(), at=at,
                  detail={"certificate_id": row["id"]})


def _amended_document(base_doc: dict, from_json, old_number: str, new_number: str, revision: int, reason: str,
                      rec: Record) -> tuple[dict, Path | None]:
    doc, folder = base_doc, None
    if from_json is not None:
        from compquant.report.jsonform import read_certificate_json

        doc = read_certificate_json(from_json)
        folder = Path(from_json).resolve().parent
        if doc["sample"]["sample_id"] != base_doc["sample"]["sample_id"]:
            raise RecordError("the amended certificate is for another sample", where=str(from_json),
                              fix=f"give a certificate of sample {base_doc['sample']['sample_id']!r}")
    doc = json.loads(json.dumps(doc))
    doc["number"] = new_number
    doc["revision"] = revision
    doc["issue_date"] = now_utc()[:10]
    doc["remarks"] = list(doc["remarks"]) + [
        f"Revision {revision}: replaces certificate {old_number}, which is withdrawn on release of this revision. "
        f"Reason: {reason}"]
    return doc, folder


def amend(rec: Record, number: str, *, reason: str, from_json=None, outdir=None, who: str | None = None) -> dict:
    """Issue a new revision (a draft) of a released certificate; return its number and files."""
    from compquant.record.certdoc import certificate_from_dict

    if not reason.strip():
        raise RecordError("an amendment needs a reason", where=number, fix='give --reason "..."')
    who = who or current_user()
    with rec.transaction() as conn:
        row = _cert_row(conn, number, rec)
        _need(row["state"] == RELEASED, rec, number, f"certificate is {row['state']}, not released",
              "only the released revision is amended (a draft is rejected or re-analysed)")
        chain = conn.execute(sa.select(C.c.revision, C.c.state, C.c.number).where(
            C.c.base_number == row["base_number"])).all()
        open_drafts = [n for _, st, n in chain if st == DRAFT]
        _need(not open_drafts, rec, number, f"revision {', '.join(open_drafts)} already awaits review",
              "release or reject it first")
        revision = max(r for r, _, _ in chain) + 1
        new_number = f"{row['base_number']}-R{revision}"
        doc, src_folder = _amended_document(json.loads(row["document"]), from_json, number, new_number, revision,
                                            reason.strip(), rec)
        cert = certificate_from_dict(doc)
        if src_folder is None:
            _load_figures(cert, row, rec)
            figures = row["figures"]
        else:
            figures = json.dumps([{"path": f.path, "sha256": sha256_file(src_folder / f.path)}
                                  for f in cert.figures if f.path], sort_keys=True)
            _load_figures(cert, {"figures": figures, "folder": str(src_folder)}, rec)
        pdf, text = _render(cert, Review(DRAFT))
        folder = Path(outdir) if outdir is not None else Path(row["folder"])
        stem = f"{row['stem']}-R{revision}"
        cid = conn.execute(C.insert().values(
            run_id=row["run_id"], sample_id=row["sample_id"], number=new_number, base_number=row["base_number"],
            revision=revision, state=DRAFT, supersedes=row["id"], created_at=now_utc(), document=text,
            figures=figures, folder=str(folder.resolve()), stem=stem, valid_for_release=cert.valid_for_release,
            reasons=json.dumps(cert.release_reasons()), flags=json.dumps(cert.flags_used()),
        ).returning(C.c.id)).scalar_one()
        rec.audit(conn, "amend", new_number, reason.strip(), who=who,
                  detail={"certificate_id": cid, "replaces": number, "from": str(from_json or "")})
        files = _write_files(conn, cid, DRAFT, folder, stem, pdf, text, cert)
    return {"number": new_number, "revision": revision, **files}


def verify_file(rec: Record, path) -> dict:
    """Is ``path`` (PDF or JSON) the released version of a certificate?  Found by its SHA-256.

    ``status``: ``released`` (the released file of the current revision), ``superseded`` (released
    once, replaced by a later revision), ``draft`` / ``rejected`` (never released), or ``unknown``
    (not a file the record knows: altered, or from elsewhere).
    """
    p = require_file(path, "certificate file")
    sha = sha256_file(p)
    out = {"file": str(p), "sha256": sha, "status": "unknown"}
    with rec.transaction() as conn:
        hit = conn.execute(sa.select(S.certificate_files.c.kind, S.certificate_files.c.format, C, S.runs.c.file_name,
                                     S.runs.c.sha256.label("run_sha256"))
                           .join(C, C.c.id == S.certificate_files.c.certificate_id).join(S.runs)
                           .where(S.certificate_files.c.sha256 == sha).order_by(S.certificate_files.c.id.desc())
                           ).mappings().first()
        if hit is None:
            out["number"] = _number_in_json(p)
            if out["number"]:
                rel = conn.execute(sa.select(S.certificate_files.c.sha256).join(C).where(
                    C.c.number == out["number"], S.certificate_files.c.kind == RELEASED,
                    S.certificate_files.c.format == "json")).scalar()
                out["released_sha256"] = rel
            return out
        status = hit["kind"] if hit["kind"] != RELEASED else hit["state"]
        if hit["kind"] == DRAFT and hit["state"] in (REJECTED, SUPERSEDED):
            status = hit["state"]
        out.update(status=status, number=hit["number"], revision=hit["revision"], state=hit["state"],
                   reviewer=hit["reviewer"], role=hit["reviewer_role"], released_at=hit["reviewed_at"],
                   run=hit["file_name"], run_sha256=hit["run_sha256"], format=hit["format"])
    return out


def _number_in_json(p: Path) -> str | None:
    if p.suffix.lower() != ".json":
        return None
    try:
        doc = json.loads(p.read_text("utf-8"))
        return str(doc.get("number")) if isinstance(doc, dict) and doc.get("number") else None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return None


__all__ = ["awaiting_review", "release", "reject", "amend", "verify_file"]
