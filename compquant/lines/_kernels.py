"""numba kernels of :mod:`compquant.lines.compiled` (imported only when numba is installed).

Module-level functions, so that numba caches their machine code on disk (``cache=True``).
"""

from __future__ import annotations

import numba
import numpy as np

jit = numba.njit(nogil=True, cache=True)


@jit
def repair_masked(y, msk, nxt):
    """Replace masked pixels by the straight line between the nearest unmasked neighbours."""
    n = y.shape[0]
    j = -1
    for i in range(n - 1, -1, -1):  # nxt[i]: first unmasked pixel >= i
        if not msk[i]:
            j = i
        nxt[i] = j
    last = -1
    for i in range(n):
        if not msk[i]:
            last = i
            continue
        r = nxt[i]
        if last >= 0 and r >= 0:
            slope = (y[r] - y[last]) / np.float64(r - last)
            y[i] = slope * np.float64(i - last) + y[last]
        elif last >= 0:
            y[i] = y[last]
        elif r >= 0:
            y[i] = y[r]
        else:
            y[i] = 0.0


@jit
def clip_step(b, c, p, half):
    """One SNIP clipping step of half-width ``p`` from buffer ``b`` into buffer ``c``."""
    npad = b.shape[0]
    for i in range(p):
        c[i] = b[i]
        c[npad - 1 - i] = b[npad - 1 - i]
    # slices, so that every index is a non-negative loop counter: numba then drops its
    # negative-index checks and the loop runs in SIMD instructions (a separate function,
    # so that the compiler sees b and c as two arrays)
    w = npad - 2 * p
    bl = b[:w]
    br = b[2 * p :]
    bm = b[p : npad - p]
    cm = c[p : npad - p]
    for i in range(w):
        t = (bl[i] + br[i]) * half  # half = 0.5 in the buffers' precision
        v = bm[i]
        cm[i] = t if (t < v or t != t) else v  # as numpy.minimum: a NaN propagates


@jit
def snip_row(y, b, c, m, decreasing, lls, xc, xm, sxx, half):
    """SNIP baseline of ``y`` left in ``b[m:m+n]`` or ``c[m:m+n]``; returns that buffer."""
    n = y.shape[0]
    for i in range(n):
        v = y[i]
        if lls:
            v = np.log(np.log(np.sqrt(max(v, 0.0) + 1.0) + 1.0) + 1.0)
        b[m + i] = v
    window = max(1, min(m, n))
    if m > 0:
        if window == 1:
            for k in range(m):
                b[k] = b[m]
                b[m + n + k] = b[m + n - 1]
        else:
            for side in range(2):
                s0 = m if side == 0 else m + n - window
                tot = 0.0
                dot = 0.0
                for k in range(window):
                    tot += b[s0 + k]
                    dot += b[s0 + k] * xc[k]
                ym = tot / window
                slope = dot / sxx
                for k in range(m):
                    if side == 0:
                        b[k] = ym + slope * (np.float64(k - m) - xm)
                    else:
                        b[m + n + k] = ym + slope * (np.float64(window + k) - xm)
    for s in range(m):
        clip_step(b, c, m - s if decreasing else s + 1, half)
        b, c = c, b
    return b


#: sums whose order may be changed (reassociation only: no NaN/Inf assumptions, no fused
#: multiply-add), so that they run in SIMD lanes; the result moves by round-off only
jit_sum = numba.njit(nogil=True, cache=True, fastmath={"reassoc"})


@jit
def load_row(raw_row, dark, inv, y):
    """``y = (raw - dark) * inv`` in float64 arithmetic (dark / inv empty: not applied)."""
    n = y.shape[0]
    hd = dark.shape[0] == n
    hr = inv.shape[0] == n
    if hd and hr:
        for i in range(n):
            y[i] = (np.float64(raw_row[i]) - dark[i]) * inv[i]
    elif hd:
        for i in range(n):
            y[i] = np.float64(raw_row[i]) - dark[i]
    elif hr:
        for i in range(n):
            y[i] = np.float64(raw_row[i]) * inv[i]
    else:
        for i in range(n):
            y[i] = raw_row[i]


@jit_sum
def subtract_baseline(y, base, lls):
    """``y -= baseline`` (the inverse LLS transform first when ``lls``); returns the baseline's sum."""
    tot = 0.0
    if lls:
        for i in range(y.shape[0]):
            e = np.exp(np.exp(base[i]) - 1.0) - 1.0
            bb = e * e - 1.0
            tot += bb
            y[i] = y[i] - bb
    else:
        for i in range(y.shape[0]):
            bb = base[i]
            tot += bb
            y[i] = y[i] - bb
    return tot


@jit_sum
def dot(y, t):
    acc = 0.0
    for i in range(y.shape[0]):
        acc += y[i] * t[i]
    return acc


#: the fixed grid of :mod:`compquant.exactsum` (the same constants: the two paths give the same sums)
_C1 = 1.5 * 2.0**52
_C2 = 1.5 * 2.0 ** (52 - 40)
_LIMIT = 2.0**39
_LO_SCALE = 2.0**40


