"""Detection and quantification limits.

IUPAC 3-sigma practice (Long & Winefordner 1983, Anal. Chem. 55, 712A; IUPAC
Compendium of Analytical Nomenclature, the "Orange Book", sec. 18.4.3.7)::

    LOD = 3 s / b,    LOQ = 10 s / b

``b`` is the sensitivity (slope of the curve at zero content), ``s`` the standard
deviation of the blank response: from replicate blank measurements when a blank
is in the run, otherwise the residual standard deviation of the calibration
(the fallback named in ICH Q2(R1), sec. 6.3 "based on the standard deviation of the
response and the slope" -- from memory of ICH Q2(R1), verify).  The source is
returned with the limits.

ISO 11843-2:2000 critical value and minimum detectable value from a straight
line fitted by OLS to I*J calibration points (from memory of ISO 11843-2, verify)::

    x_c = t_{1-alpha}(nu) (s/b) sqrt(1/K + 1/(IJ) + xbar^2 / Sxx)
    x_d = delta(nu, alpha, beta) (s/b) sqrt(1/K + 1/(IJ) + xbar^2 / Sxx)

with ``nu = IJ - 2``, ``K`` measurements of the test sample, and ``delta`` the
non-centrality parameter of the non-central t distribution for which
``P(T'(nu, delta) <= t_{1-alpha}(nu)) = beta`` (alpha = beta = 0.05).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import optimize, stats


def lod_loq(s: float, slope: float) -> tuple[float, float]:
    """``(3 s / b, 10 s / b)`` (IUPAC; see module docstring)."""
    return 3.0 * s / slope, 10.0 * s / slope


def blank_sd(blank_means=None, blank_shots=None) -> tuple[float, str, int] | None:
    """Standard deviation of one blank *measurement* and where it came from.

    With >= 3 replicate blank measurements (samples), the sd of their means.
    Otherwise, with per-shot responses of one blank (>= 3 shots), the sd of a mean
    of those N shots: ``sd_shots / sqrt(N)``, i.e. the limit refers to a
    measurement of N shots, as the samples are measured.  Returns
    ``(s, source, n)`` or None.
    """
    if blank_means is not None and len(blank_means) >= 3:
        v = np.asarray(blank_means, float)
        return float(np.std(v, ddof=1)), f"replicate blank measurements (n = {len(v)})", len(v)
    if blank_shots is not None and len(blank_shots) >= 3:
        v = np.asarray(blank_shots, float)
        n = len(v)
        return (float(np.std(v, ddof=1) / math.sqrt(n)), f"blank shots: sd of the mean of {n} shots", n)
    return None


@functools.lru_cache(maxsize=256)
def noncentral_delta(nu: int, alpha: float = 0.05, beta: float = 0.05) -> float:
    """Non-centrality ``delta`` with ``P(T'(nu, delta) <= t_{1-alpha}(nu)) = beta``."""
    tc = stats.t.ppf(1 - alpha, nu)
    # delta lies between t_{1-alpha} and t_{1-alpha} + t_{1-beta}-ish; bracket generously
    hi = 3.0 * tc + 10.0
    return float(optimize.brentq(lambda d: stats.nct.cdf(tc, nu, d) - beta, 0.0, hi))


def iso11843_2(x, y, K: int = 1, alpha: float = 0.05, beta: float = 0.05) -> dict | None:
    """ISO 11843-2 critical value ``x_c``, ``y_c`` and minimum detectable value ``x_d``.

    ``x``, ``y``: calibration points (contents, responses), straight line by OLS.
    Returns None when the data do not allow it (< 3 points or slope <= 0).
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = len(x)
    if n < 3:
        return None
    xbar = x.mean()
    sxx = float(np.sum((x - xbar) ** 2))
    if sxx <= 0:
        return None
    b = float(np.sum((x - xbar) * (y - y.mean())) / sxx)
    a = float(y.mean() - b * xbar)
    if b <= 0:
        return None
    nu = n - 2
    s = math.sqrt(float(np.sum((y - a - b * x) ** 2)) / nu)
    root = math.sqrt(1.0 / K + 1.0 / n + xbar**2 / sxx)
    t = float(stats.t.ppf(1 - alpha, nu))
    xc = t * s / b * root
    delta = noncentral_delta(nu, alpha, beta)
    return {
        "x_c": xc,
        "y_c": a + b * xc,
        "x_d": delta * s / b * root,
        "s": s,
        "slope": b,
        "intercept": a,
        "dof": nu,
        "alpha": alpha,
        "beta": beta,
        "K": K,
        "delta": delta,
    }


__all__ = ["lod_loq", "blank_sd", "iso11843_2", "noncentral_delta"]
