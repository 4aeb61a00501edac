"""Alerts: run the monitoring checks over the store, keep their findings as alerts.

One evaluation (:func:`evaluate`), after every import and on demand:

1. **Day summaries.** ``monitor_day`` holds one summarised row per meter and local day
   (:mod:`auditor.monitoring.days`). Before the checks, the days of the window (70 days, more
   while an open alert needs its older baseline) that are missing, incomplete, summarised under
   another multiplier, or revised by an import since the last run are (re)computed from the
   readings — in the nightly case one new day per meter. The local day of ``as_of`` is
   summarised on the fly from the intervals before ``as_of`` and never stored.
2. **Checks.** :func:`auditor.monitoring.run_checks` on the panel, with each meter's own tariff
   (``meter_tariff``) where it has one; checks that need a tariff skip the others.
3. **Alerts.** A finding whose (meter, kind, cause) matches an open alert (new or seen) updates
   it and is not raised again; one that matches an alert resolved with the same start re-opens
   it (a cause flickering around its threshold is one cause); anything else is a new alert. An
   open alert whose kind was judged for its meter and found nothing is resolved (state
   ``resolved``, ``resolved_at`` = ``as_of``). An alert of a kind that could not be judged (too
   little data) stays as it is.

Each evaluation is recorded in ``monitor_run``.
"""
from __future__ import annotations

import functools
import json
import math
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime

import numpy as np
import pandas as pd
from sqlalchemy import bindparam, delete, func, select

from auditor.errors import AuditorError, UsageError
from auditor.monitoring import (
    KINDS,
    Anchor,
    CheckSettings,
    DaySummaries,
    Finding,
    TariffPlan,
    build_panel,
    run_checks,
    summarise_days,
)
from auditor.monitoring.panel import local_date
from auditor.services.meter_tariff import from_row
from auditor.store import Store
from auditor.store.models import (
    FLAG_ESTIMATED,
    FLAG_FILLED,
    Alert,
    ImportBatch,
    Meter,
    MeterTariff,
    MonitorDay,
    MonitorRun,
    ReadingRevision,
    Site,
)
from auditor.store.queries import last_start_before, now_utc, ranges_long
from auditor.tariffs import Tariff

__all__ = ["evaluate", "RunResult", "list_alerts", "mark_seen", "alert_counts", "last_run",
           "checks_after_import", "parse_as_of", "rebuild_day_summaries", "WINDOW_DAYS", "STATES"]

#: Days of summaries a run looks at: the open billing period and the one before (at most 62
#: days with the day of ``as_of``), and a four-week baseline before a step dated up to five
#: weeks back (64 days).
WINDOW_DAYS = 64
STATES = ("new", "seen", "resolved")
STEP_KINDS = ("correction_loss", "leading_at_light_load", "multiplier_change")


# --------------------------------------------------------------------------------------------
# one place for what the tariffs layer knows about each clause
# --------------------------------------------------------------------------------------------
def clause_facts(tariff: Tariff) -> tuple[tuple[dict, ...], tuple[str, ...]]:
    """The PF threshold of each clause that has one and the keys of the clauses charging leading
    energy, as the tariffs package answers them (:mod:`auditor.tariffs.facts`)."""
    from auditor.tariffs.facts import leading_keys, threshold_pfs

    return tuple(threshold_pfs(tariff)), tuple(leading_keys(tariff))


_plans: dict[tuple, TariffPlan] = {}


def _plan(tariff: Tariff, digest: str, billing_day: int | None) -> TariffPlan:
    key = (digest, billing_day)
    if key not in _plans:
        thresholds, leading = clause_facts(tariff)
        _plans[key] = TariffPlan(tariff, billing_day, thresholds, leading)
    return _plans[key]


