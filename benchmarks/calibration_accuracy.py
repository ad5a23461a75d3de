"""Accuracy of the calibration on the demo scenario (invented data): relative error and coverage.

Usage, from the repository root::

    python benchmarks/calibration_accuracy.py [--repeats 4] [--method demo_runs/method.toml] \
        [--results-csv results.csv]
    python benchmarks/calibration_accuracy.py --summarise results.csv   # pooled figures of a CSV

Each seeded repeat simulates a whole calibration day (11-15 min of one core on the 2-core
machine; more under load): ``--results-csv`` rewrites the per-result table (day 1 and every
repeat finished so far, column ``day``) after each repeat, so a run cut short keeps its repeats
and ``--summarise`` pools them.

1. Calibrates on the calibration-day run (``demo_runs/demo-day1.h5``, simulated into a
   temporary folder when absent) with the demo method, quantifies its check sample and
   unknowns and compares them with the true compositions of the scenario.
2. Applies that calibration to the later run with instrument drift (``demo-day2.h5``), with and
   without the two-point drift standardisation.
3. Shows the interference correction on the alternative line Al I 257.510 nm (overlapped by
   Mn II 257.610 nm): curve R^2 and Al results with and without the additive Mn term.
4. Repeats the calibration day with other seeds (new shot noise, new plasma fluctuations and a
   new draw of the standards' true compositions within their certificates) to estimate the
   coverage of U over many runs.

Relative errors are reported for results above the LOQ (below it a relative error says
nothing); majors are true contents >= 1 % (target |error| <= 2 %), minors < 1 % (target
<= 5 %).  Coverage: |measured - true| <= U, for U = 2u and for U = t95(nu_eff) u.
Every figure is printed.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from compquant.calibrate import Calibration, calibrate, load_standards, parse_calibration_section  # noqa: E402
from compquant.calibrate.apply import quantify  # noqa: E402
from compquant.lines import measure_run  # noqa: E402
from compquant.method import load_method, method_from_dict  # noqa: E402
from compquant.run import Run  # noqa: E402
from compquant.simulate import load_scenario, simulate_run  # noqa: E402
from compquant.simulate.scenario import draw_true_composition  # noqa: E402

MAJOR = 0.01


def truth_seed(k: int) -> int:
    """The seed of seeded repeat ``k``'s true compositions."""
    return 20261116 + 7919 * k


def repeat_samples(sc1, k: int):
    """The samples of seeded repeat ``k`` of the calibration day: every certified material
    (standards, check, blank) gets a true composition drawn within its certificate (seed
    :func:`truth_seed`); the unknowns keep theirs."""
    ts = truth_seed(k)
    return tuple(
        dataclasses.replace(s, composition=draw_true_composition(
            s.standard_ref, sc1.certified[s.standard_ref], sc1.matrix, ts))
        if s.role in ("standard", "check", "blank") and s.standard_ref in sc1.certified else s
        for s in sc1.samples)


def measure(path, method):
    with Run.open(path) as run:
        lm = measure_run(run, method)
        return lm, run.samples, run.sha256()


def get_run(name: str, scenario_path: Path, seed: int, work: Path, scenario=None, runs_dir=None) -> Path:
    p = ROOT / "demo_runs" / name
    if scenario is None and p.exists():
        return p
    if runs_dir is not None and (Path(runs_dir) / name).exists():
        print(f"  using {Path(runs_dir) / name} (simulated before with seed {seed})")
        return Path(runs_dir) / name
    out = work / name
    t = time.perf_counter()
    simulate_run(scenario or load_scenario(scenario_path), out, seed=seed)
    print(f"  simulated {out.name} (seed {seed}) in {time.perf_counter() - t:.1f} s")
    return out


def truth_of(scenario) -> dict:
    return {(s.sample_id, el): w for s in scenario.samples for el, w in s.composition.items()}


def compare(q, truth: dict, roles=("unknown", "check")) -> pd.DataFrame:
    r = q.results[q.results["role"].isin(roles) & (q.results["basis"] == "calibration")].copy()
    r["true"] = [truth.get((s, e), 0.0) for s, e in zip(r["sample_id"], r["element"])]
    r["rel_err"] = r["mass_fraction"] / r["true"].where(r["true"] > 0) - 1
    r["k_t95"] = [float(stats.t.ppf(0.975, max(d, 1.0))) for d in r["dof"]]
    err = (r["mass_fraction"] - r["true"]).abs()
    r["cover_k2"] = err <= 2 * r["u"]
    r["cover_t95"] = err <= r["k_t95"] * r["u"]
    r["above_loq"] = (r["true"] >= r["loq"]) & ~r["below_lod"]
    r["class"] = np.where(r["true"] >= MAJOR, "major", "minor")
    return r


