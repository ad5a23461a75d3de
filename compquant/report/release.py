"""The release rules: when a certificate of analysis is *valid for release*.

One home for every rule (documented rule by rule in ``docs/certificate.md``,
section "Release rules").  A certificate is **not valid for release** when any
rule below finds a reason; every reason is printed on its first page, in its
JSON (``release.reasons``), in the run's ``summary.json`` and on screen, and
the ``analyse`` command then exits with :data:`EXIT_NOT_VALID`.

========================  ==================================================================
rule                      not valid for release when
========================  ==================================================================
analyte-not-reported      an analyte of the method has no result for the sample (curve not
                          made, line not found, all shots rejected, outside the calibrated
                          range by more than the method allows); the matrix by difference is
                          then *not determined*, never closed over the analytes left, and
                          nor is any result that is a ratio to the matrix
                          (:func:`matrix_dependents`)
closure                   the reported elements and the matrix do not close: their sum
                          differs from 100 % by more than its expanded uncertainty, or the
                          matrix by difference is negative / above 100 % beyond its U
check-not-evaluated       a check sample the run holds is not evaluated (its standard is
                          not in the standards file, an analyte it certifies has no result)
check-failed              a check sample fails ``|En| <= 1`` (and ``|z| < 3`` when set)
check-uninformative       a check could not have failed: sqrt(U_x^2 + U_X^2) >= 3 sigma_pt
check-flagged             a check rests on a flagged line or value (see
                          :data:`CHECK_BLOCKING_FLAGS`)
                          (the check rules apply to the elements whose certified content
                          in the check material is at least their LOQ, :func:`in_scope`;
                          the others are listed as not verified; a check sample with no
                          such element is not evaluated)
lte                       a criterion for local thermodynamic equilibrium is not met
                          (calibration-free analysis)
method-step-skipped       a step the method asks for was skipped (also listed under
                          "Deviations from the method")
dates                     receipt after measurement, issue before measurement, or the time
                          of measurement unknown
========================  ==================================================================

The informativeness rule follows ISO 13528:2015 practice (from memory of ISO 13528:2015,
clauses 8 and 9): a performance check is only useful when the uncertainty of the
comparison is small against the standard deviation for proficiency assessment
sigma_pt.  Here a check is *informative* when a bias of 3 sigma_pt -- the action limit of the
z score -- would give ``|En| > 1``, i.e. when ``sqrt(U_x^2 + U_X^2) < 3 sigma_pt``.
sigma_pt is ``sigma_pt_rel x X`` when the method sets ``[calibration] sigma_pt_rel``, else the
Horwitz function in Thompson's form (:func:`horwitz_sigma`; Thompson, Analyst 125 (2000)
385-386), a general model for sigma_pt that ISO 13528:2015 8.4 allows.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass

#: the two release states, named once; every output uses these words
VALID_FOR_RELEASE = "valid for release"
NOT_VALID_FOR_RELEASE = "not valid for release"

#: exit code of ``compquant analyse`` / ``demo`` when the run completed but a certificate is not
#: valid for release (0: all valid; 2: input error)
EXIT_NOT_VALID = 3

#: flags on a check sample's result that make the check rest on a flagged line or value
CHECK_BLOCKING_FLAGS = frozenset(
    {"not_found", "low_snr", "saturated", "shifted", "istd_not_positive", "below_lod", "single_shot"}
)

#: rule id -> the title that starts every reason of that rule (docs/certificate.md)
RULES = {
    "analyte-not-reported": "analyte not reported",
    "closure": "results do not close",
    "check-not-evaluated": "check sample not evaluated",
    "check-failed": "check sample failed",
    "check-uninformative": "check sample cannot fail",
    "check-flagged": "check sample rests on a flagged result",
    "lte": "LTE criterion not met",
    "method-step-skipped": "method step skipped",
    "dates": "dates",
}


def release_status(valid: bool) -> str:
    """The release state in words: :data:`VALID_FOR_RELEASE` or :data:`NOT_VALID_FOR_RELEASE`."""
    return VALID_FOR_RELEASE if valid else NOT_VALID_FOR_RELEASE


def reason(rule: str, text: str) -> str:
    """One reason, starting with its rule's title (so a reader can find the rule)."""
    return f"{RULES[rule]}: {text}"