# --------------------------------------------------------------------------------------------
# time
# --------------------------------------------------------------------------------------------
def parse_as_of(text: str | datetime | None) -> pd.Timestamp:
    """``as_of`` as a UTC timestamp: now when None; an ISO date or date-time, UTC unless it
    carries an offset."""
    if text is None:
        return pd.Timestamp(now_utc()).tz_convert("UTC")
    if isinstance(text, datetime):
        ts = pd.Timestamp(text)
    else:
        try:
            ts = pd.Timestamp(str(text).strip())
        except (ValueError, TypeError):
            raise UsageError(f"the time of the checks {text!r} is not an ISO date or date-time (such as "
                             "2025-09-29T06:00+02:00)", cli_hint="--as-of") from None
        if ts is pd.NaT:
            raise UsageError(f"the time of the checks {text!r} is not an ISO date or date-time", cli_hint="--as-of")
    if ts.tzinfo is None:
        ts = ts.tz_localize("UTC")
    return ts.tz_convert("UTC")


def _aware(dt: datetime | None) -> datetime | None:
    if dt is None:
        return None
    return dt if dt.tzinfo is not None else dt.replace(tzinfo=UTC)


def _epoch(ts) -> int:
    return int(pd.Timestamp(ts).timestamp())


# --------------------------------------------------------------------------------------------
# meters and readings
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _MeterRow:
    id: int
    name: str
    tz: str
    minutes: int
    multiplier: float


def _meters(store: Store, names: Iterable[str] | None) -> list[_MeterRow]:
    with store.session() as s:
        q = select(Meter.id, Meter.external_id, Site.timezone, Meter.interval_minutes, Meter.multiplier).join(Site)
        if names is not None:
            names = sorted(set(names))
            if not names:
                return []
            q = q.where(Meter.external_id.in_(names))
        rows = [_MeterRow(i, n, tz, int(mi or 15), float(mu)) for i, n, tz, mi, mu in s.execute(q.order_by(Meter.external_id))]
    if names is not None and len(rows) < len(names):
        from auditor.errors import NotFoundError

        missing = sorted(set(names) - {r.name for r in rows})
        raise NotFoundError(f"no meter {missing[0]!r}")
    return rows


def _placeholder(conn) -> str:
    return "?" if conn.dialect.paramstyle == "qmark" else "%s"


def _read_ranges(store: Store, meters: list[_MeterRow], ranges: list[tuple[int, int, int]]) -> pd.DataFrame:
    """Readings of (meter position, start epoch, end epoch) ranges as a long frame with meter
    codes = positions in ``meters``, multiplier applied."""
    if not ranges:
        return pd.DataFrame({"meter": [], "start": [], "kwh": [], "kvarh_lag": [], "kvarh_lead": [], "estimated": []})
    by_id = {m.id: i for i, m in enumerate(meters)}
    with store.session() as s:
        mid, start, kwh, lag, lead, flags = ranges_long(
            s.connection(), [(meters[i].id, meters[i].minutes, int(a), int(b)) for i, a, b in ranges])
    if not len(start):
        return _read_ranges(store, meters, [])
    code = pd.Series(mid).map(by_id).to_numpy(dtype=np.int64)
    mult = np.array([m.multiplier for m in meters])[code]
    return pd.DataFrame({"meter": code, "start": start, "kwh": np.nan_to_num(kwh) * mult,
                         "kvarh_lag": np.nan_to_num(lag) * mult, "kvarh_lead": np.nan_to_num(lead) * mult,
                         "estimated": (flags & (FLAG_ESTIMATED | FLAG_FILLED)) != 0})


@functools.lru_cache(maxsize=4096)
def _midnight_of(day: str, tz: str) -> int:
    return _epoch(pd.Timestamp(day).tz_localize(tz, ambiguous=True, nonexistent="shift_forward"))


def _midnight(day: np.datetime64, tz: str) -> int:
    """UTC epoch seconds of local midnight starting ``day``."""
    return _midnight_of(str(np.datetime64(day, "D")), tz)


