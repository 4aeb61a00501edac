"""The block layout as the store: the migration that moves readings into blocks and back, the
writer's classification inside blocks (new, identical, changed; revisions with the batch of the
slot they came from), what an unchanged file writes (nothing), meters on a shifted hourly grid,
the data versions rebuilt from blocks, and two imports of one meter at once on PostgreSQL.
Every test with the ``store`` or ``db_url`` fixture runs on SQLite and on PostgreSQL."""
from __future__ import annotations

import os
import subprocess
import sys
import threading

import numpy as np
import pandas as pd
import pytest

from auditor.ingest.pipeline import ImportOptions, import_file
from auditor.store import open_store
from auditor.store.blocks import BLOCK
from auditor.store.meter_data import spans, versions
from tests.ingest_helpers import day_rows, epoch, readings, stored_rows, write_csv


def _old_rows() -> list[tuple]:
    """Rows of the one-row-per-interval table as revision 0009 held them: two meters, gaps
    inside a block, an absent channel (NULL), flags, two batches, a value with every bit set."""
    t0 = epoch("2025-01-06T00:00:00+00:00")
    out = []
    for i in [*range(0, 30), *range(41, 100)]:  # a gap from slot 30 to 40
        kwh = None if i == 5 else 1.1 + i / 3
        received = 0.5 if i >= 60 else None
        out.append((1, t0 + 900 * i, kwh, 0.25 * i, 0.0, received, 1 if i in (3, 70) else 0, 1 if i < 50 else 2))
    out += [(2, t0 + 3600 * i + 1800, 10.0 + i, 2.0, 0.125, None, 2 if i == 4 else 0, 2) for i in range(30)]
    return out


def _seed_0009(url: str) -> None:
    store = open_store(url, upgrade=False)
    try:
        store.upgrade("0009")
        m = "?" if store.is_sqlite else "%s"
        with store.engine.begin() as c:
            c.exec_driver_sql(f"INSERT INTO site (id, name, timezone, created_at) VALUES (1, 'works', 'UTC', {m})",
                              (pd.Timestamp.now(tz="UTC").to_pydatetime(),))
            for mid, minutes in ((1, 15), (2, 60)):
                c.exec_driver_sql(f"INSERT INTO meter (id, site_id, external_id, multiplier, interval_minutes, "
                                  f"created_at) VALUES ({m}, 1, {m}, 1.0, {m}, {m})",
                                  (mid, f"OLD-{mid}", minutes, pd.Timestamp.now(tz="UTC").to_pydatetime()))
            for b in (1, 2):
                c.exec_driver_sql(f"INSERT INTO import_batch (id, file_name, sha256, format, rows_accepted, "
                                  f"rows_rejected, rows_revised, started_at, status) VALUES ({m}, 'f.csv', 'x', "
                                  f"'plain_csv', 0, 0, 0, {m}, 'imported')", (b, pd.Timestamp.now(tz="UTC").to_pydatetime()))
            c.exec_driver_sql(f"INSERT INTO reading (meter_id, start, kwh, kvarh_lag, kvarh_lead, kwh_received, flags, "
                              f"batch_id) VALUES ({', '.join([m] * 8)})", _old_rows())
            c.exec_driver_sql("DELETE FROM meter_data")
            c.exec_driver_sql("INSERT INTO meter_data (meter_id, data_batch_id, first_start, last_start, intervals) "
                              "SELECT meter_id, max(batch_id), min(start), max(start), count(*) FROM reading "
                              "GROUP BY meter_id")
    finally:
        store.dispose()


def _block_count(store) -> int:
    with store.engine.connect() as c:
        return c.exec_driver_sql("SELECT count(*) FROM reading_block").scalar()


