"""The whole job in one call: run + method -> certificates of analysis.

:func:`analyse` opens a run, measures the method's lines in every shot
(preprocessing inside :func:`compquant.lines.measure_run`), then either

- calibrates from the run's certified standards (``standards=``) and saves the
  calibration beside the certificates, or
- applies a saved calibration (``calibration=``) with drift standardisation from
  the run's setup samples, or
- estimates the composition calibration-free (``cf=True``),

evaluates the check samples, quantifies every unknown and writes, into
``outdir``, one certificate per unknown sample (``<sample>.pdf`` and
``<sample>.json``), their figures (``figures/<sample>/*.png``), one LIMS CSV for
the run (``lims.csv``) and a run summary (``summary.json``).  Every file is
written atomically; inputs are only read.

The issue time defaults to now (UTC); pass ``issued_at`` to make the outputs
byte-for-byte repeatable (the certificate numbers depend on the issue date).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from compquant import __version__
from compquant.errors import CompquantError, ConfigError, DataQualityError, InputError, OutputError
from compquant.fileio import (
    output_error,
    refuse_overwriting_inputs,
    require_file,
    safe_filename,
    sha256_file,
    write_bytes_atomic,
    write_text_atomic,
)
from compquant.identify.sample import detected_not_quantified
from compquant.report import (
    Certificate,
    CheckResult,
    ClientInfo,
    DriftInfo,
    FileRef,
    LabInfo,
    MethodInfo,
    Provenance,
    QCInfo,
    ResultRow,
    SampleInfo,
    Signatory,
    assemble,
    assess_conformity,
    certificate_number,
    load_lab_profile,
    load_specification,
    release,
)
from compquant.report.certificate import result_set_digest
from compquant.report.config import LabProfile, check_certificate_texts
from compquant.report.jsonform import canonical_json, write_certificate_json
from compquant.report.lims import write_lims_csv
from compquant.report.numbers import element_units, finite
from compquant.report.pdf import render_pdf_bytes

SUMMARY_SCHEMA = "compquant-run-summary"
SUMMARY_VERSION = 1


@dataclass
class CertificateOutput:
    sample_id: str
    number: str
    pdf: str
    json: str
    pages: int
    valid_for_release: bool
    conformity: str | None
    results: list[dict] = field(default_factory=list)  # element, value, U, unit, flags (as printed)
    reasons: list[str] = field(default_factory=list)  # why not valid for release (empty: valid)
    revision: int = 0
    supersedes: str = ""


@dataclass
class AnalysisOutput:
    """What :func:`analyse` wrote, for the CLI summary table and for callers."""

    outdir: str
    basis: str
    certificates: list[CertificateOutput]
    lims_csv: str
    summary_json: str
    calibration_json: str | None
    valid_for_release: bool
    not_reported: list[dict]  # every (sample, analyte) without a result, with the reason
    failures: dict

    @property
    def exit_code(self) -> int:
        """0 when every certificate is valid for release and every unknown sample got one, else
        :data:`release.EXIT_NOT_VALID`."""
        return 0 if self.valid_for_release and not self.failures else release.EXIT_NOT_VALID


def _now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


def _norm_issued_at(issued_at) -> str:
    if issued_at is None:
        return _now_utc()
    if isinstance(issued_at, _dt.datetime):
        t = issued_at if issued_at.tzinfo else issued_at.replace(tzinfo=_dt.timezone.utc)
        return t.astimezone(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    s = str(issued_at).strip()
    try:
        t = _dt.datetime.fromisoformat(s.replace("Z", "+00:00"))
    except ValueError as exc:
        raise ConfigError(
            f"issue time {s!r} is not ISO 8601", where="issued_at", fix="write e.g. 2026-12-01T21:00:00Z"
        ) from exc
    return _norm_issued_at(t)


def _measurement_times(run, samples, measured) -> dict[str, str]:
    """Per sample, when it was measured: from the run, else from ``measured`` (the user)."""
    out = {str(sid): assemble.measured_when(run, str(sid)) for sid in samples["sample_id"]}
    if measured is None:
        return out
    given = _norm_issued_at(measured)
    stated = [t for t in out.values() if t]
    if stated and min(stated)[:10] != given[:10]:
        raise ConfigError(
            f"the run states it was measured on {min(stated)[:10]}, not {given[:10]}",
            where="measured",
            fix="leave out --measured: the run's own time is used",
        )
    return {sid: (t or given) for sid, t in out.items()}


def _default_lab() -> LabProfile:
    return LabProfile(
        name="Laboratory not stated",
        address=["(no lab profile given: use --lab lab.toml)"],
        certificate_prefix="CQ",
        signatory_name="not stated",
        signatory_title="not stated",
        source="",
        sha256="",
    )


# ------------------------------------------------------------------------- the flow


def _positive(value) -> float | None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if np.isfinite(v) and v > 0 else None


def analyse(
    run_path,
    method_path,
    *,
    standards=None,
    calibration=None,
    cf: bool = False,
    lab=None,
    spec=None,
    outdir="compquant-out",
    client: str | None = None,
    received: str | None = None,
    issued_at=None,
    figures: bool = True,
    chunk_shots: int | None = None,
    memory_limit_bytes: int | None = None,
    progress=None,
    chunk_mapper=None,
    measured=None,
    revise: str | None = None,
    lims_dialect: str = "rfc4180",
    db=None,
) -> AnalysisOutput:
    """Run the whole analysis and write the certificates (see the module docstring).

    Parameters
    ----------
    run_path, method_path : the run (HDF5) and the method file (TOML).
    standards : certified-standards file: calibrate from the run's standards.
    calibration : a saved calibration JSON: apply it (drift standardisation from setup samples).
    cf : calibration-free analysis instead.
    lab, spec : lab profile and specification TOML files (optional).
    outdir : output folder (created).
    client, received : override the lab profile's client name and date of receipt.
    issued_at : issue time (ISO 8601 UTC or datetime); default now.
    figures : draw the figures (spectrum, calibration curves or Boltzmann plot).
    progress : callable ``(stage, done, total)`` for progress display.
    chunk_mapper : compute the line-measurement chunks elsewhere, e.g. on Dask workers
        (:func:`compquant.parallel.chunk_mapper`); the numbers are the same.
    measured : start time of the measurement (ISO 8601) for a run that states none (e.g. a
        converted run); refused when the run states a different day.
    revise : reason for re-issuing certificates already issued in ``outdir``: each becomes a
        revision ``-R<n>`` naming the one it supersedes.  Without it such a re-analysis is refused.
    lims_dialect : ``"rfc4180"`` (comma, decimal point) or ``"semicolon"`` (``;``, decimal comma)
        for ``lims.csv`` (:mod:`compquant.report.lims`).
    db : the lab's record (path or URL; default ``COMPQUANT_DB``): the analysis and its certificates
        are stored there (:mod:`compquant.record`).  Certificates are DRAFTs unless the lab profile
        sets ``[review] required = false``.

    Every certificate is checked against the release rules (:mod:`compquant.report.release`);
    ``AnalysisOutput.valid_for_release`` / ``exit_code`` say whether all are valid for release.
    """
    modes = sum([standards is not None, calibration is not None, bool(cf)])
    if modes != 1:
        raise ConfigError(
            "choose exactly one way to quantify" if modes else "no way to quantify chosen",
            where="analyse",
            fix="give --standards FILE, --calibration cal.json or --cf",
        )
    from compquant.lines import measure_run
    from compquant.method import load_method
    from compquant.run import Run

    issued = _norm_issued_at(issued_at)
    issue_date = issued[:10]
    run_path = require_file(run_path, "run file")
    method = load_method(method_path)
    labp = load_lab_profile(lab) if lab is not None else _default_lab()
    specp = load_specification(spec) if spec is not None else None
    # the record is opened before the work (a damaged record fails fast); the review state is printed
    from compquant.record.states import initial_review
    from compquant.record.store import recorder_for_analysis

    recorder = recorder_for_analysis(db, method)
    review = initial_review(labp, lab is not None, issued)
    if received:
        try:
            received = _dt.date.fromisoformat(str(received)).isoformat()
        except ValueError as exc:
            raise ConfigError(
                f"date of receipt {received!r} is not YYYY-MM-DD", where="received", fix="write e.g. 2026-11-27"
            ) from exc
    from compquant.report.lims import DIALECTS

    if lims_dialect not in DIALECTS:
        raise ConfigError(f"LIMS CSV dialect {lims_dialect!r} is not known", where="lims_dialect",
                          fix=f"use one of {', '.join(DIALECTS)}")
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise InputError("output path exists and is not a folder", where=str(outdir), fix="choose a folder")
    inputs = [p for p in (run_path, method_path, standards, calibration, lab, spec) if p is not None]
    refuse_overwriting_inputs(
        [outdir] + [outdir / n for n in ("lims.csv", "summary.json", "calibration.json", MANIFEST)], inputs
    )

    def tick(stage, done, total):
        if progress is not None:
            progress(stage, done, total)

    # settings owned by later steps are checked before the run is measured: fail fast, write nothing
    cf_settings = None
    if cf:
        from compquant.cflibs.settings import CFSettings

        cf_settings = CFSettings.from_section(method.sections.get("cf"), where=f"{method.where}: [cf]")
    elif standards is not None:
        from compquant.calibrate import load_standards, parse_calibration_section

        load_standards(standards)
        parse_calibration_section(method.sections.get("calibration"), source=method.where)
    else:
        from compquant.calibrate import Calibration

        cal_file = require_file(calibration, "calibration file")
        Calibration.load(cal_file, method_id=method.id, method_sha256=method.sha256)

    files = [FileRef("run", run_path.name, ""), FileRef("method", Path(method_path).name, method.sha256 or "")]
    with Run.open(run_path, memory_limit_bytes=memory_limit_bytes) as run:
        run_sha = run.sha256()
        files[0].sha256 = run_sha
        samples = run.samples.copy()
        check_certificate_texts(samples["sample_id"], samples["description"], client, str(run_path))
        n_passes = 1 + (method.preprocess.shift != "none") + any(ln.mode == "fit" for ln in method.lines)
        total = run.n_shots * n_passes
        done = [0]

        def on_chunk(n):
            done[0] += int(n)
            tick("measure", min(done[0], total), total)

        tick("measure", 0, total)
        meas = measure_run(run, method, chunk_shots=chunk_shots, progress=on_chunk, chunk_mapper=chunk_mapper)
        tick("measure", total, total)
        instrument = dict(run.instrument or {})
        acquisition = dict(run.acquisition or {})
        measured_at = _measurement_times(run, samples, measured)
        technique = assemble.technique(method, run)
        n_shots_by_sample = dict(zip(samples["sample_id"].astype(str), samples["n_shots"].astype(int)))
        mean_spec = dict(getattr(meas, "mean_spectra", {}) or {})
        medium = run.medium
        wavelength = np.asarray(meas.wavelength, float)
        intensity_basis = None
        if cf:
            from compquant.cflibs import run_intensity_basis

            intensity_basis = run_intensity_basis(method, run)

    table = meas.table
    roles = dict(zip(samples["sample_id"].astype(str), samples["role"].astype(str)))
    descriptions = dict(zip(samples["sample_id"].astype(str), samples["description"].astype(str)))
    refs = dict(zip(samples["sample_id"].astype(str), samples["standard_ref"].astype(str)))
    unknowns = [s for s in samples["sample_id"].astype(str) if roles[s] == "unknown"]
    if not unknowns:
        raise InputError(
            "the run has no sample with role 'unknown'",
            where=str(run_path),
            fix="mark the samples to certify with role 'unknown'",
        )

    basis = "cf" if cf else "calibration"
    deviations: list[release.Deviation] = release.skipped_steps(meas.provenance.get("notes", []))
    check_samples = {s: refs.get(s, "") for s in samples["sample_id"].astype(str) if roles[s] == "check"}
    parameters: dict = {"basis": basis, "issued_at": issued, "method_settings_sha256": method.settings_digest()}
    if chunk_shots:
        parameters["chunk_shots"] = int(chunk_shots)
    if cf:
        from compquant.cflibs.capture import method_windows

        qd = _quantify_cf(table, unknowns, check_samples, refs, cf_settings, method, acquisition, instrument, files,
                          tick, intensity_basis, windows=method_windows(method, meas.wavelength),
                          measurement=meas)
    else:
        qd = _quantify_calibration(meas, samples, method, standards, calibration, run_path, run_sha, issued, outdir,
                                   files, deviations, parameters, check_samples, tick)
    results, checks, drift_info, not_reported, failures = (qd.results, qd.checks, qd.drift_info, qd.not_reported,
                                                           qd.failures)
    matrix_fraction, plasma_by_sample, cf_by_sample, curves = (qd.matrix_fraction, qd.plasma_by_sample,
                                                               qd.cf_by_sample, qd.curves)
    analytes, not_evaluated, cal_info, cal_json_path, cal_text = (qd.analytes, qd.not_evaluated, qd.cal_info,
                                                                  qd.cal_json_path, qd.cal_text)

    if labp.sha256:
        files.append(FileRef("lab profile", Path(labp.source).name, labp.sha256))
    if specp is not None:
        files.append(FileRef("specification", Path(specp.path).name, specp.sha256))
    files += _method_files(method)

    lab_info = LabInfo.from_profile(labp)
    signatory = Signatory(labp.signatory_name, labp.signatory_title)
    client_info = ClientInfo(
        client if client is not None else labp.client_name, list(labp.client_address), labp.client_reference
    )
    method_info = MethodInfo(
        technique,
        method.id,
        method.version,
        method.description,
        Path(method_path).name,
        method.sha256 or "",
        basis,
        str(instrument.get("description", "")),
    )
    matrix_el = parameters.get("matrix_element")
    # the spectrum figure marks the lines the numbers rest on: the calibration curves' analytical
    # and internal-standard lines, or every method line for calibration-free analysis
    used = {c.line_id for c in curves.values()} | {c.internal_standard for c in curves.values() if c.internal_standard}
    lines_marked = [(ln.line_id, ln.wavelength_nm) for ln in method.lines if cf or not used or ln.line_id in used]

    def _not_quantified(sid: str, quantified: set[str], remarks: list[str]) -> list[str]:
        # qualitative analysis of the sample's preprocessed mean spectrum against the whole line database
        if sid not in mean_spec:
            return []
        try:
            return detected_not_quantified(wavelength, mean_spec[sid], quantified, method,
                                           resolving_power=_positive(instrument.get("resolving_power")),
                                           medium=medium)
        except CompquantError as exc:
            remarks.append(f"qualitative identification not possible: {exc.what}")
            return []

    stems = sample_stems(unknowns)  # distinct file names, decided before anything is written
    dev_texts = [d.text for d in deviations]
    step_blocks = release.step_reasons(deviations)
    drafts: list[Certificate] = []
    skipped: list[str] = []
    missing_all: list[dict] = []
    for sid in unknowns:
        rows = assemble.result_rows(results, sid)
        nr_sid = [nr for nr in not_reported if str(nr.get("sample_id")) in (sid, "*")]
        if not rows:
            # nothing measured: no certificate, the reasons go to the summary and the terminal
            why = "; ".join(f"{d.get('element')}: {d.get('reason')}" for d in nr_sid if d.get("reason"))
            failures.setdefault(sid, "no element could be quantified for this sample" + (f" ({why})" if why else ""))
            missing_all += [{"sample_id": sid, "element": str(d.get("element", "")), "reason": str(d.get("reason", ""))}
                            for d in nr_sid]
            skipped.append(sid)
            continue
        missing = release.analytes_not_reported(analytes, rows, nr_sid)
        # with the matrix by difference not determined, every ratio-to-matrix result is not either
        dependent = release.matrix_dependents(missing, rows, qd.ratio_dependent, matrix_el)
        missing_all += [{"sample_id": sid, "element": el, "reason": why}
                        for el, why in {**missing, **dependent}.items()]
        rows = _complete_rows(rows, missing, dependent, matrix_el, matrix_fraction.get(sid), checks, basis, curves)
        remarks = [f"{el} not reported: {why}" for el, why in {**missing, **dependent}.items()]
        if lab is None:
            remarks.append("No lab profile was given: laboratory, signatory and client are not stated.")
        cert = Certificate(
            number="",
            issue_date=issue_date,
            lab=lab_info,
            signatory=signatory,
            client=client_info,
            method=method_info,
            sample=SampleInfo(
                sid,
                descriptions.get(sid, ""),
                labp.sample_condition,
                received if received else labp.sample_received,
                measured_at.get(sid, ""),
                n_shots_by_sample.get(sid),
                run_path.name,
            ),
            results=rows,
            provenance=Provenance("compquant", __version__, issued, run_sha, list(files), dict(parameters)),
            calibration=cal_info,
            plasma=plasma_by_sample.get(sid),
            qc=QCInfo(drift_info, checks, assemble.blank_text(curves), not_evaluated=list(not_evaluated)),
            conformity=assess_conformity(specp, rows) if specp is not None else None,
            detected_not_quantified=_not_quantified(sid, {r.element for r in rows}, remarks),
            deviations=list(dev_texts),
            remarks=remarks,
            release_blocks=release.analyte_reasons(missing, matrix_el, dependent) + step_blocks,
        )
        digest = result_set_digest(basis, files, rows)
        cert.provenance.parameters["result_set_sha256"] = digest
        cert.number = certificate_number(labp.certificate_prefix, run_sha, sid, issue_date, result_digest=digest)
        drafts.append(cert)

    units = element_units((r.element, r.mass_fraction, r.lod, r.below_lod) for c in drafts for r in c.results)
    for c in drafts:  # one unit per element across the run's certificates, LIMS CSV and screen
        for r in c.results:
            r.unit = units.get(r.element, "")
    if not drafts:
        # nothing to certify: an error, and no summary or LIMS file that could pass for a result
        why = "; ".join(f"{k}: {v}" for k, v in sorted(failures.items())) or "no results"
        raise DataQualityError(
            f"no certificate could be issued ({why})",
            where=str(run_path),
            fix="see the reasons; check the method's lines and settings against the run",
        )

    def figures_for(cert, stem):
        if not figures:
            return []
        sid = cert.sample.sample_id
        return assemble.sample_figures(
            sid, stem, outdir, wavelength, mean_spec, lines_marked, curves, cert.results,
            matrix_fraction.get(sid, (None, None))[0] if not any(
                r.line_id == "by difference" and not finite(r.mass_fraction) for r in cert.results) else None,
            cf_by_sample.get(sid), run_path, method, write=False,
        )

    try:
        outdir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise output_error(exc, outdir) from exc
    with _folder_lock(outdir):  # another analysis into this folder waits, then sees what was issued
        plan = plan_issue(outdir, drafts, stems, revise, review)  # refuses before anything is written
        if recorder is not None:
            for it in plan:
                if it.write:
                    recorder.check_number(it.cert.number)  # never overwrite a released certificate's files
        out, certs = _write_output_set(
            outdir, plan, figures_for, cal_json_path, cal_text if cal_json_path is not None else None,
            _summary_head(issued, run_path, run_sha, method, method_path, basis, cal_info, files, drift_info,
                          checks, not_evaluated),
            missing_all, not_reported, failures, skipped, basis, lims_dialect, tick, review,
        )
    if recorder is not None:
        recorder.store(run_file=run_path, run_sha256=run_sha, instrument=instrument, samples=samples,
                       measured=measured_at, method=method, basis=basis, issued_at=issued, certificates=certs,
                       outputs=out.certificates, review=review, calibration=cal_info, drift=drift_info,
                       checks=checks, outdir=outdir)
    return out


# ------------------------------------------------------------------------- helpers of analyse()


@dataclass
class _Quant:
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


def _quantify_cf(table, unknowns, check_samples, refs, cf_settings, method, acquisition, instrument, files,
                 tick, intensity_basis=None, windows=None, measurement=None) -> _Quant:
    """Calibration-free analysis of the unknowns, and of the check samples the [cf] standards certify.

    ``intensity_basis``: the basis of the run's response-corrected intensities
    (:func:`compquant.cflibs.run_intensity_basis`; a photon-basis curve is converted, an unstated
    one refused unless ``[cf] response_basis`` states it)."""
    from compquant.cflibs import analyse_cf_samples
    from compquant.cflibs.result import results_table

    qd = _Quant(drift_info=DriftInfo(False, "not applicable to calibration-free analysis"))
    tick("quantify", 0, len(unknowns))
    cf_certified, one_point = _cf_references(cf_settings, method, table, refs, acquisition, instrument, files,
                                             intensity_basis)
    cf_checks = [s for s, ref in check_samples.items() if (ref or s) in cf_certified]
    cf_results, qd.failures = analyse_cf_samples(
        table,
        sample_ids=unknowns + cf_checks,
        settings=cf_settings,
        acquisition=acquisition,
        instrument=instrument,
        one_point=one_point,
        intensity_basis=intensity_basis,
        windows=windows,
        measurement=measurement,
        progress=lambda done, total: tick("quantify", done, total),  # per sample: the slow step
    )
    qd.results = results_table(cf_results)
    qd.analytes = _cf_analytes(cf_settings, method)
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


def _quantify_calibration(meas, samples, method, standards, calibration, run_path, run_sha, issued, outdir, files,
                          deviations, parameters, check_samples, tick) -> _Quant:
    """Calibrate from the run's standards (or load a saved calibration) and quantify every sample."""
    import pandas as pd

    from compquant.calibrate import Calibration, calibrate, load_standards, parse_calibration_section
    from compquant.calibrate.apply import quantify
    from compquant.calibrate.build import certified_table

    qd = _Quant()
    stds = None
    if standards is not None:
        stds = load_standards(standards)
        files.append(FileRef("standards", Path(standards).name, stds.attrs.get("sha256", sha256_file(standards))))
        cfg = parse_calibration_section(method.sections.get("calibration"), source=method.where)
        tick("calibrate", 0, 1)
        cal = calibrate(
            meas.table,
            stds,
            cfg,
            shot_table=meas.shots,
            samples=samples,
            method_id=method.id,
            method_version=method.version,
            method_sha256=method.sha256 or "",
            run_sha256=run_sha,
            run_path=str(run_path),
        )
        cal.created_utc = issued  # the calibration is made now; keeps repeated runs identical
        qd.cal_json_path = outdir / "calibration.json"
        # written with the certificates at the end: a failure before then leaves no output
        qd.cal_text = cal.to_json() + "\n"
        cal_sha = hashlib.sha256(qd.cal_text.encode("utf-8")).hexdigest()
        files.append(FileRef("calibration (written)", qd.cal_json_path.name, cal_sha))
        tick("calibrate", 1, 1)
        qd.cal_info = assemble.calibration_info(cal, qd.cal_json_path.name, cal_sha)
    else:
        cal_path = require_file(calibration, "calibration file")
        cal = Calibration.load(cal_path, method_id=method.id, method_sha256=method.sha256)
        cal_sha = sha256_file(cal_path)
        files.append(FileRef("calibration", cal_path.name, cal_sha))
        qd.cal_info = assemble.calibration_info(cal, cal_path.name, cal_sha)
    tick("quantify", 0, 1)
    q = quantify(meas, cal, standards=stds, run_sha256=run_sha, samples=samples)
    tick("quantify", 1, 1)
    qd.results = q.results
    qd.checks = assemble.check_results(q.checks, q.results)
    qd.drift_info = assemble.drift_info(q.drift)
    if calibration is not None and not q.drift.get("applied") and q.drift.get("mode", "optional") != "off":
        # a saved calibration applied without drift standardisation departs from the method; the
        # method allows it (drift = "optional"; "required" stops the analysis), so it does not block
        deviations.append(
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
    qd.not_evaluated = release.checks_not_evaluated(check_samples, certified, qd.analytes, qd.checks)
    _drop_matrix_dependent_checks(qd, check_samples, cal.matrix_element)
    spt = (cal.settings or {}).get("sigma_pt_rel")
    if spt:
        parameters["sigma_pt_rel"] = float(spt)
    qd.matrix_fraction = dict(q.matrix_fraction)
    qd.curves = dict(cal.curves)
    parameters["calibration_id"] = cal.calibration_id
    parameters["coverage"] = str(q.provenance.get("coverage", "k2"))
    if cal.matrix_element:
        parameters["matrix_element"] = str(cal.matrix_element)
    return qd


def _drop_matrix_dependent_checks(qd: _Quant, check_samples: dict, matrix_el) -> None:
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
    files.append(FileRef("standards (calibration-free)", path.name, sha256_file(path)))
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


def _method_files(method) -> list[FileRef]:
    """Files the method refers to that feed the results (the response curve), with their SHA-256."""
    out = []
    pre = method.preprocess
    if pre.response and pre.response_file:
        p = method.resolve_path(pre.response_file)
        out.append(FileRef("response curve", p.name, sha256_file(p)))
    if pre.shift != "none" and pre.shift_reference_file:
        p = method.resolve_path(pre.shift_reference_file)
        out.append(FileRef("wavelength-shift reference", p.name, sha256_file(p)))
    return out


def _complete_rows(rows, missing, dependent, matrix_el, matrix, checks, basis, curves) -> list[ResultRow]:
    """The sample's rows plus one *not determined* row per missing analyte and the matrix row.

    The matrix by difference is *not determined* when any analyte is missing: it is never closed
    over a subset of the analytes; nor are the results that are ratios to it (``dependent``).
    """
    rows = list(rows)
    for r in rows:
        if r.element in dependent:
            r.mass_fraction = r.U = r.u = r.lod = r.loq = None
            r.below_lod = r.above_range = False
            r.flags = [f for f in r.flags if f not in ("below_lod", "below_loq")] + ["not_reported"]
    have = {r.element for r in rows}
    for el in missing:
        if el not in have:
            line = curves[el].line_id if el in curves else ""
            rows.append(ResultRow(el, None, None, flags=["not_reported"], line_id=line, basis=basis))
    if matrix_el and matrix_el not in have and (matrix is not None or missing):
        w, uw = matrix if matrix is not None else (None, None)
        fl = ["by_difference"] + (["check_failed"] if any(not c.passed for c in checks) else [])
        if missing or not finite(w):
            rows.append(ResultRow(matrix_el, None, None, flags=fl + ["not_reported"], line_id="by difference",
                                  basis=basis))
        else:
            rows.append(ResultRow(matrix_el, float(w), U=2.0 * float(uw), u=float(uw), k=2.0, flags=fl,
                                  line_id="by difference", basis=basis))
    return rows


_RESERVED = {"lims", "summary", "calibration", "manifest", "figures"}


def sample_stems(sample_ids) -> dict[str, str]:
    """File-name stems for the samples, distinct even on a case-blind file system.

    A stem that would clash (case-insensitively) with another sample's, with a run-level file or
    with the revision suffix ``-R<n>`` gets the first 8 hex digits of the SHA-256 of the sample id
    appended; should two stems still clash the analysis is refused before anything is written.
    """
    import re

    base = {sid: safe_filename(sid) for sid in sample_ids}
    count: dict[str, int] = {}
    for st in base.values():
        count[st.lower()] = count.get(st.lower(), 0) + 1
    out = {}
    for sid, st in base.items():
        if count[st.lower()] > 1 or st.lower() in _RESERVED or re.search(r"-R\d+$", st):
            st = f"{st}-{hashlib.sha256(sid.encode('utf-8', 'surrogatepass')).hexdigest()[:8]}"
        out[sid] = st
    seen: dict[str, str] = {}
    for sid, st in out.items():
        if st.lower() in seen:
            raise InputError(
                f"samples {seen[st.lower()]!r} and {sid!r} would share the file name {st!r}",
                where="sample ids",
                fix="give the samples ids that differ in more than case and punctuation",
            )
        seen[st.lower()] = sid
    return out


@dataclass
class _Issue:
    cert: Certificate
    stem: str
    write: bool  # False: the same result set is already issued in the folder; keep that file


def _issued(outdir: Path, stem: str, sid: str) -> list[dict]:
    """Certificates already issued in ``outdir`` for this sample (its stem, revisions ``-R<n>``)."""
    import json
    import re

    found = []
    if not outdir.is_dir():
        return found
    pat = re.compile(re.escape(stem) + r"(-R(\d+))?\.json$", re.IGNORECASE)
    for p in outdir.iterdir():
        m = pat.fullmatch(p.name)
        if not m:
            continue
        try:
            doc = json.loads(p.read_text("utf-8"))
        except (OSError, UnicodeDecodeError, ValueError):
            doc = None
        if not isinstance(doc, dict) or doc.get("schema") != "compquant-certificate":
            raise InputError("a file that is not a certificate holds this sample's name", where=str(p),
                             fix="move it away or choose another output folder")
        if str(doc.get("sample", {}).get("sample_id")) != sid:
            raise InputError(f"the file holds the certificate of sample {doc['sample'].get('sample_id')!r}, "
                             f"not {sid!r}", where=str(p), fix="choose another output folder")
        found.append({"path": p, "doc": doc, "revision": int(doc.get("revision", 0) or 0)})
    return sorted(found, key=lambda d: d["revision"])


def _same_as_issued(last: dict, cert: Certificate, review=None) -> bool:
    """True when ``cert``, numbered as the issued certificate ``last``, says exactly what it says.

    Compared as canonical JSON (figures aside: they are drawn from the same numbers), so another
    client name, issue time or lab profile is a different certificate.  When true, ``cert`` keeps
    the issued number, revision and supersedes; otherwise it is left as it was.
    """
    from compquant.report.jsonform import certificate_to_dict

    before = (cert.number, cert.revision, cert.supersedes, cert.revision_reason)
    sup = last.get("supersedes") or {}
    cert.number, cert.revision = str(last.get("number", "")), int(last.get("revision", 0) or 0)
    cert.supersedes, cert.revision_reason = str(sup.get("number", "")), str(sup.get("reason", ""))
    new = certificate_to_dict(cert, review)  # with the review state it is issued in
    old = dict(last)
    new.pop("figures", None)
    old.pop("figures", None)
    if canonical_json(new) == canonical_json(old):
        return True
    cert.number, cert.revision, cert.supersedes, cert.revision_reason = before
    return False


def plan_issue(outdir: Path, drafts, stems: dict, revise: str | None, review=None) -> list[_Issue]:
    """Decide, before writing anything, how each certificate is issued (docs/certificate.md).

    No certificate of the sample in the folder: issue it.  The latest one says exactly the same
    (:func:`_same_as_issued`): keep it, write nothing.  Otherwise refuse,
    unless ``revise`` gives the reason for a revision ``<first number>-R<n>`` that names the
    certificate it supersedes; the issued files stay as they are.
    """
    import re

    plan, refused = [], []
    for cert in drafts:
        sid = cert.sample.sample_id
        stem = stems[sid]
        issued = _issued(Path(outdir), stem, sid)
        if not issued:
            plan.append(_Issue(cert, stem, True))
            continue
        last = issued[-1]["doc"]
        if _same_as_issued(last, cert, review):
            plan.append(_Issue(cert, Path(issued[-1]["path"]).stem, False))
            continue
        if not revise:
            refused.append(f"{sid} ({last.get('number')})")
            continue
        n = issued[-1]["revision"] + 1
        base = re.sub(r"-R\d+$", "", str(issued[0]["doc"]["number"]))
        cert.number, cert.revision = f"{base}-R{n}", n
        cert.supersedes, cert.revision_reason = str(last["number"]), str(revise)
        plan.append(_Issue(cert, f"{stem}-R{n}", True))
    if refused:
        raise OutputError(
            f"certificates already issued in this folder would be replaced: {', '.join(refused)}",
            where=str(outdir),
            fix="choose another output folder, or issue revisions with --revise 'reason' (analyse(revise=...))",
        )
    return plan


def _summary_head(issued, run_path, run_sha, method, method_path, basis, cal_info, files, drift_info, checks,
                  not_evaluated) -> dict:
    return {
        "schema": SUMMARY_SCHEMA,
        "schema_version": SUMMARY_VERSION,
        "software": "compquant",
        "version": __version__,
        "issued_at": issued,
        "run": {"file": run_path.name, "sha256": run_sha},
        "method": {
            "id": method.id,
            "version": method.version,
            "file": Path(method_path).name,
            "sha256": method.sha256 or "",
        },
        "basis": basis,
        "calibration": None
        if cal_info is None
        else {"calibration_id": cal_info.calibration_id, "file": cal_info.file_name, "sha256": cal_info.file_sha256},
        "files": [{"role": f.role, "name": f.name, "sha256": f.sha256} for f in files],
        "drift": {
            "applied": drift_info.applied,
            "description": drift_info.description,
            "setup_samples": drift_info.setup_samples,
            "factors": drift_info.factors,
        },
        "check_samples": [
            {
                "sample_id": c.sample_id,
                "standard_ref": c.standard_ref,
                "element": c.element,
                "measured": c.measured,
                "certified": c.certified,
                "En": c.En,
                "z": c.z,
                "passed": c.passed,
            }
            for c in checks
        ],
        "check_samples_not_evaluated": list(not_evaluated),
    }


class _folder_lock:
    """Exclusive lock on an output folder while a set is planned and written (POSIX ``flock`` on the
    folder itself, so no file is left behind); stale staging folders of dead processes are removed
    once it is held."""

    def __init__(self, outdir: Path):
        self.path = Path(outdir)
        self.fd = None

    def __enter__(self):
        import os
        import shutil

        try:
            import fcntl
        except ImportError:  # no flock on this platform: no lock (single writer assumed)
            return self
        self.fd = os.open(self.path, os.O_RDONLY)
        fcntl.flock(self.fd, fcntl.LOCK_EX)
        for d in self.path.glob(".staging-*"):
            # holding the lock, no other analysis is between staging and commit in this folder
            if d.is_dir():
                shutil.rmtree(d, ignore_errors=True)
        return self

    def __exit__(self, *exc):
        import os

        if self.fd is not None:
            os.close(self.fd)  # releases the flock
        return False


MANIFEST = "manifest.json"
MANIFEST_SCHEMA = "compquant-output-manifest"


def _write_output_set(outdir: Path, plan, figures_for, cal_json_path, cal_text, summary: dict, missing_all,
                      not_reported, failures, skipped, basis, lims_dialect="rfc4180",
                      tick=lambda *a: None, review=None):
    """Build the whole output set in a staging folder, move it in, write the manifest last; return the
    :class:`AnalysisOutput` and the certificates.  ``review``: the review state printed on each
    certificate (a DRAFT watermark until released, :mod:`compquant.record`)."""
    import shutil
    import tempfile

    staging = Path(tempfile.mkdtemp(prefix=".staging-", dir=outdir))
    try:
        certs, outputs = [], []
        for i, it in enumerate(plan):
            tick("certificates", i, len(plan))
            cert = it.cert
            cert.figures = figures_for(cert, it.stem)
            data, pages = _render_pdf(cert, review)  # before the JSON: a PDF that cannot be made leaves no JSON
            if it.write:
                assemble.write_figures(staging, cert.figures)
                write_certificate_json(cert, staging / f"{it.stem}.json", review=review)
                write_bytes_atomic(staging / f"{it.stem}.pdf", data)
            certs.append(cert)
            reasons = cert.release_reasons()
            outputs.append(
                CertificateOutput(
                    cert.sample.sample_id,
                    cert.number,
                    str(outdir / f"{it.stem}.pdf"),
                    str(outdir / f"{it.stem}.json"),
                    pages,
                    not reasons,
                    cert.conformity.outcome if cert.conformity is not None else None,
                    [{"element": r.element, **assemble.printed(r)} for r in cert.results],
                    reasons,
                    cert.revision,
                    cert.supersedes,
                )
            )
        tick("certificates", len(plan), len(plan))
        if cal_json_path is not None:
            old = outdir / cal_json_path.name
            if old.is_file() and old.read_text("utf-8") != cal_text:
                # the calibration the earlier (now superseded or kept) certificates name stays in the
                # folder under its hash, so every certificate's calibration file can still be found
                sha = sha256_file(old)
                shutil.copyfile(old, staging / f"{cal_json_path.stem}-{sha[:12]}.json")
            write_text_atomic(staging / cal_json_path.name, cal_text)
        write_lims_csv(certs, staging / "lims.csv", lims_dialect)
        valid = all(o.valid_for_release for o in outputs)
        summary.update(
            {
                "valid_for_release": valid,
                "release_status": release.release_status(valid),
                "certificates": [
                    {
                        "sample_id": o.sample_id,
                        "number": o.number,
                        "revision": o.revision,
                        "supersedes": o.supersedes,
                        "pdf": Path(o.pdf).name,
                        "json": Path(o.json).name,
                        "pages": o.pages,
                        "valid_for_release": o.valid_for_release,
                        "release_status": release.release_status(o.valid_for_release),
                        "release_reasons": list(o.reasons),
                        "conformity": o.conformity,
                    }
                    for o in outputs
                ],
                "lims_csv": "lims.csv",
                "lims_dialect": lims_dialect,
                "not_reported": [{k: str(v) for k, v in d.items()} for d in missing_all],
                "failures": {str(k): str(v) for k, v in failures.items()},
                "not_certified": skipped,
            }
        )
        write_text_atomic(staging / "summary.json", canonical_json(summary))
        _commit(staging, outdir)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return AnalysisOutput(
        str(outdir),
        basis,
        outputs,
        str(outdir / "lims.csv"),
        str(outdir / "summary.json"),
        None if cal_json_path is None else str(cal_json_path),
        valid,
        missing_all,
        failures,
    ), certs


def _render_pdf(cert, review=None) -> tuple[bytes, int]:
    """The certificate's PDF bytes and page count; a page-layout failure is one clear error line."""
    from reportlab.platypus.doctemplate import LayoutError

    try:
        return render_pdf_bytes(cert, review)
    except LayoutError as exc:
        sid = cert.sample.sample_id
        raise OutputError(f"the certificate of sample {sid[:40]!r} cannot be laid out on A4 pages "
                          f"({str(exc)[:80]})", where="certificate PDF",
                          fix="shorten the long texts (lab profile, client, sample description)") from None


def _commit(staging: Path, outdir: Path) -> None:
    """Move the staged files into ``outdir`` and write the manifest last.

    The old manifest is removed first, so a kill part-way leaves a folder without a manifest,
    which :func:`verify_output_set` reports as incomplete; the new manifest lists every file of
    the folder with its SHA-256.
    """
    import os

    man = outdir / MANIFEST
    if man.exists():
        man.unlink()
    for p in sorted(staging.rglob("*")):
        if p.is_file():
            dest = outdir / p.relative_to(staging)
            dest.parent.mkdir(parents=True, exist_ok=True)
            os.replace(p, dest)
    files = {}
    for p in sorted(outdir.rglob("*")):
        rel = p.relative_to(outdir)
        if p.is_file() and rel.parts[0] != MANIFEST and not any(part.startswith(".") for part in rel.parts):
            files[rel.as_posix()] = sha256_file(p)
    write_text_atomic(man, canonical_json({"schema": MANIFEST_SCHEMA, "schema_version": 1, "files": files}))


def verify_output_set(outdir) -> dict:
    """Check an output folder against its manifest; return the manifest, raise when it does not hold.

    Readers of an output folder (a LIMS import, a review step) call this first: a folder
    without a manifest was interrupted while being written, and a file whose SHA-256 differs
    was changed after the analysis.
    """
    import json

    outdir = Path(outdir)
    man = outdir / MANIFEST
    if not man.is_file():
        raise InputError("the output set is incomplete (no manifest.json): it was interrupted while written",
                         where=str(outdir), fix="run the analysis again into this folder")
    doc = json.loads(man.read_text("utf-8"))
    if doc.get("schema") != MANIFEST_SCHEMA:
        raise InputError("manifest.json is not a compquant output manifest", where=str(man),
                         fix="run the analysis again")
    for rel, sha in doc.get("files", {}).items():
        p = outdir / rel
        if not p.is_file() or sha256_file(p) != sha:
            raise InputError(f"{rel} is missing or differs from the manifest", where=str(outdir),
                             fix="the set was changed after the analysis; run it again")
    return doc


__all__ = [
    "analyse",
    "verify_output_set",
    "sample_stems",
    "plan_issue",
    "AnalysisOutput",
    "CertificateOutput",
    "SUMMARY_SCHEMA",
    "SUMMARY_VERSION",
]