# --------------------------------------------------------------------------------------------
# day summaries in the store
# --------------------------------------------------------------------------------------------
def _load_days(store: Store, meters: list[_MeterRow], first: date) -> tuple[DaySummaries, np.ndarray]:
    """Stored day summaries of ``meters`` from local date ``first`` on, and the multiplier each
    row was made with."""
    if not meters:
        return DaySummaries.empty(), np.zeros(0)
    by_id = {m.id: i for i, m in enumerate(meters)}
    with store.session() as s:
        conn = s.connection()
        mark = _placeholder(conn)
        ids = ", ".join([mark] * len(meters))
        cur = conn.connection.driver_connection.cursor()
        try:
            cur.execute(f"SELECT meter_id, multiplier, summary FROM monitor_day WHERE meter_id IN ({ids}) "
                        f"AND day >= {mark}",
                        (*[m.id for m in meters], first.isoformat() if conn.dialect.name == "sqlite" else first))
            rows = cur.fetchall()
        finally:
            cur.close()
    if not rows:
        return DaySummaries.empty(), np.zeros(0)
    ids_, mult, blobs = zip(*rows, strict=True)
    meter = pd.Series(ids_).map(by_id).to_numpy(dtype=np.int64)
    return DaySummaries.unpack(meter, b"".join(blobs)), np.asarray(mult, dtype=np.float64)


def _store_days(store: Store, meters: list[_MeterRow], refreshed: list[tuple[int, date, date]],
                fresh: DaySummaries) -> None:
    """Replace the summaries of the refreshed day ranges (days without data end with no row)."""
    packed = fresh.packed()
    rows = [{"meter_id": meters[int(fresh.meter[k])].id, "day": pd.Timestamp(fresh.day[k]).date(),
             "multiplier": meters[int(fresh.meter[k])].multiplier,
             "intervals": int(fresh.columns["intervals"][k]), "expected": int(fresh.columns["expected"][k]),
             "summary": packed[k].tobytes()} for k in range(len(fresh))]
    with store.session() as s:
        t = MonitorDay.__table__
        conn = s.connection()
        conn.execute(t.delete().where(t.c.meter_id == bindparam("m"), t.c.day >= bindparam("a"), t.c.day < bindparam("b")),
                     [{"m": meters[i].id, "a": a, "b": b} for i, a, b in refreshed])
        if rows:
            conn.execute(t.insert(), rows)


def _days_to_refresh(store: Store, meters: list[_MeterRow], stored: DaySummaries, stored_mult: np.ndarray,
                     first_days: np.ndarray, n_days: int, watermark: int, window_start: int) -> np.ndarray:
    """(M, n_days - 1) mask of the complete local days of the window to (re)summarise: missing,
    incomplete, made under another multiplier, or revised by an import since the last run."""
    M, D = len(meters), n_days - 1
    have = np.zeros((M, D), dtype=bool)
    stale = np.ones((M, D), dtype=bool)
    if len(stored):
        col = (stored.day - first_days[stored.meter]).astype(np.int64)
        ok = (col >= 0) & (col < D)
        m, c = stored.meter[ok], col[ok]
        current = np.array([x.multiplier for x in meters])[m]
        have[m, c] = True
        stale[m, c] = ((stored.columns["intervals"][ok] < stored.columns["expected"][ok])
                       | ~np.isclose(stored_mult[ok], current))
    refresh = ~have | stale
    with store.session() as s:
        ids = {x.id: i for i, x in enumerate(meters)}
        q = (select(ReadingRevision.meter_id, ReadingRevision.start)
             .where(ReadingRevision.superseded_by > watermark, ReadingRevision.start >= window_start).distinct())
        for mid, start in s.execute(q):
            i = ids.get(mid)
            if i is not None:
                c = int((local_date(pd.Timestamp(int(start), unit="s", tz="UTC"), meters[i].tz) - first_days[i])
                        .astype(np.int64))
                if 0 <= c < D:
                    refresh[i, c] = True
    return refresh


def _ranges(mask_row: np.ndarray) -> list[tuple[int, int]]:
    """Runs of True in a boolean row as [start, end) column pairs."""
    padded = np.concatenate([[False], mask_row, [False]])
    edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
    return list(zip(edges[::2].tolist(), edges[1::2].tolist(), strict=True))


