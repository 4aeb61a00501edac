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

import json
import math
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime

import numpy as np
import pandas as pd
from sqlalchemy import delete, func, insert, select

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
from auditor.monitoring.days import COUNTS, SCALARS
from auditor.monitoring.panel import local_date
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
from auditor.store.queries import now_utc
from auditor.tariffs import Tariff

__all__ = ["evaluate", "RunResult", "list_alerts", "mark_seen", "alert_counts", "open_alerts_of",
           "checks_after_import", "parse_as_of", "rebuild_day_summaries", "WINDOW_DAYS", "STATES"]

#: Days of summaries a run looks at: the open billing period (up to 31 days), the one before
#: (up to 31) and some slack; the four-week baselines fit inside.
WINDOW_DAYS = 70
STATES = ("new", "seen", "resolved")
STEP_KINDS = ("correction_loss", "leading_at_light_load", "multiplier_change")
_RANGE_CHUNK = 200  # (meter, start, end) ranges per reading query


# --------------------------------------------------------------------------------------------
# one place for what the tariffs layer knows about each clause
# --------------------------------------------------------------------------------------------
def clause_facts(tariff: Tariff) -> tuple[tuple[dict, ...], tuple[str, ...]]:
    """The PF threshold of each lagging clause and the keys of the clauses charging leading
    energy. The single call into the tariffs layer's knowledge of clauses, so that it can be
    switched to the tariffs package's own function in one place."""
    from auditor.services.portfolio import tariff_threshold_pf

    thresholds = tuple(tariff_threshold_pf(tariff))
    leading = tuple(Tariff.key_of(m) for m in tariff.reactive if m.kind == "leading_kvarh")
    return thresholds, leading


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
            raise UsageError(f"--as-of {text!r} is not an ISO date or date-time (such as 2025-09-29T06:00+02:00)") from None
        if ts is pd.NaT:
            raise UsageError(f"--as-of {text!r} is not an ISO date or date-time")
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
    rows: list[tuple] = []
    with store.session() as s:
        conn = s.connection()
        mark = _placeholder(conn)
        cur = conn.connection.driver_connection.cursor()
        try:
            for k in range(0, len(ranges), _RANGE_CHUNK):
                part = ranges[k:k + _RANGE_CHUNK]
                where = " OR ".join(f"(meter_id = {mark} AND start >= {mark} AND start < {mark})" for _ in part)
                params = tuple(v for i, a, b in part for v in (meters[i].id, int(a), int(b)))
                cur.execute("SELECT meter_id, start, COALESCE(kwh, 0), COALESCE(kvarh_lag, 0), "
                            f"COALESCE(kvarh_lead, 0), flags FROM reading WHERE {where}", params)
                rows.extend(cur.fetchall())
        finally:
            cur.close()
    if not rows:
        return _read_ranges(store, meters, [])
    arr = np.array(rows, dtype=np.float64)
    code = pd.Series(arr[:, 0].astype(np.int64)).map(by_id).to_numpy(dtype=np.int64)
    mult = np.array([m.multiplier for m in meters])[code]
    flags = arr[:, 5].astype(np.int64)
    return pd.DataFrame({"meter": code, "start": arr[:, 1].astype(np.int64), "kwh": arr[:, 2] * mult,
                         "kvarh_lag": arr[:, 3] * mult, "kvarh_lead": arr[:, 4] * mult,
                         "estimated": (flags & (FLAG_ESTIMATED | FLAG_FILLED)) != 0})


def _midnight(day: np.datetime64, tz: str) -> int:
    return _epoch(pd.Timestamp(day).tz_localize(tz, ambiguous=True, nonexistent="shift_forward"))


def _day_ranges(days: list[np.datetime64], tz: str) -> list[tuple[int, int]]:
    """Consecutive local days merged into UTC epoch ranges [local midnight, next midnight)."""
    out = []
    days = sorted(days)
    i = 0
    while i < len(days):
        j = i
        while j + 1 < len(days) and days[j + 1] == days[j] + np.timedelta64(1, "D"):
            j += 1
        out.append((_midnight(days[i], tz), _midnight(days[j] + np.timedelta64(1, "D"), tz)))
        i = j + 1
    return out


# --------------------------------------------------------------------------------------------
# day summaries in the store
# --------------------------------------------------------------------------------------------
_DAY_COLUMNS = ("multiplier", *COUNTS, *SCALARS, "first_start", "last_start", "hourly")


