"""Step 4 of :func:`compquant.analyse.analyse`: one certificate per unknown sample, not yet numbered on disk.

:func:`assemble_certificates` turns the :class:`~compquant.workflow.quantify.Quantified` results
into :class:`compquant.report.Certificate` drafts: the sample's rows, a *not determined* row per
analyte the method asks for but the sample lacks (and the matrix by difference), the remarks, the
release blocks (:mod:`compquant.report.release`), the elements detected but not quantified
(:mod:`compquant.identify`), and the certificate number from the result set's digest.  A sample
with no row gets no certificate; its reasons go to ``failures`` and the summary.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from compquant import __version__
from compquant.errors import CompquantError, DataQualityError
from compquant.fileio import sha256_file
from compquant.identify.sample import detected_not_quantified
from compquant.report import (
    Certificate,
    ClientInfo,
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
    release,
)
from compquant.report.certificate import result_set_digest
from compquant.report.numbers import element_units, finite


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
    ``matrix`` is ``(w, u, k, nu_eff)`` from :func:`compquant.calibrate.predict.sample_rows`:
    ``U = k u`` with the coverage factor of the other results' rule (GUM G.3-G.4).
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
        w, uw, k = (tuple(matrix) + (None,))[:3] if matrix is not None else (None, None, None)
        # as on the results (calibrate.apply.checks_valid): a check below its LOQ does not count
        fl = ["by_difference"] + (["check_failed"] if any(not c.passed and release.in_scope(c) for c in checks) else [])
        if missing or not finite(w):
            rows.append(ResultRow(matrix_el, None, None, flags=fl + ["not_reported"], line_id="by difference",
                                  basis=basis))
        else:
            k = float(k) if finite(k) else 2.0  # the closure's coverage rule (calibrate.predict.sample_rows)
            rows.append(ResultRow(matrix_el, float(w), U=k * float(uw), u=float(uw), k=k, flags=fl,
                                  line_id="by difference", basis=basis))
    return rows


def _positive(value) -> float | None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if np.isfinite(v) and v > 0 else None


@dataclass
class Drafts:
    """The certificates to issue and what the summary says about the samples without one."""

    certificates: list  # Certificate, one per unknown sample with results, numbered
    stems: dict  # sample id -> file-name stem (compquant.workflow.issue.sample_stems)
    lines_marked: list  # (line id, nm) marked in the spectrum figure
    skipped: list = field(default_factory=list)  # unknown samples without a certificate
    missing_all: list = field(default_factory=list)  # {sample_id, element, reason} not reported


def assemble_certificates(job, m, sc, qd) -> Drafts:
    """Build every unknown sample's certificate; raise :class:`DataQualityError` when none can be issued."""
    from compquant.workflow.issue import sample_stems

    _add_reference_files(job)
    parts = _shared_parts(job, m, qd)
    out = Drafts([], sample_stems(sc.unknowns), _lines_marked(job, qd))  # file names decided before writing
    for sid in sc.unknowns:
        cert = _certificate(sid, job, m, sc, qd, parts, out)
        if cert is not None:
            out.certificates.append(cert)
    _unify_units(out.certificates)
    if not out.certificates:
        # nothing to certify: an error, and no summary or LIMS file that could pass for a result
        why = "; ".join(f"{k}: {v}" for k, v in sorted(qd.failures.items())) or "no results"
        raise DataQualityError(f"no certificate could be issued ({why})", where=str(job.run_path),
                               fix="see the reasons; check the method's lines and settings against the run")
    return out


def _add_reference_files(job) -> None:
    """The lab profile, specification and the method's own files join the certificates' file list."""
    labp, specp = job.labp, job.specp
    if labp.sha256:
        job.files.append(FileRef("lab profile", Path(labp.source).name, labp.sha256))
    if specp is not None:
        job.files.append(FileRef("specification", Path(specp.path).name, specp.sha256))
    job.files += _method_files(job.method)


def _shared_parts(job, m, qd) -> dict:
    """The certificate parts every sample of the run shares."""
    labp, method = job.labp, job.method
    return {
        "lab": LabInfo.from_profile(labp),
        "signatory": Signatory(labp.signatory_name, labp.signatory_title),
        "client": ClientInfo(job.client if job.client is not None else labp.client_name,
                             list(labp.client_address), labp.client_reference),
        "method": MethodInfo(m.technique, method.id, method.version, method.description,
                             Path(job.method_path).name, method.sha256 or "", job.basis,
                             str(m.instrument.get("description", ""))),
        "qc_blank": assemble.blank_text(qd.curves),
    }


