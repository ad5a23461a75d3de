"""How the record's views (``compquant record history``, the review page) print its numbers and
check states, in the certificate's own words and rounding.

- A value with its expanded uncertainty U: U to two significant digits and the value to the same
  decimal place (JCGM 100:2008, 7.2.6), by the certificate's own rule,
  :func:`compquant.report.numbers.value_and_u`; without a usable U four significant digits.
  The record holds g/g, and the views print g/g.
- A result without a value: ``< LOD`` only when it is below the LOD (``below_lod``); any other
  result without a value is ``not determined``, as on the certificate
  (:meth:`compquant.report.certificate.ResultRow.reported`).  No U is printed beside either.
- LOD and LOQ: two significant digits (:func:`compquant.report.numbers.round_sig`).
- A check sample's result: its state as the certificate prints it (``pass``, ``FAIL``,
  ``flagged``, ``cannot fail``, ``not counted``; :func:`compquant.report.release.check_state`),
  never the bare ``passed`` field, which is true for a check that is not counted (certified
  content below the LOQ).
"""

from __future__ import annotations

import math

from compquant.report.numbers import round_sig, value_and_u

BELOW_LOD = "< LOD"
NOT_DETERMINED = "not determined"  # the certificate's words for a result without a value
#: states a reviewer must look at (the release rules check-failed, check-flagged, check-uninformative)
BAD_CHECK_STATES = ("FAIL", "flagged", "cannot fail")


def _num(x) -> float | None:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def value_u_text(value, U) -> tuple[str, str]:
    """``(value, U)`` as printed, e.g. ``(0.58757, 0.00714) -> ("0.5876", "0.0071")``; ``("", "")``
    without a value."""
    v = _num(value)
    if v is None:
        return "", ""
    u = _num(U)
    return value_and_u(v, u if u is not None and u > 0 else None)


def result_text(value, U, below_lod) -> tuple[str, str]:
    """``(value, U)`` of a recorded result as printed: ``< LOD`` only when ``below_lod`` is true,
    ``not determined`` for any other result without a value (e.g. flag ``not_reported``)."""
    if _truth(below_lod):
        return BELOW_LOD, ""
    if _num(value) is None:
        return NOT_DETERMINED, ""
    return value_u_text(value, U)


def limit_text(x) -> str:
    """An LOD or LOQ: two significant digits, empty when missing."""
    v = _num(x)
    return "" if v is None or v <= 0 else round_sig(v, 2)


def check_state_text(state, passed) -> str:
    """A check's state as the certificate prints it.  A record row of a check stored before the
    record kept states (revision 0003), and not filled by that revision's upgrade, has none: its
    ``passed`` says only whether the criterion was met, not whether the check counted."""
    if state:
        return str(state)
    return "not recorded (criterion " + ("met" if _truth(passed) else "NOT met") + ")"


def _truth(x) -> bool:
    if x is None:
        return False
    if isinstance(x, float) and math.isnan(x):
        return False
    return bool(x)


__all__ = ["BELOW_LOD", "NOT_DETERMINED", "BAD_CHECK_STATES", "value_u_text", "result_text", "limit_text",
           "check_state_text"]
