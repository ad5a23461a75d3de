"""Revision 0003 of the lab's record: each check-sample evaluation keeps its state and the LOQ.

Two new nullable columns of ``checks``: ``state``, the check's result as the certificate prints
it (``pass``, ``FAIL``, ``flagged``, ``cannot fail``, ``not counted``;
:func:`compquant.report.release.check_state`), and ``loq``, the element's LOQ in the check sample
(g/g), below which the certified content makes the check *not counted*.  Before, the record kept
only ``passed`` (|En| <= 1 met), which is true for a check that is not counted, and the review
page printed it as "passed".

Rows stored before this revision are filled from the record itself: from the certificate JSON
as issued (``quality_control.check_samples[]``, which carries ``state`` and ``loq``) of a
certificate of the same run, matched by sample id and element.  A check no certificate of its run
holds (or whose certificate JSON has no ``state``) keeps NULL, and the views say the state was not
recorded.  No other row or column is touched; the audit trail gets the usual "upgrade" entry.
The same statements run on SQLite and PostgreSQL.
"""

import json

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None

# frozen, as far as this revision reads and writes them
_checks = sa.table("checks", sa.column("id", sa.Integer), sa.column("run_id", sa.Integer),
                   sa.column("sample_id", sa.Text), sa.column("element", sa.String),
                   sa.column("state", sa.String), sa.column("loq", sa.Float))
_certificates = sa.table("certificates", sa.column("id", sa.Integer), sa.column("run_id", sa.Integer),
                         sa.column("document", sa.Text))


def _num(x):
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if v == v and abs(v) != float("inf") else None


def _issued_states(bind, run_id: int) -> dict:
    """``{(sample_id, element): (state, loq)}`` from the JSON of the run's first certificate that
    lists check samples (every certificate an analysis issues carries the run's check samples)."""
    q = (sa.select(_certificates.c.document).where(_certificates.c.run_id == run_id)
         .order_by(_certificates.c.id))
    for (document,) in bind.execute(q):
        try:
            checks = (json.loads(document).get("quality_control") or {}).get("check_samples") or []
        except (TypeError, ValueError, AttributeError):
            continue
        if checks:
            return {(c.get("sample_id"), c.get("element")): (str(c["state"]), _num(c.get("loq")))
                    for c in checks if isinstance(c, dict) and c.get("state")}
    return {}


def upgrade():
    op.add_column("checks", sa.Column("state", sa.String(16)))
    op.add_column("checks", sa.Column("loq", sa.Float))
    bind = op.get_bind()
    rows = bind.execute(sa.select(_checks.c.id, _checks.c.run_id, _checks.c.sample_id, _checks.c.element)
                        .order_by(_checks.c.run_id, _checks.c.id)).all()
    filled, issued, last_run = [], {}, None
    for r in rows:
        if r.run_id != last_run:
            issued, last_run = _issued_states(bind, r.run_id), r.run_id
        hit = issued.get((r.sample_id, r.element))
        if hit is not None:
            filled.append({"row": r.id, "st": hit[0], "lq": hit[1]})
    if filled:
        bind.execute(_checks.update().where(_checks.c.id == sa.bindparam("row"))
                     .values(state=sa.bindparam("st"), loq=sa.bindparam("lq")), filled)


def downgrade():  # the record is never downgraded: a newer schema is refused, not undone
    raise RuntimeError("the lab's record is never downgraded: a newer schema is refused, not undone")
