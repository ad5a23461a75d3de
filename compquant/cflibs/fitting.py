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


__all__ = ["BatchFit", "wls_batch"]