def rule_of(text: str) -> str | None:
    """The rule id a reason text belongs to (None for a reason from elsewhere)."""
    for rid, title in RULES.items():
        if text.startswith(title + ":"):
            return rid
    return None


def _finite(x) -> bool:
    return x is not None and not isinstance(x, bool) and isinstance(x, (int, float)) and math.isfinite(x)


def _pct(x: float) -> str:
    return f"{100 * x:.4g} %"


# ---------------------------------------------------------------------------- analytes, closure


def analytes_not_reported(analytes, rows, not_reported_sample: list[dict]) -> dict[str, str]:
    """``{element: why}`` for every analyte of the method without a result for the sample.

    ``rows``: the sample's result rows (attributes ``element``, ``mass_fraction``, ``below_lod``);
    a value below the LOD is a result.  ``not_reported_sample``: the analysis' own reasons
    (dicts with ``element`` and ``reason``), used for the words.
    """
    why = {}
    for d in not_reported_sample:
        for el in str(d.get("element", "")).split(","):
            if el:
                why.setdefault(el, str(d.get("reason", "")))
    have = {r.element for r in rows if r.below_lod or _finite(r.mass_fraction)}
    return {el: why.get(el, "no result") for el in analytes if el not in have}


def matrix_dependents(missing: dict[str, str], rows, ratio_elements, matrix_element: str | None) -> dict[str, str]:
    """``{element: why}`` for results that are ratios to the matrix, when the matrix is not determined.

    With an internal-standard (ratio) calibration each mass fraction is ``w_a = r_a w_m`` with the
    matrix ``w_m`` by difference; closed over a subset of the analytes ``w_m`` is too high, and so
    is every ``w_a``.  So when an analyte is missing none of them is determined.
    """
    if not missing or not matrix_element:
        return {}
    why = f"a ratio to {matrix_element}, whose mass fraction by difference is not determined"
    return {r.element: why for r in rows if r.element in set(ratio_elements) and r.element not in missing}


def analyte_reasons(missing: dict[str, str], matrix_element: str | None, dependent=None) -> list[str]:
    out = [reason("analyte-not-reported", f"{el} ({why})") for el, why in missing.items()]
    if dependent:
        out.append(reason("analyte-not-reported", f"{', '.join(dependent)} not determined: each is "
                          f"{next(iter(dependent.values()))}"))
    if missing and matrix_element:
        out.append(
            reason(
                "analyte-not-reported",
                f"{matrix_element} by difference is not determined, because "
                f"{', '.join(missing)} {'is' if len(missing) == 1 else 'are'} not reported",
            )
        )
    return out


def closure_reasons(rows) -> list[str]:
    """Reported elements plus the matrix must close: sum within 100 % +- U (k = 2).

    Values below the LOD count as zero with U = LOD; the sum's U is the root sum of squares
    (correlations ignored: the rule flags gross inconsistencies only).  Results of a
    calibration-free analysis are normalised to 100 % and close by construction.
    """
    out = []
    vals = [(r, r.mass_fraction if _finite(r.mass_fraction) else None) for r in rows]
    for r, v in vals:
        if "by_difference" in r.flags and v is not None:
            U = r.U if _finite(r.U) else 0.0
            if v + U < 0 or v - U > 1:
                out.append(reason("closure", f"{r.element} by difference is {_pct(v)} (U {_pct(U)})"))
    total, var = 0.0, 0.0
    for r, v in vals:
        if r.below_lod:
            var += (r.lod or 0.0) ** 2
        elif v is not None:
            total += v
            var += (r.U if _finite(r.U) else 0.0) ** 2
    has_matrix = any("by_difference" in r.flags and _finite(r.mass_fraction) for r in rows)
    U = math.sqrt(var)
    if total - U > 1.0 + 1e-9 or (has_matrix and abs(total - 1.0) > U + 1e-6):
        out.append(reason("closure", f"the reported mass fractions sum to {_pct(total)} (U {_pct(U)}), not 100 %"))
    return out


# ---------------------------------------------------------------------------- check samples


def horwitz_sigma(X: float) -> float:
    """Horwitz function in Thompson's form, sigma as a mass fraction (g/g) for content X (g/g).

    sigma = 0.22 X for X < 1.2e-7; 0.02 X^0.8495 for 1.2e-7 <= X <= 0.138; 0.01 X^0.5 above
    (M. Thompson, "Recent trends in inter-laboratory precision at ppb and sub-ppb
    concentrations in relation to fitness for purpose criteria in proficiency testing",
    Analyst 125 (2000) 385-386).
    """
    X = abs(float(X))
    if X < 1.2e-7:
        return 0.22 * X
    if X <= 0.138:
        return 0.02 * X**0.8495
    return 0.01 * X**0.5


