"""blocks of 96 intervals (a day of 15-minute data) instead of 24

Revision ID: 0011
Revises: 0010
Create Date: 2026-12-02 16:00:00

A meter-year of 15-minute data is 365 rows instead of 1,460: an audit reads a meter with a
quarter of the rows (``benchmarks/bench_portfolio.py``; DEVELOPERS.md, "The block layout").
The readings are re-blocked meter by meter, so memory holds one meter's blocks at a time: each
meter's blocks are unpacked (values, NULLs, flags and the batch of every interval kept), deleted
and packed again in the new size; the downgrade does the reverse. Both check that every
interval arrived. On PostgreSQL a row of 96 intervals (up to 3.7 kB) is kept whole in its page
rather than compressed into the TOAST table (``toast_tuple_target``). On SQLite, a database made
with 4 KiB pages is rewritten with 16 KiB pages after the upgrade when nothing else holds it
open (:meth:`auditor.store.engine.Store.upgrade`), so a row fits in its page.
"""
from __future__ import annotations

from alembic import op

revision = '0011'
down_revision = '0010'
branch_labels = None
depends_on = None

OLD, NEW = 24, 96  # intervals per block before and after this revision


def _mark() -> str:
    return "?" if op.get_bind().dialect.paramstyle == "qmark" else "%s"


def _reblock(size_from: int, size_to: int) -> None:
    from auditor.store.blocks import STORED_COLUMNS, gather, unpack
    from auditor.store.meter_data import spans
    from auditor.store.write import insert_blocks

    conn = op.get_bind()
    m = _mark()
    held = sum(v[3] for v in spans(conn, size=size_from).values())
    moved = 0
    meters = [(int(i), int(n or 15)) for i, n in conn.exec_driver_sql(
        "SELECT id, interval_minutes FROM meter ORDER BY id").all()]
    for mid, minutes in meters:
        stored = conn.exec_driver_sql(
            f"SELECT {', '.join(STORED_COLUMNS)} FROM reading_block WHERE meter_id = {m} ORDER BY block_start",
            (mid,)).fetchall()
        if not stored:
            continue
        iv = unpack([tuple(r) for r in stored], minutes, size=size_from)
        del stored
        conn.exec_driver_sql(f"DELETE FROM reading_block WHERE meter_id = {m}", (mid,))
        insert_blocks(conn, mid, gather(iv, minutes, size_to))
        moved += len(iv.start)
    after = sum(v[3] for v in spans(conn, size=size_to).values())
    if not held == moved == after:  # pragma: no cover - a defect of the move itself
        raise RuntimeError(f"re-blocking the readings moved {moved} of {held} intervals ({after} stored after)")


def upgrade() -> None:
    _reblock(OLD, NEW)
    if op.get_bind().dialect.name == "postgresql":
        op.execute("ALTER TABLE reading_block SET (toast_tuple_target = 8160)")


def downgrade() -> None:
    if op.get_bind().dialect.name == "postgresql":
        op.execute("ALTER TABLE reading_block RESET (toast_tuple_target)")
    _reblock(NEW, OLD)
