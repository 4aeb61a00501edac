"""The block layout of readings: one row per meter and block of :data:`BLOCK` intervals, each
quantity of the block held as one packed array.

Why: reading a meter-year of one-row-per-interval data built 35,040 Python tuples, which was
most of an audit's time (``benchmarks/bench_portfolio.py`` measures it). In blocks a meter-year
is 365 rows whose arrays numpy takes over without a Python object per interval.

Table ``reading_block`` (migrations 0010 and 0011):

============  ==========  ==================================================================
column        type        meaning
============  ==========  ==================================================================
meter_id      int         the meter (primary key with ``block_start``)
block_start   int8        UTC epoch seconds of the block's first slot (:func:`block_of`)
kwh …         blob/bytea  one per quantity of :data:`~auditor.store.models.QUANTITIES`:
                          ``BLOCK`` little-endian float64, NaN where the slot holds no interval
                          or no value; NULL when no slot of the block has a value
flags         blob/bytea  ``BLOCK`` little-endian int16: the interval's flags, ``-1`` where
                          the slot holds no interval; NULL when every slot holds an interval
                          and none is flagged
batch_id      int         the newest import batch among the block's slots
batch_ids     blob/bytea  ``BLOCK`` little-endian int32, the batch of each slot's value; NULL
                          when every slot's value came from ``batch_id``
============  ==========  ==================================================================

Slot ``k`` of a block starts at ``block_start + k × interval``. Blocks of a meter follow its
interval grid: ``block_start`` is a multiple of ``BLOCK × interval`` shifted by the grid's phase
(an hourly meter whose hours start at half past in UTC, as in a +05:30 zone, has blocks that
start at half past too), so every interval falls on a slot.

``BLOCK`` = 96 is a day of 15-minute data (8 hours of 5-minute data, 4 days of hourly data),
and keeps a block's row below SQLite's in-page limit for index b-tree cells with the 16 KiB pages
the store gives a new database (about 4,080 bytes: 96 × (4 × 8 + 2 + 4) = 3,648 bytes with
every column filled), so no row spills to an overflow page (:func:`auditor.store.engine.make_engine`
sets the page size; DEVELOPERS.md, "The block layout", has the measurements behind the choice).
Migration 0010 wrote blocks of 24 intervals; migration 0011 re-blocks them. The functions that
lay intervals out in blocks or read stored rows back take the block size (``size``, default
:data:`BLOCK`), so that each migration keeps the layout of its own revision.
Revisions (``reading_revision``) and quality flags (``quality_flag``) keep their tables, one row
per interval.
"""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from auditor.store.models import QUANTITIES

BLOCK = 96
ABSENT = -1  # flags value of a slot that holds no interval
GRID = 900  # every interval start lies on the quarter hour (every real UTC offset is a multiple of it)

_F8 = np.dtype("<f8")
_I2 = np.dtype("<i2")
_I4 = np.dtype("<i4")


def nan_block(size: int = BLOCK) -> bytes:
    """A quantity column with no value."""
    return np.full(size, np.nan, dtype=_F8).tobytes()


def present_block(size: int = BLOCK) -> bytes:
    """A flags column of full, unflagged slots."""
    return np.zeros(size, dtype=_I2).tobytes()

BLOCK_COLUMNS = ("meter_id", "block_start", *QUANTITIES, "flags", "batch_id", "batch_ids")
#: what a stored block is read back as (``from_rows``): the key's second half onwards
STORED_COLUMNS = BLOCK_COLUMNS[1:]


def block_seconds(interval_minutes: int, size: int = BLOCK) -> int:
    return size * int(interval_minutes) * 60


def block_of(start: np.ndarray, interval_minutes: int, size: int = BLOCK) -> np.ndarray:
    """The ``block_start`` of each interval start (UTC epoch seconds, on the interval's grid)."""
    step = int(interval_minutes) * 60
    start = np.asarray(start, dtype=np.int64)
    if np.any(start % min(step, GRID)):
        raise ValueError("interval starts must lie on the meter's interval grid")
    phase = start % step
    return start - (start - phase) % (size * step)


