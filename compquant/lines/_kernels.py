"""numba kernels of :mod:`compquant.lines.compiled` (imported only when numba is installed).

Module-level functions, so that numba caches their machine code on disk (``cache=True``).
"""

from __future__ import annotations

import numba
import numpy as np

jit = numba.njit(nogil=True, cache=True)

#: a reduction whose order may change (reassociation only): NaN stays NaN in any order
jit_finite = numba.njit(nogil=True, cache=True, fastmath={"reassoc"})


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
def clip_range(src, dst, p, g0, g1, s_base, d_base, half, safe):
    """SNIP clipping of half-width ``p`` for the global pixels ``g0 <= g < g1`` (padded indexing).

    ``dst[g - d_base] = min(src[g - s_base], (src[g - p - s_base] + src[g + p - s_base]) / 2)``;
    ``src`` and ``dst`` are distinct buffers (no read after write), sliced so that every index
    is a non-negative loop counter and the loop runs in SIMD instructions.  The selection is
    that of ``numpy.minimum(v, t)`` (the NumPy reference's call): ``v if v < t else t``, so a
    tie of ``-0.0`` and ``+0.0`` gives ``t`` as NumPy does; ``safe`` adds NumPy's NaN rule
    (``v != v`` also selects ``v``).  Without it the selection compiles to one ``vminpd``
    (x86's minimum is exactly ``v < t ? v : t``) instead of two comparisons and a blend; the
    two agree whenever ``v`` is not NaN, which the caller guarantees (finite rows).
    """
    w = g1 - g0
    if w <= 0:
        return
    bl = src[g0 - p - s_base : g0 - p - s_base + w]
    br = src[g0 + p - s_base : g0 + p - s_base + w]
    bm = src[g0 - s_base : g0 - s_base + w]
    cm = dst[g0 - d_base : g0 - d_base + w]
    if safe:
        for i in range(w):
            t = (bl[i] + br[i]) * half  # half = 0.5 in the buffers' precision
            v = bm[i]
            cm[i] = v if (v < t or v != v) else t  # as numpy.minimum(v, t): a NaN propagates
    else:
        for i in range(w):
            t = (bl[i] + br[i]) * half
            v = bm[i]
            cm[i] = v if v < t else t


@jit
def clip_tiled(b, out, m, decreasing, half, u, v, tile, safe):
    """All SNIP clipping steps of the padded row ``b``; the clipped values of ``b[m:npad-m]`` go
    to ``out[m:npad-m]`` (``out`` the size of ``b``, another buffer).

    Temporal tiling (cache blocking over the steps): the output is made in tiles of ``tile``
    pixels; a tile's final values depend on the inputs within ``H = sum(p)`` pixels of it,
    so that range is copied through all the steps in the two small buffers ``u`` / ``v``
    (``tile + 2H`` values each, inside the L1 cache) instead of streaming the whole row
    through L2 once per step.  In each step the range of valid values shrinks by ``p`` on
    each side, except at the row's ends, where the first and last ``p`` values are copied
    unchanged (as the untiled filter).  Every pixel gets the same expression from the same
    operands as in the untiled filter, so the result is identical bit for bit; the tiles'
    overlaps are computed twice (about ``H / tile`` more work).
    """
    npad = b.shape[0]
    h = m * (m + 1) // 2
    for a in range(m, npad - m, tile):
        e = min(a + tile, npad - m)
        lo = max(0, a - h)
        hi = min(npad, e + h)
        src = b
        s_base = 0
        vlo = lo
        vhi = hi
        for s in range(m):
            p = m - s if decreasing else s + 1
            if s == m - 1:  # the last step: only the tile itself, straight into the output
                clip_range(src, out, p, a, e, s_base, 0, half, safe)
                break
            nlo = 0 if vlo == 0 else vlo + p
            nhi = npad if vhi == npad else vhi - p
            dst = u if s % 2 == 0 else v
            for g in range(nlo, min(p, nhi)):  # row ends: copied unchanged
                dst[g - lo] = src[g - s_base]
            for g in range(max(npad - p, nlo), nhi):
                dst[g - lo] = src[g - s_base]
            clip_range(src, dst, p, max(nlo, p), min(nhi, npad - p), s_base, lo, half, safe)
            src = dst
            s_base = lo
            vlo = nlo
            vhi = nhi


