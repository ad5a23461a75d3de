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

:func:`analyse` is a short sequence of named steps, each a function of :mod:`compquant.workflow`
that a notebook can call on its own (prepare, check_options, measure, screen_samples,
quantify_samples, assemble_certificates, stage_outputs), followed by storing the analysis in the
lab's record.  The names this module had before the split (``AnalysisOutput``,
``verify_output_set``, ``sample_stems``, ``plan_issue`` and a few private helpers) are imported
here from their new homes.
"""

from __future__ import annotations

from compquant.workflow.certify import _complete_rows, _method_files, assemble_certificates  # noqa: F401
from compquant.workflow.issue import plan_issue, sample_stems
from compquant.workflow.outputs import (  # noqa: F401
    MANIFEST,
    MANIFEST_SCHEMA,
    SUMMARY_SCHEMA,
    SUMMARY_VERSION,
    AnalysisOutput,
    CertificateOutput,
    stage_outputs,
    verify_output_set,
)
from compquant.workflow.prepare import (  # noqa: F401
    _measurement_times,
    _norm_issued_at,
    check_options,
    measure,
    prepare,
    screen_samples,
)
from compquant.workflow.quantify import _cf_check_results, quantify_samples  # noqa: F401


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
    from compquant.record.states import initial_review
    from compquant.record.store import recorder_for_analysis

    job = prepare(run_path, method_path, standards=standards, calibration=calibration, cf=cf, lab=lab, spec=spec,
                  outdir=outdir, issued_at=issued_at, client=client, received=received, figures=figures,
                  chunk_shots=chunk_shots, memory_limit_bytes=memory_limit_bytes, progress=progress,
                  chunk_mapper=chunk_mapper, measured=measured, revise=revise, lims_dialect=lims_dialect)
    # the record is opened before the work (a damaged record fails fast); the review state is printed
    recorder = recorder_for_analysis(db, job.method)
    review = initial_review(job.labp, lab is not None, job.issued)
    check_options(job)  # options and the later steps' settings: fail fast, write nothing
    m = measure(job)  # load the run, measure the method's lines
    sc = screen_samples(job, m)  # samples by role; refuses a run without unknowns
    qd = quantify_samples(job, m, sc)  # calibrate + quantify, or calibration-free
    drafts = assemble_certificates(job, m, sc, qd)
    out, certs = stage_outputs(job, m, qd, drafts, recorder, review)  # staged, moved in, manifest last
    if recorder is not None:
        recorder.store(run_file=job.run_path, run_sha256=m.run_sha, instrument=m.instrument, samples=m.samples,
                       measured=m.measured_at, method=job.method, basis=job.basis, issued_at=job.issued,
                       certificates=certs, outputs=out.certificates, review=review, calibration=qd.cal_info,
                       drift=qd.drift_info, checks=qd.checks, outdir=job.outdir,
                       evidence=dict(meas=m.meas, method=job.method, curves=qd.curves, cf=qd.cf_by_sample,
                                     matrix_fraction=qd.matrix_fraction))  # what the review page draws
    return out


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
