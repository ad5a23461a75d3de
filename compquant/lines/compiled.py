"""The compiled one-pass kernel of :func:`compquant.lines.chunk.process_chunk` (numba).

The NumPy path of :mod:`compquant.lines.chunk` is the reference; this module computes the
same per-shot results with one loop per spectrum, so that the spectrum stays in the CPU
cache from the raw counts to the line intensities:

1. ``y = (raw - dark) * (1 / response)`` (float64 arithmetic), masked pixels replaced by
   the straight line between their nearest unmasked neighbours (pixel-index
   interpolation, the formula of ``numpy.interp``), saturated pixels ``raw >= level``
   noted (masked pixels excepted);
2. SNIP baseline (Ryan et al., Nucl. Instrum. Meth. B 34 (1988) 396-402; decreasing
   window of Morhac et al., Nucl. Instrum. Meth. A 401 (1997) 113-132) with the
   straight-line edge padding of :func:`compquant.preprocess.baseline.snip`; each clipping
   step ``v_p[i] = min(v_{p-1}[i], (v_{p-1}[i-p] + v_{p-1}[i+p]) / 2)`` writes a second
   buffer (the two buffers swap), so every step reads only the previous one;
3. the mean removed baseline, ``y - baseline``, the total emission ``y . t`` and the
   per-sample sums, exact and order-free like the NumPy path's
   (:class:`compquant.exactsum.FixedPointSum`: every value pre-rounded to the same fixed
   grid, integer and fraction parts added in float blocks of at most ``BLOCK_ROWS`` rows,
   then moved to int64; non-finite or huge values in a float channel), so both paths,
   any chunking and any worker count give the same sums for the same spectra;
4. every line as ``sum_k w_k y[p_k]`` over its own pixels (sparse, per line), NaN with a
   flag where a masked pixel touches the line, a saturation flag where a saturated one does.

Precision: ``float64`` (default) gives the NumPy path's numbers to round-off (the tests
hold them within 1e-12 relative); ``float32`` keeps the spectrum and the SNIP buffers in
single precision (sums and integrals still accumulate in float64), which moves line
intensities by about 1e-7 relative (stated in docs/performance.md).

numba is optional (``pip install compquant[fast]``): :func:`available` says whether it
imports; the kernel is compiled on first use per input dtype and cached on disk.
"""

from __future__ import annotations

import numpy as np

from compquant.exactsum import BLOCK_ROWS, FixedPointSum

_KERNEL = None
_IMPORT_ERROR: str | None = None


def available() -> bool:
    """True when numba imports (the compiled kernel can be used)."""
    return _kernel() is not None


def _kernel():
    global _KERNEL, _IMPORT_ERROR
    if _KERNEL is None and _IMPORT_ERROR is None:
        try:
            _KERNEL = _build()
        except ImportError as exc:  # numba not installed: the NumPy path is used
            _IMPORT_ERROR = str(exc)
    return _KERNEL


def _build():
    from compquant.lines._kernels import kernel

    return kernel


def warm(dtypes=("uint16",)) -> bool:
    """Load the kernel's machine code for raw counts of each of ``dtypes`` now (float64 precision).

    numba loads (or compiles) a signature's machine code on its first call, about 0.2-0.3 s of
    CPU per process; a Dask worker would pay it inside its first task.  Calling this when a
    process starts (:func:`compquant.parallel.open_executor` does, on every local worker) moves
    that cost out of the measurement, as the serial path's process pays it once at its first
    chunk.  Returns False when numba is missing (nothing to load).
    """
    if _kernel() is None:
        return False
    from compquant.lines.chunk import ChunkPlan, process_chunk

    plan = ChunkPlan(n_pixels=16, baseline="snip", baseline_params={"max_half_window": 2}, kernel="compiled")
    for dt in dtypes:
        process_chunk(np.ones((2, 16), dtype=np.dtype(dt)), np.zeros(2, dtype=np.int64), plan)
    return True


