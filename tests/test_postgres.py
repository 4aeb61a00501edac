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
from auditor.store.blocks import BLOCK, BLOCK_COLUMNS, Intervals, copy_payload, gather, pack
from auditor.store.engine import table_names
from auditor.store.models import QUANTITIES, Base
from tests.ingest_helpers import day_rows, reading_count, readings, stored_rows, write_csv

TABLES = {"site", "meter", "channel", "reading_block", "reading_revision", "import_batch", "quality_flag"}


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
    got = [(r[2], r[5]) for r in stored_rows(store)]  # kwh, kwh_received
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
    """Decode PostgreSQL binary COPY tuples by hand with struct (independent of the encoder):
    integers by their big-endian formats, ``bytea`` fields as their raw bytes."""
    fmt = {"meter_id": ">i", "block_start": ">q", "batch_id": ">i"}
    out, pos = [], 0
    while pos < len(blob):
        (n,) = struct.unpack_from(">h", blob, pos)
        pos += 2
        assert n == len(BLOCK_COLUMNS)
        row = []
        for col in BLOCK_COLUMNS:
            (length,) = struct.unpack_from(">i", blob, pos)
            pos += 4
            if length == -1:
                row.append(None)
                continue
            if col in fmt:
                assert length == struct.calcsize(fmt[col])
                (v,) = struct.unpack_from(fmt[col], blob, pos)
            else:
                v = blob[pos:pos + length]
            pos += length
            row.append(v)
        out.append(tuple(row))
    return out


def test_copy_payload_encodes_nulls_and_values():
    """The binary COPY tuples hold what the SQLite rows hold (``pack``), NULLs included."""
    t0 = 1_735_689_600
    start = t0 + 900 * np.array([0, 1, 2, BLOCK, BLOCK + 1, 3 * BLOCK + 5])
    values = {"kwh": np.array([1.5, 2.0, np.nan, 4.0, 5.0, 6.0]), "kvarh_lag": np.array([0.25, np.nan, 1.0, 2, 3, 4]),
              "kvarh_lead": np.zeros(6), "kwh_received": np.full(6, np.nan)}
    flags = np.array([0, 1, 2, 0, 0, 0], dtype="int16")
    batch = np.array([42, 42, 43, 42, 42, 44], dtype="int32")
    iv = Intervals(start, values, flags, batch)
    rows = sorted(r for b in copy_payload(7, gather(iv, 15)) for r in _decode_copy(b))
    assert rows == sorted(pack(7, 15, iv))
    first = dict(zip(BLOCK_COLUMNS, rows[0], strict=True))
    assert (first["meter_id"], first["block_start"], first["batch_id"]) == (7, t0, 43)
    assert first["kwh_received"] is None and first["batch_ids"] is not None
    kwh = struct.unpack_from(f"<{BLOCK}d", first["kwh"])
    assert kwh[:2] == (1.5, 2.0) and np.isnan(kwh[2:]).all()  # NaN: no value, or no interval
    assert struct.unpack_from("<4h", first["flags"]) == (0, 1, 2, -1)  # -1: a slot without an interval
    second = dict(zip(BLOCK_COLUMNS, rows[1], strict=True))
    assert second["flags"] is not None and second["batch_ids"] is None and second["batch_id"] == 42
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
