"""Check samples: agreement of a measured value with the certified value.

ISO 13528:2015 (Statistical methods for use in proficiency testing), 9.4-9.7
(from memory of ISO 13528, verify clause numbers)::

    z    = (x - X) / sigma_pt                  |z| <= 2 satisfactory, >= 3 unsatisfactory
    zeta = (x - X) / sqrt(u_x^2 + u_X^2)
    E_n  = (x - X) / sqrt(U_x^2 + U_X^2)       |E_n| <= 1 satisfactory

``x`` is the measured and ``X`` the certified value, ``u`` standard and ``U``
expanded uncertainties.  A check fails when ``|E_n| > 1`` (or, when a target
standard deviation ``sigma_pt`` is set, also when ``|z| >= 3``).
"""

from __future__ import annotations

import math


def en_number(x: float, U_x: float, X: float, U_X: float) -> float:
    """``E_n = (x - X) / sqrt(U_x^2 + U_X^2)`` (ISO 13528)."""
    d = math.sqrt(U_x**2 + U_X**2)
    if d <= 0:
        return math.inf if x != X else 0.0
    return (x - X) / d


def zeta_score(x: float, u_x: float, X: float, u_X: float) -> float:
    """``zeta = (x - X) / sqrt(u_x^2 + u_X^2)`` (ISO 13528)."""
    d = math.sqrt(u_x**2 + u_X**2)
    if d <= 0:
        return math.inf if x != X else 0.0
    return (x - X) / d


def z_score(x: float, X: float, sigma_pt: float) -> float:
    """``z = (x - X) / sigma_pt`` (ISO 13528)."""
    return (x - X) / sigma_pt


def check_verdict(en: float, z: float | None = None) -> bool:
    """True when the check passes: ``|E_n| <= 1`` and (if given) ``|z| < 3``."""
    if not math.isfinite(en) or abs(en) > 1.0:
        return False
    return not (z is not None and abs(z) >= 3.0)


def counted(certified: float, loq) -> bool:
    """True when a check element counts: its certified content is at least the LOQ in the check
    sample (no LOQ known: it counts).  Below the LOQ a found value is only indicative, so the
    comparison verifies nothing and neither passes nor fails the run (common practice; the
    certificate prints such an element as *not counted*, docs/certificate.md)."""
    try:
        q = float(loq)
    except (TypeError, ValueError):
        return True
    return not (math.isfinite(q) and certified < q)


__all__ = ["en_number", "zeta_score", "z_score", "check_verdict", "counted"]
