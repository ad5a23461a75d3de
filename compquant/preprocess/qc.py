"""Shot quality control: robust outlier rejection and a minimum-signal rule.

A shot is rejected when its QC quantity ``x`` (total emission, or a chosen
line's intensity) lies more than ``k`` robust standard deviations from the
sample median::

    |x - median(x)| > k * 1.4826 * MAD(x)

(the median absolute deviation scaled by 1.4826 estimates the standard
deviation of normal data; Rousseeuw & Croux, J. Am. Stat. Assoc. 88 (1993)
1273-1283), or when ``x`` is below the minimum-signal rule
``x < min_fraction * median(x)`` or ``x < min_signal`` (misfires, missed
sample).  Optional pulse-energy normalisation divides per-shot intensities by
``E / median(E)`` (line emission roughly proportional to pulse energy at fixed
focusing, common practice).

The quantities are computed per shot, chunk by chunk; the decision needs the
whole sample and is taken by :func:`qc_decide` once all chunks are seen.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.stats import norm

#: MAD -> standard deviation for normal data, 1 / Phi^-1(3/4) = 1.482602... (Rousseeuw & Croux
#: 1993); the one copy of this factor in compquant (identify.peaks uses it too)
MAD_TO_SD = float(1.0 / norm.ppf(0.75))

REASONS = ("outlier", "low_signal", "not_finite", "low_pulse_energy")


@dataclass
class QCDecision:
    """Accepted shots of one sample and the reason each rejected shot was refused."""

    accepted: np.ndarray  # bool (n,)
    reasons: list[str]  # "" for accepted shots
    median: float
    robust_sd: float
    counts: dict[str, int] = field(default_factory=dict)

    @property
    def n_rejected(self) -> int:
        return int((~self.accepted).sum())


def robust_center_scale(x: np.ndarray) -> tuple[float, float]:
    """Median and ``1.4826 * MAD`` of the finite values of x."""
    x = x[np.isfinite(x)]
    if x.size == 0:
        return float("nan"), float("nan")
    med = float(np.median(x))
    return med, float(MAD_TO_SD * np.median(np.abs(x - med)))


def qc_decide(
    x,
    *,
    k: float = 5.0,
    min_fraction: float = 0.0,
    min_signal: float | None = None,
    pulse_energy=None,
    min_pulse_fraction: float = 0.0,
    enabled: bool = True,
) -> QCDecision:
    """Decide which shots of ONE sample are accepted (see module docstring).

    Parameters
    ----------
    x : array (n,)
        QC quantity per shot (e.g. total emission in counts*nm).
    k : float
        Rejection threshold in robust standard deviations (two-sided).
    min_fraction, min_signal : minimum-signal rule (relative to the median, absolute).
    pulse_energy : array (n,) or None
        Shots with ``E < min_pulse_fraction * median(E)`` are rejected.
    enabled : bool
        ``False`` keeps every finite shot.
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.size
    reasons = np.array([""] * n, dtype=object)
    finite = np.isfinite(x)
    reasons[~finite] = "not_finite"
    med, rsd = robust_center_scale(x)
    if enabled and n > 0:
        if pulse_energy is not None and min_pulse_fraction > 0:
            e = np.asarray(pulse_energy, dtype=np.float64)
            emed = np.nanmedian(e) if np.isfinite(e).any() else np.nan
            low_e = finite & np.isfinite(e) & (e < min_pulse_fraction * emed)
            reasons[(reasons == "") & low_e] = "low_pulse_energy"
        low = np.zeros(n, dtype=bool)
        if min_signal is not None:
            low |= finite & (x < min_signal)
        if min_fraction > 0 and np.isfinite(med):
            low |= finite & (x < min_fraction * med)
        reasons[(reasons == "") & low] = "low_signal"
        if np.isfinite(rsd) and rsd > 0 and n >= 3:
            out = finite & (np.abs(x - med) > k * rsd)
            reasons[(reasons == "") & out] = "outlier"
    accepted = reasons == ""
    counts = {r: int((reasons == r).sum()) for r in REASONS if (reasons == r).any()}
    return QCDecision(accepted=accepted, reasons=list(reasons), median=med, robust_sd=rsd, counts=counts)


def pulse_energy_factors(pulse_energy, reference: float | None = None) -> np.ndarray:
    """Per-shot factors ``E / E_ref`` (``E_ref`` = median pulse energy when not given)."""
    e = np.asarray(pulse_energy, dtype=np.float64)
    ref = float(np.nanmedian(e)) if reference is None else float(reference)
    if not np.isfinite(ref) or ref <= 0:
        return np.ones_like(e)
    return e / ref
