"""``compquant analyse`` over many runs: one run per task, one output set per run.

Each task calls :func:`compquant.analyse.analyse` -- the single-run function -- on one run
with that run's own output folder; a failing run comes back as its error and the other
runs' outputs are complete. The client then joins the runs' LIMS CSV files into one.
"""

from __future__ import annotations

import os
from pathlib import Path

from compquant.parallel.runs import RunOutcome, map_runs


def _analyse_one(path: str, ctx: dict) -> dict:
    from compquant.analyse import analyse

    kw = dict(ctx["options"])
    out = analyse(path, ctx["method_path"], outdir=str(ctx["outdirs"][path]), **kw)
    return {
        "outdir": out.outdir,
        "lims_csv": out.lims_csv,
        "summary_json": out.summary_json,
        "n_certificates": len(out.certificates),
        "valid_for_release": out.valid_for_release,
        "failures": dict(out.failures),
    }


def analyse_runs(
    executor, paths: list[str | os.PathLike], method_path, outdirs: dict[str, Path], *, progress=None, **options
) -> list[RunOutcome]:
    """:func:`compquant.analyse.analyse` for every run (``options`` as for one run); outcomes in order.

    ``progress(outcome)`` is called as each run finishes (see :func:`map_runs`)."""
    items = [str(p) for p in paths]
    ctx = {"method_path": str(method_path), "outdirs": {str(k): v for k, v in outdirs.items()}, "options": options}
    return map_runs(executor, items, _analyse_one, ctx, progress=progress)


__all__ = ["analyse_runs"]
