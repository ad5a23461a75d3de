"""The ``Calibration``: per-analyte curves and everything needed to apply them, as versioned JSON.

Inverse-prediction uncertainty budget (docs/calibration.md, sec. 3).  For an
unknown with response ``y0`` (standard uncertainty ``u0`` from its ``n`` shots)
and interferer contents ``x_j`` (``u_j``), the content ``x0`` solves
``f(x0; beta, x_j) = y0`` and, by the first-order delta method (GUM 5.1.2)::

    u^2(x0) = [ s_new^2 + g' C g + sum_j (df/dx_j)^2 u_j^2 ] / (df/dx)^2

* ``g = df/dbeta`` at ``x0``; ``C`` the coefficient covariance
  ``max(sigma_hat^2, sigma_stated^2) (X'WX)^-1``;
* ``sigma_hat^2 = sum w r^2 / (n - p)`` the observed residual variance (weighted
  units) and ``sigma_stated^2 = mean_i w_i [u_y,i^2 + (df/dx_i)^2 u_x,i^2 + ...]``
  what the standards' own repeatability and *certified uncertainties* explain
  (effective variance, Orear 1982, Am. J. Phys. 50, 912): the fit is never
  credited with less scatter than the certificates imply;
* ``s_new^2 = sigma_m^2 / w_0 + u0^2`` the scatter of a *new* sample about the
  curve: ``sigma_m^2 = max(sigma_hat^2, sigma_stated^2) - mean_i(w_i u_y,i^2)``,
  the scatter the standards show beyond their own repeatability (matrix effects,
  heterogeneity and the error of their certified values, which cannot be told
  apart with a handful of standards), plus the unknown's own repeatability
  ``u0`` in place of the standards' (``w_0 = 1`` for unweighted fits,
  ``1/u0^2`` for weighted ones -- the statsmodels WLS prediction variance).
  The weight ``w_0`` is the unknown's *repeatability* weight, as the standards'
  weights are: after a drift standardisation ``u0`` also holds the setup
  measurements' terms, which are not repeatability of the sample and do not
  scale its matrix part (``u_weight``, docs/calibration.md sec. 9).

For an OLS straight line with equal repeatabilities and exact certified values
this is ISO 8466-1:1990, eq. (21) with one measurement of the sample::

    s_x0 = (s_y / b) sqrt(1 + 1/N + (y0 - ybar)^2 / (b^2 Sxx))

The effective degrees of freedom follow Welch-Satterthwaite (GUM G.4), with the matrix and fit
parts merged into one component when both come from the residual variance (``nu = n - p``,
``Curve._dof_components``); with ``coverage = "student"`` the coverage factor is
``k = t_0.975(nu_eff)``, else 2.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import asdict, dataclass, field, fields
from datetime import datetime, timezone

import numpy as np
from scipy import stats

from compquant import __version__
from compquant.calibrate.curve_models import TERMS
from compquant.calibrate.fit import d_dxi, design_matrix, invert, slope_at
from compquant.errors import CalibrationError
from compquant.fileio import MAX_CALIBRATION_BYTES, json_ready, read_input, write_text_atomic

SCHEMA = "compquant.calibration"
SCHEMA_VERSION = 1


@dataclass
class Curve:
    """One analyte's calibration curve (content ``x`` vs response ``y``)."""

    element: str
    line_id: str
    basis: str  # "ratio" | "intensity"
    internal_standard: str | None
    model: str
    through_origin: bool
    weighted: bool
    terms: list
    beta: list
    cov_fit: list  # sigma_hat^2 (X'WX)^-1 (statsmodels convention)
    cov: list  # covariance used in the uncertainty budget
    scale: float  # sigma_hat^2
    scale_stated: float  # sigma_stated^2
    sigma_m2: float  # scatter beyond repeatability, weighted units
    dof: int
    r2: float
    residual_sd: float  # sd of unweighted residuals (response units)
    range_x: list  # [lo, hi] contents of the standards used
    range_mass_fraction: list
    matrix_fraction_nominal: float  # mean matrix mass fraction of the standards (ratio basis)
    lod_x: float
    loq_x: float
    lod: float  # mass fraction (nominal matrix for ratio basis)
    loq: float
    lod_source: str
    iso11843: dict | None
    standards: list  # per standard: id, sample, x, u_x, y, u_y, ..., used, reason
    interferences: list = field(default_factory=list)  # [{element, kind, coefficient, u}]
    diagnostics: dict = field(default_factory=dict)

    # ---- evaluation ------------------------------------------------------
    def _beta(self):
        return np.asarray(self.beta, float)

    def response(self, x, xi=None):
        """Response ``y(x, xi)`` of the fitted curve at content(s) ``x``; ``xi``: ``{element: content}``
        of the interfering analytes, those not given taken as 0 (the analyte's own curve, as the
        figures draw it)."""
        xi = {**{it["element"]: 0.0 for it in self.interferences}, **(xi or {})}
        return design_matrix(self.terms, np.atleast_1d(np.asarray(x, float)), xi) @ self._beta()

    def predict_content(
        self, y0: float, u0: float, n_shots: int | None = None, xi=None, u_xi=None, where: str | None = None,
        u_weight: float | None = None,
    ) -> dict:
        """Content ``x0`` of an unknown and its standard uncertainty (see module docstring).

        ``u_weight``: the repeatability part of ``u0`` that sets the weight ``w_0`` of the matrix
        part (default ``u0``; smaller after a drift standardisation, whose terms ``u0`` includes).

        Returns ``{x, u, dof, dydx, dx_dxi: {el: ...}, budget: {...}}``.  A curve whose numbers
        give no finite answer (zero slope at the sample, overflow: a degenerate or edited
        calibration) raises :class:`CalibrationError` instead of a bare arithmetic error.
        """
        try:
            out = self._predict_content(y0, u0, n_shots, xi, u_xi, where, u_weight)
        except (ZeroDivisionError, OverflowError, FloatingPointError, ValueError) as exc:
            raise CalibrationError(
                f"the curve cannot be evaluated at this response ({exc})",
                where=where or f"{self.element} ({self.line_id})",
                fix="the calibration is degenerate or was edited; re-create it with 'compquant calibrate'",
            ) from None
        if not (math.isfinite(out["x"]) and math.isfinite(out["u"])):
            raise CalibrationError(
                "the curve gives no finite content at this response",
                where=where or f"{self.element} ({self.line_id})",
                fix="the calibration is degenerate or was edited; re-create it with 'compquant calibrate'",
            )
        return out

    def _predict_content(self, y0, u0, n_shots, xi, u_xi, where, u_weight=None) -> dict:
        xi = {k: float(v) for k, v in (xi or {}).items()}
        u_xi = {k: float(v) for k, v in (u_xi or {}).items()}
        beta = self._beta()
        try:
            x0, dydx = invert(self.terms, beta, y0, xi)
        except CalibrationError as exc:
            raise CalibrationError(exc.what, where=where or f"{self.element} ({self.line_id})", fix=exc.fix) from None
        g = design_matrix(self.terms, np.array([x0]), xi)[0]
        C = np.asarray(self.cov, float)
        v_fit = float(g @ C @ g)
        u0 = float(u0) if np.isfinite(u0) else 0.0
        uw = u0 if u_weight is None or not np.isfinite(u_weight) else min(float(u_weight), u0)
        w0 = 1.0 / uw**2 if (self.weighted and uw > 0) else 1.0
        w0 = min(w0, self._matrix_weight(y0))
        v_matrix = self.sigma_m2 / w0
        v_rep = u0**2
        dx_dxi = {}
        v_int = 0.0
        for it in self.interferences:
            el = it["element"]
            dfdxj = float(d_dxi(self.terms, beta, x0, el))
            dx_dxi[el] = -dfdxj / dydx
            v_int += (dfdxj * u_xi.get(el, 0.0)) ** 2
        var = (v_matrix + v_rep + v_fit + v_int) / dydx**2
        comps = self._dof_components(v_matrix, v_rep, v_fit, v_int, w0, n_shots, dydx)
        den = sum(c**2 / nu for c, nu in comps if c > 0 and math.isfinite(nu))
        dof = var**2 / den if den > 0 else math.inf
        return {
            "x": float(x0),
            "u": math.sqrt(var),
            "dof": float(dof),
            "dydx": float(dydx),
            "dx_dxi": dx_dxi,
            "budget": {
                "matrix": v_matrix / dydx**2,
                "repeatability": v_rep / dydx**2,
                "fit": v_fit / dydx**2,
                "interference": v_int / dydx**2,
            },
        }

    def _matrix_weight(self, y0: float) -> float:
        """Weight that turns the excess scatter ``sigma_m^2`` (weighted units) into response units
        at ``y0`` for a weighted curve: ``1 / (rho^2 y0^2)`` with ``rho^2 = 1 / mean_i(y_i^2 / u_y,i^2)``
        the standards' relative repeatability (harmonic mean of ``(u_y,i / y_i)^2``); ``inf`` for
        unweighted curves or without usable standards.

        With stated variances ``u_i^2`` and a relative matrix scatter ``tau^2 y^2`` the excess is
        ``sigma_m^2 = mean_i tau^2 y_i^2 / u_i^2 = tau^2 / rho^2``, so ``sigma_m^2 / w = tau^2 y0^2``:
        the matrix part of a new sample, which its own shots do not reduce (the multiplicative
        between-standards dispersion model, Birge ratio; R. T. Birge, Phys. Rev. 40 (1932) 207;
        compare the additive Paule-Mandel estimate, J. Res. NBS 87 (1982) 377).  The caller takes
        the smaller of this and ``1/u0^2``, so an unknown with more (or better correlated) shots
        than the standards keeps the matrix part it shares with them.
        """
        if not self.weighted or not math.isfinite(y0) or y0 == 0:
            return math.inf
        q = [s["y"] ** 2 / s["u_y"] ** 2 for s in self.standards
             if s.get("used", True) and s.get("u_y", 0) > 0 and math.isfinite(s.get("y", math.nan))]
        if not q:
            return math.inf
        return float(np.mean(q)) / y0**2

    def _dof_components(self, v_matrix, v_rep, v_fit, v_int, w0, n_shots, dydx) -> list:
        """(variance, degrees of freedom) of the independent parts of u^2(x0), for
        Welch-Satterthwaite (GUM G.4.1).

        When the residual scatter sets the coefficient covariance (``sigma_hat >= sigma_stated``),
        the matrix part ``sigma_m^2 / w0 = (sigma_hat^2 - mean w u_y^2) / w0`` and the fit part
        ``g'Cg = sigma_hat^2 g'(X'WX)^-1 g`` both scale with the one estimate ``sigma_hat^2``
        (nu = n - p): they are not independent, so they form one component.  Its random part is
        ``sigma_hat^2 (1/w0 + g'(X'WX)^-1 g)``, and the known offset ``-mean w u_y^2 / w0`` lowers
        its degrees of freedom to ``nu (c / c_random)^2`` (Satterthwaite 1946, Biometrics Bull. 2,
        110, for a linear combination of one mean square).  Otherwise the covariance comes from
        the stated uncertainties (no sampling error) and only the matrix part inherits
        ``sigma_hat^2``'s.
        """
        nu_res = max(self.dof, 1)
        d2 = dydx**2
        nu_rep = max((n_shots or 0) - 1, 1) if n_shots else math.inf
        if self.scale >= self.scale_stated and self.scale > 0:
            merged = (v_matrix + v_fit) / d2
            random = (self.scale / w0 + v_fit) / d2
            nu_merged = max(nu_res * (merged / random) ** 2, 1.0) if random > 0 else math.inf
            return [(merged, nu_merged), (v_rep / d2, nu_rep), (v_int / d2, math.inf)]
        nu_m = max(nu_res * (self.sigma_m2 / self.scale) ** 2, 1.0) if self.scale > 0 else math.inf
        return [(v_matrix / d2, nu_m), (v_rep / d2, nu_rep), (v_fit / d2, math.inf), (v_int / d2, math.inf)]

    def band(self, x, level: float = 0.95, u0: float | None = None) -> tuple:
        """Response of the curve at ``x`` and the half-width of the prediction band.

        ``u0``: repeatability of the new measurement (default: mean of the standards').
        """
        x = np.atleast_1d(np.asarray(x, float))
        X = design_matrix(self.terms, x, {el["element"]: 0.0 for el in self.interferences})
        C = np.asarray(self.cov, float)
        v_fit = np.einsum("ij,jk,ik->i", X, C, X)
        if u0 is None:
            u0 = float(np.mean([s["u_y"] for s in self.standards if s["used"]]))
        w0 = 1.0 / u0**2 if (self.weighted and u0 > 0) else 1.0
        t = stats.t.ppf(0.5 + level / 2, max(self.dof, 1))
        return X @ self._beta(), t * np.sqrt(v_fit + self.sigma_m2 / w0 + u0**2)

    def slope0(self) -> float:
        return float(slope_at(self.terms, self._beta(), 0.0, {it["element"]: 0.0 for it in self.interferences}))


