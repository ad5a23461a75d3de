"""Tables of the lab's record (SQLAlchemy Core), the one description of the database layout.

The migrations under ``compquant/record/migrations`` create exactly these tables; a test
compares the two.  Times are ISO 8601 UTC text (``2026-12-02T07:42:09Z``), which sorts in time
order on every backend; JSON-valued columns hold canonical JSON text.
"""

from __future__ import annotations

import sqlalchemy as sa

metadata = sa.MetaData()

#: what this record is: ``application = compquant-record``, created_at, created_by
record_info = sa.Table(
    "record_info",
    metadata,
    sa.Column("key", sa.String(64), primary_key=True),
    sa.Column("value", sa.Text, nullable=False),
)

#: the append-only audit trail: who did what, when and why (ISO/IEC 17025:2017, 7.5 and 8.4)
audit = sa.Table(
    "audit",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("at", sa.String(32), nullable=False),
    sa.Column("who", sa.Text, nullable=False),
    sa.Column("action", sa.String(32), nullable=False),
    sa.Column("subject", sa.Text, nullable=False),
    sa.Column("why", sa.Text, nullable=False, server_default=""),
    sa.Column("detail", sa.Text, nullable=False, server_default="{}"),
    sa.Index("ix_audit_subject", "subject"),
)

#: one row per analysis of a run file (a run analysed twice has two rows with the same sha256)
runs = sa.Table(
    "runs",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("file_name", sa.Text, nullable=False),
    sa.Column("file_path", sa.Text, nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False),
    sa.Column("instrument", sa.Text, nullable=False, server_default=""),
    sa.Column("instrument_detail", sa.Text, nullable=False, server_default="{}"),
    sa.Column("measured_at", sa.String(32), nullable=False, server_default=""),
    sa.Column("analysed_at", sa.String(32), nullable=False),
    sa.Column("stored_at", sa.String(32), nullable=False),
    sa.Column("analyst", sa.Text, nullable=False),
    sa.Column("method_id", sa.Text, nullable=False),
    sa.Column("method_version", sa.Text, nullable=False),
    sa.Column("method_sha256", sa.String(64), nullable=False, server_default=""),
    sa.Column("basis", sa.String(16), nullable=False),
    sa.Column("chart_settings", sa.Text, nullable=False, server_default="{}"),
    sa.Column("outdir", sa.Text, nullable=False, server_default=""),
    sa.Index("ix_runs_sha256", "sha256"),
    sa.Index("ix_runs_measured", "measured_at", "id"),
)

samples = sa.Table(
    "samples",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("sample_id", sa.Text, nullable=False),
    sa.Column("role", sa.String(16), nullable=False),
    sa.Column("standard_ref", sa.Text, nullable=False, server_default=""),
    sa.Column("description", sa.Text, nullable=False, server_default=""),
    sa.Column("measured_at", sa.String(32), nullable=False, server_default=""),
    sa.Column("n_shots", sa.Integer),
    sa.Index("ix_samples_sample_id", "sample_id"),
    sa.Index("ix_samples_run", "run_id"),
)

#: every reported result row (mass fractions in g/g)
results = sa.Table(
    "results",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("sample_row", sa.Integer, sa.ForeignKey("samples.id"), nullable=False),
    sa.Column("element", sa.String(8), nullable=False),
    sa.Column("value", sa.Float),
    sa.Column("u_standard", sa.Float),
    sa.Column("U_expanded", sa.Float),
    sa.Column("k", sa.Float),
    sa.Column("lod", sa.Float),
    sa.Column("loq", sa.Float),
    sa.Column("below_lod", sa.Boolean, nullable=False),
    sa.Column("flags", sa.Text, nullable=False, server_default=""),
    sa.Column("line_id", sa.Text, nullable=False, server_default=""),
    sa.Column("basis", sa.String(16), nullable=False),
    sa.Index("ix_results_sample", "sample_row"),
)

calibrations = sa.Table(
    "calibrations",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("calibration_id", sa.Text, nullable=False),
    sa.Column("created", sa.String(32), nullable=False, server_default=""),
    sa.Column("file_name", sa.Text, nullable=False, server_default=""),
    sa.Column("file_sha256", sa.String(64), nullable=False, server_default=""),
    sa.Column("curves", sa.Text, nullable=False, server_default="[]"),
)

drift_factors = sa.Table(
    "drift_factors",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("line", sa.Text, nullable=False),
    sa.Column("factor", sa.Float, nullable=False),
    sa.Index("ix_drift_line", "line"),
)

