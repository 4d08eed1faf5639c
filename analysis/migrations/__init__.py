"""Alembic environment of the results store (run programmatically by cloakrcs.store.open_store)."""