def _lines_marked(job, qd) -> list:
    """The lines the numbers rest on, marked in the spectrum figure: the calibration curves'
    analytical and internal-standard lines, or every method line for calibration-free analysis."""
    curves = qd.curves
    used = {c.line_id for c in curves.values()} | {c.internal_standard for c in curves.values() if c.internal_standard}
    return [(ln.line_id, ln.wavelength_nm) for ln in job.method.lines if job.cf or not used or ln.line_id in used]


def _not_quantified(sid: str, quantified: set[str], remarks: list[str], job, m) -> list[str]:
    """Qualitative analysis of the sample's preprocessed mean spectrum against the whole line database."""
    if sid not in m.mean_spec:
        return []
    try:
        return detected_not_quantified(m.wavelength, m.mean_spec[sid], quantified, job.method,
                                       resolving_power=_positive(m.instrument.get("resolving_power")),
                                       medium=m.medium)
    except CompquantError as exc:
        remarks.append(f"qualitative identification not possible: {exc.what}")
        return []


def _certificate(sid, job, m, sc, qd, parts, out: Drafts):
    """One sample's numbered certificate, or None (reasons in ``qd.failures`` / ``out``) without results."""
    basis = job.basis
    matrix_el = sc.parameters.get("matrix_element")
    rows = assemble.result_rows(qd.results, sid)
    nr_sid = [nr for nr in qd.not_reported if str(nr.get("sample_id")) in (sid, "*")]
    if not rows:
        # nothing measured: no certificate, the reasons go to the summary and the terminal
        why = "; ".join(f"{d.get('element')}: {d.get('reason')}" for d in nr_sid if d.get("reason"))
        qd.failures.setdefault(sid, "no element could be quantified for this sample" + (f" ({why})" if why else ""))
        out.missing_all += [{"sample_id": sid, "element": str(d.get("element", "")),
                             "reason": str(d.get("reason", ""))} for d in nr_sid]
        out.skipped.append(sid)
        return None
    missing = release.analytes_not_reported(qd.analytes, rows, nr_sid)
    # with the matrix by difference not determined, every ratio-to-matrix result is not either
    dependent = release.matrix_dependents(missing, rows, qd.ratio_dependent, matrix_el)
    not_reported = {**missing, **dependent}
    out.missing_all += [{"sample_id": sid, "element": el, "reason": why} for el, why in not_reported.items()]
    rows = _complete_rows(rows, missing, dependent, matrix_el, qd.matrix_fraction.get(sid), qd.checks, basis,
                          qd.curves)
    remarks = [f"{el} not reported: {why}" for el, why in not_reported.items()] + list(qd.remarks)
    if job.lab is None:
        remarks.append("No lab profile was given: laboratory, signatory and client are not stated.")
    labp = job.labp
    # the items' condition and date of receipt: the lab profile's only for the runs its [samples]
    # names (ISO/IEC 17025:2017 7.8.2.1 e, f); --received states the date for this run's items
    condition, received = labp.sample_facts(job.run_path.name, m.run_sha or "")
    cert = Certificate(
        number="", issue_date=job.issue_date, lab=parts["lab"], signatory=parts["signatory"], client=parts["client"],
        method=parts["method"],
        sample=SampleInfo(sid, sc.descriptions.get(sid, ""), condition, job.received or received,
                          m.measured_at.get(sid, ""),
                          m.n_shots_by_sample.get(sid), job.run_path.name),
        results=rows,
        provenance=Provenance("compquant", __version__, job.issued, m.run_sha, list(job.files), dict(sc.parameters)),
        calibration=qd.cal_info,
        plasma=qd.plasma_by_sample.get(sid),
        qc=QCInfo(qd.drift_info, qd.checks, parts["qc_blank"], not_evaluated=list(qd.not_evaluated)),
        conformity=assess_conformity(job.specp, rows) if job.specp is not None else None,
        detected_not_quantified=_not_quantified(sid, {r.element for r in rows}, remarks, job, m),
        deviations=[d.text for d in sc.deviations],
        remarks=remarks,
        release_blocks=release.analyte_reasons(missing, matrix_el, dependent) + release.step_reasons(sc.deviations),
    )
    digest = result_set_digest(basis, job.files, rows)
    cert.provenance.parameters["result_set_sha256"] = digest
    cert.number = certificate_number(labp.certificate_prefix, m.run_sha, sid, job.issue_date, result_digest=digest)
    return cert


def _unify_units(certificates) -> None:
    """One unit per element across the run's certificates, LIMS CSV and screen."""
    units = element_units((r.element, r.mass_fraction, r.lod, r.below_lod) for c in certificates for r in c.results)
    for c in certificates:
        for r in c.results:
            r.unit = units.get(r.element, "")
