"""The block layout of readings: one row per meter and block of :data:`BLOCK` intervals, each
quantity of the block held as one packed array.

Why: reading a meter-year of one-row-per-interval data builds 35,040 Python tuples, which is
most of an audit's time (``benchmarks/bench_portfolio.py`` measures it). In blocks a meter-year
is 1,460 rows whose arrays numpy takes over without a Python object per interval.

Table ``reading_block`` (the layout; created today only by the benchmark's prototype, by a
migration once the import writes blocks — DEVELOPERS.md, "The store", has the plan):

============  ==========  ==================================================================
column        type        meaning
============  ==========  ==================================================================
meter_id      int         the meter (primary key with ``block_start``)
block_start   int8        UTC epoch seconds, a multiple of ``BLOCK × interval seconds``
kwh …         blob/bytea  one per quantity of :data:`~auditor.store.models.QUANTITIES`:
                          ``BLOCK`` little-endian float64, NaN where the slot holds no interval
                          or no value; NULL when no slot of the block has a value
flags         blob/bytea  ``BLOCK`` little-endian int16: the interval's flags, ``-1`` where
                          the slot holds no interval; NULL when every slot holds an interval
                          and none is flagged
batch_id      int         the import batch that last wrote the block
batch_ids     blob/bytea  ``BLOCK`` little-endian int32, the batch of each slot's value; NULL
                          when every slot's value came from ``batch_id``
============  ==========  ==================================================================

``BLOCK`` = 24 keeps a block's row below SQLite's in-page limit for index b-tree cells (about
1,000 bytes with the default 4 KiB pages: 24 × (4 × 8 + 2 + 4) = 912 bytes with every column
filled), so no row spills to an overflow page; a block is 6 hours of 15-minute data.
Revisions (``reading_revision``) and quality flags (``quality_flag``) keep their tables.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from auditor.store.models import QUANTITIES

BLOCK = 24
ABSENT = -1  # flags value of a slot that holds no interval

_F8 = np.dtype("<f8")
_I2 = np.dtype("<i2")
_I4 = np.dtype("<i4")
_NAN_BLOCK = np.full(BLOCK, np.nan, dtype=_F8).tobytes()
_PRESENT_BLOCK = np.zeros(BLOCK, dtype=_I2).tobytes()

BLOCK_COLUMNS = ("meter_id", "block_start", *QUANTITIES, "flags", "batch_id", "batch_ids")


def block_seconds(interval_minutes: int) -> int:
    return BLOCK * int(interval_minutes) * 60


@dataclass(frozen=True, eq=False)
class Intervals:
    """One meter's intervals as arrays (time-sorted): ``start`` (UTC epoch seconds), one float64
    array per quantity (NaN: no value), ``flags`` (int16) and ``batch`` (int32)."""

    start: np.ndarray
    values: dict[str, np.ndarray]
    flags: np.ndarray
    batch: np.ndarray


def pack(meter_id: int, interval_minutes: int, iv: Intervals) -> list[tuple]:
    """Rows of ``reading_block`` (in :data:`BLOCK_COLUMNS` order) holding ``iv``, one per block
    that has an interval. Vectorised over intervals; one Python step per block for its bytes."""
    step = int(interval_minutes) * 60
    span = block_seconds(interval_minutes)
    start = np.asarray(iv.start, dtype=np.int64)
    if not len(start):
        return []
    if np.any(start % step):
        raise ValueError("interval starts must lie on the meter's interval grid")
    block = start - start % span
    starts, which = np.unique(block, return_inverse=True)
    slot = (start - block) // step
    nb = len(starts)
    vals = {}
    has = {}
    for q in QUANTITIES:
        a = np.full((nb, BLOCK), np.nan, dtype=_F8)
        a[which, slot] = iv.values[q]
        vals[q] = a
        has[q] = ~np.isnan(a).all(axis=1)
    flags = np.full((nb, BLOCK), ABSENT, dtype=_I2)
    flags[which, slot] = iv.flags
    plain = (flags == 0).all(axis=1)
    batch = np.zeros((nb, BLOCK), dtype=_I4)
    batch[which, slot] = iv.batch
    newest = np.full(nb, np.iinfo(np.int32).min, dtype=np.int64)
    np.maximum.at(newest, which, np.asarray(iv.batch, dtype=np.int64))
    present = flags != ABSENT
    one_batch = ((batch == newest[:, None]) | ~present).all(axis=1)
    rows = []
    for b in range(nb):
        rows.append((int(meter_id), int(starts[b]),
                     *[vals[q][b].tobytes() if has[q][b] else None for q in QUANTITIES],
                     None if plain[b] else flags[b].tobytes(), int(newest[b]),
                     None if one_batch[b] else batch[b].tobytes()))
    return rows


def unpack(rows: list[tuple], interval_minutes: int, start_utc: int | None = None,
           end_utc: int | None = None) -> Intervals:
    """The intervals held by ``reading_block`` rows (``block_start``, the quantities, ``flags``,
    ``batch_id``, ``batch_ids`` in that order, sorted by ``block_start``), limited to
    ``start_utc <= start < end_utc``. numpy reads each column's bytes in one piece."""
    step = int(interval_minutes) * 60
    nb = len(rows)
    if not nb:
        return Intervals(np.empty(0, np.int64), {q: np.empty(0) for q in QUANTITIES}, np.empty(0, _I2),
                         np.empty(0, _I4))
    cols = list(zip(*rows, strict=True))
    starts = np.fromiter(cols[0], dtype=np.int64, count=nb)
    nq = len(QUANTITIES)
    start = (starts[:, None] + np.arange(BLOCK, dtype=np.int64) * step).ravel()
    # which slots to keep: those holding an interval (every slot when no block has flags) in range
    flag_col = cols[1 + nq]
    if flag_col.count(None) < nb:  # tuple.count runs in C
        flags = np.frombuffer(b"".join(x if x is not None else _PRESENT_BLOCK for x in flag_col), _I2)
        keep = flags != ABSENT
    else:
        flags, keep = None, None
    if start_utc is not None or end_utc is not None:
        lo = start >= start_utc if start_utc is not None else np.ones(len(start), dtype=bool)
        inside = lo & (start < end_utc) if end_utc is not None else lo
        keep = inside if keep is None else keep & inside
    n = int(keep.sum()) if keep is not None else len(start)

    def take(a: np.ndarray) -> np.ndarray:
        return a if keep is None else a[keep]

    values = {}
    for i, q in enumerate(QUANTITIES):
        col = cols[1 + i]
        missing = col.count(None)
        if missing == nb:  # a quantity the meter does not record: no bytes to join
            values[q] = np.full(n, np.nan)
        else:
            parts = col if not missing else [x if x is not None else _NAN_BLOCK for x in col]
            values[q] = take(np.frombuffer(b"".join(parts), _F8))
    batch_of_block = np.fromiter(cols[2 + nq], dtype=np.int64, count=nb)
    if cols[3 + nq].count(None) < nb:
        batch = np.frombuffer(b"".join(x if x is not None else np.full(BLOCK, b0, _I4).tobytes()
                                       for x, b0 in zip(cols[3 + nq], batch_of_block, strict=True)), _I4)
    else:
        batch = np.repeat(batch_of_block.astype(_I4), BLOCK)
    return Intervals(take(start), values, take(flags) if flags is not None else np.zeros(n, _I2), take(batch))
