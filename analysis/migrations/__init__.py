"""Alembic environment of the results store (run programmatically by analysis.store.open_store)."""
