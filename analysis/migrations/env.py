"""Alembic environment: migrations run on the connection that cloakrcs.store hands over.

``cloakrcs.store.open_store`` calls ``alembic.command.upgrade(config, "head")`` with
``config.attributes["connection"]`` set; nothing here reads an ini file or configures logging.
"""

from alembic import context
from sqlalchemy import text

from cloakrcs.store_schema import Base  # absolute: Alembic loads this file as a script

ADVISORY_LOCK_KEY = 0x636C6F616B  # PostgreSQL: one migrator at a time


def run_migrations_online() -> None:
    connection = context.config.attributes["connection"]
    context.configure(connection=connection, target_metadata=Base.metadata, render_as_batch=True)
    with context.begin_transaction():
        if connection.dialect.name == "postgresql":
            connection.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": ADVISORY_LOCK_KEY})
        context.run_migrations()


if context.is_offline_mode():
    raise RuntimeError("the results store runs its migrations online only")
run_migrations_online()
