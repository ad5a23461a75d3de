"""Baseline (continuum) removal, vectorised over many spectra.

Three published estimators, each a plain function over a 2-D array
``(n_shots, n_pixels)`` returning the baseline of every row, chosen by name from the
registry :data:`BASELINES` (its docstring states what a new entry must meet):

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

The penalised systems are banded, symmetric and positive definite; each is
solved by LAPACK's banded Cholesky (:func:`scipy.linalg.solveh_banded`), O(n d^2)
per solve, with the penalty bands built once per call.  Spectra converge
independently and each stops at its own iteration, as the single-spectrum
reference (pybaselines) does.

Units: the baseline has the units of the spectra (counts or radiance).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from math import comb

import numpy as np
from scipy.linalg import get_lapack_funcs
from scipy.special import expit

from compquant.errors import MethodError
from compquant.settings import Setting

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
        slope = np.einsum("ij,j->i", seg, xc) / sxx  # sum (x - xm) y; einsum: the same per row for any row count
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


def clip_padded(b: np.ndarray, t: np.ndarray, m: int, *, decreasing: bool = False) -> None:
    """SNIP's clipping steps on the edge-padded rows ``b`` (in place; ``t`` a buffer of its shape).

    Step ``p`` (``p = 1..m``, or ``m..1`` when ``decreasing``; Ryan et al. 1988, Morhac et al.
    1997) sets, for ``p <= i < npad - p``,

        v_p[i] = min(v_{p-1}[i], (v_{p-1}[i - p] + v_{p-1}[i + p]) / 2),

    every new value from the previous step's values only (``(a + b) / 2`` is computed into
    ``t`` before the minimum is taken); the first and last ``p`` values are kept.  A NaN
    propagates (:func:`numpy.minimum`).  This is the reference of the compiled kernel's
    clipping (:func:`compquant.lines._kernels.clip_tiled`), which gives the same values bit for bit.

    References
    ----------
    Ryan, C. G. et al. (1988). SNIP, a statistics-sensitive background treatment for the
    quantitative analysis of PIXE spectra in geoscience applications. Nucl. Instrum. Meth. B
    34, 396-402.  Morhac, M. et al. (1997). Background elimination methods for
    multidimensional coincidence gamma-ray spectra. Nucl. Instrum. Meth. A 401, 113-132.
    """
    npad = b.shape[1]
    steps = range(m, 0, -1) if decreasing else range(1, m + 1)
    for p in steps:
        w = npad - 2 * p
        tv = t[:, :w]
        np.add(b[:, :w], b[:, 2 * p :], out=tv)
        tv *= 0.5
        np.minimum(b[:, p : npad - p], tv, out=b[:, p : npad - p])


def snip_block(y: np.ndarray, ws: SnipWorkspace, *, decreasing: bool = False, lls: bool = False) -> np.ndarray:
    """SNIP baseline of the rows of ``y`` (at most ``ws`` rows); returns a view into ``ws``.

    The returned array is overwritten by the next call with the same workspace.
    """
    r, n = y.shape
    m = ws.m
    b = ws.pad[:r]
    t = ws.tmp[:r]
    _fill_padded(lls_forward(y) if lls else y, m, m, b)
    clip_padded(b, t, m, decreasing=decreasing)
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

    Returns ``bands`` of shape (d+1, n) with ``bands[k, j] = (D^T D)[j + k, j]``, the
    lower banded storage of LAPACK (``scipy.linalg.solveh_banded(..., lower=True)``).
    With ``D[r, r + i] = c_i`` (``c_i = (-1)^(d-i) C(d, i)``),
    ``(D^T D)[b + k, b] = sum_r c_{b-r} c_{b-r+k}``: each pair ``(i, i + k)`` adds
    ``c_i c_{i+k}`` to the ``n - d`` entries ``b = r + i``, ``r = 0..n-d-1``.
    """
    coef = np.array([(-1) ** (d - i) * comb(d, i) for i in range(d + 1)], dtype=np.float64)
    bands = np.zeros((d + 1, n))
    m = n - d
    if m <= 0:
        return bands
    for k in range(d + 1):
        for i in range(d + 1 - k):
            bands[k, i : i + m] += coef[i] * coef[i + k]
    return bands


_PBSV = get_lapack_funcs("pbsv", dtype=np.float64)