def test_migration_moves_every_reading_into_blocks_and_back(db_url):
    _seed_0009(db_url)
    rows = sorted(_old_rows())
    store = open_store(db_url, upgrade=False)
    try:
        store.upgrade("0010")  # rows into blocks of 24 intervals
        assert _block_count(store) == 5 + 2  # meter 1: 100 slots of 15 min; meter 2: 30 hours at half past
        store.upgrade()  # 0011: blocks of 96 intervals
        assert store.current_revision() == store.head_revision()
        assert stored_rows(store) == rows  # values bit for bit, NULLs, flags and each interval's batch
        assert _block_count(store) == 2 + 1  # a UTC day of 15-minute slots; 96 hours from a block boundary
        with store.engine.connect() as c:
            # the version the import recorded equals the one the blocks give
            assert spans(c) == versions(c)
        # the shifted hourly grid (half past in UTC) reads back on its own times
        from auditor.services.meters import load_meter

        frame = load_meter(store, "OLD-2").frame
        assert len(frame) == 30 and (frame.index.minute == 30).all() and frame["estimated"].sum() == 1
        assert store.downgrade("0010") == []  # back into blocks of 24
        assert _block_count(store) == 5 + 2
        lost = store.downgrade("0009")
        assert lost == []  # moved back, not dropped
        with store.engine.connect() as c:
            back = c.exec_driver_sql("SELECT meter_id, start, kwh, kvarh_lag, kvarh_lead, kwh_received, flags, "
                                     "batch_id FROM reading ORDER BY meter_id, start").fetchall()
        assert [tuple(r) for r in back] == rows
        store.upgrade()
        assert stored_rows(store) == rows
    finally:
        store.dispose()


def test_a_new_sqlite_file_has_pages_a_block_fits_in(tmp_path):
    import sqlite3

    store = open_store(f"sqlite:///{tmp_path / 'new.sqlite3'}")
    store.dispose()
    con = sqlite3.connect(tmp_path / "new.sqlite3")
    try:
        assert con.execute("PRAGMA page_size").fetchone()[0] == 16384
        assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    finally:
        con.close()


def test_an_sqlite_file_with_small_pages_is_rewritten_at_the_upgrade(tmp_path):
    """A file made with SQLite's default 4 KiB pages (as before 0011) gets 16 KiB pages when
    the upgrade re-blocks it, its readings intact; a file another process holds open is left
    as it is (it works either way) and rewritten at a later upgrade."""
    import sqlite3

    path = tmp_path / "old.sqlite3"
    con = sqlite3.connect(path)
    con.execute("PRAGMA page_size=4096")
    con.execute("PRAGMA journal_mode=WAL")
    con.close()
    url = f"sqlite:///{path}"
    _seed_0009(url)
    store = open_store(url, upgrade=False)
    try:
        with store.engine.connect() as c:
            assert c.exec_driver_sql("PRAGMA page_size").scalar() == 4096
        other = sqlite3.connect(path)  # another process with the file open
        other.execute("SELECT count(*) FROM meter").fetchone()
        store.upgrade()
        with store.engine.connect() as c:
            assert c.exec_driver_sql("PRAGMA page_size").scalar() == 4096  # left as it is
            assert c.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        other.close()
        assert stored_rows(store) == sorted(_old_rows())
        store.downgrade("0010")
        store.dispose()
        # the command says so when it rewrites the file
        env = dict(os.environ, AUDITOR_DB_URL=url)
        done = subprocess.run([sys.executable, "-m", "auditor", "db", "upgrade"], capture_output=True, text=True,
                              env=env, timeout=120)
        assert done.returncode == 0, done.stderr
        assert "schema 0010 → 0011" in done.stdout and "16 KiB pages" in done.stdout
        with store.engine.connect() as c:
            assert c.exec_driver_sql("PRAGMA page_size").scalar() == 16384
            assert c.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
            assert c.exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"
        assert stored_rows(store) == sorted(_old_rows())
    finally:
        store.dispose()


