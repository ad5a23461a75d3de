"""The whole job as a short list of named steps (:func:`compquant.analyse.analyse` calls them in order).

Each step is a function a notebook can call on its own and hands the next one a small dataclass::

    from compquant.workflow import (prepare, check_options, measure, screen_samples,
                                    quantify_samples, assemble_certificates, stage_outputs)

    job = prepare(run, method, standards="standards.csv", outdir="out", issued_at="2026-12-01T12:00:00Z")
    check_options(job)                       # options and the later steps' settings, before the work
    m = measure(job)                         # load the run, measure the method's lines
    sc = screen_samples(job, m)              # samples by role, analysis parameters
    qd = quantify_samples(job, m, sc)        # calibrate + quantify, or calibration-free
    drafts = assemble_certificates(job, m, sc, qd)
    out, certs = stage_outputs(job, m, qd, drafts)   # the output set, manifest last

The steps and their modules:

- inputs: :func:`prepare`, :func:`check_options` (:mod:`compquant.workflow.prepare`);
- load and measure: :func:`measure`, :func:`screen_samples` (:mod:`compquant.workflow.prepare`);
- calibrate and quantify, or calibration-free: :func:`quantify_samples` (``quantify_calibrated``
  or ``quantify_cf``; :mod:`compquant.workflow.quantify`);
- certificates: :func:`assemble_certificates` (:mod:`compquant.workflow.certify`);
- issue plan: :func:`sample_stems`, :func:`plan_issue` (:mod:`compquant.workflow.issue`);
- outputs: :func:`stage_outputs`, :func:`verify_output_set` (:mod:`compquant.workflow.outputs`);
- record: ``recorder.store(...)`` in :func:`compquant.analyse.analyse` (:mod:`compquant.record.store`).
"""

from compquant.workflow.certify import Drafts, assemble_certificates
from compquant.workflow.issue import plan_issue, sample_stems
from compquant.workflow.outputs import AnalysisOutput, CertificateOutput, stage_outputs, verify_output_set
from compquant.workflow.prepare import Job, Measured, Screened, check_options, measure, prepare, screen_samples
from compquant.workflow.quantify import Quantified, quantify_calibrated, quantify_cf, quantify_samples

__all__ = [
    "AnalysisOutput",
    "CertificateOutput",
    "Drafts",
    "Job",
    "Measured",
    "Quantified",
    "Screened",
    "assemble_certificates",
    "check_options",
    "measure",
    "plan_issue",
    "prepare",
    "quantify_calibrated",
    "quantify_cf",
    "quantify_samples",
    "sample_stems",
    "screen_samples",
    "stage_outputs",
    "verify_output_set",
]