#: check-sample evaluations (ISO 13528 En and z); ``passed`` is only whether the criterion was met,
#: ``state`` (revision 0003) the check's result as the certificate prints it (pass, FAIL, flagged,
#: cannot fail, not counted: certified content below ``loq``, the element's LOQ in the check sample)
checks = sa.Table(
    "checks",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("sample_id", sa.Text, nullable=False),
    sa.Column("standard_ref", sa.Text, nullable=False),
    sa.Column("element", sa.String(8), nullable=False),
    sa.Column("measured", sa.Float),
    sa.Column("U_measured", sa.Float),
    sa.Column("certified", sa.Float, nullable=False),
    sa.Column("U_certified", sa.Float),
    sa.Column("z", sa.Float),
    sa.Column("En", sa.Float),
    sa.Column("passed", sa.Boolean, nullable=False),
    sa.Column("criterion", sa.Text, nullable=False, server_default=""),
    sa.Column("state", sa.String(16)),
    sa.Column("loq", sa.Float),
    sa.Index("ix_checks_material", "standard_ref", "element"),
)

#: one row per certificate revision; ``state`` is draft | released | rejected | superseded
certificates = sa.Table(
    "certificates",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("sample_id", sa.Text, nullable=False),
    sa.Column("number", sa.String(64), nullable=False),
    sa.Column("base_number", sa.String(64), nullable=False),
    sa.Column("revision", sa.Integer, nullable=False),
    sa.Column("state", sa.String(16), nullable=False),
    sa.Column("supersedes", sa.Integer, sa.ForeignKey("certificates.id")),
    sa.Column("created_at", sa.String(32), nullable=False),
    sa.Column("document", sa.Text, nullable=False),
    sa.Column("figures", sa.Text, nullable=False, server_default="[]"),
    sa.Column("folder", sa.Text, nullable=False, server_default=""),
    sa.Column("stem", sa.Text, nullable=False, server_default=""),
    sa.Column("valid_for_release", sa.Boolean, nullable=False),
    sa.Column("reasons", sa.Text, nullable=False, server_default="[]"),
    sa.Column("flags", sa.Text, nullable=False, server_default="[]"),
    sa.Column("reviewer", sa.Text, nullable=False, server_default=""),
    sa.Column("reviewer_role", sa.Text, nullable=False, server_default=""),
    sa.Column("reviewed_at", sa.String(32), nullable=False, server_default=""),
    sa.Column("statement", sa.Text, nullable=False, server_default=""),
    sa.Index("ix_certificates_number", "number"),
    sa.Index("ix_certificates_state", "state"),
)

#: every certificate file written, by SHA-256 (kind: draft | released); append-only
certificate_files = sa.Table(
    "certificate_files",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("certificate_id", sa.Integer, sa.ForeignKey("certificates.id"), nullable=False),
    sa.Column("kind", sa.String(16), nullable=False),
    sa.Column("format", sa.String(8), nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False),
    sa.Column("path", sa.Text, nullable=False),
    sa.Column("written_at", sa.String(32), nullable=False),
    sa.Index("ix_certificate_files_sha256", "sha256"),
)

#: arrays an analysis stored for review (revision 0002): the run's wavelength axis (sample_row
#: NULL, float64) and each sample's mean spectrum (float32), zlib-compressed little-endian bytes
#: with the SHA-256 of the uncompressed bytes; append-only
evidence_arrays = sa.Table(
    "evidence_arrays",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("sample_row", sa.Integer, sa.ForeignKey("samples.id")),
    sa.Column("name", sa.String(32), nullable=False),
    sa.Column("dtype", sa.String(8), nullable=False),
    sa.Column("length", sa.Integer, nullable=False),
    sa.Column("codec", sa.String(16), nullable=False),
    sa.Column("data", sa.LargeBinary, nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False),
    sa.Index("ix_evidence_arrays_run", "run_id", "sample_row"),
)

#: what the review page draws beside the numbers (revision 0002), as canonical JSON with its
#: SHA-256: kind line (window, fit, residuals), curve, mark (the sample on a curve), boltzmann,
#: map (compquant.record.evidence); append-only
evidence = sa.Table(
    "evidence",
    metadata,
    sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=False),
    sa.Column("sample_row", sa.Integer, sa.ForeignKey("samples.id")),
    sa.Column("kind", sa.String(16), nullable=False),
    sa.Column("key", sa.Text, nullable=False),
    sa.Column("data", sa.Text, nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False),
    sa.Index("ix_evidence_run", "run_id", "kind", "sample_row"),
)

#: tables in the order of the export and of foreign keys
TABLES = (record_info, audit, runs, samples, results, calibrations, drift_factors, checks, certificates,
          certificate_files, evidence_arrays, evidence)