def rebuild_day_summaries(store: Store, meters: Iterable[str] | None = None) -> int:
    """Forget every stored day summary (of ``meters``); the next run recomputes what it needs.
    Returns the rows removed."""
    rows = _meters(store, meters)
    with store.session() as s:
        q = delete(MonitorDay)
        if meters is not None:
            q = q.where(MonitorDay.meter_id.in_([m.id for m in rows]))
        return s.execute(q).rowcount or 0


# --------------------------------------------------------------------------------------------
# evaluation
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RunResult:
    run_id: int | None
    as_of: pd.Timestamp
    meters: int
    raised: list[dict]
    updated: int
    resolved: list[dict]
    open: int
    seconds: float

    def to_dict(self) -> dict:
        return {"run_id": self.run_id, "as_of": self.as_of.isoformat(), "meters": self.meters,
                "raised": self.raised, "updated": self.updated, "resolved": self.resolved,
                "open": self.open, "seconds": round(self.seconds, 3)}

    def summary(self) -> str:
        return (f"checked {self.meters} meter{'s' if self.meters != 1 else ''} as of "
                f"{self.as_of.strftime('%Y-%m-%d %H:%M')} UTC: {len(self.raised)} new alert"
                f"{'s' if len(self.raised) != 1 else ''}, {len(self.resolved)} resolved, {self.open} open")


def evaluate(store: Store, as_of=None, meters: Iterable[str] | None = None,
             settings: CheckSettings | None = None, trigger: str = "command") -> RunResult:
    """Run every check for ``meters`` (default: all) as of ``as_of`` (default: now) and update
    the alerts (see the module docstring)."""
    started = time.perf_counter()
    started_at = now_utc()
    s = settings or CheckSettings()
    as_of = parse_as_of(as_of)
    rows = _meters(store, meters)
    with store.session() as sess:
        watermark = int(sess.scalar(select(func.max(ImportBatch.id))) or 0)
        last_mark = sess.scalar(select(MonitorRun.batch_watermark).order_by(MonitorRun.id.desc()).limit(1))
        open_rows = list(sess.execute(
            select(Alert.meter_id, Alert.kind, Alert.since, Alert.figures)
            .where(Alert.state.in_(("new", "seen")), Alert.kind.in_(STEP_KINDS))))
        tariffs = {mid: row for mid, row in sess.execute(
            select(MeterTariff.meter_id, MeterTariff).where(MeterTariff.meter_id.in_([r.id for r in rows])))} \
            if rows else {}
    last_mark = int(last_mark) if last_mark is not None else 0
    if not rows:
        return _record(store, as_of, started_at, started, trigger, 0, [], 0, [], watermark)

    pos = {r.id: i for i, r in enumerate(rows)}
    local_today = {tz: local_date(as_of, tz) for tz in {r.tz for r in rows}}
    as_of_days = np.array([local_today[r.tz] for r in rows], dtype="datetime64[D]")
    anchors: list[Anchor] = []
    n_days = WINDOW_DAYS
    for mid, kind, since, figures in open_rows:
        if mid not in pos or since is None:
            continue
        i = pos[mid]
        since_day = local_date(pd.Timestamp(_aware(since)), rows[i].tz)
        anchors.append(Anchor(i, kind, since_day, json.loads(figures or "{}")))
        need = int((as_of_days[i] - since_day).astype(np.int64)) + s.baseline_days + 2
        n_days = max(n_days, min(need, 400))
    first_days = as_of_days - np.timedelta64(n_days - 1, "D")

    # 1. day summaries: refresh what changed, then read the window
    first = pd.Timestamp(first_days.min()).date()
    stored, stored_mult = _load_days(store, rows, first)
    window_start = min(_midnight(d, r.tz) for d, r in zip(first_days, rows, strict=True))
    refresh = _days_to_refresh(store, rows, stored, stored_mult, first_days, n_days, last_mark, window_start)
    day_ranges, read = [], []
    for i in np.flatnonzero(refresh.any(axis=1)):
        r = rows[i]
        for a, b in _ranges(refresh[i]):
            da, db = first_days[i] + np.timedelta64(a, "D"), first_days[i] + np.timedelta64(b, "D")
            day_ranges.append((int(i), pd.Timestamp(da).date(), pd.Timestamp(db).date()))
            read.append((int(i), _midnight(da, r.tz), _midnight(db, r.tz)))
    # the day of as_of, up to as_of: summarised on the fly, never stored
    today_ranges = [(i, _midnight(as_of_days[i], r.tz), _epoch(as_of)) for i, r in enumerate(rows)]
    frame = _read_ranges(store, rows, read + today_ranges)
    summaries = summarise_days(frame, [r.tz for r in rows], [r.minutes for r in rows])
    is_today = summaries.day == as_of_days[summaries.meter]
    if day_ranges:
        _store_days(store, rows, day_ranges, summaries.take(~is_today))
    keep = np.ones(len(stored), dtype=bool)
    if len(stored):  # a refreshed day that now has no data must not keep its old summary
        col = (stored.day - first_days[stored.meter]).astype(np.int64)
        inside = (col >= 0) & (col < n_days - 1)
        keep[inside] = ~refresh[stored.meter[inside], col[inside]]
    with_data = np.zeros(len(rows), dtype=bool)
    with_data[stored.meter[keep]] = True
    with_data[summaries.meter] = True
    last_known = _last_before(store, rows, as_of, np.flatnonzero(~with_data))
    panel = build_panel([(stored, keep), summaries], [r.name for r in rows], [r.tz for r in rows],
                        [r.minutes for r in rows], as_of, n_days, last_start=last_known)

    # 2. checks
    plans = []
    for r in rows:
        t = tariffs.get(r.id)
        if t is None:
            plans.append(None)
            continue
        own = from_row(r.name, t)
        plans.append(_plan(own.tariff, own.sha256, own.billing_day))
    evaluations = run_checks(panel, plans, s, anchors)

    # 3. alerts
    judged = {(rows[i].id, e.kind) for e in evaluations for i in np.flatnonzero(e.evaluated)}
    by_name = {r.name: i for i, r in enumerate(rows)}
    findings = [(by_name[f.meter], f) for e in evaluations for f in e.findings]
    raised, updated, resolved = _reconcile(store, rows, findings, judged, as_of)
    return _record(store, as_of, started_at, started, trigger, len(rows), raised, updated, resolved, watermark)