@dataclass
class Calibration:
    """A calibration made from one run of certified standards with one method.

    Per analyte, a curve ``y = f(x; beta)`` of the response (line intensity, or its ratio to the
    internal-standard line) against the certified mass fraction ``x`` (g/g), and everything
    needed to apply it to later runs: the setup samples' reference intensities for drift
    standardisation, the certified values of the standards and the provenance.  A content is
    found by inverse prediction with the uncertainty budget of the module docstring
    (docs/calibration.md, sec. 3; GUM 5.1.2, Welch-Satterthwaite G.4), ``U = k u``.
    Stored as versioned JSON (``save`` / ``load``, docs/calibration.md).

    Attributes
    ----------
    method_id, method_version, method_sha256, method_path : str
        The method the calibration was made with (its SHA-256 is checked on loading).
    run_sha256, run_path : str
        The calibration run.
    standards_sha256, standards_path : str
        The certified-standards file.
    standards : list
        Certified values of every standard referenced by the run.
    basis : str
        ``"ratio"`` (to the internal standard) or ``"intensity"``.
    matrix_element : str or None
        Element whose line is the internal standard (closure by difference).
    curves : dict
        Element -> ``Curve`` (coefficients, covariance, diagnostics, LOD/LOQ).
    rejected : dict
        Element -> reason, for analytes whose curve could not be made.
    setup_reference : dict
        Setup sample -> line -> ``[I, u]`` and, per ratio curve, ``"<line> / <internal standard>"``
        -> ``[R, u]`` (its response), the references of drift standardisation.
    settings : dict
        The validated ``[calibration]`` section.
    lines : list of str
        The lines the curves use (analyte and internal-standard lines).
    pls : dict or None
        Optional PLS block (``compquant.calibrate.pls``).
    created_utc : str
        Creation time, ISO 8601 UTC (default now).
    package_version, schema, schema_version
        Version of compquant that made it and of the JSON schema.

    See Also
    --------
    calibrate : makes it.
    quantify : applies it to a run.

    References
    ----------
    .. [1] ISO 8466-1:1990, Water quality -- Calibration and evaluation of analytical methods and
       estimation of performance characteristics -- Part 1: Statistical evaluation of the linear
       calibration function (eq. (21), inverse prediction).
    .. [2] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 5.1.2 and G.4.
    .. [3] Orear, Am. J. Phys. 50 (1982) 912 (effective variance).
    .. [4] compquant documentation: docs/calibration.md (statistics and the JSON file).
    """

    method_id: str
    method_version: str
    method_sha256: str
    run_sha256: str
    run_path: str
    standards_sha256: str
    standards_path: str
    standards: list  # certified values of every standard referenced by the run
    basis: str
    matrix_element: str | None
    curves: dict  # element -> Curve
    rejected: dict = field(default_factory=dict)  # element -> reason
    setup_reference: dict = field(default_factory=dict)  # sample -> line or response key -> [value, u]
    settings: dict = field(default_factory=dict)  # validated [calibration] section
    lines: list = field(default_factory=list)
    pls: dict | None = None
    method_path: str = ""
    created_utc: str = ""
    package_version: str = __version__
    schema: str = SCHEMA
    schema_version: int = SCHEMA_VERSION

    def __post_init__(self):
        if not self.created_utc:
            self.created_utc = datetime.now(timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")

    @property
    def calibration_id(self) -> str:
        """Short id: method id, creation time and the first 8 hex of the run hash."""
        stamp = self.created_utc.replace("-", "").replace(":", "")
        return f"{self.method_id}-{stamp}-{self.run_sha256[:8]}"

    # ---- JSON ------------------------------------------------------------
    def to_dict(self) -> dict:
        d = asdict(self)
        d["calibration_id"] = self.calibration_id
        return _clean(d)

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=1, allow_nan=False)

    def save(self, path) -> None:
        """Write the calibration as JSON, atomically."""
        write_text_atomic(path, self.to_json() + "\n")

    @classmethod
    def from_dict(cls, d: dict, where: str = "calibration") -> Calibration:
        if not isinstance(d, dict) or d.get("schema") != SCHEMA:
            raise CalibrationError(
                "not a compquant calibration file",
                where=where,
                fix="give the JSON written by 'compquant calibrate'",
            )
        ver = d.get("schema_version")
        if not isinstance(ver, int):
            raise CalibrationError(
                "calibration file has no schema version",
                where=where,
                fix="re-create it with 'compquant calibrate'",
            )
        if ver > SCHEMA_VERSION:
            raise CalibrationError(
                f"calibration schema version {ver} is newer than this compquant reads ({SCHEMA_VERSION})",
                where=where,
                fix="upgrade compquant to read it",
            )
        d = dict(d)
        d.pop("calibration_id", None)
        try:
            if not isinstance(d["curves"], dict):
                raise TypeError("'curves' is not a table")
            d["curves"] = {k: Curve(**_unclean(v)) for k, v in d["curves"].items()}
            cal = cls(**_unclean(d))
            _check_types(cal, "calibration")
            for el, c in cal.curves.items():
                _check_curve(c, f"curve {el}")
                _check_curve_numbers(el, c, where)
            _check_settings(cal.settings)
            if cal.pls is not None:
                _check_pls(cal.pls)
            return cal
        except (TypeError, KeyError, AttributeError, ValueError) as exc:
            raise CalibrationError(
                f"calibration file is incomplete or damaged ({exc})",
                where=where,
                fix="re-create it with 'compquant calibrate'",
            ) from None

    @classmethod
    def load(cls, path, *, method_id: str | None = None, method_sha256: str | None = None) -> Calibration:
        """Read a calibration JSON; refuse newer schemas and a different method id or hash.

        ``path``: the file, ``-`` for standard input (:func:`compquant.fileio.read_stdin`: refused
        when a terminal or empty) or an :class:`~compquant.fileio.InputBytes` already read (the
        caller keeps its ``name`` and ``sha256``, the SHA-256 of the bytes parsed, for provenance).
        At most :data:`compquant.fileio.MAX_CALIBRATION_BYTES`.
        """
        src = read_input(path, "calibration file", limit=MAX_CALIBRATION_BYTES, error=CalibrationError)
        where = src.where
        try:
            d = json.loads(src.data.decode("utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise CalibrationError(
                f"not valid JSON ({exc})", where=where, fix="give the JSON written by 'compquant calibrate'"
            ) from None
        cal = cls.from_dict(d, where=where)
        cal.check_method(method_id, method_sha256, where=where)
        return cal

    def check_method(self, method_id=None, method_sha256=None, where="calibration") -> None:
        if method_id is not None and method_id != self.method_id:
            raise CalibrationError(
                f"calibration was made with method '{self.method_id}', not '{method_id}'",
                where=where,
                fix="use the method it was made with, or re-calibrate",
            )
        if method_sha256 is not None and method_sha256 != self.method_sha256:
            raise CalibrationError(
                f"method file differs from the one the calibration was made with "
                f"(sha256 {method_sha256[:12]}... vs {self.method_sha256[:12]}...)",
                where=where,
                fix="use the same method file, or re-calibrate",
            )


_NONFINITE = "__nonfinite__"
_TERM = re.compile(rf"^({'|'.join(map(re.escape, TERMS))}|(add|mul):[A-Z][a-z]?)$")  # terms of the registered forms


def _type_ok(value, annotation: str) -> bool:
    for alt in (a.strip() for a in annotation.split("|")):
        if alt == "None" and value is None:
            return True
        if alt == "float" and isinstance(value, (int, float)) and not isinstance(value, bool):
            return True
        if alt == "int" and isinstance(value, int) and not isinstance(value, bool):
            return True
        if alt == "bool" and isinstance(value, bool):
            return True
        if alt in ("str", "list", "dict") and isinstance(value, {"str": str, "list": list, "dict": dict}[alt]):
            return True
        if type(value).__name__ == alt:  # a nested settings class (PLSConfig ...), checked on its own
            return True
    return False


def _check_types(obj, what: str) -> None:
    """Each dataclass field holds a value of its declared type (the file may have been edited)."""
    for f in fields(obj):
        if isinstance(f.type, str) and not _type_ok(getattr(obj, f.name), f.type):
            raise TypeError(f"{what}: '{f.name}' should be {f.type}, got {getattr(obj, f.name)!r:.40}")


def _numbers(v, n: int | None = None) -> bool:
    return (isinstance(v, list) and (n is None or len(v) == n)
            and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v))


