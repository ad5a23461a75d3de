"""Alembic environment of the lab's record: always run on a connection given by the caller.

:func:`compquant.record.db.open_record` passes its open connection (inside its transaction) as
``config.attributes["connection"]``; there is no ``alembic.ini`` and no offline mode.
"""

from alembic import context

connection = context.config.attributes["connection"]
context.configure(connection=connection, target_metadata=None, transaction_per_migration=False)
with context.begin_transaction():
    context.run_migrations()
