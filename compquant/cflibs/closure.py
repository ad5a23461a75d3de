"""Closure and mass fractions of one analysis: the robust-closure screen, a fixed element
content, the share of elements removed from the closure, and the per-element rows
(docs/calibration-free.md §5; the rules are :mod:`compquant.cflibs.screening`).
"""

from __future__ import annotations

import math

import numpy as np

from compquant.cflibs.result import ElementResult
from compquant.cflibs.screening import nondetection_conflicts, outlier_lines
from compquant.errors import DataQualityError


def _missing_share_bound(e, w_est, checks, s) -> float:
    """Upper bound (g/g) of the share of an element removed from the closure.

    Contradicted non-detections scale the element's estimate down by its largest
    predicted/limit ratio (its content cannot exceed what keeps every non-detected line below
    its limit; the estimate is scaled relative to the rest of the sample, w/(1 − w), as the
    closure does); otherwise (a weak element removed for its size) ``weak_element_closure_max``.
    """
    ratios = [c["ratio"] for c in checks if c["element"] == e and c["contradicted"]]
    if ratios and 0.0 < w_est < 1.0:
        # the lines scale with the element's content relative to the rest of the sample
        x = w_est / (1.0 - w_est) / max(ratios)
        return float(x / (1.0 + x))
    return float(s.weak_element_closure_max)


class Closure:
    """Mixin of :class:`compquant.cflibs.analysis._Analysis`: closure and mass fractions."""

    def screen(self):
        """Rules 2 and 3 of :mod:`compquant.cflibs.screening` on the current solution:
        ``(line_drops, element_drops)``, each mapping id → reason."""
        sol = self.sol
        ne_free = self.ne_est is None

        def can_drop(mask):
            return self._can_drop(mask, ne_free)

        lines = outlier_lines(self.L, sol, self.u_y, self.s, can_drop)
        checks, els = nondetection_conflicts(self.L, self.nd, self.model, sol, self.s)
        self.upper_limit_checks = checks
        return lines, els

    def _apply_fixed(self, wfrac, elements):
        """Fixed content of one element: scale (element measured) or close to 1 − w_fixed."""
        wfrac = np.atleast_2d(wfrac)
        if not self.s.fixed:
            return wfrac, wfrac.sum(axis=1)
        el, val = next(iter(self.s.fixed.items()))
        if el in elements:
            j = elements.index(el)
            out = wfrac * (val / wfrac[:, j:j + 1])
        else:
            out = wfrac * (1.0 - val)
        total = out.sum(axis=1) + (0.0 if el in elements else val)
        return out, total

    def _closed_fractions(self, sol, u_w, mc, mc_ok, fixed_el):
        """Mass fractions of the central solution after :meth:`_apply_fixed`, and u widened by the
        share of the elements removed from the closure: ``(wfrac, closure_sum, u_w)``."""
        wfrac, closure_sum = self._apply_fixed(sol.mass_fraction, sol.elements)
        wfrac = wfrac[0]
        share = float(sum(getattr(self, "missing_share", {}).values()))
        if share > 0 and not fixed_el and mc_ok:
            # elements removed from the closure: the others are high by their share, at most
            # `share`; rectangular over [0, share] read with half-width `share` (GUM 4.3.7),
            # a conservative term added to every u
            u_w = np.sqrt(u_w**2 + (wfrac * share / math.sqrt(3.0)) ** 2)
            mc["missing_share_bound"] = dict(self.missing_share)
        return wfrac, closure_sum, u_w

    def _element_rows(self, sol, wfrac, u_w, u_x, lines, fixed_el):
        """One :class:`~compquant.cflibs.result.ElementResult` per element of the closure, with its
        flags (an element in ``undetermined`` keeps its value only as ``uncertified_mass_fraction``)."""
        s, L = self.s, self.L
        sa_flag_lines = {r["line_id"] for r in lines if "self_absorbed" in r["flags"]}
        elements = []
        for j, e in enumerate(sol.elements):
            idx = np.flatnonzero(L.element == e)
            fl = []
            if len(idx) == 1:
                fl.append("single_line")
            if any(L.line_id[i] in sa_flag_lines for i in idx):
                fl.append("self_absorption_corrected" if s.self_absorption in
                          ("curve_of_growth", "columnar", "reference_line") else "self_absorbed")
            if e in self.no_factor:
                fl.append("no_one_point_factor")
            if e == fixed_el:
                fl.append("fixed_content")
            er = ElementResult(
                element=e, mass_fraction=float(wfrac[j]), u=float(u_w[j]) if e != fixed_el else 0.0,
                number_fraction=float(sol.number_fraction[0, j]), u_number_fraction=float(u_x[j]),
                n_lines=int(len(idx)), lines=[str(x) for x in L.line_id[idx]], flags=fl,
                fixed=e == fixed_el)
            if e in self.undetermined and e != fixed_el:
                er.uncertified_mass_fraction = er.mass_fraction
                er.mass_fraction, er.u = float("nan"), float("nan")
                er.determined, er.reasons = False, list(self.undetermined[e])
                er.flags.append("not_determined")
            elements.append(er)
        return elements

    def _undetermined_rows(self, sol, fixed_el):
        """Rows of requested, fixed, rejected or all-lines-failed elements not in the closure."""
        s = self.s
        requested = list(self.elements_requested or []) + ([fixed_el] if fixed_el else [])
        requested += list(self.undetermined)
        failed_el: dict[str, list[str]] = {}
        for x in self.excluded:
            el = x.get("element")
            if (el and el not in sol.elements and el not in s.exclude_elements
                    and (self.elements_requested is None or el in self.elements_requested)):
                failed_el.setdefault(el, []).append(f"{x['line_id']}: {x['reason']}")
        requested += list(failed_el)
        out = []
        nan = float("nan")
        for e in dict.fromkeys(requested):
            if e in sol.elements or e in s.exclude_elements:
                continue
            if e == fixed_el:
                out.append(ElementResult(e, float(s.fixed[e]), 0.0, nan, nan, 0, [], ["fixed_content"], True))
                continue
            reasons = list(self.undetermined.get(e, []))
            flags = ["not_determined"]
            if not reasons:
                if s.missing == "error":
                    raise DataQualityError(f"element {e} has no usable lines", where=self.where,
                                           fix="add lines for it, or set [cf] missing = 'omit'")
                why = failed_el.get(e, [])
                self._warn(f"element {e} has no usable lines: left out of the closure")
                reasons = ["no usable line" + (": " + "; ".join(why[:6]) if why else " in the line table")]
                flags.append("no_usable_lines")
            out.append(ElementResult(e, nan, nan, nan, nan, 0, [], flags, False, determined=False,
                                     reasons=reasons))
        return out