@dataclass(frozen=True, eq=False)
class Intervals:
    """One meter's intervals as arrays (time-sorted): ``start`` (UTC epoch seconds), one float64
    array per quantity (NaN: no value), ``flags`` (int16) and ``batch`` (int32)."""

    start: np.ndarray
    values: dict[str, np.ndarray]
    flags: np.ndarray
    batch: np.ndarray


@dataclass(frozen=True, eq=False)
class Blocks:
    """Blocks of one meter as (blocks × :data:`BLOCK`) arrays: ``start`` (block starts, sorted),
    one float64 array per quantity, ``flags`` (int16, :data:`ABSENT` in an empty slot) and
    ``batch`` (int32). The writer reads stored blocks into this form, lays the file's intervals
    over them and writes them back."""

    start: np.ndarray
    values: dict[str, np.ndarray]
    flags: np.ndarray
    batch: np.ndarray

    @staticmethod
    def empty(starts: np.ndarray, size: int = BLOCK) -> Blocks:
        nb = len(starts)
        return Blocks(np.asarray(starts, dtype=np.int64),
                      {q: np.full((nb, size), np.nan, dtype=_F8) for q in QUANTITIES},
                      np.full((nb, size), ABSENT, dtype=_I2), np.zeros((nb, size), dtype=_I4))

    @property
    def size(self) -> int:
        """Intervals per block."""
        return self.flags.shape[1]

    def take(self, which) -> Blocks:
        return Blocks(self.start[which], {q: v[which] for q, v in self.values.items()}, self.flags[which],
                      self.batch[which])


def gather(iv: Intervals, interval_minutes: int, size: int = BLOCK) -> Blocks:
    """The blocks (of ``size`` intervals) holding the intervals of ``iv``. Vectorised over intervals."""
    start = np.asarray(iv.start, dtype=np.int64)
    block = block_of(start, interval_minutes, size)
    starts, which = np.unique(block, return_inverse=True)
    slot = (start - block) // (int(interval_minutes) * 60)
    out = Blocks.empty(starts, size)
    for q in QUANTITIES:
        out.values[q][which, slot] = iv.values[q]
    out.flags[which, slot] = iv.flags
    out.batch[which, slot] = iv.batch
    return out


@dataclass(frozen=True, eq=False)
class _Shape:
    """Per block: which quantity columns hold a value, whether the flags column and the batch
    column can be NULL, and the block's batch."""

    has: dict[str, np.ndarray]
    plain: np.ndarray
    one_batch: np.ndarray
    newest: np.ndarray


def _shape(b: Blocks) -> _Shape:
    present = b.flags != ABSENT
    newest = np.where(present, b.batch, np.iinfo(np.int32).min).max(axis=1)
    return _Shape({q: ~np.isnan(b.values[q]).all(axis=1) for q in QUANTITIES}, (b.flags == 0).all(axis=1),
                  ((b.batch == newest[:, None]) | ~present).all(axis=1), newest.astype(np.int64))


def rows(meter_id: int, b: Blocks) -> list[tuple]:
    """Rows of ``reading_block`` (in :data:`BLOCK_COLUMNS` order) holding the blocks ``b``, each
    of which must hold an interval. One Python step per block for its bytes."""
    sh = _shape(b)
    vals = [b.values[q] for q in QUANTITIES]
    has = [sh.has[q].tolist() for q in QUANTITIES]
    plain, one_batch, newest = sh.plain.tolist(), sh.one_batch.tolist(), sh.newest.tolist()
    mid = int(meter_id)
    out = []
    for i, start in enumerate(b.start.tolist()):
        out.append((mid, start, *[v[i].tobytes() if h[i] else None for v, h in zip(vals, has, strict=True)],
                    None if plain[i] else b.flags[i].tobytes(), newest[i],
                    None if one_batch[i] else b.batch[i].tobytes()))
    return out


def pack(meter_id: int, interval_minutes: int, iv: Intervals, size: int = BLOCK) -> list[tuple]:
    """Rows of ``reading_block`` (in :data:`BLOCK_COLUMNS` order) holding ``iv`` in blocks of
    ``size`` intervals, one per block that has an interval."""
    if not len(iv.start):
        return []
    return rows(meter_id, gather(iv, interval_minutes, size))


# PostgreSQL binary COPY: the fixed binary header, and the trailer (a field count of -1)
PGCOPY_HEADER = b"PGCOPY\n\xff\r\n\x00" + b"\x00" * 8
PGCOPY_TRAILER = b"\xff\xff"


