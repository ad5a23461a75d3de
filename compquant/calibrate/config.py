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

from dataclasses import asdict, dataclass, field, fields

from compquant.calibrate.curve_models import MODELS, model_doc
from compquant.calibrate.standards import ELEMENT_SYMBOLS
from compquant.errors import MethodError
from compquant.settings import REQUIRED, Setting, Table


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


def _element(v, where, error=MethodError):
    if not isinstance(v, str) or v not in ELEMENT_SYMBOLS:
        raise error(f"{v!r} is not an element symbol", where=where, fix="use a symbol such as Cu, Zn, Pb")
    return v


def _elements(v, where, error=MethodError):
    for el in v:
        _element(el, where, error)
    return v


def _cv_folds(v, where, error):
    if v == 1:
        raise error("'cv_folds' must be 0 (leave-one-out) or >= 2", where=where, fix="use 0")
    return v


BASES = ("ratio", "intensity")
OUTLIERS = ("flag", "exclude")
_MODEL_DOC = "curve model: " + "; ".join(model_doc(m) for m in MODELS)

#: ``[calibration]``; the analytes and the PLS part have tables of their own
CALIBRATION_TABLE = Table("calibration", (
    Setting("basis", "str", "ratio", "response: ratio to the internal-standard line, or the line intensity",
            choices=BASES),
    Setting("matrix_element", "str", None, "element whose line is the internal standard (its content follows by "
            "difference)", check=_element),
    Setting("internal_standard", "str", None, 'internal-standard line id, e.g. "Cu I 510.554"',
            fix='write internal_standard = "Cu I 510.554"'),
    Setting("model", "str", "linear", _MODEL_DOC + " (registry compquant.calibrate.curve_models)", choices=MODELS),
    Setting("through_origin", "bool", False, "curve without intercept"),
    Setting("outliers", "str", "flag", "outlying standards (Bonferroni test on studentised residuals): flag or "
            "exclude", choices=OUTLIERS),
    Setting("outlier_alpha", "float", 0.05, "significance level of the outlier test", min=0, max=0.5,
            min_open=True, max_open=True, fix="use 0.05"),
    Setting("coverage", "str", "k2", '"k2" (U = 2u) or "student" (k = t95 at the effective dof)',
            choices=("k2", "student")),
    Setting("drift", "str", "optional", "drift standardisation with setup samples", choices=("optional", "required",
                                                                                                 "off")),
    Setting("sigma_pt_rel", "float", None, "target sd of check-sample z scores (relative)", min=0, min_open=True,
            fix="e.g. 0.05"),
    Setting("max_above_range", "float", 0.10, "a result above the top standard by more than this fraction of it "
            "is not reported", min=0, max=1, fix="e.g. 0.10 (10 % above the top standard at most)"),
    Setting("analytes", "list", REQUIRED, "one [[calibration.analytes]] table per element", nonempty=True,
            fix="add one [[calibration.analytes]] table per element"),
    Setting("pls", "table", None, "optional multivariate calibration: [calibration.pls]"),
), "Calibration from certified standards (docs/calibration.md).", "compquant.calibrate",
    notes=('basis = "ratio" needs internal_standard and matrix_element; the matrix element is not an analyte.',))

ANALYTE_TABLE = Table("calibration.analytes", (
    Setting("element", "str", REQUIRED, "analyte element", check=_element),
    Setting("line", "str", REQUIRED, 'analyte line id, e.g. "Zn I 481.053"', fix='write line = "Zn I 481.053"'),
    Setting("model", "str", None, "curve model; not set: [calibration] model", choices=MODELS),
    Setting("through_origin", "bool", None, "not set: [calibration] through_origin"),
    Setting("internal_standard", "str", None, "not set: [calibration] internal_standard"),
    Setting("outliers", "str", None, "not set: [calibration] outliers", choices=OUTLIERS),
    Setting("exclude", "list", [], 'standards left out: [{standard = "CRM-1", reason = "..."}]',
            fix='write exclude = [{standard = "CRM-1", reason = "..."}]'),
    Setting("interferences", "list", [], 'interfering analytes: [{element = "Fe", kind = "additive"}] (kind '
            "additive or multiplicative)", fix='write interferences = [{element = "Fe", kind = "additive"}]'),
    Setting("basis", "str", None, "not set: [calibration] basis", choices=BASES),
), "One analyte's curve.", "compquant.calibrate", array=True,
    notes=("An element is listed once; an interfering element must itself be an analyte.",))

