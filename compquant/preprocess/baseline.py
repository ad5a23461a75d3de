"""Baseline (continuum) removal, vectorised over many spectra.

Three published estimators, each a plain function over a 2-D array
``(n_shots, n_pixels)`` returning the baseline of every row, plus a small
scikit-learn transformer that subtracts it:

* :func:`snip` -- Statistics-sensitive Non-linear Iterative Peak clipping,
  Ryan, Clayton, Griffin, Sie & Cousens, Nucl. Instrum. Meth. B 34 (1988)
  396-402, with the LLS (log-log-square-root) transform of that paper and the
  decreasing-window variant of Morhac et al., Nucl. Instrum. Meth. A 401 (1997)
  113-132.  At clipping step ``p``::

      v_p[i] = min( v_{p-1}[i], (v_{p-1}[i-p] + v_{p-1}[i+p]) / 2 )

  The edges are padded by a straight line fitted to the first/last
  ``max_half_window`` pixels (the same padding as pybaselines'
  ``smooth.snip``), so results match that reference library to round-off.
  The work runs on blocks of rows small enough to stay in CPU cache.

* :func:`asls` -- asymmetric least squares, Eilers & Boelens (2005), "Baseline
  correction with asymmetric least squares smoothing".  Minimises
  ``sum_i w_i (y_i - z_i)^2 + lam * sum_i (Delta^d z_i)^2`` with
  ``w_i = p`` where ``y_i > z_i`` and ``1 - p`` otherwise, i.e. solves
  ``(W + lam D^T D) z = W y`` repeatedly.

* :func:`arpls` -- asymmetrically reweighted penalised least squares, Baek,
  Park, Ahn & Choo, Analyst 140 (2015) 250-257; same linear system, weights
  ``w_i = logistic(-2 (r_i - (-m + 2 s)) / s)`` with ``m, s`` the mean and
  standard deviation of the negative residuals ``r = y - z``.

The penalised systems are banded, symmetric and positive definite; they are
solved for all spectra at once by a banded Cholesky factorisation whose loop
runs over pixels while every arithmetic operation acts on all spectra
(:func:`solve_banded_spd_batch`).  Spectra converge independently and each
stops at its own iteration, as the single-spectrum reference does.

Units: the baseline has the units of the spectra (counts or radiance).
"""

from __future__ import annotations

import numpy as np
from scipy.special import expit
from sklearn.base import BaseEstimator, TransformerMixin

from compquant.errors import MethodError

#: rows per block in SNIP.  SNIP keeps two buffers of ``rows x (pixels + 2 M)`` float64: at
#: 16 rows and 4,096 pixels that is 2 x 0.5 MiB, inside a 2 MiB L2 cache with room for the
#: input block (64 rows, 6 MiB in all, overflowed it and ran 1.4-1.5x slower, same results).
SNIP_BLOCK_ROWS = 16


def _as_2d(spectra) -> tuple[np.ndarray, bool]:
    a = np.asarray(spectra, dtype=np.float64)
    if a.ndim == 1:
        return a[None, :], True
    if a.ndim != 2:
        raise ValueError("spectra must be 1-D or 2-D (n_shots, n_pixels)")
    return a, False


def lls_forward(y: np.ndarray) -> np.ndarray:
    """LLS transform of Ryan et al. (1988): ``v = ln(ln(sqrt(y + 1) + 1) + 1)``.

    Negative values (dark-subtracted noise) are clipped to 0 first, since the
    transform is defined for counts ``y >= 0``.
    """
    return np.log(np.log(np.sqrt(np.maximum(y, 0.0) + 1.0) + 1.0) + 1.0)


def lls_inverse(v: np.ndarray) -> np.ndarray:
    """Inverse LLS transform: ``y = (exp(exp(v) - 1) - 1)^2 - 1``."""
    return (np.exp(np.exp(v) - 1.0) - 1.0) ** 2 - 1.0


