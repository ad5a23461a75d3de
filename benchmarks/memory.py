"""Benchmark: peak memory of line measurement against shots x lines (issue 22, item 4).

Usage::

    /work/venv/bin/python benchmarks/memory.py [--dir /tmp/compquant-mem] [--scale 1]
        [--keep] [--case 20|200|both] [--spill auto|on|off] [--step measure|calibrate]
        [--paths view|table|both]

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
``--step calibrate`` runs, after ``measure_run`` in the same child, the calibrate step as
``compquant calibrate`` does (calibrate, quantify, the per-shot CSV) on a run whose first six
samples are invented standards, once with the per-shot values read from ``lm.shot_view`` and
once from the whole long table ``lm.shots`` (the path before), and prints each peak, the growth
per shot x line of each and digests of the calibration + results and of the CSV (equal digests:
identical numbers and bytes).
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
N_STANDARDS = 6
PIXELS_PER_LINE = 16


def _content(s: int) -> float:
    """Invented analyte mass fraction of sample ``s`` (0.005 to 0.0185; matrix 0.9)."""
    return 0.005 + 0.0015 * s


def make_run(path: Path, n_shots: int, n_lines: int, standards: bool = False) -> np.ndarray:
    """Write the synthetic run in blocks (memory: one block); returns the line centres (nm).

    ``standards``: the first :data:`N_STANDARDS` samples are calibration standards (role
    ``standard``, reference ``S<k>``) and the first line's height is proportional to the sample's
    content of the analyte (:func:`_content`), for the calibrate step; otherwise every sample is
    an unknown and every line has the same height."""
    rng = np.random.default_rng(20261202)
    n_pix = PIXELS_PER_LINE * n_lines + 32
    wl = np.linspace(250.0, 250.0 + 0.02 * n_pix, n_pix)
    centres = wl[16 + PIXELS_PER_LINE * np.arange(n_lines) + PIXELS_PER_LINE // 2] + 0.003
    prof = np.zeros(n_pix)
    for c in centres:
        prof += np.exp(-0.5 * ((wl - c) / 0.025) ** 2)
    profs = np.repeat(prof[None, :], N_SAMPLES, axis=0)
    if standards:  # the analyte line scaled by the content relative to the middle one (0.01)
        first = np.exp(-0.5 * ((wl - centres[0]) / 0.025) ** 2)
        profs += (np.array([_content(s) for s in range(N_SAMPLES)]) / 0.01 - 1.0)[:, None] * first[None, :]
    per = n_shots // N_SAMPLES
    idx = np.minimum(np.arange(n_shots) // per, N_SAMPLES - 1)
    samples = [{"sample_id": f"M{s:02d}", "role": "standard" if standards and s < N_STANDARDS else "unknown",
                "standard_ref": f"S{s}" if standards and s < N_STANDARDS else "", "description": "memory benchmark"}
               for s in range(N_SAMPLES)]
    with RunWriter(path, wl, n_shots, samples, idx, dtype="uint16", saturation=65535, compression="gzip") as w:
        for start in range(0, n_shots, 8192):
            stop = min(n_shots, start + 8192)
            block_prof = profs[idx[start:stop]] if standards else prof[None, :]
            mean = 200.0 + 3000.0 * block_prof * rng.normal(1.0, 0.05, (stop - start, 1))
            noisy = mean + np.sqrt(mean) * rng.standard_normal(mean.shape, dtype=np.float32)
            w.write_spectra(start, np.clip(np.rint(noisy), 0, 65535).astype(np.uint16))
    return centres


def _method(centres: np.ndarray, calibrate: bool = False):
    from compquant.method import method_from_dict

    lines = [{"element": "Fe", "ion": 1, "wavelength_nm": float(round(c, 4))} for c in centres]
    if calibrate:  # the analyte (first line) and the matrix's internal-standard line (second)
        lines[0]["element"], lines[1]["element"] = "Zn", "Cu"
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


def _child_calibrate(path: str, centres, q, how: str, csv_path: str) -> None:
    """Measure, then the calibrate step as ``compquant calibrate`` runs it (calibrate, quantify,
    per-shot CSV) with the per-shot values from ``lm.shot_view`` (``how="view"``) or from the
    whole long table ``lm.shots`` (``how="table"``, the path before issue 22 item 4)."""
    import hashlib
    import warnings

    import pandas as pd

    from compquant.calibrate import calibrate, parse_calibration_section
    from compquant.calibrate.apply import quantify
    from compquant.cli._common import write_csv
    from compquant.cli.cmd_lines import write_shots_csv
    from compquant.lines import measure_run
    from compquant.run import Run

    warnings.simplefilter("ignore")  # invented lines: the internal-standard check warns, as it should
    method = _method(np.asarray(centres), calibrate=True)
    before = _hwm_bytes()
    with Run.open(path) as run:
        lm = measure_run(run, method)
        samples = run.samples
    measured = _hwm_bytes()
    standards = pd.DataFrame(
        [{"standard_id": f"S{s}", "matrix": "Cu", "element": el, "mass_fraction": w, "u": u, "U": 2 * u, "k": 2.0,
          "source": "invented"} for s in range(N_STANDARDS)
         for el, w, u in (("Zn", _content(s), 0.0002), ("Cu", 0.9, 0.002))]
    )
    cfg = parse_calibration_section({"basis": "ratio", "matrix_element": "Cu", "internal_standard": lm.line_ids[1],
                                     "analytes": [{"element": "Zn", "line": lm.line_ids[0], "model": "linear"}]})
    shots = lm.shot_view if how == "view" else lm.shots
    cal = calibrate(lm.table, standards, cfg, shot_table=shots, samples=samples, run_sha256="memory-benchmark")
    cal.created_utc = "2026-12-02T00:00:00Z"
    res = quantify((lm.table, shots, samples), cal, run_sha256="memory-benchmark").results
    if how == "view":
        write_shots_csv(lm, csv_path)
    else:
        write_csv(shots, csv_path)
    h = hashlib.sha256()
    with open(csv_path, "rb") as fh:
        for b in iter(lambda: fh.read(1 << 20), b""):
            h.update(b)
    os.unlink(csv_path)
    digest = hashlib.sha256((cal.to_json() + res.to_csv(float_format="%.17g")).encode()).hexdigest()
    q.put((before, measured, _hwm_bytes(), digest[:16], h.hexdigest()[:16], isinstance(lm.shot_intensity, np.memmap)))


def _calibrate_case(d: Path, n: int, n_lines: int, full_shots: int, spill: str, paths=("view", "table")) -> None:
    """The calibrate step at ``n // 4`` and ``n`` shots, per-shot values from the view and from
    the long table: peaks, growth per shot x line, identical numbers and CSV bytes."""
    grow, step, centres = {}, {}, {}
    for how in paths:
        peaks, adds = {}, {}
        for shots in (n // 4, n):
            path = d / f"mem-cal-{shots}x{n_lines}.h5"
            if shots not in centres:
                centres[shots] = make_run(path, shots, n_lines, standards=True)
            base, measured, peak, digest, csv_digest, spilled = _measure(
                path, centres[shots], spill, target=_child_calibrate, extra=(how, str(d / f"shots-{how}.csv")))
            peaks[shots], adds[shots] = peak, peak - measured
            print(f"  {how:>5}: {shots:>9,} shots x {n_lines:>3} lines: peak {peak / 2**20:7.0f} MiB "
                  f"(after measure_run {measured / 2**20:.0f} MiB, the step adds {(peak - measured) / 2**20:.0f} MiB; "
                  f"after imports {base / 2**20:.0f} MiB), "
                  f"{'spilled' if spilled else 'in memory'}; calibration+results {digest}, per-shot CSV {csv_digest}")
        grow[how] = (peaks[n] - peaks[n // 4]) / (n - n // 4)
        step[how] = (adds[n] - adds[n // 4]) / (n - n // 4)
        full = peaks[n] + grow[how] * (full_shots - n)
        print(f"  {how:>5}: growth {grow[how] / n_lines:.2f} B per shot x line (of the peak above measure_run's "
              f"{step[how] / n_lines:.2f} B); peak "
              f"{'measured' if n == full_shots else 'extrapolated'} at {full_shots:,} shots: {full / 1e9:.3f} GB")
    for shots in (n // 4, n):
        (d / f"mem-cal-{shots}x{n_lines}.h5").unlink(missing_ok=True)
    if len(grow) == 2:
        print(f"{full_shots:,} x {n_lines}, calibrate step: growth per shot x line, view / long table = "
              f"{grow['view'] / n_lines:.2f} / {grow['table'] / n_lines:.2f} B (of the peak above measure_run's: "
              f"{step['view'] / n_lines:.2f} / {step['table'] / n_lines:.2f} B)")


def _measure(path: Path, centres, spill: str = "auto", target=None, extra=()) -> tuple:
    if spill == "auto":
        os.environ.pop("COMPQUANT_SPILL_CELLS", None)
    else:
        os.environ["COMPQUANT_SPILL_CELLS"] = "0" if spill == "on" else str(2**62)
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=target or _child, args=(str(path), list(centres), q, *extra))
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
    ap.add_argument("--step", choices=("measure", "calibrate"), default="measure",
                    help="measure_run alone, or the calibrate step after it (view against long table)")
    ap.add_argument("--paths", choices=("view", "table", "both"), default="both",
                    help="calibrate step: per-shot values from the view, the long table or both")
    a = ap.parse_args(argv)
    d = Path(a.dir)
    d.mkdir(parents=True, exist_ok=True)
    print(f"load average {os.getloadavg()[0]:.1f}; scale {a.scale:g} of the issue's shot counts; spill {a.spill}; "
          f"step {a.step}")
    try:
        cases = [(2_000_000, 20), (200_000, 200)]
        for full_shots, n_lines in [c for c in cases if a.case in ("both", str(c[1]))]:
            n = int(full_shots * a.scale)
            if a.step == "calibrate":
                _calibrate_case(d, n, n_lines, full_shots, a.spill,
                                ("view", "table") if a.paths == "both" else (a.paths,))
                continue
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
