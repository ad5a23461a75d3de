"""Benchmark: calibration-free analysis per sample — the self-absorption fit's Jacobian
(finite differences vs analytic), and the partition-function and Voigt-profile memos (issue 22,
item 6).

Usage::

    /work/venv/bin/python benchmarks/cf_speed.py [--run demo_runs/demo-day1.h5]
        [--method demo_runs/method.toml] [--repeat 2] [--modes mixed,now]

Measures the lines of the run once (not timed), then, in ONE process, times ``analyse_cf`` on
every unknown and check sample (as ``compquant cf`` does, with the method's Monte Carlo draws),
interleaving the modes ``--repeat`` times:

(base)  the memos switched off (U(T) recomputed at every call, Voigt profiles recomputed at
        every self-absorption integral) and finite-difference Jacobians;
(fd)    memos on, scipy's finite-difference Jacobian in every column of the self-absorption
        fit (the code before the analytic Jacobian);
(mixed) memos on, analytic intercept and ln L columns, forward differences in the T and ln nₑ
        columns (the code before the closed-form T and ln nₑ columns);
(grid)  every column in closed form, the length continuation over the whole grid to 1 cm with
        its points fitted to xtol = ftol = 10⁻⁶ (the code before branch cffits);
(now)   the default (memos on, every column of the Jacobian in closed form, the continuation
        stopped after 2 rises of χ², grid points to 10⁻⁴).

The modes before ``grid`` also follow the whole grid.

Prints CPU seconds per sample (process time, best of ``--repeat``), the ratio of each mode to
the last, the number of ``least_squares`` calls of the self-absorption fit, the load average,
and the largest relative difference between the first mode's and the last mode's T, nₑ, mass
fractions, their U, and every other number of the results (0 means bit-identical; a different
Jacobian moves the optimiser's path, so the fd/now difference is the fit's own tolerance, not
0; so is the grid/now difference, from the grid points' tolerance).  Goal (issue 22): <= 0.5 s CPU per sample.
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
from compquant.cflibs.selfabs_fit import SelfAbsFit  # noqa: E402
from compquant.cflibs.solver import Model  # noqa: E402
from compquant.lines import measure_run  # noqa: E402
from compquant.method import load_method  # noqa: E402
from compquant.run import Run  # noqa: E402


def _memos(on: bool, analytic: bool = True, analytic_tn: bool = True, stop: bool = True) -> None:
    SelfAbsFit.ANALYTIC_JACOBIAN = analytic
    SelfAbsFit.ANALYTIC_TN = analytic_tn
    SelfAbsFit.GRID_STOP_AFTER_RISES = 2 if stop else None
    SelfAbsFit.GRID_TOL = 1e-4 if stop else 1e-6
    atomic = default_atomic_data()
    atomic._u_memo.clear()
    atomic._uu_memo.clear()
    atomic.MEMO_MAX_T = PackageAtomicData.MEMO_MAX_T if on else -1
    selfabs._PROFILE_MEMO.clear()
    selfabs._PROFILE_MEMO_SIZE = 16 if on else 0
    Model.LN_U_MEMO = 16 if on else 0


_LSQ = SelfAbsFit._lsq
_N_LSQ = [0]


def _counted_lsq(self, *args, **kw):
    """:meth:`SelfAbsFit._lsq`, counting the ``least_squares`` calls of the self-absorption fit."""
    _N_LSQ[0] += 1
    return _LSQ(self, *args, **kw)


SelfAbsFit._lsq = _counted_lsq


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
    ap.add_argument("--modes", default="mixed,now",
                    help="comma-separated: base, fd, mixed, grid, now (default mixed,now)")
    a = ap.parse_args(argv)
    modes = [m.strip() for m in a.modes.split(",") if m.strip()]
    known = {"base": (False, False, False, False), "fd": (True, False, False, False),
             "mixed": (True, True, False, False), "grid": (True, True, True, False), "now": (True, True, True, True)}
    if not modes or any(m not in known for m in modes):
        print(f"error: --modes takes base, fd, mixed, grid, now (got {a.modes!r})", file=sys.stderr)
        return 2
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
    cpu, docs, n_lsq = {m: float("inf") for m in modes}, {}, {}
    for _ in range(a.repeat):
        for name in modes:  # interleaved, so a change of load hits every mode alike
            _memos(*known[name])
            _N_LSQ[0] = 0
            t0 = time.process_time()
            docs[name] = _analyse_all(table, ids, settings, acq, instr, basis, windows)
            cpu[name] = min(cpu[name], (time.process_time() - t0) / len(ids))
            n_lsq[name] = _N_LSQ[0]
    _memos(True)
    last = modes[-1]
    for name in modes:
        print(f"({name:4s}) {cpu[name]:.3f} s CPU per sample   {name}/{last} = {cpu[name] / cpu[last]:.2f}x   "
              f"{n_lsq[name]} least_squares calls for {len(ids)} samples")
    print(f"load average at the end {os.getloadavg()[0]:.1f}; goal <= 0.5 s per sample: "
          f"{'met' if cpu[last] <= 0.5 else 'missed'} ({last})")
    for name in modes[:-1]:
        x, y = _numbers(docs[name]), _numbers(docs[last])
        if x.size != y.size:
            print(f"{name} vs {last}: results differ in shape ({x.size} vs {y.size} numbers)")
            continue
        both = np.isfinite(x) & np.isfinite(y)
        rel = np.abs(x[both] - y[both]) / np.maximum(np.abs(x[both]), 1e-300)
        same_nan = bool(np.array_equal(np.isfinite(x), np.isfinite(y)))
        print(f"{name} vs {last}: largest relative difference of all numbers {np.max(rel, initial=0.0):.2e} "
              f"over {both.sum()} numbers (same missing values: {same_nan})")
        tiny = np.abs(x[both]) < 1e-9  # e.g. the residual of a line alone in its group, ~1e-13
        if np.any(tiny & (rel > 0)):
            print(f"  of the {np.sum(~tiny)} numbers above 1e-9: {np.max(rel[~tiny], initial=0.0):.2e}; the others "
                  f"moved by at most {np.max(np.abs(x[both] - y[both])[tiny]):.1e} absolute")
        for key in ("temperature_k", "electron_density_cm3"):
            d = [abs(dy[key] / dx[key] - 1) for dx, dy in zip(docs[name], docs[last])
                 if dx.get(key) and dy.get(key)]
            print(f"  {key}: largest relative change {max(d, default=0.0):.2e}")
        d = [abs(dy["self_absorption"]["plasma_length_mm"] / dx["self_absorption"]["plasma_length_mm"] - 1)
             for dx, dy in zip(docs[name], docs[last])
             if (dx.get("self_absorption") or {}).get("plasma_length_mm") and (dy.get("self_absorption") or {}).get(
                 "plasma_length_mm")]
        if d:
            print(f"  plasma length: largest relative change {max(d):.2e}")
        d = [(dx.get("flags"), [(e.get("determined"), e.get("flags")) for e in dx.get("elements", [])]) !=
             (dy.get("flags"), [(e.get("determined"), e.get("flags")) for e in dy.get("elements", [])])
             for dx, dy in zip(docs[name], docs[last])]
        print(f"  flags or reported (determined) elements changed in {sum(d)} of {len(d)} samples")
        d = []
        for dx, dy in zip(docs[name], docs[last]):
            ex = {e["element"]: e for e in dx.get("elements", [])}
            for e in dy.get("elements", []):
                o = ex.get(e["element"])
                for k in ("mass_fraction", "u", "uncertified_mass_fraction"):
                    if o and isinstance(o.get(k), float) and isinstance(e.get(k), float) and o[k] and o[k] == o[k]:
                        d.append((abs(e[k] / o[k] - 1), f"{e['element']} {k}"))
        if d:
            worst = max(d)
            print(f"  mass fractions and u: largest relative change {worst[0]:.2e} ({worst[1]})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