def test_a_revision_inside_a_block_keeps_the_slots_batch(store, tmp_path):
    # day 1 from one file, then a file revising 3 intervals of the first block and adding a day
    first = import_file(store, write_csv(tmp_path / "a.csv", day_rows(n=96)))
    second = import_file(store, write_csv(tmp_path / "b.csv", day_rows(n=96, kwh=20.0)[4:7]
                                          + day_rows(day="2025-01-07", n=10)))
    assert (second.status, second.revised, second.inserted) == ("revised", 3, 10)
    rows = stored_rows(store)
    batches = [r[7] for r in rows]
    assert batches[:4] == [first.batch_id] * 4 and batches[4:7] == [second.batch_id] * 3
    assert batches[7:96] == [first.batch_id] * 89 and batches[96:] == [second.batch_id] * 10
    np.testing.assert_allclose([r[2] for r in rows[4:7]], 20.0 + 0.01 * np.arange(4, 7))
    with store.engine.connect() as c:
        rev = c.exec_driver_sql("SELECT start, kwh, batch_id, superseded_by FROM reading_revision "
                                "ORDER BY start").fetchall()
        mixed = c.exec_driver_sql("SELECT count(*) FROM reading_block WHERE batch_ids IS NOT NULL").scalar()
    assert [(r[0], r[2], r[3]) for r in rev] == [(epoch("2025-01-06T01:00:00+00:00") + 900 * i, first.batch_id,
                                                 second.batch_id) for i in range(3)]
    np.testing.assert_allclose([r[1] for r in rev], 10.0 + 0.01 * np.arange(4, 7))
    assert mixed == 1  # only the block where the two batches meet keeps a batch per slot


def test_an_unchanged_file_writes_no_block(store, tmp_path):
    from sqlalchemy import event

    f = write_csv(tmp_path / "a.csv", day_rows(n=96) + day_rows(day="2025-01-07", n=96))
    import_file(store, f)
    copy = tmp_path / "copy.csv"
    copy.write_bytes(f.read_bytes().replace(b"\n", b"\r\n"))  # other bytes, same content
    seen: list[str] = []
    event.listen(store.engine, "before_cursor_execute", lambda conn, cur, sql, *a: seen.append(sql))
    out = import_file(store, copy)
    assert out.status == "unchanged" and out.inserted == 0 and out.revised == 0
    assert [x for x in seen if "reading_block" in x and not x.lstrip().upper().startswith("SELECT")] == []
    assert len(readings(store)) == 192


def test_filling_a_gap_completes_the_block(store, tmp_path):
    rows = day_rows(n=BLOCK)
    import_file(store, write_csv(tmp_path / "a.csv", rows[:10] + rows[15:]))
    with store.engine.connect() as c:
        assert c.exec_driver_sql("SELECT count(*) FROM reading_block WHERE flags IS NOT NULL").scalar() == 1
    out = import_file(store, write_csv(tmp_path / "b.csv", rows[10:15]))
    assert (out.status, out.inserted) == ("imported", 5)
    with store.engine.connect() as c:
        # every slot holds an unflagged interval from one batch or another: flags need no bytes
        assert c.exec_driver_sql("SELECT count(*) FROM reading_block WHERE flags IS NOT NULL").scalar() == 0
        assert c.exec_driver_sql("SELECT count(*) FROM reading_block").scalar() == 1
        assert spans(c) == versions(c)
    assert len(readings(store)) == BLOCK


