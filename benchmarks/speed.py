"""Benchmark: line measurement against the per-spectrum loop, the read floor and the decompression floor.

Usage::

    /work/venv/bin/python benchmarks/speed.py [--shots 50000] [--pixels 4096] [--subset 2000]
        [--compression gzip|none] [--repeat 2] [--dir /tmp/compquant-bench]

Makes (once, then reuses; never committed) the synthetic run of ``benchmarks/preprocess.py``
(uint16 counts, 20 samples, 20 lines, dark frames, response) and measures, in ONE process,
so that every figure is a ratio against a baseline measured under the same machine load:

(loop)   the per-spectrum loop a user would write (pybaselines ``smooth.snip``, ``np.interp``
         + ``np.trapezoid`` per line, least-squares side background), on ``--subset`` shots;
(read)   the read floor: ``Run.read_raw`` chunk by chunk through h5py, one thread, plus one
         NumPy pass over the counts (a per-shot sum);
(inflate) the decompression floor: the stored chunks read directly and inflated
         (compquant.run.fastread), one thread and one per core;
(a)      ``measure_run`` with the NumPy kernel and h5py reads (the path before issue 22);
(b)      ``measure_run`` with the NumPy kernel and threaded decompression;
(c)      ``measure_run`` with the compiled kernel and threaded decompression (the default; on an
         uncompressed run the default splits each chunk over every core, and (c1) is the same
         with one thread);
(lines)  the chunk function alone at 10, 50 and 200 lines, NumPy and compiled, and the
         compiled kernel in float32;
(stages) (c) once more, with the CPU time of each stage (reads, chunk function, line table, the
         rest) taken in the thread that ran it.

Every row prints wall and CPU time per shot and the CPU share ``cpu / wall`` the process got;
the load average is printed before and after each measurement.  Goals (issue 22): (c) >= 50x
the loop; (c) <= 1.5x the read floor (gzip) / 3x (uncompressed); identical numbers.
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
sys.path.insert(0, str(Path(__file__).resolve().parent))

from preprocess import bench_method, make_run, user_loop  # noqa: E402

from compquant.lines import compiled  # noqa: E402
from compquant.method import method_from_dict  # noqa: E402
from compquant.run import Run, fastread  # noqa: E402


def _load() -> str:
    return "/".join(f"{x:.1f}" for x in os.getloadavg())


class Timer:
    """Wall and process-CPU seconds of a block, with the load average around it."""

    def __enter__(self):
        self.load0 = _load()
        self.t = (time.perf_counter(), time.process_time())
        return self

    def __exit__(self, *exc):
        self.wall = time.perf_counter() - self.t[0]
        self.cpu = time.process_time() - self.t[1]
        self.load1 = _load()


def best(fn, repeat: int) -> Timer:
    out = None
    for _ in range(max(1, repeat)):
        with Timer() as t:
            fn()
        if out is None or t.wall < out.wall:
            out = t
    return out


def read_floor(run: Run, chunk: int) -> None:
    acc = 0.0
    for a in range(0, run.n_shots, chunk):
        acc += float(np.sum(run.read_raw(a, min(run.n_shots, a + chunk)), axis=1, dtype=np.float64).sum())


def inflate_floor(run: Run, chunk: int, threads: int) -> None:
    bounds = [(a, min(run.n_shots, a + chunk)) for a in range(0, run.n_shots, chunk)]
    for _a, _b, _raw in fastread.iter_raw(run, bounds, threads=threads):
        pass


def measure(run, method, chunk: int, kernel: str, direct: bool, threads: int | None = None):
    from compquant.lines import measure_run

    os.environ["COMPQUANT_KERNEL"] = kernel
    saved = fastread._layout
    if not direct:
        fastread._layout = lambda run: None  # h5py reads with one prefetch thread (the old path)
    try:
        return measure_run(run, method, chunk_shots=chunk, threads=threads)
    finally:
        fastread._layout = saved


def stages(run, method, chunk: int, threads: int | None = None) -> dict:
    """One default ``measure_run`` (compiled kernel, direct reads) with the CPU time of each stage
    taken in the thread that ran it (``time.thread_time``), in seconds: the reads (reader or inflater
    threads), the chunk function (kernel threads, or the main thread with one), the per-sample line
    table (shot QC and rows, ``_per_sample``), the rest of ``_aggregate`` (normalisation, frames,
    provenance) and whatever else ran; plus wall and process CPU time."""
    import threading

    from compquant.lines import _passes
    from compquant.lines import chunk as chunk_mod
    from compquant.lines import measure as measure_mod

    lock, acc = threading.Lock(), {}

    def timed(fn, key):
        def inner(*a, **k):
            t0 = time.thread_time()
            try:
                return fn(*a, **k)
            finally:
                with lock:
                    acc[key] = acc.get(key, 0.0) + time.thread_time() - t0

        return inner

    saved = [
        (fastread, "_read_into"),
        (fastread, "_decode_chunk"),
        (chunk_mod, "process_chunk"),
        (_passes, "process_chunk"),
        (measure_mod, "_per_sample"),
        (measure_mod, "_aggregate"),
    ]
    keys = ["read", "read", "kernel", "kernel", "line table", "aggregate"]
    originals = [getattr(m, name) for m, name in saved]
    os.environ["COMPQUANT_KERNEL"] = "auto"
    try:
        for (m, name), fn, key in zip(saved, originals, keys):
            setattr(m, name, timed(fn, key))
        with Timer() as t:
            measure_mod.measure_run(run, method, chunk_shots=chunk, threads=threads)
    finally:
        for (m, name), fn in zip(saved, originals):
            setattr(m, name, fn)
    acc["aggregate"] = acc.get("aggregate", 0.0) - acc.get("line table", 0.0)
    acc["other"] = t.cpu - sum(acc.values())
    return {"wall": t.wall, "cpu": t.cpu, **acc, "load": f"{t.load0} -> {t.load1}"}


def lines_scaling(run: Run, method, repeat: int) -> list[tuple]:
    """The chunk function on 4,096 shots with the method's 20 lines and 10 / 50 / 200 lines spread over the
    axis: (lines, kernel, precision, cpu us/shot, wall us/shot, relative differences to NumPy)."""
    from compquant.lines._setup import _Setup
    from compquant.lines.chunk import process_chunk
    from compquant.lines.windows import build_window_weights, support_mask, window_geometry

    setup = _Setup(run, method)
    raw = run.read_raw(0, min(run.n_shots, 4096))
    si = setup.sample_index[: raw.shape[0]]
    wl = setup.wl
    pitch = wl[1] - wl[0]
    out = []
    sets = [("20 (method)", setup.window_weights(0.0))]
    for n_lines in (10, 50, 200):  # spread over the axis, most of them on continuum only
        centres = np.linspace(wl[40], wl[-40], n_lines) + 0.37 * pitch
        ww = build_window_weights(wl, [window_geometry(c, 9 * pitch, 5 * pitch, 0.0) for c in centres])
        sets.append((str(n_lines), ww))
    for label, ww in sets:
        ref = None
        for kernel, precision in (("numpy", "float64"), ("compiled", "float64"), ("compiled", "float32")):
            if kernel == "compiled" and not compiled.available():
                continue
            plan = setup.base_plan()
            plan.W, plan.support = ww.W, support_mask(wl.size, ww.support)
            plan.kernel, plan.precision = kernel, precision
            process_chunk(raw[:32], si[:32], plan)  # compile / warm
            t = best(lambda plan=plan: process_chunk(raw, si, plan), repeat)
            got = process_chunk(raw, si, plan).window
            if ref is None:
                ref = got
            err = np.abs(got - ref)
            rel_value = float(np.max(err / np.abs(ref)))
            rel_scale = float(np.max(err / np.max(np.abs(ref), axis=0)))
            per_shot = 1e6 / raw.shape[0]
            out.append((label, kernel, precision, t.cpu * per_shot, t.wall * per_shot, rel_value, rel_scale))
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--shots", type=int, default=50_000)
    ap.add_argument("--pixels", type=int, default=4096)
    ap.add_argument("--subset", type=int, default=2000, help="shots measured by the per-spectrum loop")
    ap.add_argument("--compression", choices=("gzip", "none"), default="gzip")
    ap.add_argument("--dir", default="/tmp/compquant-bench")
    ap.add_argument("--chunk-shots", type=int, default=4096)
    ap.add_argument("--repeat", type=int, default=2)
    args = ap.parse_args(argv)
    folder = Path(args.dir)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"preprocess-{args.shots}x{args.pixels}-{args.compression}.h5"
    if not path.exists():
        make_run(path, args.shots, args.pixels, None if args.compression == "none" else "gzip")
    kern = "yes" if compiled.available() else "no (numba missing)"
    print(f"run {path.name}: {path.stat().st_size / 1e6:.0f} MB; {os.cpu_count()} cpus; "
          f"inflater {fastread.INFLATER}; compiled kernel {kern}")  # fmt: skip
    rows = {}
    with Run.open(path, memory_limit_bytes=4 * 1024**3) as run:
        method = method_from_dict(bench_method(run.wavelength))
        n, ch, rep = run.n_shots, args.chunk_shots, args.repeat
        read_floor(run, ch)  # page cache warm
        measure(run, method, ch, "auto", True)  # compile / load the kernel
        rows["read floor, h5py, 1 thread"] = (best(lambda: read_floor(run, ch), rep), n)
        rows["inflate floor, direct, 1 thread"] = (best(lambda: inflate_floor(run, ch, 1), rep), n)
        cores = os.cpu_count() or 1
        rows[f"inflate, direct, {cores} threads"] = (best(lambda: inflate_floor(run, ch, cores), rep), n)
        results = {}
        variants = [("a", "numpy", False, None), ("b", "numpy", True, None), ("c", "auto", True, None)]
        if args.compression == "none":  # the default uses every core there (measure_run threads=None)
            variants.append(("c1", "auto", True, 1))
        for key, kernel, direct, threads in variants:
            label = {"a": "(a) numpy kernel, h5py read", "b": "(b) numpy kernel, threaded inflate",
                     "c": "(c) compiled kernel, threaded inflate",
                     "c1": "(c1) compiled kernel, 1 thread"}[key]  # fmt: skip
            holder = {}

            def job(k=kernel, d=direct, h=holder, t=threads):
                h["r"] = measure(run, method, ch, k, d, t)

            rows[label] = (best(job, rep), n)
            results[key] = holder["r"]
        s0 = n // 2
        sub = np.arange(s0, min(n, s0 + args.subset))
        with Timer() as t_loop:
            _, loop_vals = user_loop(run, method, sub)
        rows["per-spectrum loop (pybaselines)"] = (t_loop, sub.size)
        scaling = lines_scaling(run, method, rep)
        split = stages(run, method, ch)
    os.environ.pop("COMPQUANT_KERNEL", None)
    print(f"{'':42s} {'wall us/shot':>12s} {'cpu us/shot':>12s} {'cpu/wall':>9s}   load before -> after")
    for name, (t, k) in rows.items():
        print(f"{name:42s} {t.wall / k * 1e6:12.1f} {t.cpu / k * 1e6:12.1f} {t.cpu / t.wall:9.2f}   "
              f"{t.load0} -> {t.load1}")  # fmt: skip

    def per(name, attr):
        t, k = rows[name]
        return getattr(t, attr) / k

    loop, floor = "per-spectrum loop (pybaselines)", "read floor, h5py, 1 thread"
    pairs = [("a", "(a) numpy kernel, h5py read"), ("c", "(c) compiled kernel, threaded inflate")]
    if "c1" in results:
        pairs.append(("c1", "(c1) compiled kernel, 1 thread"))
    for key, name in pairs:
        for attr in ("wall", "cpu"):
            speed = per(loop, attr) / per(name, attr)
            ratio = per(name, attr) / per(floor, attr)
            print(f"{key}: speed-up over the loop ({attr}) {speed:7.1f}x (goal >= 50); "
                  f"time / read floor ({attr}) {ratio:5.2f} (goal <= 1.5 gzip, 3 none)")  # fmt: skip
    a, c = results["a"].shot_intensity, results["c"].shot_intensity
    scale = np.nanmax(np.abs(a), axis=0)
    print(f"max |c - a| / line scale (compiled vs numpy, all shots): {np.nanmax(np.abs(c - a) / scale):.2e}")
    if "c1" in results:
        same = np.array_equal(np.asarray(c).view(np.int64), np.asarray(results["c1"].shot_intensity).view(np.int64))
        print(f"(c) default threads and (c1) one thread identical bit for bit: {same}")
    print(f"line tables (a) and (c) identical in flags and n_shots: "
          f"{results['a'].table[['flags', 'n_shots']].equals(results['c'].table[['flags', 'n_shots']])}")  # fmt: skip
    rel = np.abs(c[sub] - loop_vals) / np.abs(loop_vals)
    print(f"max |c - loop| / |loop| on the subset: {rel.max():.2e}")
    print("lines scaling, chunk function on 4,096 shots: cpu us/shot, wall us/shot, max |x - numpy| "
          "relative to the value / to the line's largest |value|")  # fmt: skip
    for label, kernel, prec, cpu, wall, rel_v, rel_s in scaling:
        print(f"  {label:>11s} lines  {kernel:8s} {prec:7s} {cpu:8.2f} {wall:8.2f}   {rel_v:.1e} / {rel_s:.1e}")
    print(
        "(c) once more, CPU per stage in the thread that ran it (us/shot): "
        + ", ".join(f"{k} {split[k] / n * 1e6:.1f}" for k in ("read", "kernel", "line table", "aggregate", "other"))
        + f"; process CPU {split['cpu'] / n * 1e6:.1f}, wall {split['wall'] / n * 1e6:.1f}; load {split['load']}"
    )
    print(f"load average at the end: {_load()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