def copy_payload(meter_id: int, b: Blocks) -> list[bytes]:
    """The blocks ``b`` as tuples of PostgreSQL's binary COPY format for ``reading_block`` (in
    :data:`BLOCK_COLUMNS` order), built with numpy, no loop over blocks.

    Each tuple is a big-endian int16 field count, then per field an int32 byte length and the
    value (length -1 and no bytes for NULL): int4 meter_id, int8 block_start, the ``bytea``
    columns as their raw bytes (``BLOCK`` little-endian values, as :func:`rows` gives them),
    int4 batch_id. Blocks are grouped by which columns are NULL, since that changes a tuple's
    length; row order does not matter to a table.

    References
    ----------
    PostgreSQL documentation, "COPY", section "Binary Format".
    """
    sh = _shape(b)
    nullable = [*QUANTITIES, "flags", "batch_ids"]
    null = np.column_stack([~sh.has[q] for q in QUANTITIES] + [sh.plain, sh.one_batch])
    pattern = null.astype(np.int64) @ (1 << np.arange(len(nullable), dtype=np.int64))
    codes = np.unique(pattern)
    data = {**b.values, "flags": b.flags, "batch_ids": b.batch}
    dtypes = {**{q: _F8 for q in QUANTITIES}, "flags": _I2, "batch_ids": _I4}
    out = []
    for code in codes:
        sel = np.flatnonzero(pattern == code) if len(codes) > 1 else slice(None)
        fields = [("n", ">i2"), ("l_meter", ">i4"), ("meter", ">i4"), ("l_start", ">i4"), ("start", ">i8")]
        is_null = {c: bool(code >> i & 1) for i, c in enumerate(nullable)}
        for c in nullable[:-1]:
            fields.append((f"l_{c}", ">i4"))
            if not is_null[c]:
                fields.append((c, dtypes[c], (b.size,)))
        fields += [("l_batch", ">i4"), ("batch", ">i4"), ("l_batch_ids", ">i4")]
        if not is_null["batch_ids"]:
            fields.append(("batch_ids", _I4, (b.size,)))
        st = b.start[sel]
        rec = np.empty(len(st), dtype=np.dtype(fields))
        rec["n"] = len(BLOCK_COLUMNS)
        rec["l_meter"], rec["meter"] = 4, meter_id
        rec["l_start"], rec["start"] = 8, st
        for c in nullable:
            width = b.size * dtypes[c].itemsize
            rec[f"l_{c}"] = -1 if is_null[c] else width
            if not is_null[c]:
                rec[c] = data[c][sel]
        rec["l_batch"], rec["batch"] = 4, sh.newest[sel]
        out.append(rec.tobytes())
    return out


def _joined(col: Sequence[bytes | None], filler: bytes, dtype: np.dtype) -> np.ndarray | None:
    """One column's blocks as one flat array (None when no block has a value); numpy reads the
    joined bytes in one piece."""
    missing = col.count(None)  # tuple.count runs in C
    if missing == len(col):
        return None
    parts = col if not missing else [x if x is not None else filler for x in col]
    return np.frombuffer(b"".join(parts), dtype)


def from_rows(stored: list[tuple], size: int = BLOCK) -> Blocks:
    """Blocks (of ``size`` intervals) from ``reading_block`` rows (:data:`STORED_COLUMNS`:
    ``block_start``, the quantities, ``flags``, ``batch_id``, ``batch_ids``), as the writer
    reads them."""
    nb = len(stored)
    if not nb:
        return Blocks.empty(np.empty(0, np.int64), size)
    cols = list(zip(*stored, strict=True))
    nq = len(QUANTITIES)
    starts = np.fromiter(cols[0], dtype=np.int64, count=nb)
    values = {}
    for i, q in enumerate(QUANTITIES):
        a = _joined(cols[1 + i], nan_block(size), _F8)
        values[q] = np.full((nb, size), np.nan) if a is None else a.reshape(nb, size).copy()
    f = _joined(cols[1 + nq], present_block(size), _I2)
    flags = np.zeros((nb, size), _I2) if f is None else f.reshape(nb, size).copy()
    per_block = np.fromiter(cols[2 + nq], dtype=np.int64, count=nb)
    batch = np.repeat(per_block.astype(_I4), size).reshape(nb, size)
    if cols[3 + nq].count(None) < nb:
        for i, x in enumerate(cols[3 + nq]):
            if x is not None:
                batch[i] = np.frombuffer(x, _I4)
    return Blocks(starts, values, flags, batch)


