"""Benchmark: calibration-free analysis per sample, with and without the partition-function and
Voigt-profile memos (issue 22, item 6).

Usage::

    /work/venv/bin/python benchmarks/cf_speed.py [--run demo_runs/demo-day1.h5]
        [--method demo_runs/method.toml] [--repeat 2]

Measures the lines of the run once (not timed), then, in ONE process, times ``analyse_cf`` on
every unknown and check sample (as ``compquant cf`` does, with the method's Monte Carlo draws):

(base)  the memos switched off (U(T) recomputed at every call, Voigt profiles recomputed at
        every self-absorption integral) — the arithmetic of the code before issue 22 (the
        vectorised closure and the exception-free availability check stay on: before them the
        demo took about 4 s CPU per sample);
(memo)  the default.

Prints CPU seconds per sample (process time, best of ``--repeat``), the ratio base/memo, the
load average, and the largest relative difference between the two runs' mass fractions, T and
nₑ and every other number of the results (0 means bit-identical).  Goal (issue 22): <= 0.5 s CPU per sample.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings
from pathlib import Path

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from compquant.cflibs import CFSettings, analyse_cf, run_intensity_basis, selfabs  # noqa: E402
from compquant.cflibs.atomicdata import PackageAtomicData, default_atomic_data  # noqa: E402
from compquant.cflibs.capture import method_windows  # noqa: E402
from compquant.cflibs.solver import Model  # noqa: E402
from compquant.lines import measure_run  # noqa: E402
from compquant.method import load_method  # noqa: E402
from compquant.run import Run  # noqa: E402


def _memos(on: bool) -> None:
    atomic = default_atomic_data()
    atomic._u_memo.clear()
    atomic.MEMO_MAX_T = PackageAtomicData.MEMO_MAX_T if on else -1
    selfabs._PROFILE_MEMO.clear()
    selfabs._PROFILE_MEMO_SIZE = 16 if on else 0
    Model.LN_U_MEMO = 16 if on else 0


def _analyse_all(table, ids, settings, acq, instr, basis, windows=None):
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for sid in ids:
            r = analyse_cf(table, sample_id=sid, settings=settings, acquisition=acq, instrument=instr,
                           intensity_basis=basis, windows=windows)
            out.append(r.to_dict())
    return out


def _numbers(doc) -> np.ndarray:
    """Every number of the results (temperatures, densities, fractions, uncertainties, line rows)."""
    if isinstance(doc, dict):
        doc = list(doc.values())
    if isinstance(doc, list):
        parts = [_numbers(v) for v in doc]
        return np.concatenate(parts) if parts else np.empty(0)
    if isinstance(doc, (int, float)) and not isinstance(doc, bool):
        return np.array([float(doc)])
    return np.array([np.nan]) if doc is None else np.empty(0)


def main(argv=None) -> int:
    root = Path(__file__).resolve().parents[1]
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--run", default=str(root / "demo_runs" / "demo-day1.h5"))
    ap.add_argument("--method", default=str(root / "demo_runs" / "method.toml"))
    ap.add_argument("--repeat", type=int, default=2)
    a = ap.parse_args(argv)
    method = load_method(a.method)
    settings = CFSettings.from_section(method.sections.get("cf"), where="[cf]")
    with Run.open(a.run) as run:
        table = measure_run(run, method).table
        roles = dict(zip(run.samples["sample_id"].astype(str), run.samples["role"].astype(str)))
        acq, instr = dict(run.acquisition or {}), dict(run.instrument or {})
        basis = run_intensity_basis(method, run)
        windows = method_windows(method, run.wavelength)  # as `compquant cf` does
    ids = [s for s in dict.fromkeys(table["sample_id"].astype(str)) if roles.get(s) in ("unknown", "check")]
    print(f"{Path(a.run).name}: {len(ids)} samples, load average {os.getloadavg()[0]:.1f}")
    cpu, docs = {}, {}
    for name, on in (("base", False), ("memo", True)):
        best = float("inf")
        for _ in range(a.repeat):
            _memos(on)
            t0 = time.process_time()
            docs[name] = _analyse_all(table, ids, settings, acq, instr, basis, windows)
            best = min(best, time.process_time() - t0)
        cpu[name] = best / len(ids)
        print(f"({name:4s}) {cpu[name]:.3f} s CPU per sample   load average {os.getloadavg()[0]:.1f}")
    _memos(True)
    x, y = _numbers(docs["base"]), _numbers(docs["memo"])
    both = np.isfinite(x) & np.isfinite(y)
    rel = np.max(np.abs(x[both] - y[both]) / np.maximum(np.abs(x[both]), 1e-300), initial=0.0)
    same_nan = bool(np.array_equal(np.isfinite(x), np.isfinite(y)))
    print(f"base/memo = {cpu['base'] / cpu['memo']:.2f}x   goal <= 0.5 s per sample: "
          f"{'met' if cpu['memo'] <= 0.5 else 'missed'}")
    print(f"largest relative difference of all numbers of the results: {rel:.2e} over {both.sum()} numbers"
          f" (same missing values: {same_nan})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
