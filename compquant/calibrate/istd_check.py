"""Warnings on the choice of an internal-standard line, with suggested alternatives.

An internal standard divides out shot-to-shot changes of the ablated mass and plasma; it
only works when the standard line responds to the plasma like the analyte line.  A resonance
line (lower level in the ground term) of a major element is strongly self-absorbed: its
intensity grows sublinearly and depends on the plasma's column density, so the ratio drifts
with the matrix — an aluminium-alloy calibration on Al I 394.401 read Si and Zn 5–12 % low in
an outside check.  Common practice: choose a non-resonance line of the matrix element whose
upper-level energy is close to the analyte line's (then the ratio hardly depends on T).

:func:`internal_standard_warnings` returns plain-text warnings (empty when the choice is
sound) and the alternatives; the caller decides how to show them.
:func:`check_calibration` is what :func:`compquant.calibrate.calibrate` calls: per internal
standard it tests the line for a resonance line and, over the run's standards, for
self-absorption by the curve of growth (:func:`curve_of_growth`), warns
(:class:`InternalStandardWarning`, one line each on the command line) and returns the record kept
in each curve's ``diagnostics["internal_standard"]``, which the certificates repeat as remarks.

References
----------
.. [1] I. B. Gornushkin, J. M. Anzano, L. A. King, B. W. Smith, N. Omenetto, J. D. Winefordner,
   "Curve of growth methodology applied to laser-induced plasma emission spectroscopy",
   Spectrochim. Acta B 54 (1999) 491-503 (slope 1 of ln I against ln N for an optically thin
   line, falling towards 1/2 and below as the line saturates; from memory of that paper).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.plasma.constants import KB_EV

#: a curve-of-growth slope below this, and significantly below 1, marks a self-absorbed line
#: (a judgement between the thin slope 1 and the saturated slopes of 1/2 and below)
SLOPE_LIMIT = 0.8


class InternalStandardWarning(UserWarning):
    """The internal-standard line is a resonance line or self-absorbed (with alternatives)."""


#: lower levels up to this energy count as the ground term (a judgement: fine-structure
#: components of ground terms lie within a few tenths of an eV and are as heavily populated)
GROUND_TERM_EV = 0.1


def _row(lines, line_id):
    m = lines["line_id"].astype(str) == str(line_id)
    return None if not m.any() else lines[m].iloc[0]


def suggest_alternatives(lines, istd_id, analyte_id=None, *, temperature_k=10000.0, n=3) -> list[str]:
    """Non-resonance lines of the internal standard's element, closest in upper-level energy to
    the analyte line (or strongest at ``temperature_k`` when no analyte is given)."""
    ref = _row(lines, istd_id)
    if ref is None:
        return []
    same = lines[(lines["element"] == ref["element"]) & (lines["line_id"].astype(str) != str(istd_id))
                 & (lines["ei_ev"] > GROUND_TERM_EV)]
    if same.empty:
        return []
    kt = KB_EV * temperature_k
    strength = same["gk"] * same["aki"] * np.exp(-same["ek_ev"] / kt)
    ana = None if analyte_id is None else _row(lines, analyte_id)
    if ana is not None:
        key = (same["ek_ev"] - float(ana["ek_ev"])).abs() - 1e-12 * strength
    else:
        key = -strength
    return [str(x) for x in same.assign(_k=key.to_numpy()).sort_values("_k")["line_id"].head(n)]


def internal_standard_warnings(istd_id: str, *, lines=None, analyte_id: str | None = None,
                               self_absorbed: set[str] | None = None,
                               upper_level: bool = True) -> tuple[list[str], list[str]]:
    """``(warnings, alternatives)`` for an internal-standard line.

    ``lines``: the line list (default :func:`compquant.atomic.load_line_list`);
    ``self_absorbed``: line ids found self-absorbed elsewhere (the curve of growth over the
    standards, :func:`curve_of_growth`, or the ``self_absorbed`` flags of a calibration-free
    result on the same run); ``upper_level``: also warn when the analyte's and the internal
    standard's upper levels differ by more than 1 eV.
    """
    if lines is None:
        from compquant.atomic import load_line_list

        lines = load_line_list()
    warns: list[str] = []
    ref = _row(lines, istd_id)
    if ref is None:
        return [f"internal standard {istd_id} is not in the line list: its level energies are unknown"], []
    ei = float(ref["ei_ev"])
    if math.isfinite(ei) and ei <= GROUND_TERM_EV:
        warns.append(f"internal standard {istd_id} is a resonance line (lower level {ei:.3f} eV, ground "
                     "term): it self-absorbs in a dense plasma and the intensity ratio then drifts with "
                     "the matrix")
    if self_absorbed and istd_id in self_absorbed:
        warns.append(f"internal standard {istd_id} was found self-absorbed on this run")
    ana = None if analyte_id is None else _row(lines, analyte_id)
    if upper_level and ana is not None and abs(float(ana["ek_ev"]) - float(ref["ek_ev"])) > 1.0:
        warns.append(f"upper levels of {analyte_id} ({float(ana['ek_ev']):.2f} eV) and {istd_id} "
                     f"({float(ref['ek_ev']):.2f} eV) differ by more than 1 eV: the ratio depends on "
                     "the plasma temperature")
    alts = suggest_alternatives(lines, istd_id, analyte_id) if warns else []
    return warns, alts


def curve_of_growth(intensity, content) -> dict | None:
    """Slope of ``ln I`` against ``ln w`` over the standards (ordinary least squares).

    ``intensity``: the line's mean intensity in each standard (any unit); ``content``: the
    element's certified mass fraction in it.  An optically thin line has slope 1 (I ∝ N); a
    self-absorbed one less (Gornushkin et al. 1999).  Returns ``{"slope", "u_slope", "n",
    "ln_range"}``, or None with fewer than 3 usable standards or contents spanning less than 10 %.
    """
    y = np.asarray(intensity, float)
    x = np.asarray(content, float)
    ok = np.isfinite(x) & np.isfinite(y) & (x > 0) & (y > 0)
    lx, ly = np.log(x[ok]), np.log(y[ok])
    n = lx.size
    if n < 3 or np.ptp(lx) < 0.1:
        return None
    dx = lx - lx.mean()
    slope = float(dx @ (ly - ly.mean()) / (dx @ dx))
    resid = ly - ly.mean() - slope * dx
    u = math.sqrt(float(resid @ resid) / (n - 2) / float(dx @ dx))
    return {"slope": slope, "u_slope": u, "n": int(n), "ln_range": float(np.ptp(lx))}


def self_absorbed(growth: dict | None, limit: float = SLOPE_LIMIT) -> bool:
    """True when the curve-of-growth slope is below ``limit`` and below 1 by more than twice its
    standard uncertainty (a thin line's slope is 1)."""
    return growth is not None and growth["slope"] < limit and growth["slope"] + 2 * growth["u_slope"] < 1.0


def check_calibration(curves: dict, line_table, smap: dict, certs: dict, matrix_element) -> dict[str, dict]:
    """Check every internal-standard line of ``curves`` (element -> Curve) on the run's standards.

    Returns ``{internal standard line: {"line", "warnings", "alternatives", "curve_of_growth"}}``
    for the lines that warrant a warning (resonance line, self-absorbed), and issues one
    :class:`InternalStandardWarning` per such line.  ``smap``: sample -> (role, standard id);
    ``certs``: standard id -> element -> (w, u) (:mod:`compquant.calibrate.build`).
    """
    import warnings

    from compquant.calibrate.build import matrix_content

    out: dict[str, dict] = {}
    for istd in dict.fromkeys(c.internal_standard for c in curves.values() if c.internal_standard):
        element = str(istd).split()[0]
        rows = line_table[line_table["line_id"].astype(str) == istd]
        ints, conts = [], []
        for r in rows.itertuples(index=False):
            role, ref = smap.get(str(r.sample_id), ("unknown", None))
            cert = certs.get(ref) if role == "standard" else None
            if cert is None:
                continue
            w = cert[element][0] if element in cert else (
                matrix_content(cert, element)[0] if element == matrix_element else math.nan)
            ints.append(float(r.intensity))
            conts.append(w)
        growth = curve_of_growth(ints, conts)
        analyte = next(c.line_id for c in curves.values() if c.internal_standard == istd)
        warns, alts = internal_standard_warnings(istd, analyte_id=analyte, upper_level=False,
                                                 self_absorbed={istd} if self_absorbed(growth) else None)
        if not warns:
            continue
        if self_absorbed(growth):
            warns = [w + (f" (curve of growth over {growth['n']} standards: slope {growth['slope']:.2f} "
                          f"+- {growth['u_slope']:.2f}, 1 for a thin line)" if "self-absorbed" in w else "")
                     for w in warns]
        out[istd] = {"line": istd, "warnings": warns, "alternatives": alts, "curve_of_growth": growth}
        warnings.warn("; ".join(warns) + (f"; consider {', '.join(alts)}" if alts else ""),
                      InternalStandardWarning, stacklevel=3)
    return out


def remarks(curves: dict) -> list[str]:
    """Certificate remarks from the curves' ``diagnostics["internal_standard"]`` (one per line)."""
    seen: dict[str, str] = {}
    for c in curves.values():
        rec = (getattr(c, "diagnostics", None) or {}).get("internal_standard")
        if rec and rec.get("line") not in seen:
            alts = rec.get("alternatives") or []
            seen[rec["line"]] = ("Internal standard: " + "; ".join(rec.get("warnings", []))
                                 + (f"; non-resonance alternatives: {', '.join(alts)}." if alts else "."))
    return list(seen.values())


__all__ = [
    "GROUND_TERM_EV",
    "SLOPE_LIMIT",
    "InternalStandardWarning",
    "check_calibration",
    "curve_of_growth",
    "internal_standard_warnings",
    "remarks",
    "self_absorbed",
    "suggest_alternatives",
]
