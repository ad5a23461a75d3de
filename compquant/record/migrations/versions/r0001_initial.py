"""Initial schema of the lab's record (revision 0001): tables, indexes and the append-only rules.

The table definitions are a frozen copy of ``compquant/record/schema.py`` as of this revision
(a migration must not change when the live schema does).  Triggers make the audit trail and the
list of certificate files append-only and keep certificate rows from being deleted or edited
outside the review transitions (draft -> released | rejected | superseded, released ->
superseded), on SQLite and PostgreSQL alike.
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None

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

#: check-sample evaluations (ISO 13528 En and z)
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


_FORBID = {
    "audit": "the audit trail is append-only",
    "certificate_files": "the list of certificate files is append-only",
}

_TRANSITIONS = (
    "(OLD.state = 'draft' AND NEW.state IN ('released', 'rejected', 'superseded')) "
    "OR (OLD.state = 'released' AND NEW.state = 'superseded')"
)
_FROZEN = ("run_id", "sample_id", "number", "base_number", "revision", "supersedes", "created_at", "document",
           "figures", "folder", "stem", "valid_for_release", "reasons", "flags")


def _sqlite_triggers():
    for table, why in _FORBID.items():
        for ev in ("UPDATE", "DELETE"):
            op.execute(
                f"CREATE TRIGGER {table}_no_{ev.lower()} BEFORE {ev} ON {table} "
                f"BEGIN SELECT RAISE(ABORT, '{why}'); END"
            )
    op.execute(
        "CREATE TRIGGER certificates_no_delete BEFORE DELETE ON certificates "
        "BEGIN SELECT RAISE(ABORT, 'certificates stay in the record'); END"
    )
    changed = " OR ".join(f"NEW.{c} IS NOT OLD.{c}" for c in _FROZEN)
    review_changed = " OR ".join(
        f"NEW.{c} IS NOT OLD.{c}" for c in ("reviewer", "reviewer_role", "reviewed_at", "statement")
    )
    op.execute(
        "CREATE TRIGGER certificates_transition BEFORE UPDATE ON certificates "
        f"WHEN NOT ({_TRANSITIONS}) OR {changed} OR (OLD.state <> 'draft' AND ({review_changed})) "
        "BEGIN SELECT RAISE(ABORT, 'a certificate changes only by review (draft -> released, rejected or "
        "superseded; released -> superseded)'); END"
    )


def _postgres_triggers():
    op.execute(
        "CREATE FUNCTION compquant_forbid() RETURNS trigger LANGUAGE plpgsql AS $$ "
        "BEGIN RAISE EXCEPTION '%', TG_ARGV[0]; END $$"
    )
    for table, why in _FORBID.items():
        op.execute(
            f"CREATE TRIGGER {table}_append_only BEFORE UPDATE OR DELETE ON {table} "
            f"FOR EACH ROW EXECUTE FUNCTION compquant_forbid('{why}')"
        )
    op.execute(
        "CREATE TRIGGER certificates_no_delete BEFORE DELETE ON certificates "
        "FOR EACH ROW EXECUTE FUNCTION compquant_forbid('certificates stay in the record')"
    )
    changed = " OR ".join(f"NEW.{c} IS DISTINCT FROM OLD.{c}" for c in _FROZEN)
    review_changed = " OR ".join(
        f"NEW.{c} IS DISTINCT FROM OLD.{c}" for c in ("reviewer", "reviewer_role", "reviewed_at", "statement")
    )
    op.execute(
        "CREATE TRIGGER certificates_transition BEFORE UPDATE ON certificates FOR EACH ROW "
        f"WHEN (NOT ({_TRANSITIONS}) OR {changed} OR (OLD.state <> 'draft' AND ({review_changed}))) "
        "EXECUTE FUNCTION compquant_forbid('a certificate changes only by review (draft -> released, rejected "
        "or superseded; released -> superseded)')"
    )


def upgrade():
    bind = op.get_bind()
    metadata.create_all(bind)
    if bind.dialect.name == "sqlite":
        _sqlite_triggers()
    elif bind.dialect.name == "postgresql":
        _postgres_triggers()


def downgrade():  # the record is never downgraded: a newer schema is refused, not undone
    raise RuntimeError("the lab's record is never downgraded: its audit trail is append-only")
