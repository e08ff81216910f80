"""Alembic migrations of the audit service database (applied by ``db.migrate``)."""
