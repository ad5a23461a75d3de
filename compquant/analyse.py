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

from compquant.workflow.certify import assemble_certificates
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
    """Run the whole analysis of one run and write its certificates of analysis.

    The steps (module docstring) are: measure the method's lines in every shot, then calibrate
    from the run's certified standards, or apply a saved calibration with drift standardisation,
    or estimate the composition calibration-free; evaluate the check samples, quantify every
    unknown and write one certificate per unknown sample.  With a calibration, the reported
    value of an analyte is the inverse prediction of its calibration curve at the sample's
    normalised line intensity (docs/calibration.md; for the straight line ``x = (y - b0) / b1``,
    ISO 8466-1:1990), in the mass-fraction unit of the standards file, with the expanded
    uncertainty ``U = k u_c(x)``, ``k = 2`` (JCGM 100:2008); the calibration-free basis is that of
    docs/calibration-free.md.

    Parameters
    ----------
    run_path, method_path : str or path-like
        The run (HDF5, docs/run-format.md) and the method file (TOML, docs/method-file.md).
    standards : str or path-like, optional
        Certified-standards file: calibrate from the run's standards.
    calibration : str or path-like, optional
        A saved calibration JSON: apply it (drift standardisation from setup samples).
    cf : bool, default False
        Calibration-free analysis instead.
    lab, spec : str or path-like, optional
        Lab profile and specification TOML files.
    outdir : str or path-like, default ``"compquant-out"``
        Output folder (created).
    client, received : str, optional
        Override the lab profile's client name and date of receipt.
    issued_at : str or datetime, optional
        Issue time (ISO 8601 UTC or datetime); default now.  A fixed value makes the outputs
        byte-for-byte repeatable (the certificate numbers depend on the issue date).
    figures : bool, default True
        Draw the figures (spectrum, calibration curves or Boltzmann plot).
    chunk_shots : int, optional
        Shots per streamed chunk of the line measurement (:func:`compquant.lines.measure_run`).
    memory_limit_bytes : int, optional
        Memory limit of the run reader, bytes (default ``COMPQUANT_MEMORY_LIMIT``).
    progress : callable, optional
        ``(stage, done, total)`` for progress display.
    chunk_mapper : callable, optional
        Compute the line-measurement chunks elsewhere, e.g. on Dask workers
        (:func:`compquant.parallel.chunk_mapper`); the numbers are the same.
    measured : str, optional
        Start time of the measurement (ISO 8601) for a run that states none (e.g. a
        converted run); refused when the run states a different day.
    revise : str, optional
        Reason for re-issuing certificates already issued in ``outdir``: each becomes a
        revision ``-R<n>`` naming the one it supersedes.  Without it such a re-analysis is refused.
    lims_dialect : {"rfc4180", "semicolon"}, default "rfc4180"
        ``"rfc4180"`` (comma, decimal point) or ``"semicolon"`` (``;``, decimal comma)
        for ``lims.csv`` (:mod:`compquant.report.lims`).
    db : str or path-like, optional
        The lab's record (path or URL; default ``COMPQUANT_DB``): the analysis and its certificates
        are stored there (:mod:`compquant.record`).  Certificates are DRAFTs unless the lab profile
        sets ``[review] required = false``.

    Returns
    -------
    AnalysisOutput
        What was written.  Every certificate is checked against the release rules
        (:mod:`compquant.report.release`); ``AnalysisOutput.valid_for_release`` / ``exit_code`` say
        whether all are valid for release.

    Raises
    ------
    CompquantError
        Any problem with the inputs (run, method, standards, calibration, options), as one line:
        what, where, how to fix it.  The options and the later steps' settings are checked before
        any work is done, so such a mistake fails fast and writes nothing.

    See Also
    --------
    compquant.lines.measure_run : the line measurement step.
    compquant.calibrate.calibrate, compquant.calibrate.quantify : calibration and its apply half.
    compquant.cflibs.analyse_cf : the calibration-free estimate.

    References
    ----------
    .. [1] ISO 8466-1:1990, Water quality -- Calibration and evaluation of analytical methods and
       estimation of performance characteristics -- Part 1: Statistical evaluation of the linear
       calibration function.
    .. [2] JCGM 100:2008, Evaluation of measurement data -- Guide to the expression of uncertainty
       in measurement (GUM).
    .. [3] RFC 4180, Common Format and MIME Type for Comma-Separated Values (CSV) Files (``lims.csv``).
    .. [4] Ciucci et al., Appl. Spectrosc. 53 (1999) 960 (calibration-free LIBS, ``cf=True``).
    .. [5] compquant documentation: docs/certificate.md (the certificate), docs/calibration.md,
       docs/calibration-free.md, docs/run-format.md, docs/method-file.md.

    Examples
    --------
    From the repository root, the shipped demo (invented scenario)::

        from compquant import analyse
        out = analyse("demo_runs/demo-day1.h5", "demo_runs/method.toml",
                      standards="standards/demo-copper-alloys.csv", lab="demo_runs/lab.toml",
                      outdir="out", issued_at="2026-12-01T12:00:00Z")
        print(out.summary())
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