#: output pixels per tile of :func:`clip_tiled`: two buffers of ``TILE + 2H`` float64 values
#: (17 KiB each at SNIP half-window 10) stay in the 48 KiB L1 data cache
TILE = 2048


@jit
def tile_plan(npad, m):
    """``(tile, buffer length)`` of :func:`clip_tiled` for a padded row of ``npad`` values: tiles
    of :data:`TILE` pixels, or one tile (the whole row) when the halo makes tiles no cheaper."""
    nt = TILE + m * (m + 1)
    if nt >= npad:
        return npad, npad
    return TILE, nt


@jit_finite
def all_finite(b):
    """True when every value is finite (``sum(x * 0)`` is NaN exactly when one is not)."""
    acc = 0.0
    for i in range(b.shape[0]):
        acc += b[i] * 0.0
    return acc == 0.0


@jit
def edge_design(m, n):
    """Centred abscissae ``xc = k - xm`` (k = 0 .. w-1, ``w = max(1, min(m, n))``), their centre
    ``xm`` and ``sxx = sum(xc**2)``: the least-squares straight line through the ``w`` pixels at
    each end of a row, used to extend the row past its ends before SNIP."""
    window = max(1, min(m, n))
    xm = (window - 1) / 2.0
    xc = np.empty(window)
    sxx = 0.0
    for k in range(window):
        xc[k] = k - xm
        sxx += xc[k] * xc[k]
    return xc, xm, sxx


@jit
def snip_row(y, b, c, m, decreasing, lls, xc, xm, sxx, half, u, v, tile):
    """SNIP baseline of ``y`` left in ``c[m:m+n]`` (or ``b[m:m+n]`` when there are no steps);
    returns that buffer.  ``u`` / ``v``: tile buffers of at least ``min(npad, tile + m (m + 1))``
    values (:func:`tile_plan`)."""
    n = y.shape[0]
    for i in range(n):
        val = y[i]
        if lls:
            val = np.log(np.log(np.sqrt(max(val, 0.0) + 1.0) + 1.0) + 1.0)
        b[m + i] = val
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
    if m == 0:
        return b
    # finite values keep every clipping step free of NaN (a sum of finite values may overflow
    # to +-inf, never to NaN: +inf never enters the buffers, min(v, +inf) = v), so the
    # one-instruction minimum gives the NaN-safe selection's values; NaN or inf: the safe one
    clip_tiled(b, c, m, decreasing, half, u, v, tile, not all_finite(b))
    return c


@jit
def snip_rows(ys, out, m, decreasing, lls, tile):
    """The kernel's SNIP baseline (before the inverse LLS transform) of every row of ``ys`` into
    ``out``, with tiles of ``tile`` pixels (for tests and benchmarks)."""
    n = ys.shape[1]
    xc, xm, sxx = edge_design(m, n)
    b = np.empty(n + 2 * m)
    c = np.empty(n + 2 * m)
    nt = max(1, min(n + 2 * m, tile + m * (m + 1)))
    u = np.empty(nt)
    v = np.empty(nt)
    for r in range(ys.shape[0]):
        base = snip_row(ys[r], b, c, m, decreasing, lls, xc, xm, sxx, 0.5, u, v, tile)
        out[r] = base[m : m + n]


@jit
def clip_padded_rows(b, out, m, decreasing, tile, safe):
    """:func:`clip_tiled` on every padded row of ``b`` (for tests); ``out[r, m:npad-m]`` written."""
    npad = b.shape[1]
    nt = max(1, min(npad, tile + m * (m + 1)))
    u = np.empty(nt)
    v = np.empty(nt)
    for r in range(b.shape[0]):
        clip_tiled(b[r], out[r], m, decreasing, 0.5, u, v, tile, safe)


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
    tile, nt = tile_plan(npx + 2 * m, m)
    u0 = np.empty(nt, proto.dtype)
    v0 = np.empty(nt, proto.dtype)
    msk = np.zeros(npx, np.bool_)
    nxt = np.empty(npx, np.int64)
    sat_row = np.zeros(npx, np.bool_)
    xc, xm, sxx = edge_design(m, npx)
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
            base = snip_row(y, b0, c0, m, decreasing, lls, xc, xm, sxx, proto[0], u0, v0, tile)
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
