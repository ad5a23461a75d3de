"""Step 5 of :func:`compquant.analyse.analyse`: stage the output set, move it in, write the manifest last.

:func:`stage_outputs` takes the folder lock, plans the issue (:mod:`compquant.workflow.issue`),
renders each certificate (PDF, JSON, figures), the LIMS CSV, the run summary and the calibration
in a staging folder, moves them into the output folder and writes ``manifest.json`` last
(:func:`verify_output_set` checks a folder against it).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from compquant import __version__
from compquant.errors import InputError, OutputError
from compquant.fileio import output_error, sha256_file, write_bytes_atomic, write_text_atomic
from compquant.report import assemble, release
from compquant.report.jsonform import canonical_json, write_certificate_json
from compquant.report.lims import write_lims_csv
from compquant.report.numbers import finite
from compquant.report.pdf import render_pdf_bytes
from compquant.workflow.issue import plan_issue

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
    """What :func:`analyse` wrote, for the CLI summary table and for callers.

    Returned by :func:`compquant.analyse.analyse`; it describes the output set in ``outdir``
    (certificates as PDF and JSON, ``lims.csv``, ``summary.json``, the calibration and
    ``manifest.json``, written last).  Results are reported as on the certificate: value and
    expanded uncertainty ``U = k u_c``, ``k = 2`` (JCGM 100:2008), in the certificate's unit.

    Attributes
    ----------
    outdir : str
        The output folder.
    basis : {"calibration", "cf"}
        How the results were obtained: a calibration (made from the run's standards or a saved
        one), or calibration-free.
    certificates : list of CertificateOutput
        One per unknown sample: number, PDF and JSON paths, pages, release state, conformity,
        results as printed, reasons for not being valid for release, revision and the number it
        supersedes.
    lims_csv, summary_json : str
        Paths of the run's LIMS CSV (RFC 4180 or the semicolon dialect) and run summary.
    calibration_json : str or None
        Path of the calibration saved beside the certificates (None when none was made).
    valid_for_release : bool
        Whether every certificate passed the release rules (:mod:`compquant.report.release`).
    not_reported : list of dict
        Every (sample, analyte) without a result, with the reason.
    failures : dict
        ``sample_id -> reason`` for each sample that got no certificate.

    See Also
    --------
    compquant.analyse.analyse : makes it.
    verify_output_set : checks an output folder against its ``manifest.json``.

    References
    ----------
    .. [1] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM), 7.2.6 (reporting a result with its expanded uncertainty).
    .. [2] RFC 4180, Common Format and MIME Type for Comma-Separated Values (CSV) Files.
    .. [3] compquant documentation: docs/certificate.md (certificate and summary contents).
    """

    outdir: str
    basis: str
    certificates: list[CertificateOutput]
    lims_csv: str
    summary_json: str
    calibration_json: str | None
    valid_for_release: bool
    not_reported: list[dict]  # every (sample, analyte) without a result, with the reason
    failures: dict

    def to_frame(self):
        """One row per (certificate, element) as printed: ``sample_id, certificate, element, value,
        U, unit, flags, valid_for_release`` (strings as on the certificate; :mod:`compquant.report`)."""
        import pandas as pd

        cols = ["sample_id", "certificate", "element", "value", "U", "unit", "flags", "valid_for_release"]
        rows = [{"sample_id": c.sample_id, "certificate": c.number, "element": r.get("element", ""),
                 "value": r.get("value", ""), "U": r.get("U", ""), "unit": r.get("unit", ""),
                 "flags": r.get("flags", ""), "valid_for_release": c.valid_for_release}
                for c in self.certificates for r in c.results]
        return pd.DataFrame(rows, columns=cols)

    def summary(self) -> str:
        """A plain-text summary of what was issued: the certificates, their release state and what
        was not reported."""
        width = 78
        lines = ["=" * width, f"Analysis ({self.basis}): {len(self.certificates)} certificate(s) in {self.outdir}",
                 "=" * width, f"{'valid for release:':<24}{'yes' if self.valid_for_release else 'NO'}"]
        for c in self.certificates:
            state = "valid for release" if c.valid_for_release else "NOT valid: " + "; ".join(c.reasons)
            lines.append(f"{c.sample_id[:15]:<16}{c.number:<28}{state}")
        lines.append("-" * width)
        lines += [f"{'sample':<16}{'element':<8}{'value':>12}{'U':>10} {'unit':<7}flags", "-" * width]
        for r in self.to_frame().itertuples(index=False):
            lines.append(f"{r.sample_id[:15]:<16}{r.element:<8}{r.value:>12}{r.U:>10} {r.unit:<7}{r.flags}")
        for d in self.not_reported:
            lines.append(f"not reported: {d.get('sample_id')} {d.get('element')}: {d.get('reason')}")
        for sid, why in self.failures.items():
            lines.append(f"no certificate: {sid}: {why}")
        lines.append("=" * width)
        return "\n".join(lines)

    @property
    def exit_code(self) -> int:
        """0 when every certificate is valid for release and every unknown sample got one, else
        :data:`release.EXIT_NOT_VALID`."""
        return 0 if self.valid_for_release and not self.failures else release.EXIT_NOT_VALID

def _summary_head(issued, run_path, run_sha, method, method_path, basis, cal_info, files, drift_info, checks,
                  not_evaluated, sigma_pt_rel=None) -> dict:
    """The run summary's head.  Each check sample carries ``state``, its result as the certificates
    print it (:func:`compquant.report.release.check_state`: pass, FAIL, flagged, cannot fail, not
    counted); ``passed`` is only whether its criterion was met (true for a check not counted)."""
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
                "state": release.check_state(c, sigma_pt_rel),
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


def stage_outputs(job, m, qd, drafts, recorder=None, review=None):
    """Write the output set into ``job.outdir``; return the :class:`AnalysisOutput` and the certificates.

    Under the folder lock: plan the issue (refusing before anything is written), have the record
    check each new certificate number (``recorder.check_number``: never overwrite a released
    certificate's files), then stage, move in and write the manifest.  ``review``: the review state
    printed on each certificate (a DRAFT watermark until released, :mod:`compquant.record`).
    """
    outdir = job.outdir

    def figures_for(cert, stem):
        if not job.figures:
            return []
        sid = cert.sample.sample_id
        by_difference_open = any(r.line_id == "by difference" and not finite(r.mass_fraction) for r in cert.results)
        return assemble.sample_figures(
            sid, stem, outdir, m.wavelength, m.mean_spec, drafts.lines_marked, qd.curves, cert.results,
            qd.matrix_fraction.get(sid, (None, None))[0] if not by_difference_open else None,
            qd.cf_by_sample.get(sid), write=False,
        )

    try:
        outdir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise output_error(exc, outdir) from exc
    with _folder_lock(outdir):  # another analysis into this folder waits, then sees what was issued
        plan = plan_issue(outdir, drafts.certificates, drafts.stems, job.revise, review)
        if recorder is not None:
            for it in plan:
                if it.write:
                    recorder.check_number(it.cert.number)
        summary = _summary_head(job.issued, job.run_path, m.run_sha, job.method, job.method_path, job.basis,
                                qd.cal_info, job.files, qd.drift_info, qd.checks, qd.not_evaluated,
                                release.sigma_pt_rel_of(drafts.certificates[0]) if drafts.certificates else None)
        return _write_output_set(
            outdir, plan, figures_for, qd.cal_json_path, qd.cal_text if qd.cal_json_path is not None else None,
            summary, drafts.missing_all, qd.not_reported, qd.failures, drafts.skipped, job.basis, job.lims_dialect,
            job.tick, review,
        )


def _write_output_set(outdir: Path, plan, figures_for, cal_json_path, cal_text, summary: dict, missing_all,
                      not_reported, failures, skipped, basis, lims_dialect="rfc4180",
                      tick=lambda *a: None, review=None):
    """Build the whole output set in a staging folder, move it in, write the manifest last; return the
    :class:`AnalysisOutput` and the certificates."""
    import shutil
    import tempfile

    staging = Path(tempfile.mkdtemp(prefix=".staging-", dir=outdir))
    try:
        certs, outputs = _stage_certificates(staging, outdir, plan, figures_for, tick, review)
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
        summary.update(_summary_tail(valid, outputs, lims_dialect, missing_all, failures, skipped))
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


def _stage_certificates(staging: Path, outdir: Path, plan, figures_for, tick, review):
    """Render every planned certificate (PDF first, then JSON and figures) into ``staging``."""
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
        else:  # kept as issued: restore only its files a killed earlier run did not move in
            assemble.write_figures(staging, [f for f in cert.figures if not (outdir / f.path).exists()])
            if not (outdir / f"{it.stem}.pdf").exists():
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
    return certs, outputs


def _summary_tail(valid, outputs, lims_dialect, missing_all, failures, skipped) -> dict:
    """The run summary's entries written after the certificates (release state, files, what is missing)."""
    return {
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


def _is_certificate_json(p: Path) -> bool:
    """True for a staged certificate's JSON document (schema ``compquant-certificate``)."""
    import json

    try:
        return json.loads(p.read_text("utf-8")).get("schema") == "compquant-certificate"
    except (OSError, UnicodeDecodeError, ValueError, AttributeError):
        return False


def _commit(staging: Path, outdir: Path) -> None:
    """Move the staged files into ``outdir`` and write the manifest last.

    The old manifest is removed first, so a kill part-way leaves a folder without a manifest,
    which :func:`verify_output_set` reports as incomplete; certificates' JSON documents are moved
    after every other file, so a certificate a rerun finds issued has its PDF and figures beside
    it; the new manifest lists every file of the folder with its SHA-256.
    """
    import os

    man = outdir / MANIFEST
    if man.exists():
        man.unlink()
    staged = [p for p in sorted(staging.rglob("*")) if p.is_file()]
    # a certificate's JSON goes in after every other file (PDFs, figures, run files): a rerun keeps
    # a certificate whose JSON it finds (compquant.workflow.issue), so its other files must be there
    last = {p for p in staged if p.suffix == ".json" and p.parent == staging and _is_certificate_json(p)}
    for p in [p for p in staged if p not in last] + [p for p in staged if p in last]:
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