def _load_days(store: Store, meters: list[_MeterRow], first: date) -> DaySummaries:
    if not meters:
        return DaySummaries.empty()
    by_id = {m.id: i for i, m in enumerate(meters)}
    with store.session() as s:
        conn = s.connection()
        mark = _placeholder(conn)
        cols = ", ".join(("meter_id", "day", *_DAY_COLUMNS))
        ids = ", ".join([mark] * len(meters))
        cur = conn.connection.driver_connection.cursor()
        try:
            cur.execute(f"SELECT {cols} FROM monitor_day WHERE meter_id IN ({ids}) AND day >= {mark}",
                        (*[m.id for m in meters], first.isoformat() if conn.dialect.name == "sqlite" else first))
            rows = cur.fetchall()
        finally:
            cur.close()
    if not rows:
        return DaySummaries.empty()
    n = len(rows)
    meter = np.fromiter((by_id[r[0]] for r in rows), dtype=np.int64, count=n)
    day = np.array([r[1] if isinstance(r[1], str) else r[1].isoformat() for r in rows], dtype="datetime64[D]")
    columns = {}
    for k, name in enumerate(_DAY_COLUMNS[:-1], start=2):
        dtype = np.int64 if name in COUNTS or name in ("first_start", "last_start") else np.float64
        columns[name] = np.fromiter((r[k] for r in rows), dtype=dtype, count=n)
    hourly = np.frombuffer(b"".join(bytes(r[-1]) for r in rows), dtype="<f8").reshape(n, 3, 24)
    mult = columns.pop("multiplier")
    out = DaySummaries(meter, day, columns, hourly.copy())
    out.columns["multiplier"] = mult  # kept beside for the refresh rule
    return out


def _store_days(store: Store, meters: list[_MeterRow], refreshed: dict[int, list[np.datetime64]],
                summaries: DaySummaries) -> None:
    """Replace the summaries of the refreshed days (days without data end with no row)."""
    deletes = []
    for i, days in refreshed.items():
        for a, b in _merge_days(days):
            deletes.append((meters[i].id, a, b))
    rows = []
    for k in range(len(summaries)):
        m = meters[int(summaries.meter[k])]
        row = {"meter_id": m.id, "day": pd.Timestamp(summaries.day[k]).date(), "multiplier": m.multiplier,
               "hourly": np.ascontiguousarray(summaries.hourly[k], dtype="<f8").tobytes()}
        for name in (*COUNTS, *SCALARS, "first_start", "last_start"):
            v = summaries.columns[name][k]
            row[name] = int(v) if name in COUNTS or name in ("first_start", "last_start") else float(v)
        rows.append(row)
    with store.session() as s:
        for mid, a, b in deletes:
            s.execute(delete(MonitorDay).where(MonitorDay.meter_id == mid, MonitorDay.day >= a, MonitorDay.day < b))
        if rows:
            s.execute(insert(MonitorDay), rows)


def _merge_days(days: list[np.datetime64]) -> list[tuple[date, date]]:
    out = []
    days = sorted(days)
    i = 0
    while i < len(days):
        j = i
        while j + 1 < len(days) and days[j + 1] == days[j] + np.timedelta64(1, "D"):
            j += 1
        out.append((pd.Timestamp(days[i]).date(), pd.Timestamp(days[j] + np.timedelta64(1, "D")).date()))
        i = j + 1
    return out


