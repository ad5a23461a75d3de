"""How numbers are rounded and shown on certificates.

Rules (the same for PDF, JSON ``reported`` fields and the LIMS CSV, so the three
forms always agree):

- Unit: ``%`` when the value (or, below LOD, the LOD) is at least 0.1 % (1000
  mg/kg), else ``mg/kg`` (common practice for metal analysis); a result row may
  force one.  Within a run one unit per element (:func:`element_units`): ``%`` when
  any sample's value of the element reaches 0.1 %; value and U always share it.
- The expanded uncertainty U is rounded to two significant digits and the value
  to the same decimal place (JCGM 100:2008, 7.2.6: "it is usually sufficient to
  quote u_c and U to at most two significant digits"; from memory of the GUM).
- Without a usable U the value keeps four significant digits.
- LOD and LOQ are shown with two significant digits.
- Rounding is half-up on the decimal representation (common practice), never
  scientific notation.
"""

from __future__ import annotations

import math
from decimal import ROUND_HALF_UP, Decimal

UNIT_FACTOR = {"%": 100.0, "mg/kg": 1e6, "g/g": 1.0}
PERCENT_THRESHOLD = 1e-3  # g/g, 0.1 %


def finite(x) -> bool:
    return x is not None and not isinstance(x, bool) and isinstance(x, (int, float)) and math.isfinite(x)


def choose_unit(mass_fraction: float | None, lod: float | None = None, below_lod: bool = False) -> str:
    """``%`` or ``mg/kg`` for a mass fraction in g/g."""
    ref = lod if below_lod else mass_fraction
    if not finite(ref):
        ref = lod if finite(lod) else mass_fraction
    if not finite(ref):
        return "%"
    return "%" if abs(ref) >= PERCENT_THRESHOLD else "mg/kg"


def element_units(records) -> dict[str, str]:
    """One display unit per element for a whole run's outputs.

    ``records``: ``(element, mass_fraction, lod, below_lod)`` of every result of the run.  An
    element is shown in ``%`` when any of its values (below the LOD: its LOD) reaches 0.1 %, else
    in ``mg/kg``, so every sample's value and U of that element print in the same unit on the
    certificates, the LIMS CSV and the screen.
    """
    out: dict[str, str] = {}
    for el, w, lod, below in records:
        u = choose_unit(w, lod, bool(below))
        if finite(w) or finite(lod):
            out[el] = "%" if out.get(el) == "%" or u == "%" else "mg/kg"
        else:
            out.setdefault(el, u)
    return out


def _plain(d: Decimal) -> str:
    s = format(d, "f")
    if s in ("-0", "-0.0") or (s.startswith("-") and Decimal(s) == 0):
        s = s[1:]
    return s


def exponent_of_sig(x: float, sig: int) -> int:
    """Decimal exponent of the last kept digit when ``x`` keeps ``sig`` significant digits."""
    if x == 0:
        return -sig + 1
    d = Decimal(repr(abs(float(x))))
    # position of the leading digit, then keep `sig` digits (re-checked after rounding 9.96 -> 10)
    lead = d.adjusted()
    q = lead - sig + 1
    r = d.quantize(Decimal(1).scaleb(q), rounding=ROUND_HALF_UP)
    if r.adjusted() > lead:
        q += 1
    return q


def round_to_exponent(x: float, q: int) -> str:
    """``x`` rounded half-up to the decimal place 10**q, as plain text."""
    d = Decimal(repr(float(x))).quantize(Decimal(1).scaleb(q), rounding=ROUND_HALF_UP)
    if q > 0:
        d = d.quantize(Decimal(1))
    return _plain(d)


def round_sig(x: float, sig: int = 2) -> str:
    """``x`` with ``sig`` significant digits, plain text."""
    return round_to_exponent(x, exponent_of_sig(x, sig))


def value_and_u(value: float, U: float | None, sig_u: int = 2, sig_value_no_u: int = 4) -> tuple[str, str]:
    """Round a value and its expanded uncertainty (both already in the display unit)."""
    if finite(U) and U > 0:
        q = exponent_of_sig(U, sig_u)
        return round_to_exponent(value, q), round_to_exponent(U, q)
    if value == 0:
        return "0", ""
    return round_sig(value, sig_value_no_u), ""


_SUP = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def sci_text(x: float, sig: int = 2) -> str:
    """Number in scientific notation with a superscript exponent, e.g. ``1.2×10¹⁷``.

    Plain digits are kept for 0.001 <= |x| < 100000.
    """
    if not finite(x):
        return ""
    if x == 0 or 1e-3 <= abs(x) < 1e5:
        return round_sig(x, sig) if x != 0 else "0"
    q = exponent_of_sig(x, sig)
    e = q + sig - 1
    mant = round_to_exponent(x / 10.0**e, -(sig - 1))
    return f"{mant}×10{str(e).translate(_SUP)}"


__all__ = [
    "sci_text",
    "UNIT_FACTOR",
    "PERCENT_THRESHOLD",
    "finite",
    "choose_unit",
    "element_units",
    "exponent_of_sig",
    "round_to_exponent",
    "round_sig",
    "value_and_u",
]
