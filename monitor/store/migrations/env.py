"""Alembic's environment: runs the revisions on the connection `schema` hands over.

`monitor.store.schema` opens the transaction and passes its Connection in
``config.attributes["connection"]`` (Alembic's connection-sharing recipe), so the
adoption of an old store, the upgrade and the version stamp commit together where
the backend's DDL is transactional.
"""

from alembic import context

context.configure(connection=context.config.attributes["connection"])
with context.begin_transaction():
    context.run_migrations()
