"""One analysis into the record: the run, its samples, every result, the calibration, drift
factors, check-sample evaluations, the certificates and the evidence the review page draws
(:mod:`compquant.record.evidence`), in one transaction.

Called by :func:`compquant.analyse.analyse` at its end when a record is given (``--db``) or
configured (``COMPQUANT_DB``).  Either everything of the analysis is stored or nothing is: a kill
or an error part-way leaves the record as it was before (the transaction is rolled back by the
database; SQLite's journal and PostgreSQL's write-ahead log make the commit atomic).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

import sqlalchemy as sa

from compquant.fileio import json_ready, sha256_file
from compquant.record import schema as S
from compquant.record.charts import ChartSettings, parse_chart_section
from compquant.record.db import Record, RecordError, configured, current_user, now_utc, open_record
from compquant.record.states import DRAFT, RELEASED, SUPERSEDED


def _json(obj) -> str:
    return json.dumps(json_ready(obj), sort_keys=True, ensure_ascii=False)


def _f(v):
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if x == x and abs(x) != float("inf") else None


@dataclass
class AnalysisRecorder:
    """A record opened before an analysis (fail fast on a bad record) with the method's chart settings."""

    record: Record
    chart: ChartSettings

    def check_number(self, number: str) -> None:
        """Before a certificate's files are written: refuse a number that was already released
        (its released files must not be overwritten by a new draft)."""
        with self.record.transaction() as conn:
            if _released_among(conn, [number]):
                raise _refuse_released(self.record, [number])

    def store(self, **kw) -> list[dict]:
        try:
            return store_analysis(self.record, chart=self.chart, **kw)
        finally:
            self.record.dispose()


def recorder_for_analysis(db, method) -> AnalysisRecorder | None:
    """Open the record for :func:`~compquant.analyse.analyse` (None when no record is given or configured)."""
    chart = parse_chart_section(method.sections.get("control_chart"), method.where)
    location = configured(db)
    if location is None:
        return None
    return AnalysisRecorder(open_record(location), chart)


@dataclass
class MapRecorder:
    """A record opened before ``compquant map --db``: the recorded analysis of the run (the latest
    when it was analysed more than once) whose samples the maps are stored for."""

    record: Record
    run_id: int
    run_name: str
    sample_ids: dict

    def check_samples(self, sample_ids) -> None:
        """Refuse maps of a sample that the record does not hold for this run (before files are written)."""
        missing = [s for s in sample_ids if s not in self.sample_ids]
        if missing:
            self.record.dispose()
            raise RecordError(f"sample {', '.join(missing)} of run {self.run_name} is not in the record",
                              where=self.record.where, fix="analyse the run with these samples first ('compquant "
                              "analyse RUN --db ...'), or leave out --db")

    def store(self, maps: list[dict], who: str | None = None) -> list[str]:
        """Store the map items (:func:`compquant.record.evidence.maps_evidence`) with an audit row."""
        from compquant.record.evidence import store_maps

        try:
            with self.record.transaction() as conn:
                names = store_maps(conn, self.run_id, self.sample_ids, maps)
                conn.execute(S.audit.insert(), [self.record.audit_row(
                    "store maps", self.run_name, "element maps", who=who,
                    detail={"run_id": self.run_id, "maps": names})])
            return names
        finally:
            self.record.dispose()


def recorder_for_maps(db, run) -> MapRecorder | None:
    """Open the record for ``compquant map`` (None when no record is given or configured) and find
    the run (an open :class:`compquant.run.Run`) by the SHA-256 of its file, which the run keeps,
    so the map's provenance does not hash the file again.  With ``--db`` given, a missing record or a run the record
    does not hold is refused (:class:`RecordError`); with the record only configured
    (``COMPQUANT_DB``), such a run is mapped as without a record and a log line says the maps
    were not stored (mapping a run that was never analysed stays possible)."""
    import logging

    from compquant.record.db import is_url

    location = configured(db)
    if location is None:
        return None
    explicit = db is not None
    log = logging.getLogger("compquant")
    if not is_url(location) and not Path(location).expanduser().is_file():  # not a new, empty record
        if not explicit:
            log.info("maps not stored: no record at %s (COMPQUANT_DB)", location)
            return None
        raise RecordError("no record here", where=str(location),
                          fix="give the record the run was analysed into ('compquant analyse RUN --db ...')")
    rec = open_record(location)
    run_name = Path(run.path).name
    try:
        run_sha256 = run.sha256()
    except BaseException:
        rec.dispose()
        raise
    try:
        with rec.transaction() as conn:
            run_id = conn.execute(sa.select(S.runs.c.id).where(S.runs.c.sha256 == run_sha256)
                                  .order_by(S.runs.c.id.desc())).scalars().first()
            ids = {} if run_id is None else {r.sample_id: r.id for r in conn.execute(
                sa.select(S.samples.c.sample_id, S.samples.c.id).where(S.samples.c.run_id == run_id)).all()}
    except BaseException:
        rec.dispose()
        raise
    if run_id is None:
        rec.dispose()
        if not explicit:
            log.info("maps not stored: run %s is not in the record %s (COMPQUANT_DB)", run_name, location)
            return None
        raise RecordError(f"run {run_name} (SHA-256 {run_sha256[:12]}...) is not in the record", where=rec.where,
                          fix="analyse it first with 'compquant analyse RUN --db ...', or leave out --db")
    return MapRecorder(rec, int(run_id), run_name, ids)


