"""The database-facing behaviour on both back ends: migrations, bulk write, idempotency,
revisions, concurrency. Every test runs on SQLite and, with AUDITOR_TEST_PG_URL, on PostgreSQL."""
from __future__ import annotations

import struct
import threading

import numpy as np
import pytest
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from numpy.testing import assert_allclose

from auditor.ingest.pipeline import ImportOptions, import_file
from auditor.store import open_store
from auditor.store.engine import table_names
from auditor.store.models import QUANTITIES, Base
from auditor.store.write import READING_COLUMNS, copy_payload
from tests.ingest_helpers import day_rows, reading_count, readings, write_csv

TABLES = {"site", "meter", "channel", "reading", "reading_revision", "import_batch", "quality_flag"}


def test_migrations_up_down_up(db_url):
    store = open_store(db_url, upgrade=False)
    try:
        assert not TABLES & set(table_names(store))
        store.upgrade()
        assert store.current_revision() == store.head_revision()
        assert TABLES <= set(table_names(store))
        store.downgrade("base")
        assert table_names(store) == ["alembic_version"] and store.current_revision() is None
        store.upgrade()
        assert store.current_revision() == store.head_revision()
    finally:
        store.dispose()


def test_models_and_migrations_agree(store):
    with store.engine.connect() as conn:
        diff = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    assert diff == [], diff


def test_import_idempotency_and_revision(store, tmp_path):
    a = write_csv(tmp_path / "a.csv", day_rows())
    first = import_file(store, a)
    assert first.status == "imported" and first.inserted == 96
    assert import_file(store, a).status == "unchanged"
    assert import_file(store, write_csv(tmp_path / "same.csv", day_rows()[:40])).status == "unchanged"
    rev = import_file(store, write_csv(tmp_path / "rev.csv", day_rows(kwh=30.0)[:12]))
    assert rev.status == "revised" and rev.revised == 12
    df = readings(store)
    assert len(df) == 96
    assert_allclose(df["kwh"].to_numpy()[:12], 30.0 + 0.01 * np.arange(12))
    assert_allclose(df["kwh"].to_numpy()[12:], 10.0 + 0.01 * np.arange(12, 96))
    with store.engine.connect() as c:
        old = c.exec_driver_sql("SELECT kwh FROM reading_revision ORDER BY start").scalars().all()
        statuses = c.exec_driver_sql("SELECT status FROM import_batch ORDER BY id").scalars().all()
    assert_allclose(old, 10.0 + 0.01 * np.arange(12))
    assert statuses == ["imported", "unchanged", "unchanged", "revised"]


def test_absent_channel_is_null_and_values_exact(store, tmp_path):
    rows = [f"M1,2025-01-06T00:{15 * i:02d}:00+00:00,{1.1 + i / 3:.17g},0.1,0.0" for i in range(4)]
    import_file(store, write_csv(tmp_path / "a.csv", rows))
    with store.engine.connect() as c:
        got = c.exec_driver_sql("SELECT kwh, kwh_received FROM reading ORDER BY start").fetchall()
    assert [r[1] for r in got] == [None] * 4
    assert [r[0] for r in got] == [float(f"{1.1 + i / 3:.17g}") for i in range(4)]  # bit-exact round trip


def test_rejected_file_writes_no_rows(store, tmp_path):
    import_file(store, write_csv(tmp_path / "a.csv", day_rows()))
    out = import_file(store, write_csv(tmp_path / "b.csv", day_rows(day="2025-01-07")[:50] + ["M1,x,1,1,1"]))
    assert out.status == "rejected"
    assert reading_count(store) == 96


def test_concurrent_imports_of_different_files(store, tmp_path):
    # new meters on one new site from several threads at once: on PostgreSQL the site insert
    # races and the loser retries; on SQLite the writers queue on the busy timeout
    files = [write_csv(tmp_path / f"f{i}.csv", [r for d in range(6, 9) for r in day_rows(meter=f"C{i}", day=f"2025-01-{d:02d}")])
             for i in range(4)]
    outcomes = [None] * len(files)
    barrier = threading.Barrier(len(files))

    def work(i):
        barrier.wait()
        outcomes[i] = import_file(store, files[i], ImportOptions(site="harbour"))

    threads = [threading.Thread(target=work, args=(i,)) for i in range(len(files))]
    for t in threads:
        t.start()
    for t in threads:
        t.join(120)
    assert [o.status for o in outcomes] == ["imported"] * 4, [o.errors for o in outcomes]
    assert reading_count(store) == 4 * 3 * 96
    with store.engine.connect() as c:
        assert c.exec_driver_sql("SELECT count(*) FROM site").scalar() == 1


def _decode_copy(blob: bytes) -> list[tuple]:
    """Decode PostgreSQL binary COPY tuples by hand with struct (independent of the encoder)."""
    fmt = {"meter_id": ">i", "start": ">q", "flags": ">h", "batch_id": ">i"}
    out, pos = [], 0
    while pos < len(blob):
        (n,) = struct.unpack_from(">h", blob, pos)
        pos += 2
        assert n == len(READING_COLUMNS)
        row = []
        for col in READING_COLUMNS:
            (length,) = struct.unpack_from(">i", blob, pos)
            pos += 4
            if length == -1:
                row.append(None)
                continue
            (v,) = struct.unpack_from(fmt.get(col, ">d"), blob, pos)
            assert length == struct.calcsize(fmt.get(col, ">d"))
            pos += length
            row.append(v)
        out.append(tuple(row))
    return out


def test_copy_payload_encodes_nulls_and_values():
    start = np.array([0, 900, 1800], dtype="int64")
    values = {"kwh": np.array([1.5, 2.0, np.nan]), "kvarh_lag": np.array([0.25, np.nan, 1.0]),
              "kvarh_lead": np.zeros(3), "kwh_received": np.full(3, np.nan)}
    blobs = copy_payload(7, start, values, np.array([0, 1, 2], dtype="int16"), 42)
    rows = sorted(r for b in blobs for r in _decode_copy(b))
    assert rows == [(7, 0, 1.5, 0.25, 0.0, None, 0, 42), (7, 900, 2.0, None, 0.0, None, 1, 42),
                    (7, 1800, None, 1.0, 0.0, None, 2, 42)]
    assert len(QUANTITIES) == 4


@pytest.mark.postgres
def test_postgres_bulk_path_is_copy(store, tmp_path):
    if store.is_sqlite:
        pytest.skip("COPY is the PostgreSQL path")
    seen = []
    from sqlalchemy import event

    @event.listens_for(store.engine, "before_cursor_execute")
    def _spy(conn, cursor, statement, *a):
        seen.append(statement.split()[0].upper())

    import_file(store, write_csv(tmp_path / "a.csv", day_rows()))
    # the rows went through COPY on the raw driver: SQLAlchemy saw no INSERT INTO reading
    assert reading_count(store) == 96
    assert seen.count("INSERT") <= 5  # import_batch, site, meter, channels, meter_data: never one per row