def decode(values: Sequence[Sequence[bytes | None]], flags: Sequence[bytes | None]
           ) -> tuple[dict[str, np.ndarray], np.ndarray | None]:
    """The slots of blocks read for an audit, flat over every slot (blocks × :data:`BLOCK`):
    the values (one float64 array per quantity, NaN: no value) and the flags (None when no
    block has any: every slot holds an unflagged interval), from the columns as the driver gave
    them (``values`` one sequence per quantity)."""
    nb = len(flags)
    out = {}
    for q, col in zip(QUANTITIES, values, strict=True):
        a = _joined(col, nan_block(), _F8)
        out[q] = a if a is not None else np.full(nb * BLOCK, np.nan)
    return out, _joined(flags, present_block(), _I2)


def unpack(stored: list[tuple], interval_minutes: int, start_utc: int | None = None,
           end_utc: int | None = None, size: int = BLOCK) -> Intervals:
    """The intervals held by ``reading_block`` rows (:data:`STORED_COLUMNS`, sorted by
    ``block_start``, blocks of ``size`` intervals), limited to ``start_utc <= start < end_utc``,
    sorted by start."""
    b = from_rows(stored, size)
    step = int(interval_minutes) * 60
    start = (b.start[:, None] + np.arange(size, dtype=np.int64) * step).ravel()
    keep = slots_kept(start, b.flags.ravel(), start_utc, end_utc)
    iv = Intervals(start, {q: v.ravel() for q, v in b.values.items()}, b.flags.ravel(), b.batch.ravel())
    return in_order(iv if keep is None else Intervals(
        start[keep], {q: v[keep] for q, v in iv.values.items()}, iv.flags[keep], iv.batch[keep]))


def from_interval_rows(stored: list[tuple]) -> Intervals:
    """Intervals from rows ``(start, kwh, kvarh_lag, kvarh_lead, kwh_received, flags, batch_id)``
    sorted by start, a missing value as None (the one-row-per-interval layout of revision 0009)."""
    a = np.array(stored, dtype=np.float64).reshape(len(stored), 3 + len(QUANTITIES))  # None becomes NaN
    return Intervals(a[:, 0].astype(np.int64), {q: a[:, 1 + i].copy() for i, q in enumerate(QUANTITIES)},
                     a[:, -2].astype(_I2), a[:, -1].astype(_I4))


def interval_rows(meter_id: int, iv: Intervals) -> list[tuple]:
    """``(meter_id, start, kwh, kvarh_lag, kvarh_lead, kwh_received, flags, batch_id)`` per
    interval of ``iv``, None for a missing value: the inverse of :func:`from_interval_rows`."""
    vals = [[None if x != x else x for x in iv.values[q].tolist()] for q in QUANTITIES]
    mid = int(meter_id)
    return [(mid, s, *v, f, b) for s, *v, f, b in zip(iv.start.tolist(), *vals, iv.flags.tolist(), iv.batch.tolist(),
                                                      strict=True)]


def slots_kept(start: np.ndarray, flags: np.ndarray | None, start_utc: int | None,
               end_utc: int | None) -> np.ndarray | None:
    """Which slots hold an interval in ``start_utc <= start < end_utc`` (None: every slot)."""
    keep = flags != ABSENT if flags is not None else None
    if start_utc is not None:
        keep = start >= start_utc if keep is None else keep & (start >= start_utc)
    if end_utc is not None:
        keep = start < end_utc if keep is None else keep & (start < end_utc)
    return keep


def in_order(iv: Intervals) -> Intervals:
    """``iv`` sorted by start: blocks follow one another, unless a meter's intervals changed
    their phase on the grid between files (then two blocks overlap in time)."""
    if len(iv.start) < 2 or (np.diff(iv.start) > 0).all():
        return iv
    o = np.argsort(iv.start, kind="stable")
    return Intervals(iv.start[o], {q: v[o] for q, v in iv.values.items()}, iv.flags[o], iv.batch[o])
