"""Benchmark: the demo flow stage by stage, and certificate rendering (not part of the test suite).

Usage: python benchmarks/bench_report.py [OUTDIR]
Runs `analyse` on demo_runs/demo-day1.h5 with the shipped method, standards, lab profile and
specification, printing the wall time of each stage, the pages of each certificate and the time
per certificate (its figures drawn, PDF and JSON written).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main(outdir: str | None = None) -> None:
    from compquant.analyse import analyse

    outdir = outdir or tempfile.mkdtemp(prefix="cq-bench-")
    marks: dict[str, float] = {}

    def progress(stage, done, total):
        marks.setdefault(stage, time.perf_counter())

    t0 = time.perf_counter()
    out = analyse(
        ROOT / "demo_runs/demo-day1.h5",
        ROOT / "demo_runs/method.toml",
        standards=ROOT / "standards/demo-copper-alloys.csv",
        lab=ROOT / "demo_runs/lab.toml",
        spec=ROOT / "demo_runs/spec-HB58-Pb2.toml",
        outdir=outdir,
        issued_at="2026-12-01T21:00:00Z",
        progress=progress,
    )
    t_end = time.perf_counter()
    order = sorted(marks.items(), key=lambda kv: kv[1]) + [("end", t_end)]
    for (name, t), (_, t_next) in zip(order, order[1:]):
        print(f"{name:14s} {t_next - t:6.2f} s")
    print(f"{'total':14s} {t_end - t0:6.2f} s  (import and open included)")
    for c in out.certificates:
        print(f"  {c.sample_id}: {c.pages} pages, {Path(c.pdf).stat().st_size / 1024:.0f} KiB")
    n = len(out.certificates)
    if n and "certificates" in marks:
        per = (t_end - marks["certificates"]) / n
        print(f"per certificate (figures + PDF + JSON): {per:.2f} s")


if __name__ == "__main__":
    main(*sys.argv[1:])
