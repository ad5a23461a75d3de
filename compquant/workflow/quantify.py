"""Step 3 of :func:`compquant.analyse.analyse`: calibrate and quantify, or analyse calibration-free.

:func:`quantify_samples` chooses the route from the :class:`~compquant.workflow.prepare.Job`:
:func:`quantify_calibrated` (calibrate from the run's certified standards with
:func:`compquant.calibrate.calibrate`, or load a saved calibration, then
:func:`compquant.calibrate.quantify` with drift standardisation and check samples) or
:func:`quantify_cf` (:func:`compquant.cflibs.analyse_cf_samples` over the unknowns and the check
samples the ``[cf]`` standards certify).  Both hand on a :class:`Quantified`: the one results
table (:mod:`compquant.results`), check-sample comparisons, drift, and what was not reported.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

from compquant.errors import ConfigError
from compquant.report import CheckResult, DriftInfo, FileRef, assemble, release
from compquant.report.numbers import finite


@dataclass
class Quantified:
    """What the quantification step hands on to the certificates."""

    results: object = None  # the results table (compquant.calibrate.apply.RESULT_COLUMNS)
    checks: list = field(default_factory=list)  # CheckResult
    drift_info: DriftInfo = field(default_factory=lambda: DriftInfo(False, ""))
    not_reported: list = field(default_factory=list)
    failures: dict = field(default_factory=dict)
    matrix_fraction: dict = field(default_factory=dict)
    plasma_by_sample: dict = field(default_factory=dict)
    cf_by_sample: dict = field(default_factory=dict)
    curves: dict = field(default_factory=dict)
    analytes: list = field(default_factory=list)  # the analytes of the method
    ratio_dependent: set = field(default_factory=set)  # analytes whose mass fraction is a ratio x the matrix
    not_evaluated: list = field(default_factory=list)  # check samples held but not evaluated
    cal_info: object = None
    cal_json_path: Path | None = None  # calibration.json to write (calibrated from this run)
    cal_text: str | None = None
    remarks: list = field(default_factory=list)  # run-wide remarks (e.g. internal-standard warnings)


def quantify_samples(job, m, sc) -> Quantified:
    """Quantify the run's samples by the route the job asks for (calibration or calibration-free)."""
    return quantify_cf(job, m, sc) if job.cf else quantify_calibrated(job, m, sc)


def quantify_cf(job, m, sc) -> Quantified:
    """Calibration-free analysis of the unknowns, and of the check samples the [cf] standards certify.

    The intensities' basis is ``m.intensity_basis`` (:func:`compquant.cflibs.run_intensity_basis`:
    a photon-basis curve is converted, an unstated one refused unless ``[cf] response_basis``
    states it).  Progress: stage ``"quantify"`` counted in samples.
    """
    table, unknowns, check_samples, cf_settings = m.meas.table, sc.unknowns, sc.check_samples, job.cf_settings
    tick = job.tick
    from compquant.cflibs import analyse_cf_samples
    from compquant.cflibs.capture import method_windows
    from compquant.cflibs.result import results_table

    qd = Quantified(drift_info=DriftInfo(False, "not applicable to calibration-free analysis"))
    tick("quantify", 0, len(unknowns))
    cf_certified, one_point = _cf_references(cf_settings, job.method, table, sc.refs, m.acquisition, m.instrument,
                                             job.files, m.intensity_basis)
    cf_checks = [s for s, ref in check_samples.items() if (ref or s) in cf_certified]
    cf_results, qd.failures = analyse_cf_samples(
        table,
        sample_ids=unknowns + cf_checks,
        settings=cf_settings,
        acquisition=m.acquisition,
        instrument=m.instrument,
        one_point=one_point,
        intensity_basis=m.intensity_basis,
        windows=method_windows(job.method, m.meas.wavelength),  # window capture fractions
        measurement=m.meas,  # per-shot covariance of the line means in the Monte Carlo
        progress=lambda done, total: tick("quantify", done, total),  # per sample: the slow step
    )
    qd.results = results_table(cf_results)
    qd.analytes = _cf_analytes(cf_settings, job.method)
    qd.checks = _cf_check_results(cf_results, cf_checks, check_samples, cf_certified, qd.results)
    for s in cf_checks:
        if s in qd.failures:
            qd.not_reported.append({"sample_id": s, "element": "*", "reason": qd.failures.pop(s)})
    qd.not_evaluated = release.checks_not_evaluated(
        check_samples, cf_certified, qd.analytes, qd.checks,
        why_missing=None if cf_settings.standards_file else
        "the method's [cf] names no standards_file with the check material's certified values",
    )
    for res in cf_results:
        qd.cf_by_sample[str(res.sample_id)] = res
        qd.plasma_by_sample[str(res.sample_id)] = assemble.plasma_info(res)
    tick("quantify", len(unknowns), len(unknowns))
    return qd