def sigma_pt(certified: float, sigma_pt_rel: float | None) -> float:
    """Standard deviation for proficiency assessment of a check (g/g)."""
    if sigma_pt_rel:
        return float(sigma_pt_rel) * abs(float(certified))
    return horwitz_sigma(certified)


def informative(U_measured, U_certified, certified: float, sigma_pt_rel: float | None) -> bool:
    """True when a bias of 3 sigma_pt would fail the check (``|En| > 1``): see the module doc."""
    if not _finite(U_measured):
        return False
    Uc = U_certified if _finite(U_certified) else 0.0
    return math.hypot(U_measured, Uc) < 3.0 * sigma_pt(certified, sigma_pt_rel)


def in_scope(c) -> bool:
    """A check element counts when its certified content is at least the LOQ in the check sample.

    Below the LOQ a found value is only indicative (the certificate says so of any result), so
    a comparison there verifies nothing; such elements are listed as not verified by the check.
    """
    # imported here: importing compquant.calibrate.checks runs the whole calibrate package's
    # imports (about 2 s), which the report should not pay on import
    from compquant.calibrate.checks import counted

    return counted(c.certified, getattr(c, "loq", None))


def check_reasons(checks, sigma_pt_rel: float | None = None) -> list[str]:
    """Reasons from the evaluated checks (:class:`~compquant.report.certificate.CheckResult`)."""
    out = []
    by_sample: dict[str, list] = {}
    for c in checks:
        by_sample.setdefault(c.sample_id, []).append(c)
    for sid, cs in by_sample.items():
        if not any(in_scope(c) for c in cs):
            out.append(reason("check-not-evaluated", f"{sid}: no certified content of an analyte is above its LOQ"))
    for c in checks:
        if not in_scope(c):
            continue
        tag = f"{c.sample_id} ({c.standard_ref}), {c.element}"
        if not c.passed:
            out.append(reason("check-failed", f"{tag}: {c.criterion} not met"))
        flagged = sorted(set(getattr(c, "flags", []) or []) & CHECK_BLOCKING_FLAGS)
        if flagged:
            out.append(reason("check-flagged", f"{tag}: {', '.join(flagged)}"))
        if not informative(c.U_measured, c.U_certified, c.certified, sigma_pt_rel):
            s = sigma_pt(c.certified, sigma_pt_rel)
            Um = f"{_pct(c.U_measured)}" if _finite(c.U_measured) else "unknown"
            out.append(
                reason(
                    "check-uninformative",
                    f"{tag}: U found {Um} against 3 sigma_pt = {_pct(3 * s)} (certified {_pct(c.certified)})",
                )
            )
    return out


def check_state(c, sigma_pt_rel: float | None = None) -> str:
    """One word for a check's outcome as printed: pass, FAIL, flagged, cannot fail or not counted
    (certified content below the LOQ)."""
    if not in_scope(c):
        return "not counted"
    if not c.passed:
        return "FAIL"
    if set(getattr(c, "flags", []) or []) & CHECK_BLOCKING_FLAGS:
        return "flagged"
    if not informative(c.U_measured, c.U_certified, c.certified, sigma_pt_rel):
        return "cannot fail"
    return "pass"


def sigma_pt_rel_of(cert) -> float | None:
    sp = cert.provenance.parameters.get("sigma_pt_rel") if cert.provenance else None
    return float(sp) if _finite(sp) else None


def checks_not_evaluated(
    check_samples: dict[str, str], certified: dict, analytes, checks, why_missing=None
) -> list[str]:
    """Texts for check samples of the run (``{sample_id: standard_ref}``) not evaluated.

    ``certified``: ``{standard_id: {element: ...}}``; ``analytes``: the method's analytes;
    ``checks``: the evaluated checks; ``why_missing``: a reason that applies to all (e.g. the
    analysis has no way to evaluate them).
    """
    done = {(c.sample_id, c.element) for c in checks}
    out = []
    for sid, ref in check_samples.items():
        if why_missing:
            out.append(f"{sid} ({ref or 'no standard named'}): {why_missing}")
            continue
        if not ref or ref not in certified:
            out.append(f"{sid}: its standard {ref!r} is not in the standards file" if ref else
                       f"{sid}: the run names no standard for it")
            continue
        miss = [el for el in analytes if el in certified[ref] and (sid, el) not in done]
        if miss:
            out.append(f"{sid} ({ref}): no result for {', '.join(miss)}")
    return out