def _insert_run(conn, run_file, run_sha256, instrument, measured, method, basis, issued_at, chart, outdir, who):
    dates = sorted(v for v in measured.values() if v)
    desc = next((str(instrument[k]) for k in ("description", "name", "model", "id") if instrument.get(k)), "")
    return conn.execute(S.runs.insert().values(
        file_name=Path(run_file).name, file_path=str(Path(run_file).resolve()), sha256=run_sha256,
        instrument=desc, instrument_detail=_json(instrument), measured_at=dates[0] if dates else issued_at,
        analysed_at=issued_at, stored_at=now_utc(), analyst=who, method_id=str(method.id),
        method_version=str(method.version), method_sha256=method.sha256 or "", basis=basis,
        chart_settings=_json(chart.as_dict()), outdir=str(Path(outdir).resolve()),
    ).returning(S.runs.c.id)).scalar_one()


def _insert_samples(conn, run_id, samples, measured) -> dict[str, int]:
    rows = []
    for r in samples.itertuples(index=False):
        sid = str(r.sample_id)
        rows.append(dict(run_id=run_id, sample_id=sid, role=str(r.role), standard_ref=str(getattr(r, "standard_ref", "")
                    or ""), description=str(getattr(r, "description", "") or ""), measured_at=measured.get(sid, ""),
                    n_shots=int(r.n_shots) if _f(getattr(r, "n_shots", None)) is not None else None))
    got = conn.execute(S.samples.insert().returning(S.samples.c.id, sort_by_parameter_order=True), rows)
    ids = dict(zip([r["sample_id"] for r in rows], got.scalars().all()))
    return ids


def _result_rows(run_id, sample_row, cert) -> list[dict]:
    return [dict(run_id=run_id, sample_row=sample_row, element=r.element,
                 value=None if r.below_lod else _f(r.mass_fraction), u_standard=_f(r.u), U_expanded=_f(r.U),
                 k=_f(r.k), lod=_f(r.lod), loq=_f(r.loq), below_lod=bool(r.below_lod), flags=" ".join(r.all_flags()),
                 line_id=r.line_id, basis=r.basis) for r in cert.results]


def _check_rows(run_id, checks, certificates) -> list[dict]:
    """The check-sample rows, each with its state as its certificates print it
    (:func:`compquant.report.release.check_state`, with the certificates' sigma_pt_rel) and its LOQ."""
    from compquant.report.release import check_state, sigma_pt_rel_of

    sigma_pt = sigma_pt_rel_of(certificates[0]) if certificates else None
    return [dict(run_id=run_id, sample_id=c.sample_id, standard_ref=c.standard_ref, element=c.element,
                 measured=_f(c.measured), U_measured=_f(c.U_measured), certified=float(c.certified),
                 U_certified=_f(c.U_certified), z=_f(c.z), En=_f(c.En), passed=bool(c.passed),
                 criterion=c.criterion, state=check_state(c, sigma_pt), loq=_f(getattr(c, "loq", None)))
            for c in checks]


def _figures(cert, outdir: Path) -> list[dict]:
    out = []
    for f in cert.figures:
        if not f.path:
            continue
        p = outdir / f.path
        sha = hashlib.sha256(f.png).hexdigest() if f.png is not None else sha256_file(p)
        out.append({"path": f.path, "sha256": sha})
    return out


def _released_among(conn, numbers: list[str]) -> list[str]:
    """Those of ``numbers`` (revision-0 numbers) with a released revision in the record."""
    C, F = S.certificates, S.certificate_files
    q = (sa.select(C.c.base_number).select_from(F.join(C)).where(C.c.base_number.in_(numbers), F.c.kind == RELEASED)
         .distinct())
    return sorted(conn.execute(q).scalars())


def _refuse_released(rec, numbers: list[str]) -> RecordError:
    return RecordError(f"certificate {', '.join(numbers)} was already released", where=rec.where,
                       fix="issue a new revision with 'compquant record amend' (or analyse with another issue date)")


def _supersede_open_drafts(rec, conn, numbers: list[str], who: str, audit: list[dict]) -> None:
    """A new analysis of recorded certificates: their open drafts are superseded; released ones refuse."""
    released = _released_among(conn, numbers)
    if released:
        raise _refuse_released(rec, released)
    C = S.certificates
    old = conn.execute(sa.select(C.c.id, C.c.number).where(C.c.number.in_(numbers), C.c.state == DRAFT)).all()
    if old:
        conn.execute(C.update().where(C.c.id.in_([cid for cid, _ in old])).values(state=SUPERSEDED))
        audit.extend(rec.audit_row("supersede", n, "replaced by a new analysis before review", who=who,
                                   detail={"certificate_id": cid}) for cid, n in old)