def quantify_calibrated(job, m, sc) -> Quantified:
    """Calibrate from the run's standards (or load a saved calibration) and quantify every sample.

    A saved calibration applied without drift standardisation is recorded as a deviation that does
    not block release (the method allows it with ``drift = "optional"``).  Progress: stages
    ``"calibrate"`` and ``"quantify"``.
    """
    import pandas as pd

    from compquant.calibrate.apply import quantify
    from compquant.calibrate.build import certified_table
    from compquant.calibrate.istd_check import remarks as istd_remarks

    qd = Quantified()
    cal, stds = calibration_for(job, m, qd)
    job.tick("quantify", 0, 1)
    q = quantify(m.meas, cal, standards=stds, run_sha256=m.run_sha, samples=m.samples)
    job.tick("quantify", 1, 1)
    qd.results = q.results
    qd.checks = assemble.check_results(q.checks, q.results)
    qd.drift_info = assemble.drift_info(q.drift)
    if job.calibration is not None and not q.drift.get("applied") and q.drift.get("mode", "optional") != "off":
        # a saved calibration applied without drift standardisation departs from the method; the
        # method allows it (drift = "optional"; "required" stops the analysis), so it does not block
        sc.deviations.append(
            release.Deviation(
                "drift standardisation with setup samples was not possible: "
                f"{q.drift.get('reason', 'no usable setup measurement')} (allowed by the method: drift = "
                f"'{q.drift.get('mode', 'optional')}')",
                blocks=False,
            )
        )
    qd.analytes = _calibration_analytes(cal)
    qd.ratio_dependent = {el for el, c in cal.curves.items() if c.basis == "ratio"}
    if cal.pls and cal.pls.get("target") == "ratio":
        qd.ratio_dependent |= set(cal.pls.get("models", {}))
    qd.not_reported = list(q.provenance.get("not_reported", []))
    qd.not_reported += [{"sample_id": "*", "element": el, "reason": f"no calibration curve: {why}"}
                        for el, why in sorted(cal.rejected.items())]
    certified = certified_table(stds if stds is not None else pd.DataFrame(cal.standards))
    qd.not_evaluated = release.checks_not_evaluated(sc.check_samples, certified, qd.analytes, qd.checks)
    _drop_matrix_dependent_checks(qd, sc.check_samples, cal.matrix_element)
    _calibration_parameters(sc.parameters, cal, q)
    qd.matrix_fraction = dict(q.matrix_fraction)
    qd.curves = dict(cal.curves)
    qd.remarks = istd_remarks(cal.curves)  # resonance / self-absorbed internal standard
    return qd


def _calibration_parameters(parameters: dict, cal, q) -> None:
    """The calibration's entries of the certificates' analysis parameters (in their printed order)."""
    spt = (cal.settings or {}).get("sigma_pt_rel")
    if spt:
        parameters["sigma_pt_rel"] = float(spt)
    parameters["calibration_id"] = cal.calibration_id
    parameters["coverage"] = str(q.provenance.get("coverage", "k2"))
    if cal.matrix_element:
        parameters["matrix_element"] = str(cal.matrix_element)


def calibration_for(job, m, qd: Quantified):
    """The calibration to apply: made now from the run's standards, or the saved one; ``(cal, standards)``.

    A calibration made now is kept as text in ``qd.cal_text`` (written with the certificates at the
    end: a failure before then leaves no output); its file and hash join ``job.files``.
    """
    from compquant.calibrate import calibrate
    from compquant.workflow.prepare import parse_step_settings

    method = job.method
    if (job.saved_calibration if job.standards is None else job.standards_table) is None:
        parse_step_settings(job)  # check_options was not called (a notebook): parse them now
    if job.standards is None:
        src, cal = job.calibration, job.saved_calibration  # as read and loaded by prepare: the bytes hashed
        job.files.append(FileRef("calibration", src.name, src.sha256))
        qd.cal_info = assemble.calibration_info(cal, src.name, src.sha256)
        return cal, None
    stds, cfg = job.standards_table, job.calibration_config  # as parsed by prepare
    job.files.append(FileRef("standards", stds.attrs["name"], stds.attrs["sha256"]))
    job.tick("calibrate", 0, 1)
    cal = calibrate(m.meas.table, stds, cfg, shot_table=m.meas.shot_view, samples=m.samples, method_id=method.id,
                    method_version=method.version, method_sha256=method.sha256 or "", run_sha256=m.run_sha,
                    run_path=str(job.run_path))
    cal.created_utc = job.issued  # the calibration is made now; keeps repeated runs identical
    qd.cal_json_path = job.outdir / "calibration.json"
    qd.cal_text = cal.to_json() + "\n"
    cal_sha = hashlib.sha256(qd.cal_text.encode("utf-8")).hexdigest()
    job.files.append(FileRef("calibration (written)", qd.cal_json_path.name, cal_sha))
    job.tick("calibrate", 1, 1)
    qd.cal_info = assemble.calibration_info(cal, qd.cal_json_path.name, cal_sha)
    return cal, stds


