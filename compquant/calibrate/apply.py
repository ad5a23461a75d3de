"""Apply a calibration to the line measurements of a run: results per sample and element.

Steps (docs/calibration.md):

1. drift standardisation of each curve's responses (intensity, or ratio to the internal
   standard) with the run's setup samples (two-point, :mod:`compquant.calibrate.drift`)
   against the references stored at calibration time, unless the run is the
   calibration run itself;
2. per analyte, the response of every sample and the inverse prediction of its
   content with standard uncertainty; interference corrections use the contents
   of the interfering analytes in the same sample, solved by fixed-point
   iteration;
3. for an internal-standard (ratio) calibration, mass fractions follow by
   closure with the matrix element by difference::

       w_m = (1 - sum_intensity-basis w) / (1 + sum_ratio r),   w_a = r_a w_m

   with the uncertainties propagated through the Jacobian (GUM 5.1.2);
4. flags (``below_lod``, ``above_range``, ``below_range``, line flags, ...) and
   ``U = k u``;
5. check samples against their certified values (ISO 13528 E_n, zeta, z); a failed
   check flags every result of the run ``check_failed`` and makes the run not
   valid for release.

Results table columns (docs/architecture.md): ``sample_id, element,
mass_fraction, u, U, k, lod, loq, below_lod, flags, basis, line_id`` plus
``role`` (the sample's role) and ``dof`` (effective degrees of freedom).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from compquant import results as _results
from compquant.calibrate.build import certified_table, standard_map
from compquant.calibrate.checks import check_verdict, counted, en_number, z_score, zeta_score
from compquant.calibrate.drift import correct, reference_response, response_key, two_point
from compquant.calibrate.model import Calibration
from compquant.calibrate.predict import coverage_factor, pls_rows, predict_sample, sample_rows
from compquant.calibrate.response import sample_responses
from compquant.errors import CalibrationError, DataQualityError

#: the results table's columns, declared once (name, dtype, unit, meaning) in compquant.results
RESULT_COLUMNS = list(_results.RESULT_COLUMNS)
CHECK_COLUMNS = [
    "sample_id",
    "standard_id",
    "element",
    "measured",
    "u",
    "U",
    "certified",
    "u_certified",
    "U_certified",
    "En",
    "zeta",
    "z",
    "passed",
    "loq",
    "counted",
]


@dataclass
class QuantifyResult:
    """Results table, check-sample table, drift record and provenance of one quantification.

    Attributes
    ----------
    results : DataFrame
        One row per (sample, element): columns :data:`RESULT_COLUMNS` (docs/architecture.md,
        :mod:`compquant.results`), mass fractions in g/g, ``U = k u``.
    checks : DataFrame
        One row per (check sample, element): measured and certified values with the ISO 13528
        ``E_n``, ``zeta`` and ``z`` scores, ``passed``, the element's ``loq`` in the check sample and
        whether the check ``counted`` (certified content at least that LOQ; :data:`CHECK_COLUMNS`).
    drift : dict
        The drift standardisation record (``applied``, or the ``reason`` it was not).
    provenance : dict
        Calibration, run and settings the numbers came from.
    valid_for_release : bool
        False when a check sample failed (every result is then flagged ``check_failed``).
    matrix_fraction : dict
        Sample -> ``(w, u)`` of the matrix element by difference (ratio calibrations).

    See Also
    --------
    quantify : makes it.
    QuantifyResult.to_frame : the results as the declared contract.

    References
    ----------
    .. [1] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 5.1.2.
    .. [2] ISO 13528:2015, E_n, zeta and z scores of the check samples.
    .. [3] compquant documentation: docs/calibration.md, docs/architecture.md (results table).
    """

    results: pd.DataFrame
    checks: pd.DataFrame
    drift: dict
    provenance: dict
    valid_for_release: bool = True
    matrix_fraction: dict = field(default_factory=dict)  # sample -> (w, u, k, nu_eff) by difference

    def to_frame(self) -> pd.DataFrame:
        """The results as the declared contract (:mod:`compquant.results`: columns, order, dtypes)."""
        return _results.to_frame(self.results)

    def summary(self) -> str:
        """A plain-text summary: calibration, drift, checks, then one line per result."""
        prov = self.provenance or {}
        info = {
            "basis": "calibration",
            "calibration": prov.get("calibration_id", ""),
            "coverage": prov.get("coverage", "k2"),
            "drift standardisation": "applied" if self.drift.get("applied") else
            f"not applied ({self.drift.get('reason', '')})",
            "check samples": f"{int(self.checks['passed'].sum())} of {len(self.checks)} passed"
            if len(self.checks) else "none",
            "valid for release": "yes" if self.valid_for_release else "NO",
            "not reported": len(prov.get("not_reported", [])),
        }
        return _results.summary_text(self.to_frame(), "Calibrated results (compquant.calibrate.quantify)", info)


def _tables(measurement):
    """``(line_table, shot_table, samples)`` from a LineMeasurement-like object or a tuple."""
    if isinstance(measurement, pd.DataFrame):
        return measurement, None, None
    if isinstance(measurement, (tuple, list)):
        lt = measurement[0]
        st = measurement[1] if len(measurement) > 1 else None
        sm = measurement[2] if len(measurement) > 2 else None
        return lt, st, sm
    lt = next(
        (
            getattr(measurement, n)
            for n in ("lines", "line_table", "table")
            if isinstance(getattr(measurement, n, None), pd.DataFrame)
        ),
        None,
    )
    if lt is None:
        raise CalibrationError(
            "measurement has no line table",
            where="quantify",
            fix="pass the result of compquant.lines.measure_run",
        )
    # the compact per-shot view first (LineMeasurement.shot_view): ``shots`` would build the whole
    # long table (about 35 bytes per shot x line)
    view = getattr(measurement, "shot_view", None)
    st = view if hasattr(view, "line_frames") else next(
        (
            getattr(measurement, n)
            for n in ("shots", "shot_table", "per_shot")
            if isinstance(getattr(measurement, n, None), pd.DataFrame)
        ),
        None,
    )
    sm = next(
        (
            getattr(measurement, n)
            for n in ("samples", "sample_table")
            if isinstance(getattr(measurement, n, None), pd.DataFrame)
        ),
        None,
    )
    return lt, st, sm


def quantify(
    measurement,
    calibration: Calibration,
    *,
    standards: pd.DataFrame | None = None,
    run_sha256: str | None = None,
    samples: pd.DataFrame | None = None,
) -> QuantifyResult:
    """Results per (sample, element) for every non-setup sample of the run.

    Parameters
    ----------
    measurement : LineMeasurement, DataFrame or tuple
        The run's line table (and shot and sample tables), from :func:`compquant.lines.measure_run`.
    calibration : Calibration
        The calibration to apply (:func:`compquant.calibrate.calibrate` or ``Calibration.load``).
    standards : DataFrame, optional
        Certified values for the check samples (default: those stored in the calibration).
    run_sha256 : str, optional
        SHA-256 of the run; the calibration run itself is not drift-standardised.
    samples : DataFrame, optional
        The run's sample table (roles, standard references).

    Returns
    -------
    QuantifyResult
        ``results`` (columns :data:`RESULT_COLUMNS`, declared in :mod:`compquant.results`),
        ``checks`` (:data:`CHECK_COLUMNS`), ``drift``, ``provenance``, ``valid_for_release``,
        ``matrix_fraction``.

    See Also
    --------
    calibrate : makes the calibration.
    Calibration.load : reads a saved one.
    compquant.analyse : the whole analysis, certificates included.

    Notes
    -----
    Steps 1-5 of the module docstring: drift standardisation (:func:`_drift_standardise`),
    inverse prediction with interference corrections, closure with the matrix by difference,
    flags and ``U = k u`` (:mod:`compquant.calibrate.predict`: ``predict_sample``,
    ``sample_rows``), check samples (:func:`_check_table`).

    References
    ----------
    .. [1] JCGM 100:2008 (GUM), 5.1.2 and G.3-G.4.
    .. [2] ISO 13528:2015, E_n, zeta and z scores.
    .. [3] ISO 8466-1:1990, inverse prediction of the straight line, ``x = (y - b0) / b1``.
    .. [4] compquant documentation: docs/calibration.md.

    Examples
    --------
    From the repository root, the shipped demo (invented scenario), with ``method``, ``m``,
    ``samples`` and ``cal`` as in the example of :func:`calibrate`::

        from compquant import quantify
        q = quantify(m, cal, samples=samples)
        print(q.summary())
    """
    lt, st, sm = _tables(measurement)
    samples = samples if samples is not None else sm
    cfg = calibration.settings
    drift_mode = cfg.get("drift", "optional")
    allow_above = float(cfg.get("max_above_range", 0.10))  # saved before the setting existed: 10 %
    smap = standard_map(lt, samples)
    curves = calibration.curves
    resp = {el: sample_responses(lt, c.line_id, c.internal_standard, st, where=f"quantify {el} ({c.line_id})")
            for el, c in curves.items()}
    drift, run_flags = _drift_standardise(curves, resp, calibration, smap, drift_mode, run_sha256)
    sample_ids = [s for s in dict.fromkeys(map(str, lt["sample_id"])) if smap.get(s, ("unknown", None))[0] != "setup"]
    coverage = cfg.get("coverage", "k2")
    rows, not_reported, matrix_fraction = [], [], {}
    for sid in sample_ids:
        ok = [el for el in curves if sid in resp[el].index and np.isfinite(resp[el].loc[sid, "y"])]
        not_reported += [{"sample_id": sid, "element": el, "reason": "no valid response"}
                         for el in curves if el not in ok]
        preds, failed = predict_sample(sid, ok, curves, resp)
        not_reported += [{"sample_id": sid, "element": el, "reason": why} for el, why in failed.items()]
        good = [el for el in ok if el in preds and el not in failed]
        if good:
            rows += sample_rows(sid, smap.get(sid, ("unknown", None))[0], good, preds, curves, resp, allow_above,
                                 coverage, run_flags, not_reported, matrix_fraction)
    # the PLS spectra are not drift-standardised: in a later run say so on every PLS result
    later = drift_mode != "off" and not (run_sha256 and run_sha256 == calibration.run_sha256)
    pls_flags = [f for f in run_flags if f not in ("no_drift_correction", "partial_drift_correction")]
    if later:
        pls_flags.append("no_drift_correction")
    rows += pls_rows(measurement, calibration, smap, sample_ids, pls_flags, not_reported,
                      matrix_fraction)
    results = pd.DataFrame(rows, columns=RESULT_COLUMNS)
    certs = (
        certified_table(standards) if standards is not None else certified_table(pd.DataFrame(calibration.standards))
    )
    checks = _check_table(results, smap, certs, cfg.get("sigma_pt_rel"))
    valid = checks_valid(checks)
    if not valid:
        results["flags"] = [
            ";".join([f for f in (fl.split(";") if fl else [])] + ["check_failed"]) for fl in results["flags"]
        ]
    prov = {
        "calibration_id": calibration.calibration_id,
        "method_id": calibration.method_id,
        "method_sha256": calibration.method_sha256,
        "calibration_created": calibration.created_utc,
        "run_sha256": run_sha256 or "",
        "coverage": coverage,
        "not_reported": not_reported,
        "rejected_analytes": dict(calibration.rejected),
        "checks_passed": valid,
        "sigma_pt_rel": cfg.get("sigma_pt_rel"),
        "n_checks": int(len(checks)),
        "matrix_element": calibration.matrix_element,
    }
    return QuantifyResult(
        results=results,
        checks=checks,
        drift=drift,
        provenance=prov,
        valid_for_release=valid,
        matrix_fraction=matrix_fraction,
    )


def _drift_standardise(curves, resp, calibration, smap, drift_mode, run_sha256) -> tuple[dict, list]:
    """Two-point drift standardisation of every curve's responses ``resp`` (corrected in place).

    Per curve, the response (intensity or ratio to the internal standard) of each setup sample now,
    against its reference from the stored setup intensities (:mod:`compquant.calibrate.drift`).
    Returns the drift record and the flags every result of the run carries.
    """
    drift = {"applied": False, "mode": drift_mode, "level": "response"}
    run_flags: list[str] = []
    if drift_mode == "off":
        drift["reason"] = "drift standardisation switched off in the method"
        return drift, run_flags
    if run_sha256 and run_sha256 == calibration.run_sha256:
        drift["reason"] = "this is the calibration run (setup references measured here)"
        return drift, run_flags
    coefs, missing = {}, []
    setups = [s for s, (role, _) in smap.items() if role == "setup"]
    for el, c in curves.items():
        key = response_key(c.line_id, c.internal_standard)
        coef = two_point(_setup_points(c, resp[el], setups, calibration.setup_reference))
        if coef is None:
            missing.append(key)
            continue
        coef["element"] = el
        coefs[key] = coef
        r = resp[el].copy()
        y, u = correct(r["y"].to_numpy(float), r["u_y"].to_numpy(float), coef)
        # the repeatability part, scaled by the correction: it alone weights the matrix part
        # of the prediction (Curve.predict_content, u_weight); u_y adds the setup terms
        r["u_rep_y"] = np.abs(coef["alpha"]) * r["u_y"].to_numpy(float)
        r["per_net"] = np.abs(coef["alpha"]) * r["per_net"].to_numpy(float)  # net intensity -> corrected response
        r["y"], r["u_y"] = y, u
        resp[el] = r
    if coefs:
        drift.update(applied=True, coefficients=coefs,
                     setup_samples=sorted({s for c in coefs.values() for s in c["samples"]}),
                     uncorrected_lines=missing)
    if missing and drift_mode == "required":
        raise DataQualityError(
            "drift standardisation required but the run has no usable setup "
            f"measurement for {', '.join(missing)}",
            where="quantify",
            fix="measure the setup samples of the calibration in this run",
        )
    if missing:
        drift["reason"] = ("no setup samples in the run" if not coefs else
                           f"setup measurements missing for {', '.join(missing)}")
        run_flags.append("no_drift_correction" if not coefs else "partial_drift_correction")
    return drift, run_flags


def _setup_points(c, resp_el, setups, setup_reference) -> list:
    """``(reference, now, u_now, sample, u_reference)`` of each setup sample measured now for curve ``c``.

    A setup disc is compared with itself (calibration day against today): how far the material
    lies off the curve (the curve's excess scatter sigma_m) is the same on both days and cancels,
    so ``u_now`` is today's repeatability of the response and ``u_reference`` the one stored with
    the reference (:mod:`compquant.calibrate.drift`, docs/calibration.md sec. 9).
    """
    pts = []
    for sid in setups:
        ref = reference_response(setup_reference, sid, c.line_id, c.internal_standard)
        if ref is None or sid not in resp_el.index:
            continue
        m = resp_el.loc[sid]
        pts.append((float(ref[0]), float(m["y"]), float(m["u_y"]), sid, float(ref[1])))
    return pts


def checks_valid(checks: pd.DataFrame) -> bool:
    """True unless a check element that counts (certified content at least its LOQ,
    :func:`compquant.calibrate.checks.counted`) failed: the run's results are then not valid for
    release.  A check below its LOQ neither passes nor fails the run, as on the certificate
    (:func:`compquant.report.release.check_reasons`)."""
    if not len(checks):
        return True
    return bool((checks["passed"].astype(bool) | ~checks["counted"].astype(bool)).all())


def _check_table(results: pd.DataFrame, smap: dict, certs: dict, spt) -> pd.DataFrame:
    """Check samples against their certified values: E_n, zeta and z (ISO 13528), pass or fail."""
    chk = []
    for r in results[(results["role"] == "check") & (results["basis"] == "calibration")].itertuples():
        ref = smap[r.sample_id][1]
        cv = certs.get(ref, {}).get(r.element)
        if cv is None:
            continue
        X, uX = cv
        UX = 2.0 * uX
        en = en_number(r.mass_fraction, r.U, X, UX)
        zeta = zeta_score(r.mass_fraction, r.u, X, uX)
        z = z_score(r.mass_fraction, X, spt * X) if spt and X > 0 else None
        chk.append(
            {
                "sample_id": r.sample_id,
                "standard_id": ref,
                "element": r.element,
                "measured": r.mass_fraction,
                "u": r.u,
                "U": r.U,
                "certified": X,
                "u_certified": uX,
                "U_certified": UX,
                "En": en,
                "zeta": zeta,
                "z": math.nan if z is None else z,
                "passed": check_verdict(en, z),
                "loq": r.loq,
                "counted": counted(X, r.loq),
            }
        )
    return pd.DataFrame(chk, columns=CHECK_COLUMNS)


__all__ = ["quantify", "QuantifyResult", "RESULT_COLUMNS", "CHECK_COLUMNS", "coverage_factor"]
