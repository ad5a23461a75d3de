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
)
from compquant.report.config import LabProfile, check_certificate_texts
from compquant.report.jsonform import canonical_json, write_certificate_json
from compquant.report.lims import write_lims_csv
from compquant.report.numbers import finite
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
    not_reported: list[dict]
    failures: dict


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
    db : the lab's record (path or URL; default ``COMPQUANT_DB``): the analysis and its certificates
        are stored there (:mod:`compquant.record`).  Certificates are DRAFTs unless the lab profile
        sets ``[review] required = false``.
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
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise InputError("output path exists and is not a folder", where=str(outdir), fix="choose a folder")

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
        samples = run.samples.copy()
        check_certificate_texts(samples["sample_id"], samples["description"], client, str(run_path))
        run_sha = run.sha256()
        files[0].sha256 = run_sha
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
        measured = {str(sid): assemble.measured_when(run, str(sid)) for sid in samples["sample_id"]}
        technique = assemble.technique(method, run)
        n_shots_by_sample = dict(zip(samples["sample_id"].astype(str), samples["n_shots"].astype(int)))
        mean_spec = dict(getattr(meas, "mean_spectra", {}) or {})
        medium = run.medium
        wavelength = np.asarray(meas.wavelength, float)

    table = meas.table
    roles = dict(zip(samples["sample_id"].astype(str), samples["role"].astype(str)))
    descriptions = dict(zip(samples["sample_id"].astype(str), samples["description"].astype(str)))
    unknowns = [s for s in samples["sample_id"].astype(str) if roles[s] == "unknown"]
    if not unknowns:
        raise InputError(
            "the run has no sample with role 'unknown'",
            where=str(run_path),
            fix="mark the samples to certify with role 'unknown'",
        )

    basis = "cf" if cf else "calibration"
    cal_info = None
    cal_json_path = None
    drift_info = DriftInfo(False, "not applicable to calibration-free analysis" if cf else "")
    checks: list[CheckResult] = []
    not_reported: list[dict] = []
    failures: dict = {}
    matrix_fraction: dict = {}
    plasma_by_sample: dict = {}
    cf_by_sample: dict = {}
    curves = {}
    run_blocks: list[str] = []
    deviations: list[str] = []
    parameters: dict = {"basis": basis, "issued_at": issued, "method_settings_sha256": method.settings_digest()}
    if chunk_shots:
        parameters["chunk_shots"] = int(chunk_shots)

    if cf:
        from compquant.cflibs import analyse_cf_samples
        from compquant.cflibs.result import results_table

        tick("quantify", 0, len(unknowns))
        cf_results, failures = analyse_cf_samples(
            table,
            sample_ids=unknowns,
            settings=cf_settings,
            acquisition=acquisition,
            instrument=instrument,
        )
        results = results_table(cf_results)
        for res in cf_results:
            cf_by_sample[str(res.sample_id)] = res
            plasma_by_sample[str(res.sample_id)] = assemble.plasma_info(res)
        tick("quantify", len(unknowns), len(unknowns))
    else:
        from compquant.calibrate import Calibration, calibrate, load_standards, parse_calibration_section
        from compquant.quantify import quantify

        stds = None
        if standards is not None:
            stds = load_standards(standards)
            files.append(FileRef("standards", Path(standards).name, stds.attrs.get("sha256", sha256_file(standards))))
            cfg = parse_calibration_section(method.sections.get("calibration"), source=method.where)
            tick("calibrate", 0, 1)
            cal = calibrate(
                table,
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
            cal_json_path = outdir / "calibration.json"
            # written with the certificates at the end: a failure before then leaves no output
            cal_text = cal.to_json() + "\n"
            cal_sha = hashlib.sha256(cal_text.encode("utf-8")).hexdigest()
            files.append(FileRef("calibration (written)", cal_json_path.name, cal_sha))
            tick("calibrate", 1, 1)
            cal_info = assemble.calibration_info(cal, cal_json_path.name, cal_sha)
        else:
            cal_path = require_file(calibration, "calibration file")
            cal = Calibration.load(cal_path, method_id=method.id, method_sha256=method.sha256)
            cal_sha = sha256_file(cal_path)
            files.append(FileRef("calibration", cal_path.name, cal_sha))
            cal_info = assemble.calibration_info(cal, cal_path.name, cal_sha)
        tick("quantify", 0, 1)
        q = quantify(meas, cal, standards=stds, run_sha256=run_sha, samples=samples)
        tick("quantify", 1, 1)
        results = q.results
        checks = assemble.check_results(q.checks)
        drift_info = assemble.drift_info(q.drift)
        if calibration is not None and not q.drift.get("applied") and q.drift.get("mode", "optional") != "off":
            # a saved calibration applied without drift standardisation departs from the method
            deviations.append(
                "drift standardisation with setup samples was not possible: "
                f"{q.drift.get('reason', 'no usable setup measurement')}"
            )
        not_reported = list(q.provenance.get("not_reported", []))
        matrix_fraction = dict(q.matrix_fraction)
        curves = dict(cal.curves)
        parameters["calibration_id"] = cal.calibration_id
        parameters["coverage"] = str(q.provenance.get("coverage", "k2"))
        if cal.matrix_element:
            parameters["matrix_element"] = str(cal.matrix_element)

    if labp.sha256:
        files.append(FileRef("lab profile", Path(labp.source).name, labp.sha256))
    if specp is not None:
        files.append(FileRef("specification", Path(specp.path).name, specp.sha256))

    try:
        outdir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise output_error(exc, outdir) from exc
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

    certs: list[Certificate] = []
    outputs: list[CertificateOutput] = []
    skipped: list[str] = []
    used_stems: set[str] = set()
    for i, sid in enumerate(unknowns):
        tick("certificates", i, len(unknowns))
        rows = assemble.result_rows(results, sid)
        remarks = []
        if matrix_el and sid in matrix_fraction and matrix_el not in {r.element for r in rows}:
            w, uw = matrix_fraction[sid]
            if finite(w):
                rows.append(
                    ResultRow(
                        matrix_el,
                        float(w),
                        U=2.0 * float(uw),
                        u=float(uw),
                        k=2.0,
                        flags=["by_difference"] + (["check_failed"] if any(not c.passed for c in checks) else []),
                        line_id="by difference",
                        basis=basis,
                    )
                )
        for nr in not_reported:
            if str(nr.get("sample_id")) == sid:
                remarks.append(f"{nr.get('element')} not reported: {nr.get('reason')}")
        blocks = list(run_blocks)
        if not rows:
            # nothing to certify: no certificate, the reason goes to the summary and the terminal
            failures.setdefault(sid, "no element could be quantified for this sample")
            skipped.append(sid)
            continue
        number = certificate_number(labp.certificate_prefix, run_sha, sid, issue_date)
        if recorder is not None:
            recorder.check_number(number)  # never overwrite a released certificate's files
        stem = safe_filename(sid)
        if stem.lower() in used_stems or stem.lower() in ("lims", "summary", "calibration"):
            stem = f"{stem}-{len(used_stems) + 1}"  # never overwrite another sample's files
        used_stems.add(stem.lower())
        figs = []
        if figures:
            figs = assemble.sample_figures(
                sid,
                stem,
                outdir,
                wavelength,
                mean_spec,
                lines_marked,
                curves,
                rows,
                matrix_fraction.get(sid, (None, None))[0],
                cf_by_sample.get(sid),
                run_path,
                method,
            )
        conf = assess_conformity(specp, rows) if specp is not None else None
        cert = Certificate(
            number=number,
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
                measured.get(sid, ""),
                n_shots_by_sample.get(sid),
                run_path.name,
            ),
            results=rows,
            provenance=Provenance("compquant", __version__, issued, run_sha, list(files), dict(parameters)),
            calibration=cal_info,
            plasma=plasma_by_sample.get(sid),
            qc=QCInfo(drift_info, checks, assemble.blank_text(curves)),
            conformity=conf,
            detected_not_quantified=_not_quantified(sid, {r.element for r in rows}, remarks),
            figures=figs,
            deviations=list(deviations),
            remarks=remarks,
            release_blocks=blocks,
        )
        if lab is None:
            cert.remarks.append("No lab profile was given: laboratory, signatory and client are not stated.")
        pdf_path = outdir / f"{stem}.pdf"
        json_path = outdir / f"{stem}.json"
        pdf_bytes, pages = _render_pdf(cert, sid, review)  # first: a PDF that cannot be made leaves no JSON alone
        write_certificate_json(cert, json_path, review=review)
        write_bytes_atomic(pdf_path, pdf_bytes)
        certs.append(cert)
        outputs.append(
            CertificateOutput(
                sid,
                number,
                str(pdf_path),
                str(json_path),
                pages,
                cert.valid_for_release,
                conf.outcome if conf is not None else None,
                [{"element": r.element, **assemble.printed(r)} for r in rows],
            )
        )
    tick("certificates", len(unknowns), len(unknowns))

    if not outputs:
        # nothing to certify: an error, and no summary or LIMS file that could pass for a result
        why = "; ".join(f"{k}: {v}" for k, v in sorted(failures.items())) or "no results"
        raise DataQualityError(
            f"no certificate could be issued ({why})",
            where=str(run_path),
            fix="see the reasons; check the method's lines and settings against the run",
        )
    if cal_json_path is not None:
        write_text_atomic(cal_json_path, cal_text)
    lims_path = outdir / "lims.csv"
    write_lims_csv(certs, lims_path)
    summary = {
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
        "valid_for_release": all(o.valid_for_release for o in outputs),
        "certificates": [
            {
                "sample_id": o.sample_id,
                "number": o.number,
                "pdf": Path(o.pdf).name,
                "json": Path(o.json).name,
                "pages": o.pages,
                "valid_for_release": o.valid_for_release,
                "conformity": o.conformity,
            }
            for o in outputs
        ],
        "lims_csv": lims_path.name,
        "not_reported": [{k: str(v) for k, v in d.items()} for d in not_reported],
        "failures": {str(k): str(v) for k, v in failures.items()},
        "not_certified": skipped,
    }
    summary_path = outdir / "summary.json"
    write_text_atomic(summary_path, canonical_json(summary))
    if recorder is not None:
        recorder.store(run_file=run_path, run_sha256=run_sha, instrument=instrument, samples=samples, measured=measured,
                       method=method, basis=basis, issued_at=issued, certificates=certs, outputs=outputs, review=review,
                       calibration=cal_info, drift=drift_info, checks=checks, outdir=outdir)
    return AnalysisOutput(
        str(outdir),
        basis,
        outputs,
        str(lims_path),
        str(summary_path),
        None if cal_json_path is None else str(cal_json_path),
        summary["valid_for_release"],
        not_reported,
        failures,
    )



def _render_pdf(cert, sid: str, review=None) -> tuple[bytes, int]:
    """The certificate's PDF bytes and page count; a page-layout failure is one clear error line."""
    from reportlab.platypus.doctemplate import LayoutError

    try:
        return render_pdf_bytes(cert, review)
    except LayoutError as exc:
        raise OutputError(f"the certificate of sample {sid[:40]!r} cannot be laid out on A4 pages "
                          f"({str(exc)[:80]})", where="certificate PDF",
                          fix="shorten the long texts (lab profile, client, sample description)") from None

__all__ = ["analyse", "AnalysisOutput", "CertificateOutput", "SUMMARY_SCHEMA", "SUMMARY_VERSION"]