@jit
def add_row(s1, s2, rest, y):
    """Add ``y`` to the exact per-sample sums (:class:`compquant.exactsum.FixedPointSum`).

    Each value is rounded on its own, ``q1 = (x + C1) - C1`` (an integer), ``r = x - q1``,
    ``q2 = (r + C2) - C2`` (on the grid 2**-40) -- numba compiles without fast-math here, so
    these are kept as written -- and ``q1``, ``q2`` are added to the float blocks ``s1``,
    ``s2`` (exact while fewer than ``BLOCK_ROWS`` rows are in them); values ``|x| >= 2**39``
    and non-finite ones go to the float channel ``rest`` (``x - xs``: 0 for the others).
    Branch-free, so that the loop runs in SIMD instructions.
    """
    for i in range(y.shape[0]):
        x = np.float64(y[i])
        xs = x if abs(x) < _LIMIT else 0.0  # NaN fails the test
        q1 = (xs + _C1) - _C1
        r = xs - q1
        s1[i] += q1
        s2[i] += (r + _C2) - _C2
        rest[i] += x - xs


@jit
def flush_sums(s1, s2, hi, lo):
    """Move the exact float blocks into the int64 accumulators and clear them."""
    for i in range(s1.shape[0]):
        hi[i] += np.int64(s1[i])
        lo[i] += np.int64(s2[i] * _LO_SCALE)
        s1[i] = 0.0
        s2[i] = 0.0


@jit
def saturated_row(raw_row, thr, msk, nm, sat_row):
    """Mark ``raw >= thr`` (masked pixels excepted) in ``sat_row``; True when any is."""
    hi = raw_row[0]
    for i in range(raw_row.shape[0]):
        hi = max(hi, raw_row[i])
    if not hi >= thr:
        return False
    found = False
    for i in range(raw_row.shape[0]):
        sv = raw_row[i] >= thr and not (nm > 0 and msk[i])
        sat_row[i] = sv
        found = found or sv
    return found


@jit
def kernel(
    raw, slot, op_of_row, dark, inv_resp, sat_thr, use_sat, mask_run, mask_rows,
    m, decreasing, lls, do_base, want_bg, accumulate, tw,
    idx, w, cnt, defined, sidx, scnt, proto,
    vals, satf, maskf, total, bg, s1, s2, hi, lo, rest, block_rows,
):  # fmt: skip
    n, npx = raw.shape
    n_lines = cnt.shape[1]
    has_mrun = mask_run.shape[0] == npx
    has_mrow = mask_rows.shape[0] == n and mask_rows.shape[1] == npx
    y = np.empty(npx, proto.dtype)
    b0 = np.empty(npx + 2 * m, proto.dtype)
    c0 = np.empty(npx + 2 * m, proto.dtype)
    msk = np.zeros(npx, np.bool_)
    nxt = np.empty(npx, np.int64)
    sat_row = np.zeros(npx, np.bool_)
    window = max(1, min(m, npx))
    xm = (window - 1) / 2.0
    xc = np.empty(window)
    sxx = 0.0
    for k in range(window):
        xc[k] = k - xm
        sxx += xc[k] * xc[k]
    any_sat = False
    any_mask = False
    in_block = np.zeros(s1.shape[0], np.int64)  # rows in each sample's float blocks
    for r in range(n):
        load_row(raw[r], dark, inv_resp, y)
        nm = 0
        if has_mrun or has_mrow:
            for i in range(npx):
                mk = (has_mrun and mask_run[i]) or (has_mrow and mask_rows[r, i])
                msk[i] = mk
                nm += mk
            if nm:
                repair_masked(y, msk, nxt)
                any_mask = True
        rs = use_sat and saturated_row(raw[r], sat_thr, msk, nm, sat_row)
        any_sat = any_sat or rs
        if do_base:
            base = snip_row(y, b0, c0, m, decreasing, lls, xc, xm, sxx, proto[0])
            bsum = subtract_baseline(y, base[m : m + npx], lls)
            bg[r] = bsum / npx if want_bg else 0.0
        else:
            bg[r] = 0.0
        total[r] = dot(y, tw)
        if accumulate:
            k = slot[r]
            add_row(s1[k], s2[k], rest[k], y)
            in_block[k] += 1
            if in_block[k] == block_rows:
                flush_sums(s1[k], s2[k], hi[k], lo[k])
                in_block[k] = 0
        o = op_of_row[r]
        for j in range(n_lines):
            if not defined[o, j]:
                vals[r, j] = np.nan
                continue
            acc = 0.0
            for k in range(cnt[o, j]):
                acc += w[o, j, k] * y[idx[o, j, k]]
            fs = False
            fm = False
            if nm > 0 or rs:
                for k in range(scnt[o, j]):
                    q = sidx[o, j, k]
                    if nm > 0 and msk[q]:
                        fm = True
                    if rs and sat_row[q]:
                        fs = True
            vals[r, j] = np.nan if fm else acc
            satf[r, j] = fs
            maskf[r, j] = fm
    if accumulate:
        for k in range(s1.shape[0]):
            flush_sums(s1[k], s2[k], hi[k], lo[k])
    return any_sat, any_mask
