"""The database: models, engine and sessions, bulk writes and DataFrame queries."""
from auditor.store.engine import Store, default_db_url, open_store

__all__ = ["Store", "open_store", "default_db_url"]
