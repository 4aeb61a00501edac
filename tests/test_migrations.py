"""The schema exists only through Alembic: empty → head → base and back, and it matches the models."""
from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext

from auditor.store import open_store
from auditor.store.engine import table_names
from auditor.store.models import Base


def test_upgrade_downgrade_round_trip(tmp_path):
    store = open_store(f"sqlite:///{tmp_path / 'm.sqlite3'}", upgrade=False)
    assert table_names(store) == []
    store.upgrade()
    assert store.current_revision() == store.head_revision()
    assert {"site", "meter", "channel", "reading_block", "reading_revision", "import_batch", "quality_flag"} <= set(
        table_names(store))
    store.downgrade("base")
    assert table_names(store) == ["alembic_version"]
    store.upgrade()
    assert store.current_revision() == store.head_revision()


def test_models_and_migrations_agree(tmp_path):
    store = open_store(f"sqlite:///{tmp_path / 'm.sqlite3'}")
    with store.engine.connect() as conn:
        diff = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    assert diff == [], diff


def test_reading_table_is_clustered_without_rowid(tmp_path):
    store = open_store(f"sqlite:///{tmp_path / 'm.sqlite3'}")
    with store.engine.connect() as conn:
        sql = conn.exec_driver_sql("SELECT sql FROM sqlite_master WHERE name = 'reading_block'").scalar()
        assert conn.exec_driver_sql("SELECT sql FROM sqlite_master WHERE name = 'reading'").scalar() is None
    assert "WITHOUT ROWID" in sql.upper()
    assert "PRIMARY KEY (meter_id, block_start)" in sql


def test_first_use_applies_migrations(tmp_path):
    store = open_store(f"sqlite:///{tmp_path / 'sub' / 'fresh.sqlite3'}")
    assert store.current_revision() == store.head_revision()
