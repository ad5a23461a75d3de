"""Build a :class:`~compquant.calibrate.model.Calibration` from the standards measured in a run.

Works on the documented line table (and optionally the per-shot table and the
run's sample table); see docs/calibration.md for the statistics.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from compquant.calibrate.config import AnalyteConfig, CalibrationConfig
from compquant.calibrate.curve import curve_from_records
from compquant.calibrate.drift import reference_intensities
from compquant.calibrate.limits import blank_sd
from compquant.calibrate.model import Calibration, Curve
from compquant.calibrate.response import sample_responses
from compquant.errors import CalibrationError, StandardsError


def standard_map(line_table: pd.DataFrame, samples: pd.DataFrame | None) -> dict:
    """``{sample_id: (role, standard_ref)}``; without a sample table the id is the reference."""
    out = {}
    if samples is not None and len(samples):
        for r in samples.itertuples():
            ref = getattr(r, "standard_ref", None)
            ref = None if ref is None or (isinstance(ref, float) and math.isnan(ref)) or ref == "" else str(ref)
            out[str(r.sample_id)] = (str(r.role), ref)
    for sid, role in line_table[["sample_id", "role"]].drop_duplicates().itertuples(index=False):
        if str(sid) not in out:
            out[str(sid)] = (str(role), str(sid) if role in ("standard", "check", "setup") else None)
    return out


def certified_table(standards: pd.DataFrame) -> dict:
    """``{standard_id: {element: (w, u)}}``."""
    out: dict = {}
    for r in standards.itertuples():
        out.setdefault(str(r.standard_id), {})[str(r.element)] = (float(r.mass_fraction), float(r.u))
    return out


def matrix_content(cert: dict, matrix: str) -> tuple[float, float, bool]:
    """Matrix mass fraction of a standard: certified, or by difference ``1 - sum(others)``."""
    if matrix in cert:
        w, u = cert[matrix]
        return w, u, False
    others = [(w, u) for el, (w, u) in cert.items() if el != matrix]
    w = 1.0 - sum(w for w, _ in others)
    u = math.sqrt(sum(u * u for _, u in others))
    return w, u, True


def content(cert: dict, element: str, basis: str, matrix: str | None):
    """``(x, u_x)``: mass fraction, or mass-fraction ratio to the matrix for basis 'ratio'."""
    if element not in cert:
        return None
    w, u = cert[element]
    if basis != "ratio":
        return w, u
    wm, um, _ = matrix_content(cert, matrix)
    if wm <= 0:
        return None
    r = w / wm
    return r, math.sqrt((u / wm) ** 2 + (w * um / wm**2) ** 2)


def _curve_for(a: AnalyteConfig, cfg: CalibrationConfig, line_table, shot_table, smap, certs, where: str) -> Curve:
    resp = sample_responses(line_table, a.line, a.internal_standard, shot_table, where=where)
    excl = {e["standard"]: e["reason"] for e in a.exclude}
    recs = []
    for sid, r in resp.iterrows():
        role, ref = smap.get(str(sid), ("unknown", None))
        if role != "standard":
            continue
        rec = {
            "standard_id": ref,
            "sample_id": str(sid),
            "y": float(r["y"]),
            "u_y": float(r["u_y"]),
            "n_shots": int(r["n_shots"]),
            "line_flags": ";".join(r["flags"]),
            "net": float(r["net"]),  # the analyte line's own net intensity (negative-net check)
            "u_net": float(r["u_net"]),
            "used": True,
            "reason": "",
            "shots": r["shots"],
        }
        cert = certs.get(ref)
        if cert is None:
            raise StandardsError(
                f"standard '{ref}' of sample '{sid}' is not in the standards file",
                where=where,
                fix="add its certified values or correct the run's standard reference",
            )
        c = content(cert, a.element, a.basis, cfg.matrix_element)
        if c is None:
            rec.update(x=math.nan, u_x=math.nan, used=False, reason=f"{a.element} not certified")
        else:
            rec.update(x=c[0], u_x=c[1], w=cert[a.element][0])
        if a.basis == "ratio":
            rec["matrix_fraction"] = matrix_content(cert, cfg.matrix_element)[0]
        for it in a.interferences:
            cj = content(cert, it["element"], a.basis, cfg.matrix_element)
            if cj is None and rec["used"]:
                rec.update(used=False, reason=f"interferer {it['element']} not certified")
            rec[f"xi:{it['element']}"] = cj[0] if cj else math.nan
            rec[f"uxi:{it['element']}"] = cj[1] if cj else math.nan
        if rec["used"] and ref in excl:
            rec.update(used=False, reason=f"excluded by method: {excl[ref]}")
        if rec["used"] and "saturated" in rec["line_flags"].split(";"):
            rec.update(used=False, reason="line saturated")
        if rec["used"] and not (np.isfinite(rec["y"]) and np.isfinite(rec["u_y"])):
            fl = rec["line_flags"].replace(";", ", ")
            rec.update(used=False, reason="no valid response (line not measured" + (f": {fl})" if fl else ")"))
        recs.append(rec)
    if not recs:
        raise CalibrationError(
            "no standards measured in the run", where=where, fix="the run needs samples with role 'standard'"
        )
    blanks = [sid for sid, (role, _) in smap.items() if role == "blank" and sid in resp.index]
    bl = None
    if blanks:
        means = [float(resp.loc[b, "y"]) for b in blanks if np.isfinite(resp.loc[b, "y"])]
        shots = resp.loc[blanks[0], "shots"]
        bl = blank_sd(means if len(means) >= 3 else None, shots if shots is not None and len(means) < 3 else None)
    n_used = sum(1 for r in recs if r["used"])
    if n_used < 3 and n_used < len(recs):
        # name why the standards were set aside (saturated, no signal ...): the user's problem is there
        why = "; ".join(f"{r['sample_id']}: {r['reason']}" for r in recs if not r["used"])
        raise CalibrationError(
            f"only {n_used} of {len(recs)} standard(s) usable ({why}); at least 3 are needed",
            where=where,
            fix="check the standards' spectra ('compquant inspect', 'compquant plot') and the method's lines",
        )
    return curve_from_records(a, recs, outlier_alpha=cfg.outlier_alpha, blank=bl, where=where)


def calibrate(
    line_table: pd.DataFrame,
    standards: pd.DataFrame,
    config: CalibrationConfig,
    *,
    shot_table=None,
    samples: pd.DataFrame | None = None,
    method_id: str = "method",
    method_version: str = "",
    method_sha256: str = "",
    run_sha256: str = "",
    run_path: str = "",
    pls=None,
    method_path: str = "",
) -> Calibration:
    """Fit every analyte curve of ``config`` to the standards in ``line_table``.

    Each analyte's response (line intensity, or its ratio to the internal-standard line) is
    fitted against the certified mass fractions of the standards measured in the run with the
    analyte's model (``linear``, ``weighted`` or ``quadratic``; docs/calibration.md), with
    outlier, lack-of-fit and Mandel tests, LOD/LOQ and the inverse-prediction uncertainty
    budget (:mod:`compquant.calibrate.model`; for an OLS straight line ISO 8466-1:1990,
    eq. (21)).  Analytes whose curve cannot be made (too few standards, non-positive slope ...)
    are listed in ``Calibration.rejected`` with the reason; if none can be made a
    :class:`CalibrationError` is raised.  An internal-standard line that is a resonance line or
    self-absorbed over the standards (:func:`compquant.calibrate.istd_check.check_calibration`)
    gives an :class:`~compquant.calibrate.istd_check.InternalStandardWarning` with alternatives,
    kept in each curve's ``diagnostics["internal_standard"]``.  Standards whose analyte net is
    significantly negative (:func:`compquant.calibrate.negnet.check_standards`) give a
    :class:`~compquant.calibrate.negnet.NegativeNetWarning` naming candidate interfering lines,
    kept in ``diagnostics["negative_net"]``.

    Parameters
    ----------
    line_table : DataFrame
        The run's line table (docs/architecture.md), e.g. ``LineMeasurement.table`` of
        :func:`compquant.lines.measure_run`.
    standards : DataFrame
        Certified values, mass fractions in g/g (:func:`load_standards`).
    config : CalibrationConfig
        The method's ``[calibration]`` section (:func:`parse_calibration_section`).
    shot_table : DataFrame or shot view, optional
        The long per-shot table or, using memory independent of the number of lines,
        ``LineMeasurement.shot_view`` (:func:`compquant.calibrate.response.sample_responses`).
    samples : DataFrame, optional
        The run's sample table (roles and standard references of the samples).
    method_id, method_version, method_sha256, method_path : str
        Provenance of the method, stored in the calibration.
    run_sha256, run_path : str
        Provenance of the calibration run (SHA-256 of its file and its path).
    pls : optional
        Fitted PLS block (``compquant.calibrate.pls``) stored in the calibration.

    Returns
    -------
    Calibration
        The curves per element, the rejected analytes with their reasons, the setup samples'
        reference intensities (for drift standardisation) and the provenance.

    Raises
    ------
    CalibrationError
        When no analyte could be calibrated.

    See Also
    --------
    quantify : apply the calibration to a run.
    Calibration.save, Calibration.load : the calibration as versioned JSON.
    compquant.calibrate.fit_curve : one curve.

    References
    ----------
    .. [1] ISO 8466-1:1990, Water quality -- Calibration and evaluation of analytical methods and
       estimation of performance characteristics -- Part 1: Statistical evaluation of the linear
       calibration function (inverse prediction, Mandel's fitting test).
    .. [2] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 5.1.2 and G.4 (delta method, Welch-Satterthwaite).
    .. [3] Orear, Am. J. Phys. 50 (1982) 912 (effective variance of the certified values).
    .. [4] Draper & Smith 1998, sec. 2.1 (lack-of-fit F test); Belsley, Kuh & Welsch 1980
       (studentised residuals, Bonferroni outlier test); DIN 38402-51 (Mandel's test).
    .. [5] Currie, Anal. Chem. 40 (1968) 586; ISO 11843-2:2000 (detection limits).
    .. [6] compquant documentation: docs/calibration.md.

    Examples
    --------
    From the repository root, the shipped demo (invented scenario)::

        from compquant import Run, load_method, load_standards, measure_run
        from compquant import calibrate, parse_calibration_section
        method = load_method("demo_runs/method.toml")
        with Run.open("demo_runs/demo-day1.h5") as run:
            m = measure_run(run, method)
            samples = run.samples
        cal = calibrate(m.table, load_standards("standards/demo-copper-alloys.csv"),
                        parse_calibration_section(method.sections["calibration"]),
                        shot_table=m.shot_view, samples=samples)
        print(sorted(cal.curves), cal.rejected)
    """
    smap = standard_map(line_table, samples)
    certs = certified_table(standards)
    curves, rejected = {}, {}
    for a in config.analytes:
        where = f"calibration of {a.element} ({a.line})"
        try:
            curves[a.element] = _curve_for(a, config, line_table, shot_table, smap, certs, where)
        except CalibrationError as exc:
            rejected[a.element] = exc.one_line()
    if not curves:
        first = next(iter(rejected.values()))
        raise CalibrationError(
            f"no analyte could be calibrated ({first})",
            where=str(run_path) if run_path else method_id,
            fix="see the reasons; check standards, lines and models",
        )
    # internal-standard lines that are resonance lines or self-absorbed: warned, kept with the curves
    from compquant.calibrate.istd_check import check_calibration

    for istd, rec in check_calibration(curves, line_table, smap, certs, config.matrix_element).items():
        for c in curves.values():
            if c.internal_standard == istd:
                c.diagnostics["internal_standard"] = rec
    # standards whose analyte net is significantly negative: a side window holds another line
    from compquant.calibrate.negnet import check_standards

    check_standards(curves, certs)
    refs = {ref for role, ref in smap.values() if ref}
    std_rows = standards[standards["standard_id"].isin(refs)].to_dict(orient="records")
    lines = sorted(
        {c.line_id for c in curves.values()} | {c.internal_standard for c in curves.values() if c.internal_standard}
    )
    return Calibration(
        method_id=method_id,
        method_version=str(method_version),
        method_sha256=method_sha256,
        run_sha256=run_sha256,
        run_path=str(run_path),
        standards_sha256=str(standards.attrs.get("sha256", "")),
        standards_path=str(standards.attrs.get("path", "")),
        standards=std_rows,
        basis=config.basis,
        matrix_element=config.matrix_element,
        curves=curves,
        rejected=rejected,
        setup_reference=reference_intensities(line_table, curves, shot_table),
        settings=config.to_dict(),
        lines=lines,
        pls=pls,
        method_path=str(method_path),
    )


__all__ = ["calibrate", "curve_from_records", "standard_map", "certified_table", "content", "matrix_content"]
