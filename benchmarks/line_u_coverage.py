"""Coverage of the line intensities' u from few shots, and of the calibration-free U built on
them (benchmark, not a test; issue 18).

Usage, from the repository root::

    python benchmarks/line_u_coverage.py [--part lines|cf|calib|all] [--seed 20261202] [--cf-runs 60]

1. ``lines``: the invented brass-like samples of tests/cf_synth.py (LTE forward model,
   :func:`compquant.plasma.synthesize`, R = 6000, 0.015 nm pixels), their 17 window lines.
   Window integration is a linear functional of the spectrum; it is checked equal to
   :func:`compquant.lines.measure_run`'s table (intensity and ``u_intensity = sd/√n``) on one
   run, then applied to many seeded sets of ``n`` shots (n = 4, 10, 30) with one noise source
   at a time: **pixel** (Poisson photon noise at gain 1 count/e⁻ plus 5 counts Gaussian read
   noise per pixel), **plasma** (5 % shot amplitude, mean 1, and T ~ N(11 000 K, 300 K); the
   truth is then the line's expectation over T, by quadrature on a T grid), and **both**.
   Prints the fraction of line means with ``|I − I_true| ≤ 2u`` and ``≤ t₀.₉₇₅(n−1)·u``
   beside the Student-t value ``P(|t_{n−1}| ≤ 2)`` (GUM G.3; scipy.stats).
2. ``cf``: end-to-end, forward-model runs (0.2 % shot amplitude, 5 counts read noise) → line
   pipeline → :func:`compquant.cflibs.analyse_cf` with the shots' covariance (``measurement``),
   300 Monte Carlo draws with only the line noise drawn (``mc_include_aki = false``,
   ``mc_partition_u_rel = 0``: the reference shares those inputs).  The reference is the CF
   result of the noise-free line means, weighted by their expected u for ``n`` shots.  Prints
   the coverage of the reported ``U = 2u`` for T and the mass fractions.
3. ``calib``: the calibration route's inverse prediction (:meth:`Curve.predict_content`) for an
   unknown measured with ``n`` shots (n = 4, 10, 30; its ``u0 = s/√n`` from the shots) on a
   straight line through 8 standards of 40 shots each (per-shot sd 0.05, matrix scatter 0.003,
   exact certificates), 1500 seeded cases per ``n``: coverage with ``k = 2`` and with
   ``k = t₀.₉₇₅(ν_eff)`` (``coverage = "student"``, Welch–Satterthwaite, GUM G.4).

Every figure is printed; docs/method-file.md ("What u means with few shots") and
docs/calibration-free.md §8 quote them.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

import cf_synth  # noqa: E402

from compquant import Run, analyse_cf, load_method  # noqa: E402
from compquant.lines import measure_run  # noqa: E402
from compquant.lines._setup import _Setup  # noqa: E402
from compquant.lines.windows import build_window_weights  # noqa: E402
from compquant.plasma import synthesize  # noqa: E402
from compquant.run import write_run  # noqa: E402

TRUE = {"LOT-1": {"Cu": 0.63, "Zn": 0.37}, "LOT-2": {"Cu": 0.85, "Zn": 0.15}}
T0, NE0, READ, GAIN = 11000.0, 5e16, 5.0, 1.0
WL = np.arange(200.0, 340.0, 0.015)


def _spectra(comp, T):
    return synthesize(WL, comp, np.asarray(T, float), np.full(np.size(T), NE0), length_mm=0.05,
                      resolving_power=6000.0, self_absorption=False, continuum=False)


def _write(path, spectra_by_sid):
    sids = list(spectra_by_sid)
    idx = np.concatenate([[k] * len(spectra_by_sid[s]) for k, s in enumerate(sids)])
    write_run(path, WL, np.vstack([spectra_by_sid[s] for s in sids]),
              [{"sample_id": s, "role": "unknown", "standard_ref": "", "description": "forward model"}
               for s in sids], idx,
              instrument={"resolving_power": 6000.0, "model": "forward model (benchmark)"},
              acquisition={"gate_delay_us": 1.0, "gate_width_us": 5.0})


def _base():
    out = {}
    for sid, comp in TRUE.items():
        s0 = _spectra(comp, [T0])[0]
        out[sid] = s0 / s0.max() * 5e4  # counts at the peak, as tests/cf_synth.py
    return out


def _weights(d, method, base):
    """Window weights of the method's lines, checked equal to measure_run's table."""
    rng = np.random.default_rng(0)
    sp = {s: b + READ * rng.standard_normal((4, WL.size)) for s, b in base.items()}
    _write(d / "check.h5", sp)
    with Run.open(d / "check.h5") as run:
        table = measure_run(run, method).table
        st = _Setup(run, method)
        W = build_window_weights(st.wl, [st.geometry(i, None) for i in range(len(st.lines))])
    for sid, x in sp.items():
        v = W.integrate(x)
        t = table[table.sample_id == sid]
        assert np.allclose(t.intensity.to_numpy(), v.mean(0), rtol=1e-9, atol=1e-9)
        assert np.allclose(t.u_intensity.to_numpy(), v.std(0, ddof=1) / 2.0, rtol=1e-9, atol=1e-12)
    print("window functional equals measure_run's table (intensity, u_intensity): yes")
    return W, st


def lines_part(seed, d, method):
    base = _base()
    W, _ = _weights(d, method, base)
    TG = np.linspace(T0 - 1500, T0 + 1500, 121)
    wts = stats.norm.pdf(TG, T0, 300.0)
    wts /= wts.sum()
    banks = {}
    for sid, comp in TRUE.items():
        s0 = _spectra(comp, [T0])[0]
        scale = 5e4 / s0.max()
        grid = W.integrate(_spectra(comp, TG) * scale)  # (n_T, n_lines), noise-free
        var_pix = np.array([np.sum(w**2 * (GAIN * np.clip(base[sid][idx], 0, None) + READ**2))
                            for idx, w in zip(W.pixels, W.weights)])
        banks[sid] = (base[sid], W.integrate(base[sid]), wts @ grid, grid, var_pix)
    rng = np.random.default_rng(seed)
    print("\nline means: coverage of |I − I_true| ≤ k u, u = sd/√n (the line table's u_intensity)")
    print(f"{'noise':7s} {'n':>3s} {'k = 2':>8s} {'k = t95':>8s} {'P(|t|≤2)':>9s} {'t95':>5s} {'line means':>10s}")
    for kind in ("pixel", "plasma", "both"):
        for n in (4, 10, 30):
            runs = {4: 600, 10: 300, 30: 150}[n] if kind == "pixel" else 1500
            kt = stats.t.ppf(0.975, n - 1)
            h2 = ht = tot = 0
            for spec0, I0, I_T, grid, var_pix in banks.values():
                truth = I0 if kind == "pixel" else I_T
                for _ in range(runs):
                    if kind == "pixel":
                        sp = GAIN * rng.poisson(np.broadcast_to(spec0 / GAIN, (n, WL.size)))
                        x = W.integrate(sp + READ * rng.standard_normal((n, WL.size)))
                    else:
                        T = rng.normal(T0, 300.0, n)
                        a = 1.0 + 0.05 * rng.standard_normal((n, 1))
                        x = np.column_stack([np.interp(T, TG, grid[:, j]) for j in range(grid.shape[1])]) * a
                        if kind == "both":
                            x = x + np.sqrt(var_pix) * rng.standard_normal(x.shape)
                    e = np.abs(x.mean(0) - truth)
                    u = x.std(0, ddof=1) / np.sqrt(n)
                    h2 += int(np.sum(e <= 2 * u))
                    ht += int(np.sum(e <= kt * u))
                    tot += e.size
            p2 = 2 * stats.t.cdf(2.0, n - 1) - 1
            print(f"{kind:7s} {n:3d} {100 * h2 / tot:7.1f}% {100 * ht / tot:7.1f}% {100 * p2:8.1f}% "
                  f"{kt:5.2f} {tot:10d}")


def cf_part(seed, d, runs):
    cf = "mc_draws = 300\nseed = 5\nmc_include_aki = false\nmc_partition_u_rel = 0\n"
    (d / "cf.toml").write_text(cf_synth.method_toml(cf))
    method = load_method(d / "cf.toml")
    cfs = method.sections.get("cf")
    base = _base()
    W, st = _weights(d, method, base)
    norms = {ln.line_id: float(np.linalg.norm(w)) for ln, w in zip(st.lines, W.weights)}

    def analyse(table, m, n_draws=None):
        out = {}
        for s in TRUE:
            r = analyse_cf(table, sample_id=s, settings=cfs, instrument={"resolving_power": 6000.0},
                           acquisition={"gate_delay_us": 1.0}, measurement=m, mc_draws=n_draws)
            out[s] = {"T": (r.temperature_k, r.u_temperature_k),
                      **{e: (r.element(e).mass_fraction, r.element(e).u) for e in TRUE[s]}}
        return out

    _write(d / "ref.h5", {s: np.vstack([b] * 3) for s, b in base.items()})
    with Run.open(d / "ref.h5") as run:
        ref_table = measure_run(run, method).table
    print("\ncalibration-free: coverage of U = 2u (reference: the noise-free line means)")
    print(f"{'n':>3s} {'T':>7s} {'w':>7s} {'all':>7s} {'results':>8s} {'s':>5s}")
    rng = np.random.default_rng(seed + 1)
    for n in (4, 10, 30):
        t = ref_table.copy()
        sd = np.sqrt((READ * t["line_id"].map(norms)) ** 2 + (0.002 * t["intensity"]) ** 2)
        t["u_intensity"], t["sd_shots"] = sd / np.sqrt(n), sd
        ref = analyse(t, None, 0)
        z = {"T": [], "w": []}
        t0 = time.time()
        for k in range(runs):
            sp = {s: b * (1 + 0.002 * rng.standard_normal((n, 1))) + READ * rng.standard_normal((n, WL.size))
                  for s, b in base.items()}
            _write(d / f"r{k % 2}.h5", sp)
            with Run.open(d / f"r{k % 2}.h5") as run:
                m = measure_run(run, method)
            res = analyse(m.table, m)
            for s in res:
                for q, (v, u) in res[s].items():
                    z["T" if q == "T" else "w"].append(abs(v - ref[s][q][0]) / u)
        zt, zw = np.array(z["T"]), np.array(z["w"])
        za = np.concatenate([zt, zw])
        print(f"{n:3d} {100 * np.mean(zt <= 2):6.1f}% {100 * np.mean(zw <= 2):6.1f}% {100 * np.mean(za <= 2):6.1f}% "
              f"{za.size:8d} {time.time() - t0:5.0f}")


def calib_part(seed):
    from compquant.calibrate.apply import coverage_factor
    from compquant.calibrate.build import curve_from_records
    from compquant.calibrate.config import AnalyteConfig

    def one(rng, n0, sig=0.05, n_std=8, s_matrix=0.003, n_std_shots=40):
        xt = np.linspace(0.02, 0.3, n_std)
        b0, b1 = 0.05, 10.0
        recs = []
        for i in range(n_std):
            shots = b0 + b1 * xt[i] + rng.normal(0, s_matrix) + sig * rng.standard_normal(n_std_shots)
            recs.append(dict(standard_id=f"S{i}", sample_id=f"S{i}", x=xt[i], u_x=0.0, y=shots.mean(),
                             u_y=shots.std(ddof=1) / np.sqrt(n_std_shots), n_shots=n_std_shots, w=xt[i]))
        cfg = AnalyteConfig(element="Zn", line="Zn I 481.053", model="linear", basis="intensity")
        c = curve_from_records(cfg, recs)
        x0 = 0.13
        s0 = b0 + b1 * x0 + rng.normal(0, s_matrix) + sig * rng.standard_normal(n0)
        p = c.predict_content(s0.mean(), s0.std(ddof=1) / np.sqrt(n0), n0)
        return p["x"] - x0, p["u"], p["dof"]

    print("\ncalibration route: coverage of U = k u for an unknown of n shots (8 standards, 40 shots each)")
    print(f"{'n':>3s} {'k = 2':>7s} {'student':>8s} {'median nu_eff':>14s}")
    for n0 in (4, 10, 30):
        rng = np.random.default_rng(seed + n0)
        d, u, dof = np.array([one(rng, n0) for _ in range(1500)]).T
        cov = {m: np.mean(np.abs(d) <= np.array([coverage_factor(m, v) for v in dof]) * u) for m in ("k2", "student")}
        print(f"{n0:3d} {100 * cov['k2']:6.1f}% {100 * cov['student']:7.1f}% {np.median(dof):14.1f}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--part", choices=("lines", "cf", "calib", "all"), default="all")
    ap.add_argument("--seed", type=int, default=20261202)
    ap.add_argument("--cf-runs", type=int, default=60, help="seeded runs per shot count (cf part)")
    a = ap.parse_args(argv)
    warnings.filterwarnings("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        (d / "method.toml").write_text(cf_synth.method_toml())
        if a.part in ("lines", "all"):
            lines_part(a.seed, d, load_method(d / "method.toml"))
        if a.part in ("cf", "all"):
            cf_part(a.seed, d, a.cf_runs)
        if a.part in ("calib", "all"):
            calib_part(a.seed)


if __name__ == "__main__":
    main()
