"""Alembic revisions of the store's schema (``versions/``), run by `monitor.store.schema`.

Each revision is frozen DDL: the tables as they were at that revision, written out
column by column. Never edit a revision that shipped; add the next one (copy the
newest file, set ``revision`` and ``down_revision``) and change `monitor.store.tables`
to match.
"""