def _last_before(store: Store, rows: list[_MeterRow], as_of: pd.Timestamp, which: Sequence[int]) -> list[int]:
    """The last interval start before ``as_of`` of the meters at positions ``which`` (-1 where
    there is none), for meters with no data in the window: one index seek each."""
    out = [-1] * len(rows)
    if not len(which):
        return out
    t = _epoch(as_of)
    with store.session() as s:
        for i in which:
            got = last_start_before(s.connection(), rows[i].id, rows[i].minutes, t)
            out[i] = int(got) if got is not None else -1
    return out


def _since_equal(a: datetime | None, b: pd.Timestamp | None) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(_aware(a).timestamp() - b.timestamp()) < 1


def _reconcile(store: Store, rows: list[_MeterRow], findings: list[tuple[int, Finding]],
               judged: set[tuple[int, str]], as_of: pd.Timestamp):
    now = now_utc()
    as_of_dt = as_of.to_pydatetime()
    raised, resolved = [], []
    updated = 0
    ids = [r.id for r in rows]
    with store.session() as s:
        existing = list(s.scalars(select(Alert).where(Alert.meter_id.in_(ids))))
        open_by_key = {(a.meter_id, a.kind, a.cause): a for a in existing if a.state in ("new", "seen")}
        closed = [a for a in existing if a.state == "resolved"]
        matched: set[int] = set()
        for i, f in findings:
            mid = rows[i].id
            key = (mid, f.kind, f.cause)
            alert = open_by_key.get(key)
            if alert is None:
                alert = next((a for a in closed if (a.meter_id, a.kind, a.cause) == key and _since_equal(a.since, f.since)),
                             None)
                if alert is not None:  # the same cause back after a pause: re-open, do not raise again
                    alert.state = "seen" if alert.seen_at else "new"
                    alert.resolved_at = None
                    alert.resolved_notified = False
                    open_by_key[key] = alert
            if alert is not None:
                matched.add(alert.id)
                alert.severity = f.severity
                alert.money_per_month = f.money_per_month
                alert.currency = f.currency
                alert.message = f.message
                alert.figures = json.dumps(f.figures, default=str)
                alert.as_of = as_of_dt
                alert.updated_at = now
                updated += 1
                continue
            alert = Alert(meter_id=mid, kind=f.kind, cause=f.cause,
                          since=f.since.to_pydatetime() if f.since is not None else None, severity=f.severity,
                          money_per_month=f.money_per_month, currency=f.currency, message=f.message,
                          figures=json.dumps(f.figures, default=str), state="new", raised_at=now, updated_at=now,
                          as_of=as_of_dt, notified=False, resolved_notified=False)
            s.add(alert)
            s.flush()
            matched.add(alert.id)
            raised.append(alert)
        for alert in open_by_key.values():
            if alert.id in matched or (alert.meter_id, alert.kind) not in judged:
                continue
            alert.state = "resolved"
            alert.resolved_at = as_of_dt
            alert.updated_at = now
            resolved.append(alert)
        names = {r.id: r for r in rows}
        return ([_alert_dict(a, names[a.meter_id].name, names[a.meter_id].tz) for a in raised], updated,
                [_alert_dict(a, names[a.meter_id].name, names[a.meter_id].tz) for a in resolved])


