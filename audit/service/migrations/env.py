"""Alembic environment: runs on the connection handed over by ``audit.service.db.migrate``.

To create a new revision during development::

    python -c "from alembic.config import Config; from alembic import command; \
c = Config(); c.set_main_option('script_location', 'audit/service/migrations'); \
c.set_main_option('sqlalchemy.url', 'sqlite:///dev.sqlite3'); \
command.revision(c, 'describe the change')"

and write the ``upgrade``/``downgrade`` bodies by hand (no autogenerate dependency).
"""

from __future__ import annotations

from alembic import context
from sqlalchemy import create_engine

from audit.service.db import Base

target_metadata = Base.metadata
connection = context.config.attributes.get("connection")
if connection is not None:
    context.configure(connection=connection, target_metadata=target_metadata,
                      render_as_batch=connection.dialect.name == "sqlite")
    with context.begin_transaction():
        context.run_migrations()
else:  # stand-alone use with sqlalchemy.url set
    engine = create_engine(context.config.get_main_option("sqlalchemy.url"))
    with engine.connect() as conn:
        context.configure(connection=conn, target_metadata=target_metadata)
        with context.begin_transaction():
            context.run_migrations()