def _days_to_refresh(store: Store, meters: list[_MeterRow], stored: DaySummaries, first_days: np.ndarray,
                     last_days: np.ndarray, watermark: int, window_start: int) -> dict[int, list[np.datetime64]]:
    """Per meter position: the complete local days of the window to (re)summarise."""
    have: dict[tuple[int, np.datetime64], tuple[int, int, float]] = {}
    if len(stored):
        for k in range(len(stored)):
            have[(int(stored.meter[k]), stored.day[k])] = (int(stored.columns["intervals"][k]),
                                                           int(stored.columns["expected"][k]),
                                                           float(stored.columns["multiplier"][k]))
    revised: set[tuple[int, np.datetime64]] = set()
    with store.session() as s:
        ids = {m.id: i for i, m in enumerate(meters)}
        q = (select(ReadingRevision.meter_id, ReadingRevision.start)
             .where(ReadingRevision.superseded_by > watermark, ReadingRevision.start >= window_start))
        for mid, start in s.execute(q):
            if mid in ids:
                i = ids[mid]
                revised.add((i, local_date(pd.Timestamp(int(start), unit="s", tz="UTC"), meters[i].tz)))
    out: dict[int, list[np.datetime64]] = {}
    for i, m in enumerate(meters):
        days = []
        d = first_days[i]
        while d < last_days[i]:
            row = have.get((i, d))
            if row is None or row[0] < row[1] or not math.isclose(row[2], m.multiplier) or (i, d) in revised:
                days.append(d)
            d = d + np.timedelta64(1, "D")
        if days:
            out[i] = days
    return out


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
    as_of_days = np.array([local_date(as_of, r.tz) for r in rows], dtype="datetime64[D]")
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
    stored = _load_days(store, rows, pd.Timestamp(first_days.min()).date())
    window_start = min(_midnight(d, r.tz) for d, r in zip(first_days, rows, strict=True))
    refresh = _days_to_refresh(store, rows, stored, first_days, as_of_days, last_mark, window_start)
    if refresh:
        ranges = [(i, a, b) for i, days in refresh.items() for a, b in _day_ranges(days, rows[i].tz)]
        fresh = summarise_days(_read_ranges(store, rows, ranges), [r.tz for r in rows], [r.minutes for r in rows])
        _store_days(store, rows, refresh, fresh)
        stored = _load_days(store, rows, pd.Timestamp(first_days.min()).date())
    today = summarise_days(
        _read_ranges(store, rows, [(i, _midnight(as_of_days[i], r.tz), _epoch(as_of)) for i, r in enumerate(rows)]),
        [r.tz for r in rows], [r.minutes for r in rows])
    days = _concat(stored, today)
    last_known = _last_before(store, rows, as_of)
    panel = build_panel(days, [r.name for r in rows], [r.tz for r in rows], [r.minutes for r in rows],
                        as_of, n_days, last_start=last_known)

    # 2. checks
    plans = []
    for r in rows:
        t = tariffs.get(r.id)
        if t is None:
            plans.append(None)
            continue
        from auditor.services.meter_tariff import _own

        own = _own(r.name, t)
        plans.append(_plan(own.tariff, own.sha256, own.billing_day))
    evaluations = run_checks(panel, plans, s, anchors)

    # 3. alerts
    judged = {(rows[i].id, e.kind) for e in evaluations for i in np.flatnonzero(e.evaluated)}
    by_name = {r.name: i for i, r in enumerate(rows)}
    findings = [(by_name[f.meter], f) for e in evaluations for f in e.findings]
    raised, updated, resolved = _reconcile(store, rows, findings, judged, as_of)
    return _record(store, as_of, started_at, started, trigger, len(rows), raised, updated, resolved, watermark)


def _concat(a: DaySummaries, b: DaySummaries) -> DaySummaries:
    if not len(b):
        return a
    if not len(a):
        return b
    cols = {k: np.concatenate([a.columns[k], b.columns[k]]) for k in b.columns}
    return DaySummaries(np.concatenate([a.meter, b.meter]), np.concatenate([a.day, b.day]), cols,
                        np.concatenate([a.hourly, b.hourly]))


def _last_before(store: Store, rows: list[_MeterRow], as_of: pd.Timestamp) -> list[int]:
    """Each meter's last interval start before ``as_of`` (-1 when none): one index seek each."""
    from auditor.store.models import Reading

    t = _epoch(as_of)
    with store.session() as s:
        sub = (select(Reading.meter_id, func.max(Reading.start))
               .where(Reading.meter_id.in_([r.id for r in rows]), Reading.start < t)
               .group_by(Reading.meter_id))
        got = dict(s.execute(sub).all())
    return [int(got[r.id]) if got.get(r.id) is not None else -1 for r in rows]


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
        raise UsageError("give alert ids, --meter M or --all")
    with store.session() as s:
        q = select(Alert).where(Alert.state == "new")
        if ids:
            known = set(s.scalars(select(Alert.id).where(Alert.id.in_(list(ids)))))
            missing = [i for i in ids if i not in known]
            if missing:
                raise UsageError(f"no alert {missing[0]} (auditor alerts --json lists them with their ids)")
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


def open_alerts_of(store: Store, meter: str) -> list[dict]:
    """Alerts of one meter that are open or resolved in the last year, for its charts."""
    return [a for a in list_alerts(store, states=None, meter=meter, limit=200)]


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

