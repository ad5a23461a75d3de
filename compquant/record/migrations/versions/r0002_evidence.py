"""Revision 0002 of the lab's record: the evidence the review page draws (spectra, line windows and
fits, calibration curves, Boltzmann plots, maps), stored by an analysis beside its numbers.

Two new tables, a frozen copy of ``compquant/record/schema.py`` as of this revision (a migration
must not change when the live schema does): ``evidence_arrays`` (compressed arrays with their
SHA-256) and ``evidence`` (canonical JSON with its SHA-256).  Both are append-only, by triggers on
SQLite and PostgreSQL alike, like the audit trail (revision 0001's ``compquant_forbid`` function
serves PostgreSQL).  Existing rows are not touched: a record upgraded from 0001 keeps every run,
certificate and audit entry; its older runs simply have no evidence.
"""

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None

metadata = sa.MetaData()

# the referenced tables, as far as the foreign keys need them (created by revision 0001)
sa.Table("runs", metadata, sa.Column("id", sa.Integer, primary_key=True))
sa.Table("samples", metadata, sa.Column("id", sa.Integer, primary_key=True))

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

_FORBID = {
    "evidence_arrays": "the stored evidence of an analysis is append-only",
    "evidence": "the stored evidence of an analysis is append-only",
}


def upgrade():
    bind = op.get_bind()
    evidence_arrays.create(bind)
    evidence.create(bind)
    for table, why in _FORBID.items():
        if bind.dialect.name == "sqlite":
            for ev in ("UPDATE", "DELETE"):
                op.execute(f"CREATE TRIGGER {table}_no_{ev.lower()} BEFORE {ev} ON {table} "
                           f"BEGIN SELECT RAISE(ABORT, '{why}'); END")
        elif bind.dialect.name == "postgresql":
            op.execute(f"CREATE TRIGGER {table}_append_only BEFORE UPDATE OR DELETE ON {table} "
                       f"FOR EACH ROW EXECUTE FUNCTION compquant_forbid('{why}')")


def downgrade():  # the record is never downgraded: a newer schema is refused, not undone
    raise RuntimeError("the lab's record is never downgraded: its stored evidence is append-only")
