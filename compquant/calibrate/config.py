"""The ``[calibration]`` section of a method file, validated.

Layout (docs/calibration.md has the full reference)::

    [calibration]
    basis = "ratio"                 # "ratio" (to the internal standard) or "intensity"
    matrix_element = "Cu"           # element whose line is the internal standard
    internal_standard = "Cu I 510.554"
    model = "linear"                # default model: linear | weighted | quadratic
    through_origin = false
    outliers = "flag"               # "flag" or "exclude" (Bonferroni test on studentised residuals)
    outlier_alpha = 0.05
    coverage = "k2"                 # "k2" (U = 2u) or "student" (k = t95 at the effective dof)
    drift = "optional"              # "optional" | "required" | "off"
    sigma_pt_rel = 0.05             # optional: target sd for check-sample z scores (relative)
    max_above_range = 0.10          # a result above the top standard by more than this fraction of it
                                    # is not reported (the certificate is then not valid for release)

    [[calibration.analytes]]
    element = "Zn"
    line = "Zn I 481.053"
    model = "weighted"              # optional, else the default
    exclude = [{standard = "CRM-07", reason = "certificate withdrawn"}]
    interferences = [{element = "Fe", kind = "additive"}]

    [calibration.pls]               # optional multivariate calibration
    analytes = ["Sn"]
    half_width_nm = 0.3
    max_components = 5
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

from compquant.calibrate.fit import MODELS
from compquant.calibrate.standards import ELEMENT_SYMBOLS
from compquant.errors import MethodError
from compquant.fileio import check_keys

_TOP = {
    "basis",
    "matrix_element",
    "internal_standard",
    "model",
    "through_origin",
    "outliers",
    "outlier_alpha",
    "coverage",
    "drift",
    "sigma_pt_rel",
    "max_above_range",
    "analytes",
    "pls",
}
_AN = {
    "element",
    "line",
    "model",
    "through_origin",
    "internal_standard",
    "outliers",
    "exclude",
    "interferences",
    "basis",
}
_PLS = {"analytes", "half_width_nm", "max_components", "cv_folds", "alpha", "lines", "normalise"}


@dataclass
class AnalyteConfig:
    element: str
    line: str
    model: str = "linear"
    through_origin: bool = False
    basis: str = "ratio"
    internal_standard: str | None = None
    outliers: str = "flag"
    exclude: list = field(default_factory=list)  # [{standard, reason}]
    interferences: list = field(default_factory=list)  # [{element, kind}]


@dataclass
class PLSConfig:
    analytes: list
    half_width_nm: float = 0.3
    max_components: int = 5
    cv_folds: int = 0  # 0 = leave-one-out
    alpha: float = 0.05
    lines: list | None = None  # line ids whose windows form the X block (default: all method lines)
    normalise: str = "total"   # "internal_standard" | "total" (row / window sum) | "none"


@dataclass
class CalibrationConfig:
    analytes: list
    basis: str = "ratio"
    matrix_element: str | None = None
    internal_standard: str | None = None
    outlier_alpha: float = 0.05
    coverage: str = "k2"
    drift: str = "optional"
    sigma_pt_rel: float | None = None
    pls: PLSConfig | None = None
    max_above_range: float = 0.10

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> CalibrationConfig:
        d = dict(d)
        d["analytes"] = [AnalyteConfig(**a) for a in d["analytes"]]
        if d.get("pls"):
            d["pls"] = PLSConfig(**d["pls"])
        return cls(**d)


def _choice(v, allowed, where, key):
    if v not in allowed:
        raise MethodError(
            f"'{key}' must be one of {', '.join(map(str, allowed))} (got {v!r})",
            where=where,
            fix=f'set {key} = "{allowed[0]}"',
        )
    return v


def _bool(v, where, key):
    if not isinstance(v, bool):
        raise MethodError(f"'{key}' must be true or false", where=where, fix=f"write {key} = false")
    return v


def _element(v, where, key):
    if not isinstance(v, str) or v not in ELEMENT_SYMBOLS:
        raise MethodError(
            f"'{key}' = {v!r} is not an element symbol", where=where, fix="use a symbol such as Cu, Zn, Pb"
        )
    return v


def parse_calibration_section(section: dict | None, source: str = "method") -> CalibrationConfig:
    """Validate ``Method.sections['calibration']`` (a plain dict) into a CalibrationConfig.

    Raises :class:`MethodError` naming ``<source>: calibration.<key>``.
    """
    base = f"{source}: [calibration]"
    if not section:
        raise MethodError(
            "the method has no [calibration] section",
            where=source,
            fix="add [calibration] and [[calibration.analytes]] (see docs/calibration.md)",
        )
    check_keys(section, _TOP, base, MethodError, required={"analytes"})
    basis = _choice(section.get("basis", "ratio"), ("ratio", "intensity"), base, "basis")
    model = _choice(section.get("model", "linear"), MODELS, base, "model")
    origin = _bool(section.get("through_origin", False), base, "through_origin")
    outl = _choice(section.get("outliers", "flag"), ("flag", "exclude"), base, "outliers")
    alpha = section.get("outlier_alpha", 0.05)
    if not isinstance(alpha, (int, float)) or not 0 < alpha < 0.5:
        raise MethodError("'outlier_alpha' must be a number in (0, 0.5)", where=base, fix="use 0.05")
    coverage = _choice(section.get("coverage", "k2"), ("k2", "student"), base, "coverage")
    drift = _choice(section.get("drift", "optional"), ("optional", "required", "off"), base, "drift")
    spt = section.get("sigma_pt_rel")
    if spt is not None and (not isinstance(spt, (int, float)) or spt <= 0):
        raise MethodError("'sigma_pt_rel' must be a positive number", where=base, fix="e.g. 0.05")
    mar = section.get("max_above_range", 0.10)
    if isinstance(mar, bool) or not isinstance(mar, (int, float)) or not 0 <= mar <= 1:
        raise MethodError("'max_above_range' must be a fraction between 0 and 1", where=base,
                          fix="e.g. 0.10 (10 % above the top standard at most)")
    matrix = section.get("matrix_element")
    if matrix is not None:
        _element(matrix, base, "matrix_element")
    istd = section.get("internal_standard")
    if istd is not None and not isinstance(istd, str):
        raise MethodError(
            "'internal_standard' must be a line id string",
            where=base,
            fix='write internal_standard = "Cu I 510.554"',
        )
    ans = section["analytes"]
    if not isinstance(ans, list) or not ans:
        raise MethodError(
            "[[calibration.analytes]] is empty",
            where=base,
            fix="add one [[calibration.analytes]] table per element",
        )
    analytes, seen = [], set()
    for i, a in enumerate(ans, 1):
        w = f"{source}: [[calibration.analytes]] #{i}"
        check_keys(a, _AN, w, MethodError, required={"element", "line"})
        el = _element(a["element"], w, "element")
        w = f"{source}: calibration.analytes {el}"
        if el in seen:
            raise MethodError(f"analyte {el} listed twice", where=w, fix="keep one entry per element")
        seen.add(el)
        if not isinstance(a["line"], str):
            raise MethodError("'line' must be a line id string", where=w, fix='write line = "Zn I 481.053"')
        ab = _choice(a.get("basis", basis), ("ratio", "intensity"), w, "basis")
        ai = a.get("internal_standard", istd)
        if ab == "ratio":
            if not ai:
                raise MethodError(
                    "basis 'ratio' needs an internal-standard line",
                    where=w,
                    fix='set internal_standard = "Cu I 510.554" in [calibration]',
                )
            if not matrix:
                raise MethodError("basis 'ratio' needs matrix_element", where=base, fix='set matrix_element = "Cu"')
            if el == matrix:
                raise MethodError(
                    "the matrix element cannot be an analyte of a ratio calibration",
                    where=w,
                    fix="its content follows by difference",
                )
        excl = a.get("exclude", [])
        if not isinstance(excl, list):
            raise MethodError(
                "'exclude' must be a list of {standard, reason}",
                where=w,
                fix='write exclude = [{standard = "CRM-1", reason = "..."}]',
            )
        for e in excl:
            check_keys(e, {"standard", "reason"}, f"{w} exclude", MethodError, required={"standard", "reason"})
        intf = a.get("interferences", [])
        if not isinstance(intf, list):
            raise MethodError(
                "'interferences' must be a list of {element, kind}",
                where=w,
                fix='write interferences = [{element = "Fe", kind = "additive"}]',
            )
        for e in intf:
            check_keys(e, {"element", "kind"}, f"{w} interferences", MethodError, required={"element", "kind"})
            _element(e["element"], f"{w} interferences", "element")
            _choice(e["kind"], ("additive", "multiplicative"), f"{w} interferences", "kind")
            if e["element"] == el:
                raise MethodError("an analyte cannot interfere with itself", where=w, fix="remove the entry")
        analytes.append(
            AnalyteConfig(
                element=el,
                line=a["line"],
                model=_choice(a.get("model", model), MODELS, w, "model"),
                through_origin=_bool(a.get("through_origin", origin), w, "through_origin"),
                basis=ab,
                internal_standard=ai if ab == "ratio" else None,
                outliers=_choice(a.get("outliers", outl), ("flag", "exclude"), w, "outliers"),
                exclude=[dict(e) for e in excl],
                interferences=[{"element": e["element"], "kind": e["kind"]} for e in intf],
            )
        )
    names = {a.element for a in analytes}
    for a in analytes:
        for e in a.interferences:
            if e["element"] not in names:
                raise MethodError(
                    f"interfering element {e['element']} is not an analyte",
                    where=f"{source}: calibration.analytes {a.element}",
                    fix="its content in unknowns must be measured: add it as an analyte",
                )
    pls = None
    if section.get("pls") is not None:
        ps = section["pls"]
        w = f"{source}: [calibration.pls]"
        check_keys(ps, _PLS, w, MethodError, required={"analytes"})
        pa = ps["analytes"]
        if not isinstance(pa, list) or not pa:
            raise MethodError("'analytes' must be a non-empty list of elements", where=w, fix='write analytes = ["Sn"]')
        for el in pa:
            _element(el, w, "analytes")
        hw = ps.get("half_width_nm", 0.3)
        if not isinstance(hw, (int, float)) or hw <= 0:
            raise MethodError("'half_width_nm' must be > 0", where=w, fix="e.g. 0.3")
        mc = ps.get("max_components", 5)
        if not isinstance(mc, int) or isinstance(mc, bool) or mc < 1:
            raise MethodError("'max_components' must be an integer >= 1", where=w, fix="e.g. 5")
        cv = ps.get("cv_folds", 0)
        if not isinstance(cv, int) or isinstance(cv, bool) or cv < 0 or cv == 1:
            raise MethodError("'cv_folds' must be 0 (leave-one-out) or >= 2", where=w, fix="use 0")
        al = ps.get("alpha", 0.05)
        if not isinstance(al, (int, float)) or not 0 < al < 0.5:
            raise MethodError("'alpha' must be in (0, 0.5)", where=w, fix="use 0.05")
        lines = ps.get("lines")
        if lines is not None and (not isinstance(lines, list) or not all(isinstance(s, str) for s in lines)):
            raise MethodError("'lines' must be a list of line ids", where=w, fix="or leave it out")
        dflt = "internal_standard" if (basis == "ratio" and istd) else "total"
        norm = _choice(ps.get("normalise", dflt), ("internal_standard", "total", "none"), w, "normalise")
        if norm == "internal_standard" and not istd:
            raise MethodError("normalise = 'internal_standard' needs [calibration] internal_standard",
                              where=w, fix='set internal_standard = "Cu I 510.554" or normalise = "total"')
        pls = PLSConfig(analytes=list(pa), half_width_nm=float(hw), max_components=mc, cv_folds=cv,
                        alpha=float(al), lines=lines, normalise=norm)
    return CalibrationConfig(
        analytes=analytes,
        basis=basis,
        matrix_element=matrix,
        internal_standard=istd,
        outlier_alpha=float(alpha),
        coverage=coverage,
        drift=drift,
        sigma_pt_rel=None if spt is None else float(spt),
        pls=pls,
        max_above_range=float(mar),
    )


__all__ = ["AnalyteConfig", "PLSConfig", "CalibrationConfig", "parse_calibration_section"]