def test_hourly_meter_on_a_half_past_grid(store, tmp_path):
    """Local hours of a +05:30 zone start at half past in UTC: blocks follow that grid."""
    lines = [f"IN-1,2025-01-06T{h:02d}:00:00+05:30,{5 + h},1.0,0.0" for h in range(24)]
    lines += [f"IN-1,2025-01-07T{h:02d}:00:00+05:30,{50 + h},1.0,0.0" for h in range(0, 24, 2)]
    out = import_file(store, write_csv(tmp_path / "in.csv", lines), ImportOptions(timezone="Asia/Kolkata"))
    assert out.status == "imported", out.errors
    from auditor.services.meters import load_meter

    frame = load_meter(store, "IN-1").frame
    assert len(frame) == 36 and (frame.index.minute == 30).all()
    np.testing.assert_allclose(frame["kwh"].to_numpy()[:24], 5 + np.arange(24))
    # a revision of one hour, read back in place
    again = import_file(store, write_csv(tmp_path / "rev.csv", ["IN-1,2025-01-07T04:00:00+05:30,99,1.0,0.0"]))
    assert (again.status, again.revised) == ("revised", 1)
    frame = load_meter(store, "IN-1").frame
    assert frame.loc["2025-01-06T22:30:00+00:00", "kwh"] == 99.0


@pytest.mark.postgres
def test_two_imports_of_one_meter_at_once_into_one_block(store, tmp_path, monkeypatch):
    """Adjacent intervals of one meter from two files at once, into a stored block: both arrive. Each
    import waits (up to 2 s) after reading the stored blocks for the other to have read them
    too, which is when two writers that do not exclude each other lose one file's intervals
    or collide on the block's key."""
    if store.is_sqlite:
        pytest.skip("SQLite takes one writer at a time")
    import auditor.store.write as write

    rows = day_rows(meter="PG-1", n=24)
    import_file(store, write_csv(tmp_path / "first.csv", rows[:2]))  # the block is stored
    files = [write_csv(tmp_path / "a.csv", rows[2:12]), write_csv(tmp_path / "b.csv", rows[12:])]
    both_read = threading.Barrier(2)
    read = write.stored_blocks

    def read_then_wait(*a, **k):
        found = read(*a, **k)
        try:
            both_read.wait(timeout=2)
        except threading.BrokenBarrierError:
            pass
        return found

    monkeypatch.setattr(write, "stored_blocks", read_then_wait)
    outcomes = [None, None]

    def work(i):
        outcomes[i] = import_file(store, files[i])

    threads = [threading.Thread(target=work, args=(i,)) for i in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(120)
    assert [o.status for o in outcomes] == ["imported", "imported"], [o.errors for o in outcomes]
    assert len(readings(store)) == 24


def test_a_channel_recorded_in_some_blocks_only_reads_back_in_place(store, tmp_path):
    """Received energy arrives for the second day only, one interval of the first day is
    estimated: the blocks of the first day store no received bytes and those of the second
    no flags, and the frame puts each value at its own interval, whole or in a range."""
    from auditor.services.meters import load_meter

    day1 = [r + ",A" for r in day_rows(day="2025-01-06")]
    day1[30] = day1[30][:-1] + "E"
    day2 = [r + f",{0.5 + i / 100:.2f}" for i, r in enumerate(day_rows(day="2025-01-07"))]
    header = "meter,start,kwh,kvarh_lag,kvarh_lead"
    assert import_file(store, write_csv(tmp_path / "a.csv", day1, header + ",flag")).status == "imported"
    assert import_file(store, write_csv(tmp_path / "b.csv", day2, header + ",kwh_received")).status == "imported"
    with store.engine.connect() as c:
        per_day = 96 // BLOCK  # blocks of a UTC day of 15-minute data
        assert c.exec_driver_sql("SELECT count(kwh_received), count(flags), count(*) FROM reading_block").one() \
            == (per_day, 1, 2 * per_day)
    frame = load_meter(store, "M1").frame
    assert len(frame) == 192 and frame["estimated"].sum() == 1 and frame["estimated"].iloc[30]
    np.testing.assert_array_equal(frame["kwh_received"].to_numpy()[:96], 0.0)
    np.testing.assert_allclose(frame["kwh_received"].to_numpy()[96:], 0.5 + np.arange(96) / 100)
    part = load_meter(store, "M1", pd.Timestamp("2025-01-07").date(), pd.Timestamp("2025-01-08").date()).frame
    pd.testing.assert_frame_equal(part, frame.iloc[96:])