def solve_whittaker(weights: np.ndarray, penalty: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve ``(diag(weights) + P) z = rhs`` for one spectrum, ``P`` given by its lower bands.

    The matrix is symmetric positive definite and banded (bandwidth d); LAPACK's banded
    Cholesky ``dpbsv`` (the routine behind :func:`scipy.linalg.solveh_banded`, called directly
    to save its checks; Golub & Van Loan, Matrix Computations, 4th ed., algorithm 4.3.5
    "band Cholesky") does it in O(n d^2).  ``rhs`` is left unchanged.
    """
    ab = penalty.copy()
    ab[0] += weights
    _, z, info = _PBSV(ab, rhs, lower=1, overwrite_ab=1, overwrite_b=0)
    if info != 0:  # not positive definite: only with non-finite data; no baseline then
        return np.full(rhs.shape, np.nan)
    return z


def _relative_difference(old: np.ndarray, new: np.ndarray) -> float:
    """``||new - old|| / ||old||`` of two weight vectors (the convergence test of pybaselines)."""
    d = new - old
    return float(np.sqrt(d @ d) / max(np.sqrt(old @ old), np.finfo(float).eps))


def _whittaker_iterate(y2: np.ndarray, lam: float, diff_order: int, max_iter: int, tol: float, reweight) -> np.ndarray:
    """Iterate the reweighted Whittaker smoother on each row, as pybaselines does for one spectrum:
    solve, reweight (``reweight(y, z) -> (new weights, stop)`` on 1-D rows), stop when
    ``||w_new - w|| / ||w|| < tol`` (or ``reweight`` says so) or after ``max_iter`` reweightings;
    the baseline is the last solution."""
    n_rows, n = y2.shape
    if lam <= 0:
        raise ValueError("lam must be > 0")
    pen = _difference_penalty_bands(n, diff_order) * lam
    z = np.empty_like(y2)
    for r in range(n_rows):
        y = y2[r]
        w = np.ones(n)
        for _ in range(max_iter + 1):
            zr = solve_whittaker(w, pen, w * y)
            new_w, stop_now = reweight(y, zr)
            if stop_now or _relative_difference(w, new_w) < tol:
                break
            w = new_w
        z[r] = zr
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
        return np.where(y > z, p, 1 - p), False

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
        rn = r[r < 0]
        if rn.size < 2:
            return np.zeros_like(r), True
        m = rn.mean()
        s = rn.std(ddof=1)
        s = s if s > 0 else np.finfo(float).eps
        return expit((-2.0 / s) * (r - (2 * s - m))), False

    z = _whittaker_iterate(y2, lam, diff_order, max_iter, tol, reweight)
    return z[0] if squeeze else z


# --------------------------------------------------------------------------- the registry


@dataclass(frozen=True)
class BaselineEstimator:
    """One entry of :data:`BASELINES`: a baseline estimator the method file can choose.

    Contract a new entry must meet (add it here and a test in ``tests/test_preprocess.py``
    that checks it against an outside reference, e.g. pybaselines; nothing else changes:
    ``[preprocess.baseline] method`` accepts its name, its parameters become keys of that
    table, ``docs/method-reference.md`` lists them after ``python scripts/make_method_reference.py``,
    and the fuzz tests draw them):

    * ``function(spectra, **params) -> baseline``: ``spectra`` a float64 array
      ``(n_shots, n_pixels)`` (C-contiguous, NaN-free: masked pixels are already bridged),
      the baseline of every row returned as a new float64 array of the same shape, in the
      units of the spectra; rows are independent (the result of a row must not depend on the
      other rows or on how a run is cut into chunks), no I/O, no global state;
    * ``params``: one :class:`compquant.settings.Setting` per keyword argument of ``function``,
      with type, range and default (the default is what the method file gets when it leaves
      the key out); keys shared with other entries keep the same meaning;
    * ``reference``: the publication (or standard) the estimator follows, also cited in the
      function's docstring with its equation.

    ``function`` is None only for ``"none"`` (no baseline removal).
    """

    name: str
    function: Callable | None
    params: tuple[Setting, ...]
    reference: str
    doc: str = ""

    @property
    def keys(self) -> tuple[str, ...]:
        return tuple(s.key for s in self.params)


_LAM = "smoothness λ of the penalised fit (larger: stiffer baseline)"
_WHITTAKER_TAIL = (
    Setting("diff_order", "int", 2, "order d of the difference penalty", min=0, min_open=True),
    Setting("max_iter", "int", 50, "reweighting iterations at most", min=0, min_open=True),
    Setting("tol", "float", 1e-3, "convergence: relative change of the weights", min=0, min_open=True),
)

#: the baseline estimators, by the name ``[preprocess.baseline] method`` gives
BASELINES: dict[str, BaselineEstimator] = {
    "none": BaselineEstimator("none", None, (), "", "no baseline removal"),
    "snip": BaselineEstimator(
        "snip",
        snip,
        (
            Setting("max_half_window", "int", 20, "largest clipping half-width M, about half the broadest peak's "
                    "full width", unit="pixels", min=0, min_open=True),
            Setting("decreasing", "bool", False, "clip from M down to 1 (Morhac et al. 1997)"),
            Setting("lls", "bool", False, "log-log-square-root transform before clipping (Ryan et al. 1988)"),
        ),
        "Ryan et al., Nucl. Instrum. Meth. B 34 (1988) 396-402",
        "SNIP peak clipping",
    ),
    "asls": BaselineEstimator(
        "asls",
        asls,
        (
            Setting("lam", "float", 1e6, _LAM, min=0, min_open=True),
            Setting("p", "float", 0.01, "asymmetry: weight of points above the baseline", min=0, max=1,
                    min_open=True, max_open=True, fix="use e.g. 0.01"),
            *_WHITTAKER_TAIL,
        ),
        "Eilers & Boelens (2005), Baseline correction with asymmetric least squares smoothing",
        "asymmetric least squares",
    ),
    "arpls": BaselineEstimator(
        "arpls",
        arpls,
        (Setting("lam", "float", 1e5, _LAM, min=0, min_open=True), *_WHITTAKER_TAIL),
        "Baek et al., Analyst 140 (2015) 250-257",
        "asymmetrically reweighted penalised least squares",
    ),
}
BASELINE_METHODS = tuple(BASELINES)


def estimate_baseline(spectra, method: str, **params) -> np.ndarray | None:
    """The baseline of every row by the estimator ``method`` of :data:`BASELINES`; ``None`` for ``"none"``."""
    entry = BASELINES.get(method)
    if entry is None:
        raise MethodError(
            f"unknown baseline method {method!r}",
            where="[preprocess.baseline] method",
            fix=f"use one of {', '.join(BASELINE_METHODS)}",
        )
    return None if entry.function is None else entry.function(spectra, **params)