def _check_curve(c: Curve, what: str) -> None:
    """What applying a curve relies on: term names, coefficient and covariance shapes, ranges."""
    _check_types(c, what)
    p = len(c.terms)
    if not p or not all(isinstance(t, str) and _TERM.match(t) for t in c.terms):
        raise TypeError(f"{what}: bad design terms {c.terms!r:.60}")
    if not _numbers(c.beta, p):
        raise TypeError(f"{what}: 'beta' should be {p} numbers")
    for name in ("cov", "cov_fit"):
        m = getattr(c, name)
        if not (isinstance(m, list) and len(m) == p and all(_numbers(r, p) for r in m)):
            raise TypeError(f"{what}: '{name}' should be a {p} x {p} matrix")
    for name in ("range_x", "range_mass_fraction"):
        if not _numbers(getattr(c, name), 2):
            raise TypeError(f"{what}: '{name}' should be two numbers")
    if not all(isinstance(s, dict) for s in c.standards) or not all(
        isinstance(it, dict) and isinstance(it.get("element"), str) for it in c.interferences
    ):
        raise TypeError(f"{what}: 'standards' / 'interferences' should be tables")


def _check_curve_numbers(key: str, c: Curve, where: str) -> None:
    """What a curve must hold to give a right answer: a known element, finite numbers, a
    non-negative variance and a response that rises with the content over the calibrated range.

    A slope at or below zero, a NaN or a negative variance makes every content from the curve
    wrong or undefined (ISO 11095:1996, linear calibration: the inverse needs a non-zero slope;
    a variance is never negative), so the file is refused when it is read, not after the work.
    """
    from compquant.atomic.elements import known_symbols

    w = f"{where}: curve {key!r:.24}"
    fix = "the calibration was edited or damaged; re-create it with 'compquant calibrate'"
    if key != c.element or c.element not in known_symbols():
        raise CalibrationError(f"curve element {c.element!r:.24} is not a chemical element symbol"
                               + ("" if key == c.element else f" or differs from its key {key!r:.24}"),
                               where=w, fix=fix)
    nums = {"beta": c.beta, "cov": [x for r in c.cov for x in r], "cov_fit": [x for r in c.cov_fit for x in r],
            "range_x": c.range_x, "scale": [c.scale], "sigma_m2": [c.sigma_m2]}
    for name, vals in nums.items():
        if not all(math.isfinite(float(v)) for v in vals):
            raise CalibrationError(f"'{name}' holds NaN or infinite numbers", where=w, fix=fix)
    p = len(c.terms)
    variances = [c.cov[i][i] for i in range(p)] + [c.cov_fit[i][i] for i in range(p)] + [c.scale, c.sigma_m2]
    if min(variances) < 0:
        raise CalibrationError("a variance is negative (covariance diagonal, scale or sigma_m2)", where=w, fix=fix)
    lo, hi = (float(v) for v in c.range_x)
    if not hi >= lo:
        raise CalibrationError(f"calibrated range {lo:g} to {hi:g} is reversed", where=w, fix=fix)
    grid = np.linspace(lo, hi if hi > lo else lo + 1.0, 9)
    xi = {it["element"]: 0.0 for it in c.interferences}
    slopes = [float(slope_at(c.terms, c._beta(), float(x), xi)) for x in grid]
    if not all(math.isfinite(v) and v > 0 for v in slopes):
        bad = next(v for v in slopes if not (math.isfinite(v) and v > 0))
        raise CalibrationError(f"the response does not rise with the content (slope {bad:.3g} within the "
                               "calibrated range)", where=w, fix=fix)


