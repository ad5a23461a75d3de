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


def populate(location: str, n_runs: int) -> None:
    """N runs, each with a check sample, a drift factor and one unknown with 5 results (bulk); the unknown
    of every 500th run is the same sample (LOT-REPEAT, measured again and again), the others are new lots."""
    import sqlalchemy as sa

    from compquant.record import open_record
    from compquant.record import schema as S

    rec = open_record(location)
    with rec.transaction() as conn:
        start = conn.execute(sa.select(sa.func.max(S.runs.c.id))).scalar() or 0
        s0 = conn.execute(sa.select(sa.func.max(S.samples.c.id))).scalar() or 0
        runs = [dict(id=start + i + 1, file_name=f"run{i}.h5", file_path=f"/runs/run{i}.h5",
                     sha256=hashlib.sha256(f"{location}{i}".encode()).hexdigest(),
                     measured_at=f"20{20 + i // 4000:02d}-01-01T{(i // 100) % 24:02d}:{i % 60:02d}:00Z",
                     analysed_at="2026-12-01T00:00:00Z", stored_at="2026-12-01T00:00:00Z", analyst="bench",
                     method_id="M", method_version="1", basis="calibration", chart_settings="{}")
                for i in range(n_runs)]
        conn.execute(S.runs.insert(), runs)
        ids = [r["id"] for r in runs]
        lots = {rid: "LOT-REPEAT" if rid % 500 == 0 else f"LOT-{rid}" for rid in ids}
        conn.execute(S.samples.insert(), [dict(id=s0 + rid, run_id=rid, sample_id=lots[rid], role="unknown")
                                          for rid in ids])
        conn.execute(S.results.insert(), [dict(run_id=rid, sample_row=s0 + rid, element=el,
                                               value=0.01 + (rid % 7) * 1e-4, below_lod=False, basis="calibration")
                                          for rid in ids for el in ("Cu", "Zn", "Pb", "Sn", "Fe")])
        conn.execute(S.checks.insert(), [dict(run_id=rid, sample_id="CHK", standard_ref="CRM-X", element="Pb",
                                              measured=0.019 + ((rid * 37) % 11 - 5) * 1e-5, certified=0.019,
                                              U_certified=0.0004, passed=True) for rid in ids])
        conn.execute(S.drift_factors.insert(), [dict(run_id=rid, line="Pb I 405.781", factor=1.0) for rid in ids])
    rec.dispose()


def bench_history(location: str) -> tuple[float, float, int, int]:
    from compquant.record import open_record
    from compquant.record.charts import ChartSettings
    from compquant.record.queries import check_chart, sample_history

    rec = open_record(location)

    def chart():
        with rec.transaction() as conn:
            return check_chart(conn, "CRM-X", "Pb", ChartSettings())

    n_pts = len(chart().points)
    t_chart = _best(chart)
    n_hist = len(sample_history(rec, "LOT-REPEAT"))
    t_hist = _best(lambda: sample_history(rec, "LOT-REPEAT"))
    rec.dispose()
    return t_chart, t_hist, n_pts, n_hist


def baseline_history(path: str) -> float:
    con = sqlite3.connect(path)

    def run():
        con.execute("SELECT r.id, r.measured_at, c.measured FROM checks c JOIN runs r ON r.id = c.run_id "
                    "WHERE c.standard_ref = 'CRM-X' AND c.element = 'Pb' ORDER BY r.measured_at, r.id").fetchall()

    t = _best(run)
    con.close()
    return t


def main(n_runs: int = 10000) -> None:
    work = Path(tempfile.mkdtemp(prefix="cq-record-bench-"))
    targets = [("sqlite", str(work / "record.sqlite"))]
    if os.environ.get("COMPQUANT_TEST_PG_URL"):
        targets.append(("postgresql", os.environ["COMPQUANT_TEST_PG_URL"]))
    t_base = baseline_store(work)
    print(f"baseline: 2,000 result rows by sqlite3 executemany: {t_base * 1e3:.1f} ms")
    for name, loc in targets:
        t = bench_store(loc, work / name)
        print(f"{name}: store one run of 100 samples x 20 elements: {t * 1e3:.0f} ms "
              f"({t / t_base:.0f}x the bare insert; goal well under 1 s: {'met' if t < 0.5 else 'MISSED'})")
    for name, loc in targets:
        populate(loc, n_runs)
        t_chart, t_hist, n_pts, n_hist = bench_history(loc)
        line = (f"{name}: over {n_pts} stored runs: control chart {t_chart * 1e3:.0f} ms, "
                f"sample history ({n_hist} rows) {t_hist * 1e3:.0f} ms")
        if name == "sqlite":
            tb = baseline_history(loc)
            line += f"; bare SELECT of the chart's rows {tb * 1e3:.1f} ms (chart {t_chart / tb:.0f}x)"
        ok = max(t_chart, t_hist) < 0.5
        print(line + f"; goal well under 1 s: {'met' if ok else 'MISSED'}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 10000)