def _record(store, as_of, started_at, started, trigger, n, raised, updated, resolved, watermark) -> RunResult:
    seconds = time.perf_counter() - started
    with store.session() as s:
        run = MonitorRun(as_of=as_of.to_pydatetime(), started_at=started_at, seconds=seconds, trigger=trigger,
                         meters=n, raised=len(raised), updated=updated, resolved=len(resolved),
                         batch_watermark=watermark)
        s.add(run)
        s.flush()
        run_id = run.id
        open_count = s.scalar(select(func.count()).select_from(Alert).where(Alert.state.in_(("new", "seen"))))
    return RunResult(run_id, as_of, n, raised, updated, resolved, int(open_count or 0), seconds)


# --------------------------------------------------------------------------------------------
# reading and marking alerts
# --------------------------------------------------------------------------------------------
def _iso_local(dt: datetime | None, tz: str) -> str | None:
    if dt is None:
        return None
    return pd.Timestamp(_aware(dt)).tz_convert(tz).isoformat()


def _alert_dict(a: Alert, meter: str, tz: str) -> dict:
    """The JSON shape of an alert: the keys every consumer relies on first, then the rest."""
    money = a.money_per_month
    return {
        "meter": meter,
        "kind": a.kind,
        "since": _iso_local(a.since, tz),
        "severity": a.severity,
        "money_per_month": None if money is None or not math.isfinite(money) else round(float(money), 2),
        "message": a.message,
        "state": a.state,
        "id": a.id,
        "currency": a.currency,
        "cause": a.cause,
        "figures": json.loads(a.figures or "{}"),
        "raised_at": _iso_local(a.raised_at, "UTC"),
        "updated_at": _iso_local(a.updated_at, "UTC"),
        "resolved_at": _iso_local(a.resolved_at, tz),
        "as_of": _iso_local(a.as_of, tz),
        "timezone": tz,
    }


def list_alerts(store: Store, *, states: Sequence[str] | None = ("new", "seen"), meter: str | None = None,
                since: date | None = None, kind: str | None = None, limit: int | None = None) -> list[dict]:
    """Alerts, newest start first. ``states`` None means every state; ``since`` keeps alerts
    whose cause began on or after that (UTC) date; ``kind`` one of :data:`KINDS`."""
    if kind is not None and kind not in KINDS:
        raise UsageError(f"unknown alert kind {kind!r}; kinds: {', '.join(KINDS)}")
    if states is not None:
        bad = [x for x in states if x not in STATES]
        if bad:
            raise UsageError(f"unknown alert state {bad[0]!r}; states: {', '.join(STATES)}")
    with store.session() as s:
        q = select(Alert, Meter.external_id, Site.timezone).join(Meter, Alert.meter_id == Meter.id).join(Site)
        if states is not None:
            q = q.where(Alert.state.in_(list(states)))
        if meter is not None:
            from auditor.store.queries import get_meter

            q = q.where(Alert.meter_id == get_meter(s, meter).id)
        if kind is not None:
            q = q.where(Alert.kind == kind)
        if since is not None:
            q = q.where(Alert.since >= datetime(since.year, since.month, since.day, tzinfo=UTC))
        q = q.order_by(Alert.since.desc(), Alert.id.desc())
        if limit:
            q = q.limit(limit)
        return [_alert_dict(a, m, tz) for a, m, tz in s.execute(q)]


