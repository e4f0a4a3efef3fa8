"""Alembic environment: always run programmatically by station.history.db.migrate, which hands
over an open connection (config.attributes["connection"])."""

from alembic import context

from station.history.models import Base

connection = context.config.attributes.get("connection")
if connection is None:
    raise RuntimeError("run the history migrations through station.history.db.migrate()")
context.configure(connection=connection, target_metadata=Base.metadata,
                  render_as_batch=connection.dialect.name == "sqlite")
with context.begin_transaction():
    context.run_migrations()