def _fill_padded(y: np.ndarray, pad: int, window: int, out: np.ndarray) -> None:
    """Write ``y`` into ``out[:, pad:pad+n]`` and pad each row with a straight line fitted by
    least squares to ``window`` edge pixels (``pybaselines.utils.pad_edges(mode="extrapolate")``).
    """
    n_rows, n = y.shape
    out[:, pad : pad + n] = y
    if pad == 0:
        return
    window = max(1, min(window, n))
    if window == 1:
        out[:, :pad] = y[:, :1]
        out[:, pad + n :] = y[:, -1:]
        return
    x = np.arange(window, dtype=np.float64)
    xm = x.mean()
    xc = x - xm
    sxx = float(xc @ xc)
    for side in ("left", "right"):
        seg = y[:, :window] if side == "left" else y[:, n - window :]
        ym = seg.mean(axis=1)
        slope = (seg @ xc) / sxx  # sum (x - xm)(y - ym) = sum (x - xm) y
        if side == "left":
            xe = np.arange(-pad, 0, dtype=np.float64) - xm
            out[:, :pad] = ym[:, None] + slope[:, None] * xe[None, :]
        else:
            xe = np.arange(window, window + pad, dtype=np.float64) - xm
            out[:, pad + n :] = ym[:, None] + slope[:, None] * xe[None, :]