def mark_seen(store: Store, ids: Sequence[int] = (), *, meter: str | None = None, every: bool = False) -> int:
    """Mark new alerts seen: those with ``ids``, or every new one (of ``meter``). Returns how many
    changed; an id that does not exist is a usage error."""
    if not ids and not every and meter is None:
        raise UsageError("say which alerts: their ids, a meter, or all of them", cli_hint="ids, --meter M or --all")
    with store.session() as s:
        q = select(Alert).where(Alert.state == "new")
        if ids:
            known = set(s.scalars(select(Alert.id).where(Alert.id.in_(list(ids)))))
            missing = [i for i in ids if i not in known]
            if missing:
                raise UsageError(f"no alert {missing[0]}", cli_hint="auditor alerts --json lists them with their ids")
            q = q.where(Alert.id.in_(list(ids)))
        if meter is not None:
            from auditor.store.queries import get_meter

            q = q.where(Alert.meter_id == get_meter(s, meter).id)
        n = 0
        now = now_utc()
        for a in s.scalars(q):
            a.state = "seen"
            a.seen_at = now
            n += 1
        return n


def alert_counts(store: Store) -> dict:
    """Open alerts by state and by meter, for badges."""
    with store.session() as s:
        rows = s.execute(select(Meter.external_id, Alert.state, Alert.severity, func.count())
                         .join(Meter, Alert.meter_id == Meter.id)
                         .where(Alert.state.in_(("new", "seen")))
                         .group_by(Meter.external_id, Alert.state, Alert.severity)).all()
    out = {"new": 0, "seen": 0, "by_meter": {}}
    for meter, state, severity, n in rows:
        out[state] += n
        m = out["by_meter"].setdefault(meter, {"new": 0, "seen": 0, "critical": 0})
        m[state] += n
        if severity == "critical":
            m["critical"] += n
    return out


def last_run(store: Store) -> dict | None:
    with store.session() as s:
        r = s.scalars(select(MonitorRun).order_by(MonitorRun.id.desc()).limit(1)).first()
        if r is None:
            return None
        return {"id": r.id, "as_of": _iso_local(r.as_of, "UTC"), "started_at": _iso_local(r.started_at, "UTC"),
                "seconds": round(r.seconds, 3), "trigger": r.trigger, "meters": r.meters, "raised": r.raised,
                "resolved": r.resolved}


# --------------------------------------------------------------------------------------------
# the hook after imports
# --------------------------------------------------------------------------------------------
def checks_after_import(store: Store, files: Sequence[dict], as_of=None,
                        settings: CheckSettings | None = None) -> dict | None:
    """Run the checks for the meters an import touched (``files``: the import's outcome dicts).
    Returns the run's summary, ``{"error": message}`` when the checks could not run (the import
    itself stands), or None when nothing was imported."""
    meters = sorted({m for f in files if f.get("status") in ("imported", "revised") for m in f.get("meters") or []})
    if not meters:
        return None
    try:
        if settings is None:
            from auditor.services.notify import load_settings

            settings = load_settings().checks
        result = evaluate(store, as_of, meters, settings, trigger="import")
    except AuditorError as exc:
        return {"error": exc.message}
    return {"meters": result.meters, "raised": len(result.raised), "resolved": len(result.resolved),
            "open": result.open, "seconds": round(result.seconds, 3), "summary": result.summary()}