def print_table(r: pd.DataFrame, title: str) -> None:
    print(f"\n{title}")
    print(f"{'sample':<12} {'el':<3} {'true %':>10} {'found %':>10} {'U(k=2) %':>9} {'rel.err':>8} "
          f"{'cov k2':>6} {'cov t95':>7}  flags")
    for x in r.itertuples(index=False):
        rel = f"{x.rel_err * 100:+7.2f}%" if x.above_loq and np.isfinite(x.rel_err) else "   <LOQ "
        found = "< LOD" if x.below_lod else f"{x.mass_fraction * 100:.5f}"
        print(f"{x.sample_id:<12} {x.element:<3} {x.true * 100:10.5f} {found:>10} {2 * x.u * 100:9.5f} {rel:>8} "
              f"{'yes' if x.cover_k2 else 'NO':>6} {'yes' if x.cover_t95 else 'NO':>7}  {x.flags}")


def summary(r: pd.DataFrame, title: str) -> None:
    print(f"\n{title}")
    print(f"{'el':<3} {'class':<6} {'n':>3} {'median|err|':>11} {'max|err|':>9} {'target':>7} {'met':>4} "
          f"{'cov k2':>7} {'cov t95':>8} {'n all':>6}")
    for (el, cls), g in r.groupby(["element", "class"], sort=True):
        q = g[g["above_loq"]]
        tgt = 0.02 if cls == "major" else 0.05
        if len(q):
            med, mx = float(np.median(np.abs(q["rel_err"]))), float(np.max(np.abs(q["rel_err"])))
            met = "yes" if mx <= tgt else "no"
            ms = f"{med * 100:10.2f}% {mx * 100:8.2f}%"
        else:
            ms, met = f"{'-':>11} {'-':>9}", "-"
        print(f"{el:<3} {cls:<6} {len(q):3d} {ms} {tgt * 100:6.0f}% {met:>4} {g['cover_k2'].mean() * 100:6.1f}% "
              f"{g['cover_t95'].mean() * 100:7.1f}% {len(g):6d}")
    q = r[r["above_loq"]]
    for cls, tgt in (("major", 0.02), ("minor", 0.05)):
        g = q[q["class"] == cls]
        if len(g):
            # an unbiased normal estimate with sd u lands within ±tgt·true with probability
            # erf(tgt·true / (√2 u)): the fraction the stated u allow (docs/calibration.md sec. 8)
            allowed = np.mean([math.erf(tgt * t / (math.sqrt(2.0) * u)) if u > 0 else 1.0
                               for t, u in zip(g["true"], g["u"])])
            print(f"  {cls}s above LOQ: {len(g)} results, median |err| {np.median(np.abs(g['rel_err'])) * 100:.2f} %, "
                  f"within {tgt * 100:.0f} %: {np.mean(np.abs(g['rel_err']) <= tgt) * 100:.0f} % "
                  f"(allowed by the stated u: {allowed * 100:.0f} %)")
    for cls in ("major", "minor"):
        g, ga = r[r["class"] == cls], q[q["class"] == cls]
        if len(g):
            ab = f", above LOQ {ga['cover_k2'].mean() * 100:.1f} % of {len(ga)}" if len(ga) else ""
            print(f"  {cls}s: coverage of U (k = 2) {g['cover_k2'].mean() * 100:.1f} % of {len(g)} results{ab}")
    print(f"  coverage over all {len(r)} results: k = 2 {r['cover_k2'].mean() * 100:.1f} %, "
          f"k = t95(nu_eff) {r['cover_t95'].mean() * 100:.1f} % (nominal 95 %)")
    neg = r["flags"].fillna("").astype(str).str.contains("negative_net")
    if neg.any():
        g = r[neg]
        print(f"  flagged negative_net (analyte net below -3u; U widened, docs/calibration.md sec. 3): {len(g)} "
              f"results, covered by U (k = 2) {int(g['cover_k2'].sum())} of {len(g)}: "
              + ", ".join(f"{x.sample_id} {x.element} {x.mass_fraction * 100:.3g} +- {2 * x.u * 100:.2g} % "
                          f"(true {x.true * 100:.3g} %)" for x in g.itertuples(index=False)))
        rest = r[~neg]
        print(f"  if they were not reported instead: coverage over the other {len(rest)} results "
              f"k = 2 {rest['cover_k2'].mean() * 100:.1f} %")


def calibrate_run(path, method, standards):
    cfg = parse_calibration_section(method.sections.get("calibration"), method.where)
    lm, samples, sha = measure(path, method)
    from compquant.calibrate.pls import fit_pls_block

    pls = fit_pls_block(cfg, lm, samples, standards) if cfg.pls else None
    cal = calibrate(lm.table, standards, cfg, shot_table=lm.shots, samples=samples, method_id=method.id,
                    method_version=method.version, method_sha256=method.sha256 or "", run_sha256=sha,
                    run_path=str(path), pls=pls)
    return cal, lm, samples, sha


