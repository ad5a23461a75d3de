"""Benchmark: compquant's AsLS / arPLS baselines against pybaselines, one spectrum at a time.

Usage::

    /work/venv/bin/python benchmarks/baseline.py [--pixels 4096] [--spectra 20] [--repeat 5]

Makes invented spectra (curved continuum, 40 Gaussian lines, Gaussian noise), then times, per
spectrum, ``compquant.preprocess.asls`` / ``arpls`` and ``pybaselines.Baseline(x).asls`` /
``arpls`` with the same parameters (best of ``--repeat`` passes over all spectra, both in this
process), and prints the time per spectrum of each, the ratio pybaselines / compquant (> 1:
compquant faster) and the largest difference relative to the data scale.
Targets (issue 20): ratio >= 1, difference <= 1e-6 of the data scale.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from compquant.preprocess import arpls, asls  # noqa: E402


def spectra(n_pixels: int, n: int, seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = np.linspace(250.0, 450.0, n_pixels)
    out = []
    for _ in range(n):
        y = 500 + 0.4 * (x - 250) + 250 * np.sin(x / 40)
        for c in rng.uniform(255, 445, 40):
            y = y + rng.uniform(100, 6000) * np.exp(-0.5 * ((x - c) / 0.08) ** 2)
        out.append(y + rng.normal(0, 8, x.size))
    return x, np.array(out)


def best_time(fn, rows, repeat: int) -> tuple[float, np.ndarray]:
    best, res = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        res = np.array([fn(y) for y in rows])
        best = min(best, time.perf_counter() - t0)
    return best / len(rows), res


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--pixels", type=int, default=4096)
    ap.add_argument("--spectra", type=int, default=20)
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args(argv)
    from pybaselines import Baseline

    x, Y = spectra(a.pixels, a.spectra)
    ref = Baseline(x)
    cases = [
        ("asls", lambda y: asls(y, lam=1e6, p=0.01), lambda y: ref.asls(y, lam=1e6, p=0.01)[0]),
        ("arpls", lambda y: arpls(y, lam=1e5), lambda y: ref.arpls(y, lam=1e5)[0]),
    ]
    print(f"{a.spectra} spectra x {a.pixels} pixels, best of {a.repeat}, one thread")
    print(f"{'method':8s} {'compquant ms':>13s} {'pybaselines ms':>15s} {'ratio pb/cq':>12s} {'max diff/scale':>15s}")
    scale = float(np.max(np.abs(Y)))
    for name, ours, theirs in cases:
        t_ours, z_ours = best_time(ours, Y, a.repeat)
        t_ref, z_ref = best_time(theirs, Y, a.repeat)
        diff = float(np.max(np.abs(z_ours - z_ref))) / scale
        print(f"{name:8s} {1e3 * t_ours:13.3f} {1e3 * t_ref:15.3f} {t_ref / t_ours:12.2f} {diff:15.2e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
