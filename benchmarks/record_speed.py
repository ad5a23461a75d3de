"""Benchmark: the lab's record (compquant.record) on SQLite, and on PostgreSQL when
COMPQUANT_TEST_PG_URL is set (not part of the test suite).

Usage: python benchmarks/record_speed.py [N_RUNS]      (default 10000)

1. storing one analysis of 100 samples x 20 elements (2,000 results, 100 certificates, audit
   entries) in one transaction, against a baseline measured in the same run: the same 2,000 result
   rows inserted by the standard library's sqlite3 executemany into a bare table;
2. a history query over N_RUNS stored runs: a check material's control chart (one point per run:
   query, limits and the tests for special causes) and the history of one sample measured in every
   500th run, against a baseline of the bare SELECT of the chart's rows with sqlite3.

Goal (issue 14): each well under a second on SQLite.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
import sys
import tempfile
import time
import uuid
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))


def _best(fn, repeat: int = 3) -> float:
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def bench_store(location: str, work: Path) -> float:
    from record_helpers import fake_analysis

    from compquant.record import open_record
    from compquant.record.store import store_analysis

    rec = open_record(location)
    runs = [fake_analysis(work / f"s{i}", f"BIG-{uuid.uuid4().hex[:8]}", n_samples=100, n_elements=20)
            for i in range(3)]
    it = iter(runs)
    t = _best(lambda: store_analysis(rec, **next(it)), repeat=3)
    rec.dispose()
    return t


def baseline_store(work: Path) -> float:
    con = sqlite3.connect(work / "bare.sqlite")
    con.execute("CREATE TABLE r (run INTEGER, sample TEXT, element TEXT, value REAL, u REAL, u_exp REAL, k REAL, "
                "lod REAL, loq REAL, flags TEXT)")
    rows = [(1, f"S{i}", f"E{j}", 0.01, 0.001, 0.002, 2.0, 1e-5, 3e-5, "") for i in range(100) for j in range(20)]

    def run():
        with con:
            con.executemany("INSERT INTO r VALUES (?,?,?,?,?,?,?,?,?,?)", rows)

    t = _best(run)
    con.close()
    return t


def populate(location: str, n_runs: int) -> str:
    """N runs, each with a check sample, a drift factor and one unknown with 5 results (bulk); the unknown
    of every 500th run is the same sample (LOT-REPEAT, measured again and again), the others are new lots."""

    from compquant.record import open_record
    from compquant.record import schema as S

    rec = open_record(location)
    tag = uuid.uuid4().hex[:8]
    with rec.transaction() as conn:
        runs = [dict(file_name=f"run{i}.h5", file_path=f"/runs/run{i}.h5",
                     sha256=hashlib.sha256(f"{tag}{i}".encode()).hexdigest(),
                     measured_at=f"20{20 + i // 4000:02d}-01-01T{(i // 100) % 24:02d}:{i % 60:02d}:00Z",
                     analysed_at="2026-12-01T00:00:00Z", stored_at="2026-12-01T00:00:00Z", analyst="bench",
                     method_id="M", method_version="1", basis="calibration", chart_settings="{}")
                for i in range(n_runs)]
        ids = conn.execute(S.runs.insert().returning(S.runs.c.id, sort_by_parameter_order=True), runs).scalars().all()
        lots = [dict(run_id=rid, sample_id="LOT-REPEAT" if i % 500 == 0 else f"LOT-{tag}-{i}", role="unknown")
                for i, rid in enumerate(ids)]
        rows = conn.execute(S.samples.insert().returning(S.samples.c.id, sort_by_parameter_order=True),
                            lots).scalars().all()
        conn.execute(S.results.insert(), [dict(run_id=rid, sample_row=sid, element=el,
                                               value=0.01 + (rid % 7) * 1e-4, below_lod=False, basis="calibration")
                                          for rid, sid in zip(ids, rows) for el in ("Cu", "Zn", "Pb", "Sn", "Fe")])
        conn.execute(S.checks.insert(), [dict(run_id=rid, sample_id="CHK", standard_ref=f"CRM-{tag}", element="Pb",
                                              measured=0.019 + ((rid * 37) % 11 - 5) * 1e-5, certified=0.019,
                                              U_certified=0.0004, passed=True) for rid in ids])
        conn.execute(S.drift_factors.insert(), [dict(run_id=rid, line="Pb I 405.781", factor=1.0) for rid in ids])
    rec.dispose()
    return f"CRM-{tag}"


def bench_history(location: str, material: str) -> tuple[float, float, int, int]:
    from compquant.record import open_record
    from compquant.record.charts import ChartSettings
    from compquant.record.queries import check_chart, sample_history

    rec = open_record(location)

    def chart():
        with rec.transaction() as conn:
            return check_chart(conn, material, "Pb", ChartSettings())

    n_pts = len(chart().points)
    t_chart = _best(chart)
    n_hist = len(sample_history(rec, "LOT-REPEAT"))
    t_hist = _best(lambda: sample_history(rec, "LOT-REPEAT"))
    rec.dispose()
    return t_chart, t_hist, n_pts, n_hist


def baseline_history(path: str, material: str) -> float:
    con = sqlite3.connect(path)

    def run():
        sql = ("SELECT r.id, r.measured_at, c.measured FROM checks c JOIN runs r ON r.id = c.run_id "
               "WHERE c.standard_ref = ? AND c.element = 'Pb' ORDER BY r.measured_at, r.id")
        con.execute(sql, (material,)).fetchall()

    t = _best(run)
    con.close()
    return t


def fresh_pg_database(server_url: str, drop: str | None = None) -> str:
    """A new database on the test server (or ``drop`` the one named); its URL."""
    import sqlalchemy as sa

    url = sa.make_url(server_url)
    url = url.set(drivername="postgresql+psycopg") if url.drivername in ("postgresql", "postgres") else url
    eng = sa.create_engine(url, isolation_level="AUTOCOMMIT")
    name = drop or f"cqbench_{uuid.uuid4().hex[:10]}"
    with eng.connect() as c:
        c.exec_driver_sql(f'DROP DATABASE "{name}" WITH (FORCE)' if drop else f'CREATE DATABASE "{name}"')
    eng.dispose()
    return url.set(database=name).render_as_string(hide_password=False)


def main(n_runs: int = 10000) -> None:
    work = Path(tempfile.mkdtemp(prefix="cq-record-bench-"))
    targets = [("sqlite", str(work / "record.sqlite"))]
    server = os.environ.get("COMPQUANT_TEST_PG_URL")
    if server:
        targets.append(("postgresql", fresh_pg_database(server)))
    try:
        _run(targets, work, n_runs)
    finally:
        if server:
            import sqlalchemy as sa

            fresh_pg_database(server, drop=sa.make_url(targets[-1][1]).database)


def _run(targets, work: Path, n_runs: int) -> None:
    t_base = baseline_store(work)
    print(f"baseline: 2,000 result rows by sqlite3 executemany: {t_base * 1e3:.1f} ms")
    for name, loc in targets:
        t = bench_store(loc, work / name)
        print(f"{name}: store one run of 100 samples x 20 elements: {t * 1e3:.0f} ms "
              f"({t / t_base:.0f}x the bare insert; goal well under 1 s: {'met' if t < 0.5 else 'MISSED'})")
    for name, loc in targets:
        material = populate(loc, n_runs)
        t_chart, t_hist, n_pts, n_hist = bench_history(loc, material)
        line = (f"{name}: over {n_pts} stored runs: control chart {t_chart * 1e3:.0f} ms, "
                f"sample history ({n_hist} rows) {t_hist * 1e3:.0f} ms")
        if name == "sqlite":
            tb = baseline_history(loc, material)
            line += f"; bare SELECT of the chart's rows {tb * 1e3:.1f} ms (chart {t_chart / tb:.0f}x)"
        ok = max(t_chart, t_hist) < 0.5
        print(line + f"; goal well under 1 s: {'met' if ok else 'MISSED'}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 10000)
