"""Queries that return DataFrames or plain dicts for the service layer."""
from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from typing import TYPE_CHECKING

from sqlalchemy import select
from sqlalchemy.orm import Session

from auditor.errors import NotFoundError
from auditor.store.models import (
    FLAG_ESTIMATED,
    FLAG_FILLED,
    QUANTITIES,
    ImportBatch,
    Meter,
    QualityFlag,
    Site,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def now_utc() -> datetime:
    return datetime.now(UTC)


def get_meter(session: Session, external_id: str) -> Meter:
    meter = session.scalar(select(Meter).where(Meter.external_id == external_id))
    if meter is None:
        known = session.scalars(select(Meter.external_id).order_by(Meter.external_id).limit(20)).all()
        hint = f"; known meters: {', '.join(known)}" if known else "; the database has no meters yet"
        raise NotFoundError(f"no meter {external_id!r}{hint}", cli_hint=None if known else "auditor import FILE")
    return meter


def read_intervals(session: Session, meter: Meter, start_utc: int | None = None,
                   end_utc: int | None = None) -> pd.DataFrame:
    """The interval frame of one meter (DEVELOPERS.md): UTC index, multiplier applied."""
    got = read_arrays(session.connection(), [MeterSpan(meter.id, meter.interval_minutes or 15, start_utc, end_utc)])
    return interval_frame_of(*got[0], meter.multiplier)


@dataclass(frozen=True)
class MeterSpan:
    """What to read of one meter: its id, its interval and the UTC range (None: open)."""

    meter_id: int
    interval_minutes: int
    start_utc: int | None = None
    end_utc: int | None = None


def read_arrays(conn, spans: list[MeterSpan]) -> list[tuple]:
    """Each span's intervals as ``(start, values, flags)`` (UTC epoch seconds, one float64
    array per quantity with NaN where there is no value, int16 flags), in the order of
    ``spans``, read with one query for them all (a few for hundreds of scattered ranges).

    No Python object per interval: a block is one row whose columns numpy reads whole
    (:mod:`auditor.store.blocks`). SQLite rows come through the driver's own cursor
    (SQLAlchemy's per-row processing skipped), and every column of every block read is joined
    and decoded in one piece. PostgreSQL concatenates each meter's blocks on the server
    (``string_agg`` ordered by ``block_start``), so the client gets one row per meter.
    Spans of one meter that overlap give their common intervals twice.
    """
    import numpy as np

    from auditor.store.blocks import BLOCK, Intervals, block_seconds, in_order, slots_kept

    if not spans:
        return []
    bounds: dict[int, tuple[int | None, int | None]] = {}
    for sp in spans:  # per meter, the loosest block bounds of its spans: each span is cut exactly below
        lo = None if sp.start_utc is None else int(sp.start_utc) - block_seconds(sp.interval_minutes)
        hi = None if sp.end_utc is None else int(sp.end_utc)
        if sp.meter_id in bounds:
            a, b = bounds[sp.meter_id]
            lo = None if a is None or lo is None else min(a, lo)
            hi = None if b is None or hi is None else max(b, hi)
        bounds[sp.meter_id] = (lo, hi)
    fetch = _pg_blocks if conn.dialect.name == "postgresql" else _sqlite_blocks
    by_meter = fetch(conn, bounds)
    out = []
    for sp in spans:
        found = by_meter.get(sp.meter_id)
        if found is None:
            out.append((np.empty(0, np.int64), {q: np.empty(0) for q in QUANTITIES}, np.empty(0, np.int16)))
            continue
        block_start, values, flags = found
        step = 60 * int(sp.interval_minutes)
        start = (block_start[:, None] + np.arange(BLOCK, dtype=np.int64) * step).ravel()
        keep = slots_kept(start, flags, sp.start_utc, sp.end_utc)
        if keep is not None:
            start, values = start[keep], {q: v[keep] for q, v in values.items()}
            flags = flags[keep] if flags is not None else None
        flags = flags if flags is not None else np.zeros(len(start), np.int16)
        iv = in_order(Intervals(start, values, flags, flags))
        out.append((iv.start, iv.values, iv.flags))
    return out


_SPANS_PER_QUERY = 200  # meters with bounds of their own per query (an OR of key ranges)


def _add_bounds(terms: list[str], params: list, lo, hi, mark: str) -> None:
    """Append the block-start bounds ``lo < block_start < hi`` (either may be None) to a WHERE."""
    if lo is not None:
        terms.append(f"block_start > {mark}")
        params.append(lo)
    if hi is not None:
        terms.append(f"block_start < {mark}")
        params.append(hi)


def _where(bounds: dict[int, tuple[int | None, int | None]], mark: str, any_array: bool) -> list[tuple[str, list]]:
    """WHERE clauses (with their parameters) selecting the blocks of ``bounds``: one list of
    meters when they share their bounds (a batch audit), else an OR of key ranges in chunks."""
    ids = sorted(bounds)
    shared = set(bounds.values())
    if len(shared) == 1:
        lo, hi = next(iter(shared))
        if any_array:
            where, params = ["meter_id = ANY(%s)"], [ids]
        else:
            where, params = [f"meter_id IN ({', '.join([mark] * len(ids))})"], list(ids)
        _add_bounds(where, params, lo, hi, mark)
        return [(" AND ".join(where), params)]
    out = []
    for k in range(0, len(ids), _SPANS_PER_QUERY):
        terms, params = [], []
        for mid in ids[k:k + _SPANS_PER_QUERY]:
            lo, hi = bounds[mid]
            term = [f"meter_id = {mark}"]
            params.append(mid)
            _add_bounds(term, params, lo, hi, mark)
            terms.append("(" + " AND ".join(term) + ")")
        out.append((" OR ".join(terms), params))
    return out


def _sqlite_blocks(conn, bounds: dict) -> dict:
    """``{meter_id: (block starts, flat values, flat flags or None)}``, one driver row per meter:
    SQLite concatenates each column of a meter's blocks (``group_concat`` with an empty
    separator keeps a blob's bytes as they are, NULs included, and ``CAST … AS BLOB`` hands
    them over unchanged). A NULL column (no value in the block, or no flag) is left out of the
    concatenation and counted, so a channel the meter does not record and the flags of
    unflagged blocks cost nothing; the starts of the blocks that have flags come as text, and a
    channel recorded in some blocks only is read again for those blocks. The block starts come
    in the same aggregate, so every column is in the same order whatever order SQLite fed the
    rows in; they are sorted if it was not theirs."""
    import numpy as np

    from auditor.store.blocks import BLOCK

    if not _utf8(conn):  # a UTF-16 file would re-encode the bytes as text: one row per block
        return _sqlite_block_rows(conn, bounds)
    cols = ["count(*)", "group_concat(block_start)"]
    for c in (*QUANTITIES, "flags"):
        cols += [f"count({c})", f"CAST(group_concat({c}, '') AS BLOB)"]
    cols.append("group_concat(CASE WHEN flags IS NOT NULL THEN block_start END)")
    found: list[tuple] = []
    cur = conn.connection.driver_connection.cursor()
    try:
        for where, params in _where(bounds, "?", False):
            cur.execute(f"SELECT meter_id, {', '.join(cols)} FROM reading_block WHERE {where} GROUP BY meter_id",
                        params)
            found += cur.fetchall()
    finally:
        cur.close()
    out = {}
    nq = len(QUANTITIES)
    for row in found:
        mid, nb, starts = int(row[0]), int(row[1]), row[2]
        block_start = np.fromstring(starts, dtype=np.int64, sep=",")
        if len(block_start) != nb:  # pragma: no cover - the aggregate itself went wrong
            raise ValueError(f"meter {mid}: {len(block_start)} block starts for {nb} blocks")
        order = None if nb < 2 or (np.diff(block_start) > 0).all() else np.argsort(block_start, kind="stable")
        if order is not None:
            block_start = block_start[order]
        values = {}
        for i, q in enumerate(QUANTITIES):
            n, data = int(row[3 + 2 * i]), row[4 + 2 * i]
            if n == nb:
                v = np.frombuffer(data, "<f8")
                if len(v) != BLOCK * nb:  # pragma: no cover
                    raise ValueError(f"meter {mid}: blocks of another size than {BLOCK} intervals")
                values[q] = v if order is None else v.reshape(nb, BLOCK)[order].ravel()
            elif n == 0:
                values[q] = np.full(nb * BLOCK, np.nan)
            else:  # recorded in some blocks only: those blocks again, placed by their starts
                values[q] = _partial_column(conn, mid, q, bounds[mid], block_start)
        n_flags, flag_data, flag_starts = int(row[3 + 2 * nq]), row[4 + 2 * nq], row[5 + 2 * nq]
        flags = None
        if n_flags:
            flags = np.zeros((nb, BLOCK), np.int16)
            at = np.searchsorted(block_start, np.fromstring(flag_starts, dtype=np.int64, sep=","))
            flags[at] = np.frombuffer(flag_data, "<i2").reshape(n_flags, BLOCK)
            flags = flags.ravel()
        out[mid] = (block_start, values, flags)
    return out


def _partial_column(conn, meter_id: int, column: str, bound: tuple, block_start):
    """One column of a meter's blocks where only some blocks hold it (NaN elsewhere)."""
    import numpy as np

    from auditor.store.blocks import BLOCK

    where, params = _where({meter_id: bound}, "?", False)[0]
    rows = conn.connection.driver_connection.execute(
        f"SELECT block_start, {column} FROM reading_block WHERE ({where}) AND {column} IS NOT NULL", params).fetchall()
    out = np.full((len(block_start), BLOCK), np.nan)
    if rows:
        at = np.searchsorted(block_start, np.array([r[0] for r in rows], dtype=np.int64))
        out[at] = np.frombuffer(b"".join(r[1] for r in rows), "<f8").reshape(len(rows), BLOCK)
    return out.ravel()


def _utf8(conn) -> bool:
    """Whether the SQLite file stores text as UTF-8 (asked once per engine)."""
    engine = conn.engine
    found = engine.__dict__.get("_auditor_utf8")
    if found is None:
        enc = conn.connection.driver_connection.execute("PRAGMA encoding").fetchone()[0]
        found = engine.__dict__["_auditor_utf8"] = str(enc).upper() == "UTF-8"
    return found


def _sqlite_block_rows(conn, bounds: dict) -> dict:
    """``{meter_id: (block starts, flat values, flat flags or None)}``, one driver row per block."""
    import numpy as np

    from auditor.store.blocks import BLOCK, decode

    rows: list[tuple] = []
    cur = conn.connection.driver_connection.cursor()
    try:
        for where, params in _where(bounds, "?", False):
            cur.execute(f"SELECT meter_id, block_start, {', '.join(QUANTITIES)}, flags FROM reading_block "
                        f"WHERE {where} ORDER BY meter_id, block_start", params)
            rows += cur.fetchall()
    finally:
        cur.close()
    if not rows:
        return {}
    cols = list(zip(*rows, strict=True))
    nq = len(QUANTITIES)
    meter = np.fromiter(cols[0], dtype=np.int64, count=len(rows))
    block_start = np.fromiter(cols[1], dtype=np.int64, count=len(rows))
    values, flags = decode(cols[2:2 + nq], cols[2 + nq])
    cut = np.flatnonzero(np.diff(meter)) + 1
    out = {}
    for a, b in zip(np.r_[0, cut].tolist(), np.r_[cut, len(rows)].tolist(), strict=True):
        out[int(meter[a])] = (block_start[a:b], {q: v[a * BLOCK:b * BLOCK] for q, v in values.items()},
                              flags[a * BLOCK:b * BLOCK] if flags is not None else None)
    return out


def _pg_blocks(conn, bounds: dict) -> dict:
    """``{meter_id: (block starts, flat values, flat flags or None)}``, one row per meter: the
    server concatenates each column of a meter's blocks in order (``string_agg(... ORDER BY
    block_start)``), NULL columns left out, and with each column the starts of the blocks that
    hold it (only looked at when some blocks lack it); numpy reads each column whole."""
    import numpy as np

    from auditor.store.blocks import BLOCK

    order = "ORDER BY block_start"
    cols = ["count(*)", f"string_agg(int8send(block_start), ''::bytea {order})"]
    for c in (*QUANTITIES, "flags"):
        cols += [f"count({c})", f"string_agg({c}, ''::bytea {order})",
                 f"string_agg(int8send(block_start), ''::bytea {order}) FILTER (WHERE {c} IS NOT NULL)"]
    found: list[tuple] = []
    raw = conn.connection.driver_connection
    with raw.cursor(binary=True) as cur:
        for where, params in _where(bounds, "%s", True):
            cur.execute(f"SELECT meter_id, {', '.join(cols)} FROM reading_block WHERE {where} GROUP BY meter_id",
                        params)
            found += cur.fetchall()
    out = {}
    for row in found:
        mid, nb = int(row[0]), int(row[1])
        block_start = np.frombuffer(row[2], ">i8").astype(np.int64)
        values = {}
        for k, q in enumerate(QUANTITIES):
            v = _pg_column(row[3 + 3 * k:6 + 3 * k], nb, block_start, "<f8", np.nan)
            values[q] = v if v is not None else np.full(nb * BLOCK, np.nan)
        flags = _pg_column(row[3 + 3 * len(QUANTITIES):], nb, block_start, "<i2", 0)
        if len(block_start) != nb or any(len(v) != BLOCK * nb for v in values.values()):  # pragma: no cover
            raise ValueError(f"meter {mid}: blocks of another size than {BLOCK} intervals")
        out[mid] = (block_start, values, flags)
    return out


def _pg_column(parts, nb: int, block_start, dtype: str, fill):
    """One column of a meter's blocks from ``(count, concatenated bytes, starts of the blocks
    holding it)``: None when no block holds it, ``fill`` in the blocks that do not."""
    import numpy as np

    from auditor.store.blocks import BLOCK

    n, data, starts = int(parts[0]), parts[1], parts[2]
    if n == nb:
        return np.frombuffer(data, dtype)
    if n == 0:
        return None
    out = np.full((nb, BLOCK), fill, dtype=dtype)
    out[np.searchsorted(block_start, np.frombuffer(starts, ">i8"))] = np.frombuffer(data, dtype).reshape(n, BLOCK)
    return out.ravel()


def ranges_long(conn, ranges: list[tuple[int, int, int, int]]):
    """Readings of ``(meter_id, interval minutes, start, end)`` ranges (UTC epoch seconds, end
    excluded) as ``(meter_id, start, kwh, kvarh_lag, kvarh_lead, flags)`` arrays, values
    without a multiplier (NaN: no value). Overlapping ranges of a meter give each interval once."""
    import numpy as np

    merged: dict[tuple[int, int], list[list[int]]] = {}
    for m, minutes, a, b in sorted(ranges, key=lambda r: (r[0], r[2])):
        runs = merged.setdefault((m, minutes), [])
        if runs and a <= runs[-1][1]:
            runs[-1][1] = max(runs[-1][1], b)
        else:
            runs.append([a, b])
    spans = [MeterSpan(m, minutes, a, b) for (m, minutes), runs in merged.items() for a, b in runs]
    got = read_arrays(conn, spans)
    if not got:
        e = np.empty(0)
        return np.empty(0, np.int64), np.empty(0, np.int64), e, e, e, np.empty(0, np.int16)
    meter = np.concatenate([np.full(len(s), sp.meter_id, np.int64) for sp, (s, _, _) in zip(spans, got, strict=True)])
    return (meter, np.concatenate([s for s, _, _ in got]),
            *[np.concatenate([v[q] for _, v, _ in got]) for q in ("kwh", "kvarh_lag", "kvarh_lead")],
            np.concatenate([f for _, _, f in got]))


def last_start_before(conn, meter_id: int, interval_minutes: int, before_utc: int) -> int | None:
    """The start of the meter's last interval before ``before_utc`` (None: there is none): one
    index seek for the block, then its slots."""
    mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    bound = int(before_utc)
    while True:
        row = conn.exec_driver_sql(
            f"SELECT block_start FROM reading_block WHERE meter_id = {mark} AND block_start < {mark} "
            "ORDER BY block_start DESC LIMIT 1", (int(meter_id), bound)).first()
        if row is None:
            return None
        got = read_arrays(conn, [MeterSpan(meter_id, interval_minutes, int(row[0]), int(before_utc))])[0][0]
        got = got[got < int(before_utc)]
        if len(got):
            return int(got.max())
        bound = int(row[0])  # the block held nothing before the time: look further back


def interval_frame_of(start, vals, flags, multiplier: float = 1.0) -> pd.DataFrame:
    """The interval frame from starts, values (an (n, 4) array or one array per quantity) and
    flags, as :func:`read_arrays` gives them: the meter's multiplier applied, an absent value
    as zero energy, ``estimated`` from the flags."""
    import numpy as np  # here, not at the top: listing meters does without them
    import pandas as pd

    columns = {}
    for i, q in enumerate(QUANTITIES):
        v = (vals[q] if isinstance(vals, dict) else vals[:, i]) * multiplier  # a new array
        v[np.isnan(v)] = 0.0  # an absent value counts as zero energy
        columns[q] = v
    columns["estimated"] = (flags & (FLAG_ESTIMATED | FLAG_FILLED)) != 0
    # epoch seconds to microseconds viewed as datetime64 (a third of to_datetime's time)
    micros = np.asarray(start, dtype=np.int64) * 1_000_000
    index = pd.DatetimeIndex(micros.view("M8[us]"), dtype="datetime64[us, UTC]", name="start")
    return pd.DataFrame(columns, index=index, copy=False)


def interval_frame(rows: list[tuple], multiplier: float = 1.0) -> pd.DataFrame:
    """The interval frame of rows ``(start, kwh, kvarh_lag, kvarh_lead, kwh_received, flags)``."""
    import numpy as np

    if rows:
        arr = np.array(rows, dtype="float64")
        return interval_frame_of(arr[:, 0].astype("int64"), arr[:, 1:5], arr[:, 5].astype("int64"), multiplier)
    return interval_frame_of(np.empty(0, "int64"), np.empty((0, 4)), np.empty(0, "int64"), multiplier)


def meter_summaries(session: Session) -> list[dict]:
    """Every meter by site with the span, count and coverage of its readings (from
    ``meter_data``: one row per meter, no scan of the readings)."""
    from auditor.store.meter_data import ensure_current, versions

    conn = session.connection()
    ensure_current(conn)
    by_meter = versions(conn)
    out = []
    for meter, site in session.execute(select(Meter, Site).join(Site).order_by(Site.name, Meter.external_id)):
        _, lo, hi, n = by_meter.get(meter.id, (None, None, None, 0))
        step = (meter.interval_minutes or 15) * 60
        expected = (hi - lo) // step + 1 if n else 0
        out.append({
            "meter": meter.external_id,
            "site": site.name,
            "timezone": site.timezone,
            "interval_minutes": meter.interval_minutes,
            "multiplier": meter.multiplier,
            "first": _iso(lo),
            "last": _iso(hi + step) if hi is not None else None,
            "intervals": int(n),
            "coverage": round(n / expected, 6) if expected else None,
        })
    return out


def _iso(epoch: int | None) -> str | None:
    if epoch is None:
        return None
    return datetime.fromtimestamp(int(epoch), UTC).isoformat().replace("+00:00", "Z")


def batches(session: Session, limit: int = 200) -> list[ImportBatch]:
    return list(session.scalars(select(ImportBatch).order_by(ImportBatch.id.desc()).limit(limit)))


def quality_flags(session: Session, meter: Meter) -> list[QualityFlag]:
    return list(session.scalars(select(QualityFlag).where(QualityFlag.meter_id == meter.id)
                                .order_by(QualityFlag.start)))
