"""Statements of conformity to a specification, with their decision rules.

A *decision rule* says how the measurement uncertainty is taken into account
when a measured value is compared with a tolerance limit (ISO/IEC 17025:2017,
3.7 and 7.8.6).  The rules follow ILAC G8:09/2019 "Guidelines on Decision Rules
and Statements of Conformity" (from memory of ILAC G8:09/2019, section 4):

``simple-acceptance`` (binary, guard band w = 0)
    *Pass* when the measured value lies within the tolerance limits, *fail*
    otherwise.  The risk of a false accept can approach 50 % for a value at the
    limit; ILAC G8 asks that the customer agrees to this rule.

``guard-band-binary`` (binary, w = U)
    The acceptance limits are moved inside the tolerance limits by the
    expanded uncertainty U (k = 2): *pass* when ``TL_min + U <= x <= TL_max - U``,
    *fail* otherwise (the specific risk of a false accept is then below about
    2.5 % for a normal distribution).

``guard-band`` (non-binary, w = U)
    Four outcomes for an upper limit TL (mirrored for a lower limit)::

        x <= TL - U          pass
        TL - U < x <= TL     conditional pass
        TL < x <= TL + U     conditional fail
        x > TL + U           fail

For two-sided limits the worse of the two outcomes is stated; for several
elements the overall statement is the worst element outcome.  Which side of
each boundary an equality falls on is not fixed by ILAC G8; the choice above
(equality counts toward the better outcome at the tolerance limit) is ours and
common practice.

Values below the limit of detection have no U.  The rule used here (common
practice): the true value is taken to be below the LOD; against an upper limit
the result passes when ``LOD <= TL`` and is *not decided* otherwise; against a
lower limit it fails when ``LOD <= TL`` and is *not decided* otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

PASS = "pass"
CONDITIONAL_PASS = "conditional pass"
CONDITIONAL_FAIL = "conditional fail"
FAIL = "fail"
NOT_DECIDED = "not decided"

#: outcomes from best to worst (``NOT_DECIDED`` is handled separately)
_SEVERITY = {PASS: 0, CONDITIONAL_PASS: 1, CONDITIONAL_FAIL: 2, FAIL: 3}

RULES = {
    "simple-acceptance": (
        "Simple acceptance (ILAC G8:09/2019, 4.2.1; guard band w = 0): a result passes when the "
        "measured value lies within the specified limits and fails otherwise. The measurement "
        "uncertainty is not subtracted from the limits; for a value close to a limit the "
        "probability of a wrong decision can approach 50 %."
    ),
    "guard-band-binary": (
        "Binary statement with guard band w = U (ILAC G8:09/2019, 4.2.2): the acceptance limits "
        "are the specified limits narrowed by the expanded uncertainty U (k = 2); a result passes "
        "when the measured value lies within the acceptance limits and fails otherwise (specific "
        "risk of a false accept below about 2.5 %)."
    ),
    "guard-band": (
        "Non-binary statement with guard band w = U (ILAC G8:09/2019, 4.2.3): pass when the "
        "measured value is inside the limits by at least U; conditional pass when it is inside "
        "the limits by less than U; conditional fail when it is outside the limits by no more "
        "than U; fail when it is outside the limits by more than U (U expanded uncertainty, "
        "k = 2). A conditional outcome means the decision is not certain at about 95 % "
        "coverage."
    ),
}

#: how the rule texts name the coverage of U when every result used k = 2, and the words for
#: results whose U used another factor (Student t at the effective degrees of freedom)
_K2_PHRASES = (("expanded uncertainty U (k = 2)", "expanded uncertainty U (with the coverage factor k given with "
                "each result)"), ("(U expanded uncertainty, k = 2)", "(U expanded uncertainty, with the coverage "
                                  "factor k given with each result)"))


def rule_text(rule: str, coverage_factors=()) -> str:
    """The decision rule in words, naming the coverage factor the results' U used.

    :data:`RULES` states k = 2; when any decided result's U used another k (``coverage =
    "student"``: k = t_0.975(nu_eff), JCGM 100:2008 G.4), the text says U carries the k given
    with each result instead, so it never calls a Student-t U "k = 2".
    """
    text = RULES[rule]
    ks = {round(float(k), 2) for k in coverage_factors if _finite(k)}
    if ks and ks != {2.0}:
        for k2, other in _K2_PHRASES:
            text = text.replace(k2, other)
    return text


#: Plain-word meaning of each outcome, for certificates.
OUTCOME_TEXT = {
    PASS: "conforms",
    CONDITIONAL_PASS: "conforms, with less than 95 % confidence (conditional pass)",
    CONDITIONAL_FAIL: "does not conform, with less than 95 % confidence (conditional fail)",
    FAIL: "does not conform",
    NOT_DECIDED: "no statement of conformity can be made",
}


@dataclass(frozen=True)
class Decision:
    """Outcome of one comparison, and why."""

    outcome: str
    reason: str


def _finite(x) -> bool:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(float(x))


def _upper(x: float, U: float, tl: float, rule: str) -> str:
    if rule == "simple-acceptance":
        return PASS if x <= tl else FAIL
    if rule == "guard-band-binary":
        return PASS if x <= tl - U else FAIL
    # non-binary guard band
    if x <= tl - U:
        return PASS
    if x <= tl:
        return CONDITIONAL_PASS
    if x <= tl + U:
        return CONDITIONAL_FAIL
    return FAIL


def _lower(x: float, U: float, tl: float, rule: str) -> str:
    # mirror image of the upper limit: x >= TL is inside
    return _upper(-x, U, -tl, rule)


def worst(outcomes) -> str:
    """Combine outcomes: the worst decided one, or ``not decided`` when that can hide a worse one."""
    outcomes = list(outcomes)
    if not outcomes:
        return NOT_DECIDED
    decided = [o for o in outcomes if o != NOT_DECIDED]
    if not decided:
        return NOT_DECIDED
    w = max(decided, key=_SEVERITY.__getitem__)
    if len(decided) < len(outcomes) and w in (PASS, CONDITIONAL_PASS):
        # an undecided element could still fail: no overall pass can be stated
        return NOT_DECIDED
    return w


def decide(
    value: float | None,
    U: float | None,
    *,
    lower: float | None = None,
    upper: float | None = None,
    rule: str = "guard-band",
    below_lod: bool = False,
    lod: float | None = None,
) -> Decision:
    """Decide conformity of one measured value with a lower and/or upper tolerance limit.

    Parameters
    ----------
    value, U : float
        Measured value and its expanded uncertainty (k = 2), same unit as the limits.
    lower, upper : float, optional
        Tolerance limits (``min``, ``max`` of the specification); at least one.
    rule : str
        ``simple-acceptance``, ``guard-band-binary`` or ``guard-band`` (see module doc).
    below_lod, lod : bool, float
        For a result below the limit of detection: the LOD it is below.
    """
    if rule not in RULES:
        raise ValueError(f"unknown decision rule {rule!r}")
    if lower is None and upper is None:
        raise ValueError("decide() needs a lower or an upper limit")
    if below_lod:
        if not _finite(lod):
            return Decision(NOT_DECIDED, "below the limit of detection, LOD unknown")
        outs = []
        if upper is not None:
            outs.append(PASS if lod <= upper else NOT_DECIDED)
        if lower is not None:
            outs.append(FAIL if lod <= lower else NOT_DECIDED)
        out = worst(outs)
        if out == NOT_DECIDED:
            return Decision(
                out,
                "below the limit of detection, but the LOD is not below the upper limit / above the lower limit",
            )
        if out == FAIL:
            return Decision(out, "below the limit of detection, which is below the minimum")
        return Decision(out, "below the limit of detection, which is below the maximum")
    if not _finite(value):
        return Decision(NOT_DECIDED, "no measured value")
    if rule != "simple-acceptance" and not (_finite(U) and U >= 0):
        return Decision(NOT_DECIDED, "no expanded uncertainty for a guard-band rule")
    Uv = float(U) if _finite(U) else 0.0
    outs = []
    if upper is not None:
        outs.append(_upper(float(value), Uv, float(upper), rule))
    if lower is not None:
        outs.append(_lower(float(value), Uv, float(lower), rule))
    out = max(outs, key=_SEVERITY.__getitem__)
    return Decision(out, OUTCOME_TEXT[out])


@dataclass
class ElementConformity:
    """Conformity of one element's result to its specified limits (mass fractions in g/g)."""

    element: str
    lower: float | None
    upper: float | None
    unit: str  # the unit the specification states its limits in
    outcome: str
    reason: str
    value: float | None = None
    U: float | None = None


