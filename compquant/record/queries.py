"""Reading the record: control-chart series, a run's broken chart tests, a sample's history, the audit trail.

Each run file counts once in a series: when a run was analysed more than once, its latest
analysis is the point.  Runs are in the order they were measured (then stored).
"""

from __future__ import annotations

import json

import pandas as pd
import sqlalchemy as sa

from compquant.record import schema as S
from compquant.record.charts import RULE_TEXT, ChartSettings, build_chart
from compquant.record.db import Record

R = S.runs
#: a sample's own time of measurement, the run's when the sample has none (as on its certificate)
SAMPLE_TIME = sa.case((S.samples.c.measured_at != "", S.samples.c.measured_at), else_=R.c.measured_at)


def _dedupe(rows: list[dict], key=("sha256", "sample_id")) -> list[dict]:
    last: dict = {}
    for r in rows:
        last[tuple(r.get(k) for k in key)] = r
    keep = {id(r) for r in last.values()}
    return [r for r in rows if id(r) in keep]


def check_series(conn, standard_ref: str, element: str, upto_run: int | None = None) -> list[dict]:
    """Check-sample results of one material and element, one point per run, in run order.

    ``measured_at`` is the check sample's own time of measurement (``samples.measured_at``, the
    run's start plus its first shot, as on the certificates), the run's time only when the sample
    has none; the points stay in run order.  A check *not counted* (certified content below its LOQ
    in the check sample, :func:`compquant.calibrate.checks.counted`) is no point: its found value
    is only indicative, the certificate does not count it, and so its chart may not warn about or
    block a release either (rows stored before revision 0003 have no state and stay)."""
    smp = S.samples
    q = (sa.select(R.c.id.label("run_id"), SAMPLE_TIME.label("measured_at"), R.c.file_name.label("file"), R.c.sha256,
                   S.checks.c.sample_id, S.checks.c.measured.label("value"), S.checks.c.certified,
                   S.checks.c.U_certified)
         .join(R, R.c.id == S.checks.c.run_id)
         .outerjoin(smp, sa.and_(smp.c.run_id == S.checks.c.run_id, smp.c.sample_id == S.checks.c.sample_id))
         .where(S.checks.c.standard_ref == standard_ref, S.checks.c.element == element,
                S.checks.c.measured.is_not(None),
                sa.or_(S.checks.c.state.is_(None), S.checks.c.state != "not counted"))
         .order_by(R.c.measured_at, R.c.id))
    if upto_run is not None:
        this = conn.execute(sa.select(R.c.measured_at).where(R.c.id == upto_run)).scalar_one()
        q = q.where(sa.or_(R.c.measured_at < this, sa.and_(R.c.measured_at == this, R.c.id <= upto_run)))
    rows = [dict(r) for r in conn.execute(q).mappings()]
    if upto_run is not None:  # the run being judged is its own file's point
        sha = conn.execute(sa.select(R.c.sha256).where(R.c.id == upto_run)).scalar_one()
        rows = [r for r in rows if r["sha256"] != sha or r["run_id"] == upto_run]
    return _dedupe(rows)


def drift_series(conn, line: str) -> list[dict]:
    """Drift-correction factors of one line (or element), one point per run, in run order."""
    q = (sa.select(R.c.id.label("run_id"), R.c.measured_at, R.c.file_name.label("file"), R.c.sha256,
                   S.drift_factors.c.factor.label("value"))
         .join(R, R.c.id == S.drift_factors.c.run_id).where(S.drift_factors.c.line == line)
         .order_by(R.c.measured_at, R.c.id))
    return _dedupe([dict(r) for r in conn.execute(q).mappings()], key=("sha256",))


def check_chart(conn, standard_ref: str, element: str, settings: ChartSettings, upto_run: int | None = None):
    pts = check_series(conn, standard_ref, element, upto_run)
    last = pts[-1] if pts else {}
    return build_chart(f"check material {standard_ref}, {element}", "check",
                       {"standard_ref": standard_ref, "element": element},
                       [{k: p[k] for k in ("run_id", "measured_at", "file", "sha256", "value")} for p in pts],
                       settings, last.get("certified"), last.get("U_certified"))