def _drop_matrix_dependent_checks(qd: Quantified, check_samples: dict, matrix_el) -> None:
    """A check sample whose matrix by difference is not determined cannot check its ratio results.

    Their found values rest on a matrix closed over a subset of the analytes; they are taken out of
    the comparisons and named under ``not_evaluated``.
    """
    if not matrix_el or not qd.ratio_dependent:
        return
    drop = set()
    for sid, ref in check_samples.items():
        rows = assemble.result_rows(qd.results, sid)
        nr = [n for n in qd.not_reported if str(n.get("sample_id")) in (sid, "*")]
        dep = release.matrix_dependents(release.analytes_not_reported(qd.analytes, rows, nr), rows,
                                        qd.ratio_dependent, matrix_el)
        dep = {el: why for el, why in dep.items() if any(c.sample_id == sid and c.element == el for c in qd.checks)}
        if dep:
            why = next(iter(dep.values()))
            qd.not_evaluated.append(f"{sid} ({ref}): {', '.join(dep)} not comparable, each is {why}")
            drop |= {(sid, el) for el in dep}
    qd.checks = [c for c in qd.checks if (c.sample_id, c.element) not in drop]


def _calibration_analytes(cal) -> list[str]:
    """The analytes the method asks for: every [[calibration.analytes]] element and PLS model."""
    out = [str(a.get("element")) for a in (cal.settings or {}).get("analytes", []) if isinstance(a, dict)]
    out += [el for el in list(cal.curves) + list(cal.rejected) if el not in out]
    if cal.pls:
        out += [el for el in cal.pls.get("models", {}) if el not in out]
    return out


def _cf_analytes(settings, method) -> list[str]:
    """Elements a calibration-free analysis must report: [cf] elements, else the method's line elements."""
    if settings.elements:
        return list(settings.elements)
    els = list(dict.fromkeys(ln.line_id.split()[0] for ln in method.lines))
    return [e for e in els if e not in set(settings.exclude_elements)]


def _cf_references(settings, method, table, refs, acquisition, instrument, files, intensity_basis=None):
    """Certified values for calibration-free checks and the one-point calibration the method asks for.

    Returns ``(certified, one_point)``: ``{standard_id: {element: (w, u)}}`` from ``[cf]
    standards_file`` (hashed into ``files``), and the :func:`compquant.cflibs.onepoint.one_point_calibration`
    of ``[cf] one_point_standard`` (None when not asked for).
    """
    if not settings.standards_file:
        if settings.one_point_standard:
            raise ConfigError("one-point calibration needs [cf] standards_file", where=f"{method.where}: [cf]",
                              fix="give the certified-standards CSV")
        return {}, None
    from compquant.calibrate import load_standards
    from compquant.calibrate.build import certified_table
    from compquant.cflibs.onepoint import one_point_calibration

    path = method.resolve_path(settings.standards_file)
    stds = load_standards(path)
    files.append(FileRef("standards (calibration-free)", stds.attrs["name"], stds.attrs["sha256"]))  # as parsed
    certified = certified_table(stds)
    one_point = None
    sid = settings.one_point_standard
    if sid:
        ref = refs.get(sid) or sid
        if sid not in refs or ref not in certified:
            raise ConfigError(f"one-point standard {sid!r} is not a sample of the run with certified values",
                              where=f"{method.where}: [cf] one_point_standard",
                              fix="name a standard sample of the run that the standards file certifies")
        one_point = one_point_calibration(table, {el: w for el, (w, _u) in certified[ref].items()}, sample_id=sid,
                                          settings=settings, acquisition=acquisition, instrument=instrument,
                                          intensity_basis=intensity_basis)
    return certified, one_point


def _cf_check_results(cf_results, cf_checks, check_samples, certified, results) -> list[CheckResult]:
    """Calibration-free results of the check samples against their certified values (|En| <= 1)."""
    from compquant.calibrate.checks import check_verdict, en_number

    flags = {(str(r.sample_id), str(r.element)): [f for f in str(r.flags or "").split(";") if f]
             for r in results.itertuples(index=False)}
    out = []
    for res in cf_results:
        sid = str(res.sample_id)
        if sid not in cf_checks:
            continue
        ref = check_samples[sid] or sid
        for e in res.elements:
            cv = certified[ref].get(e.element)
            if cv is None or not finite(e.mass_fraction):
                continue
            X, uX = cv
            U = res.k * e.u if finite(e.u) else float("nan")
            en = en_number(e.mass_fraction, U, X, 2.0 * uX)
            out.append(CheckResult(sid, ref, e.element, float(e.mass_fraction), U if finite(U) else None, X,
                                   2.0 * uX, None, en, check_verdict(en), "|En| <= 1",
                                   flags.get((sid, e.element), [])))
    return out