@dataclass
class ConformityStatement:
    """Statement of conformity of one sample to a specification."""

    specification: str
    grade: str
    rule: str
    rule_text: str
    elements: list[ElementConformity] = field(default_factory=list)
    outcome: str = NOT_DECIDED
    statement: str = ""
    source: str = ""


def assess_conformity(spec, results) -> ConformityStatement:
    """Statement of conformity of one sample's results to a specification.

    ``spec`` is a :class:`compquant.report.config.Specification`; ``results`` are
    :class:`compquant.report.certificate.ResultRow` (mass fractions in g/g).
    Remainder (balance) elements are listed but not decided.  An element of the
    specification without a result is *not decided*, so no overall pass can be
    stated for that sample.
    """
    by_el = {r.element: r for r in results}
    elems = []
    for lim in spec.limits:
        r = by_el.get(lim.element)
        if lim.remainder:
            elems.append(
                ElementConformity(
                    lim.element, None, None, lim.unit, "remainder", "balance element, no limit", None, None
                )
            )
            continue
        if r is None:
            elems.append(
                ElementConformity(
                    lim.element, lim.lower, lim.upper, lim.unit, NOT_DECIDED, "not determined by this method"
                )
            )
            continue
        d = decide(
            r.mass_fraction,
            r.U,
            lower=lim.lower,
            upper=lim.upper,
            rule=spec.decision_rule,
            below_lod=r.below_lod,
            lod=r.lod,
        )
        elems.append(
            ElementConformity(
                lim.element,
                lim.lower,
                lim.upper,
                lim.unit,
                d.outcome,
                d.reason,
                None if r.below_lod else r.mass_fraction,
                None if r.below_lod else r.U,
            )
        )
    overall = worst(e.outcome for e in elems if e.outcome != "remainder")
    failing = [e.element for e in elems if e.outcome in (FAIL, CONDITIONAL_FAIL)]
    undecided = [e.element for e in elems if e.outcome == NOT_DECIDED]
    target = f"{spec.name} ({spec.grade})"
    text = {
        PASS: f"Pass: the sample conforms to {target}",
        CONDITIONAL_PASS: f"Conditional pass: the sample conforms to {target}, but at least one result "
        "lies within its expanded uncertainty of a limit",
        CONDITIONAL_FAIL: f"Conditional fail: the sample does not conform to {target}, but at least one "
        "result lies outside a limit by no more than its expanded uncertainty",
        FAIL: f"Fail: the sample does not conform to {target}",
        NOT_DECIDED: f"No statement of conformity to {target} can be made",
    }[overall]
    details = []
    if failing:
        details.append("outside the limits: " + ", ".join(failing))
    if undecided:
        details.append("not decided: " + ", ".join(undecided))
    if details:
        text += " (" + "; ".join(details) + ")"
    text += f", under the decision rule '{spec.decision_rule}'."
    return ConformityStatement(
        spec.name,
        spec.grade,
        spec.decision_rule,
        rule_text(spec.decision_rule, [e.k for e in (by_el.get(lim.element) for lim in spec.limits)
                                       if e is not None and not e.below_lod and _finite(e.U)]),
        elems,
        overall,
        text,
        spec.source,
    )


__all__ = [
    "assess_conformity",
    "PASS",
    "CONDITIONAL_PASS",
    "CONDITIONAL_FAIL",
    "FAIL",
    "NOT_DECIDED",
    "RULES",
    "rule_text",
    "OUTCOME_TEXT",
    "Decision",
    "ElementConformity",
    "ConformityStatement",
    "decide",
    "worst",
]