def drift_chart(conn, line: str, settings: ChartSettings):
    return build_chart(f"drift factor, {line}", "drift", {"line": line}, drift_series(conn, line), settings)


def run_chart_violations(conn, run_id: int) -> tuple[list[str], bool]:
    """The chart tests the run's check samples break at that run (messages), and whether they block release."""
    settings = ChartSettings.from_dict(json.loads(conn.execute(
        sa.select(R.c.chart_settings).where(R.c.id == run_id)).scalar_one() or "{}"))
    pairs = conn.execute(sa.select(S.checks.c.standard_ref, S.checks.c.element).where(
        S.checks.c.run_id == run_id).distinct().order_by(S.checks.c.standard_ref, S.checks.c.element)).all()
    msgs = []
    for ref, el in pairs:
        ch = check_chart(conn, ref, el, settings, upto_run=run_id)
        if not ch.points or ch.points[-1]["run_id"] != run_id:
            continue
        for t in ch.violations[-1]:
            msgs.append(f"control chart {ref} {el}: test {t} broken ({RULE_TEXT[t]})")
    return msgs, bool(msgs) and settings.block_release


def materials(conn) -> list[tuple[str, str]]:
    return [tuple(r) for r in conn.execute(sa.select(S.checks.c.standard_ref, S.checks.c.element).distinct()
                                           .order_by(S.checks.c.standard_ref, S.checks.c.element))]


def drift_lines(conn) -> list[str]:
    return list(conn.execute(sa.select(S.drift_factors.c.line).distinct().order_by(S.drift_factors.c.line)).scalars())


def latest_settings(conn) -> ChartSettings:
    s = conn.execute(sa.select(R.c.chart_settings).order_by(R.c.id.desc()).limit(1)).scalar()
    return ChartSettings.from_dict(json.loads(s or "{}"))


def sample_history(rec: Record, sample_id: str) -> pd.DataFrame:
    """Every result of a sample id across runs, in run order, with its certificate and state.

    ``measured_at`` is the sample's own time of measurement (the run's start plus its first shot,
    as its certificate's "Date of measurement"), the run's time only when the sample has none.
    ``value`` is empty for a result below the LOD (``below_lod`` true) and for one not determined.
    """
    q = (sa.select(SAMPLE_TIME.label("measured_at"), R.c.file_name.label("run"), R.c.sha256.label("run_sha256"),
                   R.c.id.label("run_id"),
                   S.results.c.element, S.results.c.value, S.results.c.U_expanded.label("U"), S.results.c.k,
                   S.results.c.lod, S.results.c.below_lod, S.results.c.flags, S.results.c.basis)
         .join(S.samples, S.samples.c.id == S.results.c.sample_row).join(R, R.c.id == S.results.c.run_id)
         .where(S.samples.c.sample_id == sample_id).order_by(R.c.measured_at, R.c.id, S.results.c.element))
    cq = (sa.select(S.certificates.c.run_id, S.certificates.c.number, S.certificates.c.state)
          .where(S.certificates.c.sample_id == sample_id).order_by(S.certificates.c.id))
    with rec.transaction() as conn:
        res = conn.execute(q)
        df = pd.DataFrame.from_records([tuple(r) for r in res.all()], columns=list(res.keys()))
        certs = pd.DataFrame.from_records([tuple(r) for r in conn.execute(cq).all()],
                                          columns=["run_id", "number", "state"])
    if df.empty:
        return df
    certs = certs.groupby("run_id", sort=False).agg(certificate=("number", " ".join), state=("state", " ".join))
    df = df.merge(certs, left_on="run_id", right_index=True, how="left")
    df[["certificate", "state"]] = df[["certificate", "state"]].fillna("")
    return df


def audit_trail(rec: Record, subject: str | None = None) -> pd.DataFrame:
    q = sa.select(S.audit).order_by(S.audit.c.id)
    if subject:
        q = q.where(sa.or_(S.audit.c.subject == subject, S.audit.c.subject.like(f"{subject}-R%")))
    with rec.transaction() as conn:
        return pd.DataFrame(conn.execute(q).mappings().all(), columns=[c.name for c in S.audit.columns])


__all__ = ["check_series", "drift_series", "check_chart", "drift_chart", "run_chart_violations", "materials",
           "drift_lines", "latest_settings", "sample_history", "audit_trail"]