def snip_baseline(spectra, max_half_window: int = 20, *, decreasing: bool = False, tile: int | None = None):
    """The compiled kernel's SNIP baseline of every row of ``spectra`` (float64), as in the chunk kernel.

    The same edge padding as :func:`compquant.preprocess.baseline.snip` (a least-squares
    straight line through ``m`` edge pixels), then the clipping steps of
    :func:`compquant.preprocess.baseline.clip_padded`,
    ``v_p[i] = min(v_{p-1}[i], (v_{p-1}[i-p] + v_{p-1}[i+p]) / 2)``, in tiles of ``tile`` pixels
    (default :data:`compquant.lines._kernels.TILE`; the result does not depend on it).
    For tests and benchmarks; the chunk kernel calls the same machine code per shot.

    References
    ----------
    Ryan, C. G. et al. (1988). Nucl. Instrum. Meth. B 34, 396-402 (SNIP).
    """
    if _kernel() is None:
        raise RuntimeError(f"the compiled kernel needs numba ({_IMPORT_ERROR})")
    from compquant.lines import _kernels

    y = np.ascontiguousarray(np.atleast_2d(spectra), dtype=np.float64)
    n = y.shape[1]
    m = min(int(max_half_window), (n - 1) // 2)
    out = np.empty_like(y)
    _kernels.snip_rows(y, out, m, bool(decreasing), False, int(tile or _kernels.TILE))
    return out[0] if np.ndim(spectra) == 1 else out


def run_kernel(raw, slot, op_of_row, geo: dict, ops, n_slots: int, precision: str = "float64") -> dict:
    """Run the compiled kernel on one block of shots; returns the per-shot arrays and sums.

    ``geo`` holds the preprocessing settings (arrays, empty when unused), ``ops`` the
    per-line operators stacked over samples (:class:`compquant.lines.chunk.StackedOperators`).
    """
    kern = _kernel()
    if kern is None:
        raise RuntimeError(f"the compiled kernel needs numba ({_IMPORT_ERROR})")
    raw = np.ascontiguousarray(raw)
    n, npx = raw.shape
    n_lines = ops.cnt.shape[1]
    vals = np.empty((n, n_lines))
    satf = np.zeros((n, n_lines), dtype=bool)
    maskf = np.zeros((n, n_lines), dtype=bool)
    total = np.empty(n)
    bg = np.empty(n)
    ns = n_slots if geo["accumulate"] else 1
    s1, s2, rest = np.zeros((ns, npx)), np.zeros((ns, npx)), np.zeros((ns, npx))
    hi, lo = np.zeros((ns, npx), dtype=np.int64), np.zeros((ns, npx), dtype=np.int64)
    proto = np.full(1, 0.5, dtype=np.float32 if precision == "float32" else np.float64)
    any_sat, any_mask = kern(
        raw, slot, op_of_row, geo["dark"], geo["inv_resp"], geo["sat_thr"], geo["use_sat"], geo["mask_run"],
        geo["mask_rows"], geo["m"], geo["decreasing"], geo["lls"], geo["do_base"], geo["want_bg"],
        geo["accumulate"], geo["tw"], ops.idx, ops.w, ops.cnt, ops.defined, ops.sidx, ops.scnt, proto,
        vals, satf, maskf, total, bg, s1, s2, hi, lo, rest, BLOCK_ROWS,
    )  # fmt: skip
    sums = []
    if geo["accumulate"]:
        per = np.bincount(slot, minlength=n_slots)
        for k in range(n_slots):
            acc = FixedPointSum(npx)
            acc.hi, acc.lo, acc.n = hi[k], lo[k], int(per[k])
            # the float channel only where a value went there (as FixedPointSum.add_rows)
            acc.rest = None if np.all(rest[k] == 0.0) else rest[k]
            sums.append(acc)
    return {
        "vals": vals,
        "sat": satf if any_sat else None,
        "mask": maskf if any_mask else None,
        "total": total,
        "bg": bg,
        "sums": sums,
    }