def _check_settings(settings: dict) -> None:
    """The saved ``[calibration]`` settings rebuild a :class:`CalibrationConfig` of the declared types."""
    from compquant.calibrate.config import CalibrationConfig

    cfg = CalibrationConfig.from_dict(settings)
    _check_types(cfg, "settings")
    for a in cfg.analytes:
        _check_types(a, f"settings analyte {a.element!r:.20}")
    if cfg.pls is not None:
        _check_types(cfg.pls, "settings pls")
    spt = cfg.sigma_pt_rel
    if spt is not None and not (math.isfinite(spt) and spt > 0):
        raise TypeError(f"settings: 'sigma_pt_rel' should be a positive number, got {spt!r:.20}")


# what applying a saved PLS model reads, with the type each entry must have
_PLS_MODEL_KEYS = {
    "n_components": int, "rmsecv": float, "x_mean": list, "x_scale": list, "coef": list, "intercept": float,
    "x_rotations": list, "x_loadings": list, "score_var": list, "t2_limit": float, "q_limit": float,
    "n": int, "y_range": list, "wavelength_mask_nm": list, "lines": list,
}


def _check_pls(pls) -> None:
    """A saved PLS block holds every entry that :func:`compquant.calibrate.pls.predict_pls` reads."""
    if not isinstance(pls, dict) or not isinstance(pls.get("models"), dict) or not pls["models"]:
        raise TypeError("pls: 'models' should be a non-empty table")
    if pls.get("normalise") not in ("internal_standard", "total", "none"):
        raise TypeError("pls: 'normalise' should be internal_standard, total or none")
    if pls.get("target") not in ("ratio", "mass_fraction"):
        raise TypeError("pls: 'target' should be ratio or mass_fraction")
    if pls.get("is_mask_nm") is not None and not _numbers(pls["is_mask_nm"]):
        raise TypeError("pls: 'is_mask_nm' should be a list of numbers")
    for el, m in pls["models"].items():
        if not isinstance(m, dict):
            raise TypeError(f"pls model {el!r:.20}: not a table")
        for key, kind in _PLS_MODEL_KEYS.items():
            v = m.get(key)
            ok = (_numbers([v]) if kind is float else isinstance(v, kind) and not isinstance(v, bool))
            if not ok:
                raise TypeError(f"pls model {el!r:.20}: '{key}' should be {kind.__name__}")
        if not (_numbers(m["y_range"], 2) and _numbers(m["wavelength_mask_nm"]) and _numbers(m["coef"])):
            raise TypeError(f"pls model {el!r:.20}: 'y_range', 'wavelength_mask_nm' and 'coef' should be numbers")
        if not all(isinstance(s, str) for s in m["lines"]):
            raise TypeError(f"pls model {el!r:.20}: 'lines' should be line ids")


def _clean(o):
    """JSON-safe copy: numpy -> python, +-inf/nan -> tagged strings (JSON has no inf)."""
    return json_ready(o, nonfinite=lambda f: {_NONFINITE: repr(f)})


def _unclean(o):
    if isinstance(o, dict):
        if set(o) == {_NONFINITE}:
            return float(o[_NONFINITE])
        return {k: _unclean(v) for k, v in o.items()}
    if isinstance(o, list):
        return [_unclean(v) for v in o]
    return o


__all__ = ["Curve", "Calibration", "SCHEMA", "SCHEMA_VERSION"]
