"""Benchmark: peak memory of line measurement against shots x lines (issue 22, item 4).

Usage::

    /work/venv/bin/python benchmarks/memory.py [--dir /tmp/compquant-mem] [--scale 1]
        [--keep] [--case 20|200|both] [--spill auto|on|off]

For each case (2,000,000 shots x 20 lines and 200,000 shots x 200 lines, times ``--scale``)
writes a synthetic gzip run (uint16 counts, 10 samples, one Gaussian line per line window
on a flat continuum with Poisson-like noise; invented data) and runs ``measure_run`` in a
fresh process at the full case size and at a quarter of it.  Prints the peak resident memory
of each child, the growth per shot between the two sizes, that growth per (shot x line) and its
ratio to the 8 bytes of the one float64 result array ``shot_intensity`` (plus 2 bytes of
per-shot flags: saturated and masked), and the peak at the full issue size (measured at
``--scale 1``, else extrapolated from the growth).  ``--spill`` sets ``COMPQUANT_SPILL_CELLS`` in
the children: ``auto`` (the default threshold), ``on`` (0: always spill the per-shot x per-line
arrays to a file, compquant.lines.shotstore), ``off`` (never).
The run files are deleted afterwards unless ``--keep``.  Goal (issue 22): <= 0.5 GB peak at
2 M shots x 20 lines and at 200 k x 200 lines.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import os
import shutil
import sys
from pathlib import Path

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from compquant.run import RunWriter  # noqa: E402

N_SAMPLES = 10
PIXELS_PER_LINE = 16


def make_run(path: Path, n_shots: int, n_lines: int) -> np.ndarray:
    """Write the synthetic run in blocks (memory: one block); returns the line centres (nm)."""
    rng = np.random.default_rng(20261202)
    n_pix = PIXELS_PER_LINE * n_lines + 32
    wl = np.linspace(250.0, 250.0 + 0.02 * n_pix, n_pix)
    centres = wl[16 + PIXELS_PER_LINE * np.arange(n_lines) + PIXELS_PER_LINE // 2] + 0.003
    prof = np.zeros(n_pix)
    for c in centres:
        prof += np.exp(-0.5 * ((wl - c) / 0.025) ** 2)
    per = n_shots // N_SAMPLES
    idx = np.minimum(np.arange(n_shots) // per, N_SAMPLES - 1)
    samples = [{"sample_id": f"M{s:02d}", "role": "unknown", "standard_ref": "", "description": "memory benchmark"}
               for s in range(N_SAMPLES)]
    with RunWriter(path, wl, n_shots, samples, idx, dtype="uint16", saturation=65535, compression="gzip") as w:
        for start in range(0, n_shots, 8192):
            stop = min(n_shots, start + 8192)
            mean = 200.0 + 3000.0 * prof[None, :] * rng.normal(1.0, 0.05, (stop - start, 1))
            noisy = mean + np.sqrt(mean) * rng.standard_normal(mean.shape, dtype=np.float32)
            w.write_spectra(start, np.clip(np.rint(noisy), 0, 65535).astype(np.uint16))
    return centres


def _method(centres: np.ndarray):
    from compquant.method import method_from_dict

    lines = [{"element": "Fe", "ion": 1, "wavelength_nm": float(round(c, 4))} for c in centres]
    return method_from_dict({
        "method": {"id": "memory-benchmark", "version": "1", "technique": "LIBS"},
        "preprocess": {"baseline": {"method": "snip", "max_half_window": 6}, "qc": {"k": 5.0, "min_fraction": 0.1}},
        "measure": {"mode": "window", "window_nm": 0.14, "side_nm": 0.06},
        "lines": lines,
    })


def _hwm_bytes() -> int:
    """Peak resident memory of this process image (VmHWM of /proc/self/status; unlike getrusage's
    ru_maxrss it is not carried over from the parent across fork + exec)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) * 1024
    raise RuntimeError("no VmHWM in /proc/self/status (Linux only)")


def _child(path: str, centres, q) -> None:
    from compquant.lines import measure_run
    from compquant.run import Run

    method = _method(np.asarray(centres))
    before = _hwm_bytes()
    with Run.open(path) as run:
        lm = measure_run(run, method)
    q.put((before, _hwm_bytes(), lm.shot_intensity.nbytes, int(lm.table["n_shots"].sum()),
           isinstance(lm.shot_intensity, np.memmap)))


def _measure(path: Path, centres, spill: str = "auto") -> tuple:
    if spill == "auto":
        os.environ.pop("COMPQUANT_SPILL_CELLS", None)
    else:
        os.environ["COMPQUANT_SPILL_CELLS"] = "0" if spill == "on" else str(2**62)
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_child, args=(str(path), list(centres), q))
    p.start()
    out = q.get()
    p.join()
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--dir", default="/tmp/compquant-mem")
    ap.add_argument("--scale", type=float, default=1.0, help="fraction of the issue's shot counts to run")
    ap.add_argument("--spill", choices=("auto", "on", "off"), default="auto", help="spill per-shot arrays to a file")
    ap.add_argument("--keep", action="store_true", help="keep the run files")
    ap.add_argument("--case", choices=("20", "200", "both"), default="both", help="lines: 20, 200 or both")
    a = ap.parse_args(argv)
    d = Path(a.dir)
    d.mkdir(parents=True, exist_ok=True)
    print(f"load average {os.getloadavg()[0]:.1f}; scale {a.scale:g} of the issue's shot counts; spill {a.spill}")
    try:
        cases = [(2_000_000, 20), (200_000, 200)]
        for full_shots, n_lines in [c for c in cases if a.case in ("both", str(c[1]))]:
            n = int(full_shots * a.scale)
            peaks = {}
            for shots in (n // 4, n):
                path = d / f"mem-{shots}x{n_lines}.h5"
                centres = make_run(path, shots, n_lines)
                base, peak, nbytes, accepted, spilled = _measure(path, centres, a.spill)
                peaks[shots] = peak
                print(f"  {shots:>9,} shots x {n_lines:>3} lines: peak {peak / 2**20:7.0f} MiB "
                      f"(after imports {base / 2**20:.0f} MiB), shot_intensity {nbytes / 2**20:.0f} MiB, "
                      f"{accepted:,} shot-lines accepted, {'spilled to a file' if spilled else 'in memory'}")
                path.unlink()
            grow = (peaks[n] - peaks[n // 4]) / (n - n // 4)
            per_cell = grow / n_lines
            full = peaks[n] + grow * (full_shots - n)
            how = "measured" if n == full_shots else "extrapolated"
            print(f"{full_shots:,} x {n_lines}: growth {grow:.0f} B/shot = {per_cell:.2f} B per shot x line "
                  f"= {per_cell / 10:.2f}x the 10 B of the result arrays; "
                  f"peak {how} at {full_shots:,} shots: {full / 1e9:.3f} GB (goal <= 0.5 GB: "
                  f"{'met' if full <= 0.5e9 else 'missed'})")
    finally:
        if not a.keep:
            shutil.rmtree(d, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