def _certificate_row(run_id, cert, out, review, outdir: Path) -> tuple[dict, bytes]:
    doc_bytes = Path(out.json).read_bytes()
    row = dict(
        run_id=run_id, sample_id=cert.sample.sample_id, number=cert.number, base_number=cert.number,
        revision=int(cert.revision), state=review.state, supersedes=None, created_at=now_utc(),
        document=doc_bytes.decode("utf-8"), figures=_json(_figures(cert, outdir)), folder=str(outdir.resolve()),
        stem=Path(out.json).stem, valid_for_release=bool(cert.valid_for_release),
        reasons=_json(cert.release_reasons()), flags=_json(cert.flags_used()), reviewer=review.reviewer,
        reviewer_role=review.role, reviewed_at=review.at, statement=review.statement,
    )
    return row, doc_bytes


def _insert_certificates(rec, conn, run_id, certificates, outputs, review, outdir: Path, who,
                         audit: list[dict]) -> list[dict]:
    _supersede_open_drafts(rec, conn, [c.number for c in certificates], who, audit)
    rows, docs = zip(*[_certificate_row(run_id, c, o, review, outdir) for c, o in zip(certificates, outputs)])
    ids = conn.execute(S.certificates.insert().returning(S.certificates.c.id, sort_by_parameter_order=True),
                       list(rows)).scalars().all()
    at = now_utc()
    files = []
    for cid, out, doc in zip(ids, outputs, docs):
        files.append(dict(certificate_id=cid, kind=review.state, format="json", sha256=hashlib.sha256(doc).hexdigest(),
                          path=str(Path(out.json).resolve()), written_at=at))
        files.append(dict(certificate_id=cid, kind=review.state, format="pdf", sha256=sha256_file(out.pdf),
                          path=str(Path(out.pdf).resolve()), written_at=at))
    conn.execute(S.certificate_files.insert(), files)
    for cid, cert in zip(ids, certificates):
        if review.state == RELEASED:
            audit.append(rec.audit_row("release", cert.number, review.statement, who=who, at=at, detail={
                "certificate_id": cid, "authorised_by": review.reviewer, "role": review.role}))
        else:
            audit.append(rec.audit_row("issue draft", cert.number, "analysis", who=who, at=at,
                                       detail={"certificate_id": cid}))
    return [{"number": c.number, "state": review.state, "certificate_id": cid} for c, cid in zip(certificates, ids)]


def store_analysis(rec: Record, *, run_file, run_sha256: str, instrument: dict, samples, measured: dict, method,
                   basis: str, issued_at: str, certificates, outputs, review, calibration=None, drift=None,
                   checks=(), outdir, chart: ChartSettings | None = None, who: str | None = None,
                   evidence=None) -> list[dict]:
    """Store one analysis (see the module docstring); return the certificates' record entries.

    ``evidence``: what the review page draws (mean spectra, line windows and fits, curves,
    Boltzmann plots), a :class:`compquant.record.evidence.AnalysisEvidence` or the keyword
    arguments of one; stored in the same transaction (:func:`compquant.record.evidence.store_evidence`).
    """
    from compquant.record.evidence import AnalysisEvidence, store_evidence

    if isinstance(evidence, dict):
        evidence = AnalysisEvidence(**evidence)
    who = who or current_user()
    outdir = Path(outdir)
    if chart is None:
        chart = parse_chart_section((getattr(method, "sections", None) or {}).get("control_chart"), method.where)
    with rec.transaction() as conn:
        run_id = _insert_run(conn, run_file, run_sha256, instrument, measured, method, basis, issued_at, chart,
                             outdir, who)
        sample_ids = _insert_samples(conn, run_id, samples, measured)
        rows = []
        for cert in certificates:
            rows.extend(_result_rows(run_id, sample_ids[cert.sample.sample_id], cert))
        if rows:
            conn.execute(S.results.insert(), rows)
        if calibration is not None:
            conn.execute(S.calibrations.insert().values(
                run_id=run_id, calibration_id=calibration.calibration_id, created=calibration.created or "",
                file_name=calibration.file_name, file_sha256=calibration.file_sha256,
                curves=_json([c.__dict__ for c in calibration.curves])))
        if drift is not None and drift.factors:
            conn.execute(S.drift_factors.insert(), [dict(run_id=run_id, line=str(k), factor=float(v))
                                                    for k, v in drift.factors.items() if _f(v) is not None])
        chk = _check_rows(run_id, checks, certificates)
        if chk:
            conn.execute(S.checks.insert(), chk)
        store_evidence(conn, evidence, run_id, sample_ids, certificates)
        audit: list[dict] = []
        entries = (_insert_certificates(rec, conn, run_id, certificates, outputs, review, outdir, who, audit)
                   if certificates else [])
        numbers = [e["number"] for e in entries]
        audit.append(rec.audit_row("store analysis", run_sha256, "analysis", who=who,
                                   detail={"run_id": run_id, "file": Path(run_file).name, "certificates": numbers}))
        conn.execute(S.audit.insert(), audit)
    return entries


__all__ = ["store_analysis", "recorder_for_analysis", "recorder_for_maps", "AnalysisRecorder", "MapRecorder"]