EXCLUDE_TABLE = Table("calibration.analytes.exclude", (
    Setting("standard", "any", REQUIRED, "standard id"), Setting("reason", "any", REQUIRED, "why")))
INTERFERENCE_TABLE = Table("calibration.analytes.interferences", (
    Setting("element", "any", REQUIRED, "interfering element", check=_element),
    Setting("kind", "str", REQUIRED, "additive or multiplicative", choices=("additive", "multiplicative"))))

PLS_TABLE = Table("calibration.pls", (
    Setting("analytes", "list", REQUIRED, "elements calibrated by PLS", item="str", nonempty=True, check=_elements,
            fix='write analytes = ["Sn"]'),
    Setting("half_width_nm", "float", 0.3, "half-width of each line window of the X block", unit="nm", min=0,
            min_open=True, fix="e.g. 0.3"),
    Setting("max_components", "int", 5, "largest number of PLS components tried", min=1, fix="e.g. 5"),
    Setting("cv_folds", "int", 0, "cross-validation folds (0 = leave-one-out, else >= 2)", min=0, check=_cv_folds,
            fix="use 0"),
    Setting("alpha", "float", 0.05, "significance level", min=0, max=0.5, min_open=True, max_open=True,
            fix="use 0.05"),
    Setting("lines", "list", None, "line ids whose windows form the X block; not set: all method lines",
            item="str", fix="or leave it out"),
    Setting("normalise", "str", None, 'row normalisation; not set: "internal_standard" for a ratio calibration '
            'with an internal standard, else "total"', choices=("internal_standard", "total", "none")),
), "Optional multivariate (PLS) calibration.", "compquant.calibrate")

TABLES = (CALIBRATION_TABLE, ANALYTE_TABLE, PLS_TABLE)
_CONFIG_FIELDS = frozenset(f.name for f in fields(CalibrationConfig))


def _or(value, default):
    return default if value is None else value


def _analyte(a, i: int, top: dict, source: str) -> AnalyteConfig:
    """One ``[[calibration.analytes]]`` entry; unset keys take the ``[calibration]`` values."""
    w = f"{source}: [[calibration.analytes]] #{i}"
    ANALYTE_TABLE.check_table(a, w, MethodError)
    el = _element(a["element"], f"{w}.element")
    w = f"{source}: calibration.analytes {el}"
    v = ANALYTE_TABLE.parse(a, w, MethodError)
    basis = _or(v["basis"], top["basis"])
    istd = _or(v["internal_standard"], top["internal_standard"])
    if basis == "ratio":
        if not istd:
            raise MethodError("basis 'ratio' needs an internal-standard line", where=w,
                              fix='set internal_standard = "Cu I 510.554" in [calibration]')
        if not top["matrix_element"]:
            raise MethodError("basis 'ratio' needs matrix_element", where=f"{source}: [calibration]",
                              fix='set matrix_element = "Cu"')
        if el == top["matrix_element"]:
            raise MethodError("the matrix element cannot be an analyte of a ratio calibration", where=w,
                              fix="its content follows by difference")
    for e in v["exclude"]:
        EXCLUDE_TABLE.parse(e, f"{w}.exclude", MethodError)
    for e in v["interferences"]:
        INTERFERENCE_TABLE.parse(e, f"{w}.interferences", MethodError)
        if e["element"] == el:
            raise MethodError("an analyte cannot interfere with itself", where=w, fix="remove the entry")
    return AnalyteConfig(
        element=el,
        line=v["line"],
        model=_or(v["model"], top["model"]),
        through_origin=_or(v["through_origin"], top["through_origin"]),
        basis=basis,
        internal_standard=istd if basis == "ratio" else None,
        outliers=_or(v["outliers"], top["outliers"]),
        exclude=[dict(e) for e in v["exclude"]],
        interferences=[{"element": e["element"], "kind": e["kind"]} for e in v["interferences"]],
    )


