"""Batched weighted least squares for Boltzmann and Saha–Boltzmann plots.

One design matrix ``X`` (n_lines × p) is shared by many right-hand sides ``y``
(n_draws × n_lines) with their own weights ``w`` (n_draws × n_lines), so the
Monte Carlo draws are solved in a single call.  For each draw the estimator is
the usual weighted least-squares solution (e.g. Bevington & Robinson, *Data
Reduction and Error Analysis*, 3rd ed., ch. 7)::

    β = (Xᵀ W X)⁻¹ Xᵀ W y,      cov(β) = (Xᵀ W X)⁻¹ · max(1, χ²/ν)

with ``W = diag(1/u_y²)``.  The Birge-ratio scaling ``max(1, χ²/ν)`` widens the
covariance when the scatter about the line is larger than the stated
uncertainties explain (common practice); it never narrows it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class BatchFit:
    """Result of :func:`wls_batch` (leading axis = draws)."""

    beta: np.ndarray  # (d, p)
    cov: np.ndarray  # (d, p, p), Birge-scaled
    cov_raw: np.ndarray  # (d, p, p), (XᵀWX)⁻¹ only
    chi2: np.ndarray  # (d,)
    dof: int
    residuals: np.ndarray  # (d, n)  y - Xβ

    @property
    def birge(self) -> np.ndarray:
        """Reduced chi-square χ²/ν (NaN when ν = 0)."""
        if self.dof <= 0:
            return np.full(self.chi2.shape, np.nan)
        return self.chi2 / self.dof


def wls_batch(X: np.ndarray, y: np.ndarray, w: np.ndarray, scale_by_chi2: bool = True) -> BatchFit:
    """Solve many weighted linear fits sharing one design matrix.

    Parameters
    ----------
    X : (n, p) design matrix
    y : (d, n) or (n,) ordinates
    w : (d, n) or (n,) weights 1/u²
    scale_by_chi2 : widen the covariance by the Birge ratio when χ²/ν > 1.
    """
    X = np.asarray(X, dtype=float)
    y2 = np.atleast_2d(np.asarray(y, dtype=float))
    w2 = np.broadcast_to(np.atleast_2d(np.asarray(w, dtype=float)), y2.shape)
    n, p = X.shape
    A = np.einsum("ni,dn,nj->dij", X, w2, X)
    b = np.einsum("ni,dn,dn->di", X, w2, y2)
    # a tiny ridge on the diagonal would bias exact fits; instead solve with
    # lstsq-like pseudo-inverse only where A is singular
    try:
        cov_raw = np.linalg.inv(A)
    except np.linalg.LinAlgError:
        cov_raw = np.linalg.pinv(A)
    beta = np.einsum("dij,dj->di", cov_raw, b)
    resid = y2 - beta @ X.T
    chi2 = np.einsum("dn,dn->d", w2, resid**2)
    dof = n - p
    cov = cov_raw.copy()
    if scale_by_chi2 and dof > 0:
        s = np.maximum(1.0, chi2 / dof)
        cov = cov * s[:, None, None]
    return BatchFit(beta=beta, cov=cov, cov_raw=cov_raw, chi2=chi2, dof=dof, residuals=resid)


def paule_mandel_scatter(X: np.ndarray, y: np.ndarray, u: np.ndarray, rounds: int = 3) -> float:
    """Extra standard deviation s of every ordinate that makes the weighted fit consistent.

    Paule & Mandel (1982, *J. Res. Natl. Bur. Stand.* 87, 377): when the residuals scatter
    more than the stated uncertainties u_i explain, each ordinate is given the variance
    u_i² + s² with s² chosen so that the weighted χ² equals its degrees of freedom ν,

        Σ_i (y_i − x_iᵀβ(s²))² / (u_i² + s²) = ν,     β(s²) the weighted fit,

    and s² = 0 when χ² ≤ ν already.  χ² falls monotonically with s², so the root is found
    on a logarithmic grid of s² (all fits of a grid in one :func:`wls_batch` call), refined
    ``rounds`` times.  Unlike the Birge-ratio scaling, which keeps the relative weights, this
    stops lines with a tiny stated u from deciding the fit alone when some unstated effect
    (blends, side-band interference, atomic data) moves every line.
    """
    X = np.asarray(X, float)
    y = np.ravel(np.asarray(y, float))
    u2 = np.asarray(u, float) ** 2
    nu = X.shape[0] - X.shape[1]
    if nu <= 0:
        return 0.0

    def chi2(s2):
        w = 1.0 / (u2[None, :] + np.asarray(s2, float)[:, None])
        return wls_batch(X, np.broadcast_to(y, w.shape), w, scale_by_chi2=False).chi2

    if chi2(np.array([0.0]))[0] <= nu:
        return 0.0
    lo, hi = 1e-12, max(float(np.var(y)) * 10.0, 1e-6)
    for _ in range(rounds):
        grid = np.geomspace(lo, hi, 24)
        c = chi2(grid)
        k = int(np.searchsorted(-c, -nu))  # first grid point with χ² ≤ ν
        if k == 0:
            return float(np.sqrt(grid[0]))
        if k >= grid.size:
            return float(np.sqrt(grid[-1]))
        lo, hi = grid[k - 1], grid[k]
    return float(np.sqrt(0.5 * (lo + hi)))


__all__ = ["BatchFit", "paule_mandel_scatter", "wls_batch"]
