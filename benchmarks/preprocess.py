"""Benchmark: the preprocessing + line-measurement pipeline against a per-spectrum loop and the I/O floor.

Usage::

    /work/venv/bin/python benchmarks/preprocess.py [--shots 100000] [--pixels 4096]
        [--subset 2000] [--compression gzip|none] [--dir /tmp/compquant-bench]

Makes (once, then reuses) a synthetic run of ``shots x pixels`` uint16 counts
with dark frames, a response curve, 20 samples and 20 emission lines on a
curved continuum (invented demo data: Voigt lines plus Gaussian noise of
Poisson variance), then in one process measures

(c) the floor: reading all spectra from the file chunk by chunk plus one numpy
    pass over them (a per-shot sum);
(a) compquant's pipeline, :func:`compquant.lines.measure_run`: dark (median),
    response, saturation mask, shot QC, SNIP baseline, 20-line window
    integration with local linear background, statistics per sample;
(b) the loop a user would write: per spectrum, dark and response correction,
    ``pybaselines.smooth.snip`` and, per line, ``np.interp`` + ``np.trapezoid``
    over the window minus a straight background fitted by least squares over
    the side windows' intervals (normal equations by Simpson's rule), on a subset
    of shots, scaled per shot;

and prints shots/s of each, the ratios a/b and a/floor, the largest relative
difference between (a) and (b) on the subset, and the peak resident memory.
Targets (issue 4): a >= 30x faster than b, a within 4x of the floor, peak
memory <= 1.5 GB, results equal within 1e-6 relative.
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import time
from pathlib import Path

# one BLAS/OpenMP thread for all three measurements, so they compare like with like
for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from compquant.method import method_from_dict  # noqa: E402
from compquant.run import Run, RunWriter  # noqa: E402

N_LINES = 20
N_SAMPLES = 20
MAX_HALF_WINDOW = 10
WINDOW_PIXELS = 9
SIDE_PIXELS = 5


def _axis(n_pixels: int) -> np.ndarray:
    return np.linspace(250.0, 450.0, n_pixels)


def _line_centres(wl: np.ndarray) -> np.ndarray:
    # 20 lines spread over the axis, off the pixel grid (fractions of a pixel)
    pitch = wl[1] - wl[0]
    k = np.linspace(120, wl.size - 120, N_LINES).astype(int)
    return wl[k] + 0.37 * pitch


def _templates(wl: np.ndarray, rng) -> np.ndarray:
    from scipy.special import voigt_profile

    pitch = wl[1] - wl[0]
    centres = _line_centres(wl)
    sig, gam = 0.8 * pitch, 0.6 * pitch
    out = np.empty((N_SAMPLES, wl.size))
    for s in range(N_SAMPLES):
        y = 300 + 900 * np.exp(-0.5 * ((wl - 330 - 3 * s) / 60) ** 2) + 0.8 * (wl - 250)
        areas = rng.uniform(200, 2500, N_LINES) * pitch * 40
        for c, a in zip(centres, areas):
            y += a * voigt_profile(wl - c, sig, gam)
        out[s] = y
    return out


def make_run(path: Path, n_shots: int, n_pixels: int, compression: str | None) -> None:
    """Write the synthetic run in blocks (memory: one block)."""
    rng = np.random.default_rng(20261201)
    wl = _axis(n_pixels)
    templ = _templates(wl, rng)
    response = 0.6 + 0.4 * np.exp(-0.5 * ((wl - 350) / 80) ** 2)
    dark_level = 100.0 + 5 * np.sin(wl / 7)
    per = n_shots // N_SAMPLES
    idx = np.minimum(np.arange(n_shots) // per, N_SAMPLES - 1)
    samples = [
        {"sample_id": f"S{s:02d}", "role": "unknown", "standard_ref": "", "description": "synthetic benchmark sample"}
        for s in range(N_SAMPLES)
    ]
    dark = np.rint(dark_level + rng.normal(0, 3, (10, n_pixels))).astype(np.uint16)
    with RunWriter(
        path,
        wl,
        n_shots,
        samples,
        idx,
        dtype="uint16",
        dark=dark,
        response=response,
        saturation=65535,
        compression=compression,
        pulse_energy_mj=rng.normal(50, 1.5, n_shots),
    ) as w:
        block = 4096
        for start in range(0, n_shots, block):
            stop = min(n_shots, start + block)
            scale = rng.normal(1.0, 0.08, stop - start)[:, None]
            mean = templ[idx[start:stop]] * scale * response + dark_level
            noisy = mean + np.sqrt(mean) * rng.standard_normal(mean.shape, dtype=np.float32)
            w.write_spectra(start, np.clip(np.rint(noisy), 0, 65535).astype(np.uint16))


def bench_method(wl: np.ndarray) -> dict:
    pitch = float(wl[1] - wl[0])
    lines = [{"element": "Fe", "ion": 1, "wavelength_nm": float(round(c, 4))} for c in _line_centres(wl)]
    return {
        "method": {"id": "benchmark", "version": "1", "technique": "LIBS"},
        "preprocess": {
            "dark": {"statistic": "median", "scale_exposure": False},
            "baseline": {"method": "snip", "max_half_window": MAX_HALF_WINDOW},
            "qc": {"k": 5.0, "min_fraction": 0.1},
        },
        "measure": {"mode": "window", "window_nm": WINDOW_PIXELS * pitch, "side_nm": SIDE_PIXELS * pitch},
        "lines": lines,
    }


def _clock() -> tuple[float, float]:
    return time.perf_counter(), time.process_time()


def _since(t: tuple[float, float]) -> tuple[float, float]:
    return time.perf_counter() - t[0], time.process_time() - t[1]


def floor(run: Run, chunk: int) -> tuple[float, float]:
    t = _clock()
    acc = 0.0
    for start in range(0, run.n_shots, chunk):
        raw = run.read_raw(start, min(run.n_shots, start + chunk))
        acc += float(np.sum(raw, axis=1, dtype=np.float64).sum())
    return _since(t)


def user_loop(run: Run, method, rows: np.ndarray) -> tuple[float, np.ndarray]:
    """(b): what a user would write with pybaselines and numpy, one spectrum at a time."""
    from pybaselines.smooth import snip as pb_snip

    wl = run.wavelength
    dark = np.median(run.dark(), axis=0)
    resp = run.response()
    win = method.measure.window_nm
    side = method.measure.side_nm
    centres = [ln.wavelength_nm for ln in method.lines]
    out = np.empty((rows.size, len(centres)))
    t = _clock()
    raw_all = run.read_raw(int(rows[0]), int(rows[-1]) + 1)
    for k in range(rows.size):
        y = (raw_all[k].astype(np.float64) - dark) / resp
        y = y - pb_snip(y, max_half_window=MAX_HALF_WINDOW)[0]
        for j, c in enumerate(centres):
            a, b = c - win / 2, c + win / 2
            inside = (wl >= a) & (wl <= b)
            xs = np.concatenate([[a], wl[inside], [b]])
            area = np.trapezoid(np.interp(xs, wl, y), xs)
            # straight background: least squares over the two side intervals of the interpolant,
            # normal equations from Simpson's rule per segment (exact: the integrands are quadratic)
            M, r = np.zeros((2, 2)), np.zeros(2)
            for lo, hi in ((a - side, a), (b, b + side)):
                e = np.concatenate([[lo], wl[(wl > lo) & (wl < hi)], [hi]])  # segment ends
                em = 0.5 * (e[1:] + e[:-1])
                d0, dm, d1 = e[:-1] - c, em - c, e[1:] - c
                y0, ym, y1 = np.interp(e[:-1], wl, y), np.interp(em, wl, y), np.interp(e[1:], wl, y)
                h6 = np.diff(e) / 6
                for p in range(2):
                    r[p] += np.sum(h6 * (d0**p * y0 + 4 * dm**p * ym + d1**p * y1))
                    for q in range(2):
                        M[p, q] += np.sum(h6 * (d0 ** (p + q) + 4 * dm ** (p + q) + d1 ** (p + q)))
            p0, p1 = np.linalg.solve(M, r)
            ua, ub = a - c, b - c
            out[k, j] = area - (p0 * (ub - ua) + 0.5 * p1 * (ub**2 - ua**2))
    return _since(t), out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--shots", type=int, default=100_000)
    ap.add_argument("--pixels", type=int, default=4096)
    ap.add_argument("--subset", type=int, default=2000, help="shots measured by the per-spectrum loop (b)")
    ap.add_argument("--compression", choices=("gzip", "none"), default="gzip")
    ap.add_argument("--dir", default="/tmp/compquant-bench")
    ap.add_argument("--chunk-shots", type=int, default=4096)
    ap.add_argument("--repeat", type=int, default=2, help="timed repetitions of (a) and (c); best is kept")
    ap.add_argument("--threads", default="1,2", help="comma-separated thread counts for (a)")
    ap.add_argument("--make-only", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    comp = None if args.compression == "none" else "gzip"
    folder = Path(args.dir)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"preprocess-{args.shots}x{args.pixels}-{args.compression}.h5"
    if args.make_only:
        make_run(path, args.shots, args.pixels, comp)
        return 0
    if not path.exists():
        # a child process makes the run, so this process's peak memory is the pipeline's
        import subprocess

        t0 = time.perf_counter()
        subprocess.run(
            [
                sys.executable,
                __file__,
                "--make-only",
                "--shots",
                str(args.shots),
                "--pixels",
                str(args.pixels),
                "--compression",
                args.compression,
                "--dir",
                args.dir,
            ],
            check=True,
        )
        print(f"made {path} ({path.stat().st_size / 1e6:.0f} MB) in {time.perf_counter() - t0:.1f} s")
    else:
        print(f"reusing {path} ({path.stat().st_size / 1e6:.0f} MB)")
    from compquant.lines import measure_run

    with Run.open(path, memory_limit_bytes=4 * 1024**3) as run:
        method = method_from_dict(bench_method(run.wavelength))
        n = run.n_shots
        floor(run, args.chunk_shots)  # warm the page cache so (a) and (c) read alike
        t_floor = min(floor(run, args.chunk_shots) for _ in range(max(1, args.repeat)))
        rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        t_a = {}
        for th in [int(x) for x in args.threads.split(",")]:
            best = (float("inf"), float("inf"))
            for _ in range(max(1, args.repeat)):
                t = _clock()
                lm = measure_run(run, method, chunk_shots=args.chunk_shots, threads=th)
                best = min(best, _since(t))
            t_a[th] = best
        rss_a = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        # (b) on a subset of consecutive shots from the middle of the run
        s0 = n // 2
        rows = np.arange(s0, min(n, s0 + args.subset))
        t_b, ib = user_loop(run, method, rows)
    ia = lm.shot_intensity[rows]
    rel = np.abs(ia - ib) / np.abs(ib)
    kb = rows.size
    print(
        f"run: {n} shots x {args.pixels} pixels, uint16, compression={args.compression}, "
        f"chunk {args.chunk_shots} shots, SNIP max_half_window={MAX_HALF_WINDOW}, {N_LINES} lines, "
        f"{os.cpu_count()} cpus, load average {os.getloadavg()[0]:.2f}, BLAS threads "
        f"{os.environ.get('OPENBLAS_NUM_THREADS')}"
    )
    print("                                wall s   shots/s (wall)    cpu s   shots/s (cpu)")
    rows_out = [(f"(a) compquant, {th} thread{'s' if th > 1 else ' '}", tt, n) for th, tt in t_a.items()]
    rows_out += [("(b) per-spectrum loop      ", t_b, kb), ("(c) floor (read + sum)     ", t_floor, n)]
    for name, tt, k in rows_out:
        print(f"{name} : {tt[0]:8.2f} {k / tt[0]:14.0f}   {tt[1]:8.2f} {k / tt[1]:12.0f}")
    print(f"(b) measured on {kb} shots, scaled per shot")
    for th, ta in t_a.items():
        print(f"(a, {th} thread{'s' if th > 1 else ''}):")
        print(f"  a/b speed-up, wall     : {(n / ta[0]) / (kb / t_b[0]):8.1f} x   (target >= 30)")
        print(f"  a/floor time, wall     : {ta[0] / t_floor[0]:8.2f}     (target <= 4)")
        print(f"  a/b speed-up, cpu      : {(n / ta[1]) / (kb / t_b[1]):8.1f} x")
        print(f"  a/floor time, cpu      : {ta[1] / t_floor[1]:8.2f}")
    print(f"max |a-b|/|b|          : {rel.max():.2e}   (target <= 1e-6)")
    peak_gb = rss_a * 1024 / 1e9 if sys.platform != "darwin" else rss_a / 1e9
    print(f"peak RSS after (a)     : {peak_gb:8.3f} GB (before (a): {rss0 * 1024 / 1e9:.3f} GB; target <= 1.5)")
    print(f"shots rejected by QC   : {int((~lm.shot_accepted).sum())}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