def _pls(table, top: dict, source: str) -> PLSConfig:
    """``[calibration.pls]``; the default normalisation follows the calibration's basis."""
    w = f"{source}: [calibration.pls]"
    ps = PLS_TABLE.parse(table, w, MethodError)
    istd = top["internal_standard"]
    norm = _or(ps["normalise"], "internal_standard" if (top["basis"] == "ratio" and istd) else "total")
    if norm == "internal_standard" and not istd:
        raise MethodError("normalise = 'internal_standard' needs [calibration] internal_standard",
                          where=w, fix='set internal_standard = "Cu I 510.554" or normalise = "total"')
    return PLSConfig(analytes=list(ps["analytes"]), half_width_nm=ps["half_width_nm"],
                     max_components=ps["max_components"], cv_folds=ps["cv_folds"], alpha=ps["alpha"],
                     lines=ps["lines"], normalise=norm)


def parse_calibration_section(section: dict | None, source: str = "method") -> CalibrationConfig:
    """Validate ``Method.sections['calibration']`` (a plain dict) into a CalibrationConfig.

    Each table goes through its declaration (:data:`CALIBRATION_TABLE`, :data:`ANALYTE_TABLE`,
    :data:`PLS_TABLE`), then the rules that tie them together.

    Parameters
    ----------
    section : dict or None
        The parsed ``[calibration]`` table of a method file (layout in the module docstring and
        docs/calibration.md).
    source : str, default "method"
        Where the section came from, named in the error messages.

    Returns
    -------
    CalibrationConfig
        The validated settings: basis, matrix element, internal standard, default model,
        outlier rule, coverage (``"k2"``: ``U = 2u``; ``"student"``: ``k = t95`` at the effective
        degrees of freedom), drift rule and one ``AnalyteConfig`` per analyte.

    Raises
    ------
    MethodError
        Naming ``<source>: [calibration].<key>``, e.g. when the section is missing or a value is
        not one of its choices.

    See Also
    --------
    calibrate : uses it.
    load_method : reads the method file whose ``sections["calibration"]`` this validates.

    References
    ----------
    .. [1] TOML v1.0.0, Tom's Obvious Minimal Language, specification (https://toml.io/en/v1.0.0).
    .. [2] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 6.2-6.3 and G.4 (``coverage``).
    .. [3] compquant documentation: docs/calibration.md (the ``[calibration]`` reference) and
       docs/method-file.md.

    Examples
    --------
    >>> from compquant import parse_calibration_section
    >>> cfg = parse_calibration_section({
    ...     "basis": "ratio", "matrix_element": "Cu", "internal_standard": "Cu I 510.554",
    ...     "analytes": [{"element": "Zn", "line": "Zn I 481.053"}]})
    >>> cfg.basis, cfg.analytes[0].model, cfg.coverage
    ('ratio', 'linear', 'k2')
    """
    if not section:
        raise MethodError(
            "the method has no [calibration] section",
            where=source,
            fix="add [calibration] and [[calibration.analytes]] (see docs/calibration.md)",
        )
    top = CALIBRATION_TABLE.parse(section, f"{source}: [calibration]", MethodError)
    analytes, seen = [], set()
    for i, a in enumerate(top["analytes"], 1):
        an = _analyte(a, i, top, source)
        if an.element in seen:
            raise MethodError(f"analyte {an.element} listed twice", where=f"{source}: calibration.analytes "
                              f"{an.element}", fix="keep one entry per element")
        seen.add(an.element)
        analytes.append(an)
    for a in analytes:
        for e in a.interferences:
            if e["element"] not in seen:
                raise MethodError(
                    f"interfering element {e['element']} is not an analyte",
                    where=f"{source}: calibration.analytes {a.element}",
                    fix="its content in unknowns must be measured: add it as an analyte",
                )
    # the calibration-wide settings are fields of the same name; model, through_origin and
    # outliers live on in each analyte
    wide = {k: v for k, v in top.items() if k in _CONFIG_FIELDS and k not in ("analytes", "pls")}
    pls = None if top["pls"] is None else _pls(section["pls"], top, source)
    return CalibrationConfig(analytes=analytes, pls=pls, **wide)


__all__ = ["ANALYTE_TABLE", "CALIBRATION_TABLE", "PLS_TABLE", "AnalyteConfig", "PLSConfig", "CalibrationConfig",
           "parse_calibration_section"]