def curve_lines(cal) -> None:
    print(f"{'analyte':<4} {'line':<14} {'model':<19} {'n':>2} {'R2':>8} {'LOD g/g':>9} {'LOD from':<9} "
          f"{'range g/g':<16} {'outliers':<8}")
    for el, c in cal.curves.items():
        n = sum(s["used"] for s in c.standards)
        out = ",".join(s["standard_id"] for s in c.standards if s.get("outlier")) or "-"
        print(f"{el:<4} {c.line_id:<14} {c.model:<19} {n:2d} {c.r2:8.5f} {c.lod:9.2e} "
              f"{'blank' if c.lod_source.startswith('blank') else 'residual':<9} "
              f"{c.range_mass_fraction[0]:.2e}-{c.range_mass_fraction[1]:.2e} {out}")
    for el, why in cal.rejected.items():
        print(f"  not calibrated: {el}: {why}")
    if cal.pls:
        for el, m in cal.pls["models"].items():
            print(f"  PLS {el}: {m['n_components']} components, RMSECV {m['rmsecv']:.3g} (ratio), "
                  f"RMSEC {m['rmsec']:.3g}, lines {', '.join(m['lines'])}")


def interference_demo(method_path: Path, run_path: Path, standards, truth) -> None:
    from compquant.fileio import load_toml

    raw = load_toml(method_path)
    raw["lines"] = list(raw["lines"]) + [{"id": "Al I 257.510", "window_nm": 0.12, "side_nm": 0.0}]
    method = method_from_dict(raw, source=f"{method_path} + Al I 257.510")
    lm, samples, sha = measure(run_path, method)
    print("\nInterference correction: Al I 257.510 nm overlapped by Mn II 257.610 nm")
    for intf in ([], [{"element": "Mn", "kind": "additive"}]):
        sec = dict(raw["calibration"])
        sec.pop("pls", None)
        sec["analytes"] = [a if a["element"] != "Al" else
                           {"element": "Al", "line": "Al I 257.510", "interferences": intf}
                           for a in raw["calibration"]["analytes"]]
        cfg = parse_calibration_section(sec, "variant")
        cal = calibrate(lm.table, standards, cfg, shot_table=lm.shots, samples=samples, run_sha256=sha)
        if "Al" not in cal.curves:
            print(f"  {'with' if intf else 'without'} Mn term: not calibrated ({cal.rejected.get('Al')})")
            continue
        c = cal.curves["Al"]
        q = quantify(lm, cal, run_sha256=sha, samples=samples)
        r = compare(q, truth)
        r = r[r["element"] == "Al"]
        coef = (f"; d_Mn = {c.interferences[0]['coefficient']:.4g} +- {c.interferences[0]['u']:.2g} "
                f"(response per unit Mn/Cu ratio)") if intf else ""
        print(f"  {'with' if intf else 'without'} Mn term: R^2 = {c.r2:.5f}, residual sd {c.residual_sd:.3g}{coef}")
        for x in r.itertuples(index=False):
            rel = f"{x.rel_err * 100:+.1f} %" if np.isfinite(x.rel_err) else "-"
            print(f"    {x.sample_id:<12} Al true {x.true * 100:.4f} %, found {x.mass_fraction * 100:.4f} % "
                  f"+- {2 * x.u * 100:.4f} %  ({rel}; {x.flags or 'no flags'})")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=4, help="extra seeded calibration days (default 4)")
    ap.add_argument("--method", default=str(ROOT / "demo_runs" / "method.toml"))
    ap.add_argument("--standards", default=str(ROOT / "standards" / "demo-copper-alloys.csv"))
    ap.add_argument("--results-csv", default=None,
                    help="write the per-result table of day 1 and of every seeded repeat finished so far to "
                         "this CSV (rewritten after each repeat, so a run cut short keeps its repeats)")
    ap.add_argument("--first-repeat", type=int, default=1,
                    help="number of the first seeded repeat (its seeds follow from it; default 1)")
    ap.add_argument("--skip-days", action="store_true",
                    help="seeded repeats only: skip the day-1, day-2 and interference sections")
    ap.add_argument("--runs-dir", default=None,
                    help="folder of seeded repeat runs simulated before (repeat-K.h5, same seeds): used "
                         "instead of simulating them again, and kept")
    ap.add_argument("--summarise", nargs="+", default=None, metavar="CSV",
                    help="only print the pooled summary of --results-csv tables (e.g. of runs cut short)")
    args = ap.parse_args(argv)
    if args.summarise:
        r = pd.concat([pd.read_csv(f) for f in args.summarise], ignore_index=True)
        for col in ("above_loq", "cover_k2", "cover_t95"):
            r[col] = r[col].astype(str).str.lower().eq("true")
        r = r.drop_duplicates(["day", "sample_id", "element"])
        days = sorted(int(d) for d in r["day"].unique())
        summary(r, f"{len(days)} calibration days pooled from {', '.join(args.summarise)} "
                   f"({'day 1, ' if 0 in days else ''}repeats {', '.join(str(d) for d in days if d) or 'none'})")
        return 0
    t0 = time.perf_counter()
    method = load_method(args.method)
    standards = load_standards(args.standards)
    sc1 = load_scenario(ROOT / "demo_runs" / "scenario-day1.toml")
    sc2 = load_scenario(ROOT / "demo_runs" / "scenario-day2.toml")
    with tempfile.TemporaryDirectory(prefix="cq-calbench-") as tmp:
        work = Path(tmp)
        if not args.skip_days:
            print("Calibration day (demo-day1)")
            run1 = get_run("demo-day1.h5", sc1.path, 1, work)
            t = time.perf_counter()
            cal, lm1, samples1, sha1 = calibrate_run(run1, method, standards)
            print(f"  measured and calibrated in {time.perf_counter() - t:.1f} s")
            curve_lines(cal)
            q1 = quantify(lm1, cal, run_sha256=sha1, samples=samples1)
            r1 = compare(q1, truth_of(sc1))
            print_table(r1, "Day 1: check sample and unknowns")
            print("\nCheck sample:")
            for c in q1.checks.itertuples(index=False):
                print(f"  {c.sample_id} {c.element}: En = {c.En:+.2f}, zeta = {c.zeta:+.2f} -> "
                      f"{'pass' if c.passed else 'FAIL'}")
            print(f"  run valid for release: {q1.valid_for_release}")
            summary(r1, "Day 1 summary")
            cal_path = work / "cal.json"
            cal.save(cal_path)
            cal = Calibration.load(cal_path, method_id=method.id, method_sha256=method.sha256)

            print("\nLater day with instrument drift (demo-day2), calibration of day 1")
            run2 = get_run("demo-day2.h5", sc2.path, 2, work)
            lm2, samples2, sha2 = measure(run2, method)
            q2 = quantify(lm2, cal, run_sha256=sha2, samples=samples2)
            d = q2.drift
            print(f"  drift standardisation applied: {d['applied']}; setup samples {d.get('setup_samples')}")
            for lid, c in sorted(d.get("coefficients", {}).items()):
                print(f"    {lid:<14} {c['kind']:<9} alpha = {c['alpha']:.4f}  beta = {c['beta']:+.4g}")
            r2 = compare(q2, truth_of(sc2))
            print_table(r2, "Day 2 with drift standardisation")
            summary(r2, "Day 2 summary (drift-corrected)")
            cal_off = Calibration.from_dict(cal.to_dict())
            cal_off.settings["drift"] = "off"
            r2o = compare(quantify(lm2, cal_off, run_sha256=sha2, samples=samples2), truth_of(sc2))
            summary(r2o, "Day 2 summary WITHOUT drift standardisation (for comparison)")

            interference_demo(Path(args.method), run1, standards, truth_of(sc1))
            if args.results_csv and args.repeats <= 0:
                r1.assign(day=0).to_csv(args.results_csv, index=False)  # day 1 alone, for --summarise

        if args.repeats > 0:
            print(f"\nSeeded repeats of the calibration day: {args.repeats} (from repeat {args.first_repeat})")
            allr = [] if args.skip_days else [r1.assign(day=0)]
            if args.results_csv and allr:
                pd.concat(allr, ignore_index=True).to_csv(args.results_csv, index=False)
            for k in range(args.first_repeat, args.first_repeat + args.repeats):
                sck = dataclasses.replace(sc1, samples=repeat_samples(sc1, k))
                runk = get_run(f"repeat-{k}.h5", sc1.path, 1000 + k, work, scenario=sck, runs_dir=args.runs_dir)
                calk, lmk, smk, shak = calibrate_run(runk, method, standards)
                rk = compare(quantify(lmk, calk, run_sha256=shak, samples=smk), truth_of(sck))
                print(f"  repeat {k}: truth seed {truth_seed(k)}; coverage k=2 {rk['cover_k2'].mean() * 100:.1f} %, "
                      f"t95 {rk['cover_t95'].mean() * 100:.1f} %; rejected {list(calk.rejected) or 'none'}")
                allr.append(rk.assign(day=k))
                if runk.parent == work:
                    runk.unlink()
                if args.results_csv:
                    pd.concat(allr, ignore_index=True).to_csv(args.results_csv, index=False)
            summary(pd.concat(allr, ignore_index=True),
                    f"All {len(allr)} calibration days pooled ({'' if args.skip_days else 'day 1 + '}"
                    f"{args.repeats} repeats)")
    print(f"\ntotal time {time.perf_counter() - t0:.0f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