# ---------------------------------------------------------------------------- steps, dates


def _parse_time(s: str) -> _dt.datetime | None:
    s = str(s or "").strip()
    if not s:
        return None
    try:
        t = _dt.datetime.fromisoformat(s.replace("Z", "+00:00"))
    except ValueError:
        try:
            t = _dt.datetime.combine(_dt.date.fromisoformat(s[:10]), _dt.time())
        except ValueError:
            return None
    return t if t.tzinfo else t.replace(tzinfo=_dt.timezone.utc)


def date_reasons(received: str, measured: str, issued_at: str) -> list[str]:
    """Receipt on or before the day of measurement, issue at or after it, measurement known."""
    out = []
    tm = _parse_time(measured)
    if tm is None:
        out.append(
            reason(
                "dates",
                "the time of measurement is unknown (the run states no acquisition start_time); "
                "give it with 'compquant convert --acquisition start_time=...' or 'analyse --measured'",
            )
        )
        return out
    day = tm.astimezone(_dt.timezone.utc).date()
    tr = _parse_time(received)
    if tr is not None and tr.date() > day:
        out.append(reason("dates", f"received {tr.date().isoformat()}, after the measurement on {day.isoformat()}"))
    ti = _parse_time(issued_at)
    if ti is not None and ti < tm:
        out.append(reason("dates", f"issued {issued_at}, before the measurement at {measured}"))
    return out


@dataclass
class Deviation:
    """A departure from the method; ``blocks`` when the method asked for the step."""

    text: str
    blocks: bool = True


def step_reasons(deviations) -> list[str]:
    return [reason("method-step-skipped", d.text) for d in deviations if d.blocks]


def skipped_steps(notes) -> list[Deviation]:
    """Preprocessing steps the method asked for that the run did not allow (line-measurement notes)."""
    out = []
    for n in notes:
        n = str(n)
        if "asked for but" in n or "not checked" in n or "no usable wavelength shift" in n:
            out.append(Deviation(n))
    return out


# ---------------------------------------------------------------------------- the certificate


def certificate_reasons(cert) -> list[str]:
    """Every reason a certificate is not valid for release, in rule order (empty: valid).

    Rules that need the whole run (analytes, check samples held, skipped steps) are worked out
    by :mod:`compquant.analyse` and carried in ``cert.release_blocks``; the others are derived
    here from the certificate itself.
    """
    blocks = list(cert.release_blocks)
    out = [b for b in blocks if rule_of(b) == "analyte-not-reported"]
    out += closure_reasons(cert.results) if cert.method.basis != "cf" else []
    out += [reason("check-not-evaluated", t) for t in getattr(cert.qc, "not_evaluated", [])]
    out += check_reasons(cert.qc.check_samples, sigma_pt_rel_of(cert))
    if cert.plasma is not None:
        out += [reason("lte", chk.name) for chk in cert.plasma.lte_checks if not chk.passed]
    out += [b for b in blocks if rule_of(b) == "method-step-skipped"]
    out += date_reasons(cert.sample.received, cert.sample.measured, cert.provenance.issued_at)
    out += [b for b in blocks if rule_of(b) not in ("analyte-not-reported", "method-step-skipped")]
    return list(dict.fromkeys(out))


__all__ = [
    "VALID_FOR_RELEASE",
    "NOT_VALID_FOR_RELEASE",
    "EXIT_NOT_VALID",
    "CHECK_BLOCKING_FLAGS",
    "RULES",
    "Deviation",
    "release_status",
    "reason",
    "rule_of",
    "analytes_not_reported",
    "analyte_reasons",
    "matrix_dependents",
    "closure_reasons",
    "horwitz_sigma",
    "sigma_pt",
    "informative",
    "check_reasons",
    "checks_not_evaluated",
    "check_state",
    "in_scope",
    "sigma_pt_rel_of",
    "date_reasons",
    "step_reasons",
    "skipped_steps",
    "certificate_reasons",
]