class SnipWorkspace:
    """Reusable buffers for SNIP on blocks of at most ``rows`` spectra of ``n`` pixels."""

    def __init__(self, rows: int, n: int, max_half_window: int):
        self.m = min(int(max_half_window), (n - 1) // 2)
        self.n = n
        self.pad = np.empty((rows, n + 2 * self.m))
        self.tmp = np.empty((rows, n + 2 * self.m))


def snip_block(y: np.ndarray, ws: SnipWorkspace, *, decreasing: bool = False, lls: bool = False) -> np.ndarray:
    """SNIP baseline of the rows of ``y`` (at most ``ws`` rows); returns a view into ``ws``.

    The returned array is overwritten by the next call with the same workspace.
    """
    r, n = y.shape
    m = ws.m
    npad = n + 2 * m
    b = ws.pad[:r]
    t = ws.tmp[:r]
    _fill_padded(lls_forward(y) if lls else y, m, m, b)
    steps = range(m, 0, -1) if decreasing else range(1, m + 1)
    for p in steps:
        w = npad - 2 * p
        tv = t[:, :w]
        np.add(b[:, :w], b[:, 2 * p :], out=tv)
        tv *= 0.5
        np.minimum(b[:, p : npad - p], tv, out=b[:, p : npad - p])
    res = b[:, m : m + n]
    if lls:
        res[...] = lls_inverse(res)
    return res


def snip(
    spectra,
    max_half_window: int = 20,
    *,
    decreasing: bool = False,
    lls: bool = False,
    block_rows: int = SNIP_BLOCK_ROWS,
) -> np.ndarray:
    """SNIP baseline of every row (Ryan et al. 1988), second-order clipping filter.

    Parameters
    ----------
    spectra : array (n_shots, n_pixels) or (n_pixels,)
    max_half_window : int
        Largest clipping half-width ``M`` in pixels, about half the full width
        of the broadest peak (Ryan et al. 1988).  Clipping steps ``p = 1..M``
        (or ``M..1`` when ``decreasing``).
    lls : bool
        Apply the LLS transform before clipping and its inverse after
        (Ryan et al. 1988), which compresses the dynamic range of strong lines.
    block_rows : int
        Rows processed together (cache blocking; no effect on the result).

    Returns
    -------
    baseline : array of the input's shape, float64.
    """
    y2, squeeze = _as_2d(spectra)
    n_rows, n = y2.shape
    if int(max_half_window) < 1:
        raise ValueError("max_half_window must be >= 1")
    out = np.empty((n_rows, n))
    block_rows = max(1, min(int(block_rows), n_rows))
    ws = SnipWorkspace(block_rows, n, max_half_window)
    for r0 in range(0, n_rows, block_rows):
        r1 = min(n_rows, r0 + block_rows)
        out[r0:r1] = snip_block(y2[r0:r1], ws, decreasing=decreasing, lls=lls)
    return out[0] if squeeze else out


# --------------------------------------------------------------------------- Whittaker systems


def _difference_penalty_bands(n: int, d: int) -> np.ndarray:
    """Lower bands of ``D^T D`` for the d-th order difference matrix D ((n-d) x n).

    Returns ``bands`` of shape (d+1, n) with ``bands[k, j] = (D^T D)[j + k, j]``.
    """
    coef = np.array([(-1) ** (d - i) * _binom(d, i) for i in range(d + 1)], dtype=np.float64)
    bands = np.zeros((d + 1, n))
    # (D^T D)[a, b] = sum_r D[r, a] D[r, b], D[r, r + i] = coef[i]
    for r in range(n - d):
        for i in range(d + 1):
            for j in range(i, d + 1):
                a, b = r + j, r + i  # a >= b
                bands[a - b, b] += coef[i] * coef[j]
    return bands


def _binom(n: int, k: int) -> int:
    from math import comb

    return comb(n, k)


def solve_banded_spd_batch(diag: np.ndarray, lower: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve many symmetric positive definite banded systems at once.

    Each system ``s`` is ``A_s x_s = b_s`` with ``A_s = diag(diag[s]) + P``,
    where the shared part ``P`` has lower bands ``lower`` (shape (d+1, n), row
    ``k`` = k-th sub-diagonal, row 0 = main diagonal) and ``diag`` (n_sys, n)
    is added to the main diagonal.  Banded Cholesky ``A = L L^T`` (Golub & Van
    Loan, Matrix Computations, algorithm 4.3.5 "band Cholesky"), with the loop
    over the n pixels and every operation vectorised over the systems.
    """
    n_sys, n = diag.shape
    d = lower.shape[0] - 1
    # pixel-major copies, so that each step reads one contiguous row of n_sys values
    # L stored by bands: Lb[k][j] = L[j + k, j] (a vector over the systems)
    Lb = np.empty((d + 1, n, n_sys))
    A0 = np.ascontiguousarray(diag.T) + lower[0][:, None]
    for j in range(n):
        s = A0[j].copy()
        for k in range(1, min(d, j) + 1):
            s -= Lb[k, j - k] ** 2
        ljj = np.sqrt(s)
        Lb[0, j] = ljj
        for k in range(1, d + 1):
            if j + k >= n:
                break
            # L[j+k, j] = (A[j+k, j] - sum_{q<j} L[j+k, q] L[j, q]) / L[j, j]
            v = np.full(n_sys, lower[k][j])
            for q in range(max(0, j + k - d), j):
                v -= Lb[j + k - q, q] * Lb[j - q, q]
            Lb[k, j] = v / ljj
    b = np.ascontiguousarray(rhs.T)
    # forward: L y = b
    y = np.empty_like(b)
    for j in range(n):
        v = b[j].copy()
        for k in range(1, min(d, j) + 1):
            v -= Lb[k, j - k] * y[j - k]
        y[j] = v / Lb[0, j]
    # backward: L^T x = y
    x = np.empty_like(b)
    for j in range(n - 1, -1, -1):
        v = y[j].copy()
        for k in range(1, d + 1):
            if j + k < n:
                v -= Lb[k, j] * x[j + k]
        x[j] = v / Lb[0, j]
    return np.ascontiguousarray(x.T)


def _relative_difference(old: np.ndarray, new: np.ndarray) -> np.ndarray:
    """Row-wise ``||new - old|| / ||old||`` (the convergence test of pybaselines)."""
    num = np.linalg.norm(new - old, axis=1)
    den = np.maximum(np.linalg.norm(old, axis=1), np.finfo(float).eps)
    return num / den


def _whittaker_iterate(y2: np.ndarray, lam: float, diff_order: int, max_iter: int, tol: float, reweight) -> np.ndarray:
    n_rows, n = y2.shape
    if lam <= 0:
        raise ValueError("lam must be > 0")
    pen = _difference_penalty_bands(n, diff_order) * lam
    w = np.ones((n_rows, n))
    z = np.empty_like(y2)
    active = np.arange(n_rows)
    for _ in range(max_iter + 1):
        wa = w[active]
        za = solve_banded_spd_batch(wa, pen, wa * y2[active])
        z[active] = za
        new_w, stop_now = reweight(y2[active], za)
        diff = _relative_difference(wa, new_w)
        done = stop_now | (diff < tol)
        keep = ~done
        w[active[keep]] = new_w[keep]
        active = active[keep]
        if active.size == 0:
            break
    return z


def asls(
    spectra, lam: float = 1e6, p: float = 1e-2, *, diff_order: int = 2, max_iter: int = 50, tol: float = 1e-3
) -> np.ndarray:
    """Asymmetric least squares baseline of every row (Eilers & Boelens 2005).

    ``(W + lam D^T D) z = W y`` with ``w_i = p`` if ``y_i > z_i`` else ``1 - p``,
    iterated from ``w = 1`` until ``||w_new - w|| / ||w|| < tol`` (per row) or
    ``max_iter``.  ``lam`` is the smoothness (pixels^-2d scale), ``p`` the
    asymmetry (0.001-0.1 typical, Eilers & Boelens 2005).
    """
    if not 0 < p < 1:
        raise ValueError("p must be between 0 and 1")
    y2, squeeze = _as_2d(spectra)

    def reweight(y, z):
        return np.where(y > z, p, 1 - p), np.zeros(y.shape[0], dtype=bool)

    z = _whittaker_iterate(y2, lam, diff_order, max_iter, tol, reweight)
    return z[0] if squeeze else z


def arpls(spectra, lam: float = 1e5, *, diff_order: int = 2, max_iter: int = 50, tol: float = 1e-3) -> np.ndarray:
    """arPLS baseline of every row (Baek et al. 2015).

    Weights ``w_i = 1 / (1 + exp(2 (r_i - (2 s - m)) / s))`` with ``r = y - z``
    and ``m``, ``s`` the mean and sample standard deviation (ddof=1) of the
    negative residuals; a row stops when fewer than two residuals are negative
    (as in pybaselines) or the weights change by less than ``tol``.
    """
    y2, squeeze = _as_2d(spectra)

    def reweight(y, z):
        r = y - z
        neg = r < 0
        cnt = neg.sum(axis=1)
        stop = cnt < 2
        cntf = np.maximum(cnt, 2).astype(np.float64)
        rn = np.where(neg, r, 0.0)
        m = rn.sum(axis=1) / np.maximum(cnt, 1)
        var = (np.where(neg, (r - m[:, None]) ** 2, 0.0)).sum(axis=1) / (cntf - 1)
        s = np.sqrt(var)
        s = np.where(s > 0, s, np.finfo(float).eps)
        wts = expit(-(2.0 / s)[:, None] * (r - (2 * s - m)[:, None]))
        wts[stop] = 0.0
        return wts, stop

    z = _whittaker_iterate(y2, lam, diff_order, max_iter, tol, reweight)
    return z[0] if squeeze else z


BASELINE_METHODS = ("none", "snip", "asls", "arpls")


def estimate_baseline(spectra, method: str, **params) -> np.ndarray | None:
    """Dispatch to :func:`snip`, :func:`asls` or :func:`arpls`; ``None`` for ``"none"``."""
    if method == "none":
        return None
    if method == "snip":
        return snip(spectra, **params)
    if method == "asls":
        return asls(spectra, **params)
    if method == "arpls":
        return arpls(spectra, **params)
    raise MethodError(
        f"unknown baseline method {method!r}",
        where="[preprocess.baseline] method",
        fix=f"use one of {', '.join(BASELINE_METHODS)}",
    )


class BaselineRemoval(BaseEstimator, TransformerMixin):
    """scikit-learn step: subtract a SNIP / AsLS / arPLS baseline from every row.

    Parameters are those of :func:`snip` (``max_half_window``, ``decreasing``,
    ``lls``), :func:`asls` (``lam``, ``p``) or :func:`arpls` (``lam``).
    """

    def __init__(
        self,
        method: str = "snip",
        max_half_window: int = 20,
        decreasing: bool = False,
        lls: bool = False,
        lam: float = 1e6,
        p: float = 1e-2,
        diff_order: int = 2,
        max_iter: int = 50,
        tol: float = 1e-3,
    ):
        self.method = method
        self.max_half_window = max_half_window
        self.decreasing = decreasing
        self.lls = lls
        self.lam = lam
        self.p = p
        self.diff_order = diff_order
        self.max_iter = max_iter
        self.tol = tol

    def params_for_method(self) -> dict:
        if self.method == "snip":
            return {"max_half_window": self.max_half_window, "decreasing": self.decreasing, "lls": self.lls}
        if self.method == "asls":
            return {
                "lam": self.lam,
                "p": self.p,
                "diff_order": self.diff_order,
                "max_iter": self.max_iter,
                "tol": self.tol,
            }
        if self.method == "arpls":
            return {"lam": self.lam, "diff_order": self.diff_order, "max_iter": self.max_iter, "tol": self.tol}
        return {}

    def fit(self, X, y=None):
        return self

    def baseline(self, X) -> np.ndarray:
        X = np.asarray(X, dtype=np.float64)
        b = estimate_baseline(X, self.method, **self.params_for_method())
        return np.zeros_like(X) if b is None else b

    def transform(self, X):
        X = np.asarray(X, dtype=np.float64)
        return X - self.baseline(X)
