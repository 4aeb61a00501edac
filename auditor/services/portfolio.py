"""The portfolio: one row per meter under a tariff, and the tariffs the dashboard offers by name.

Its neighbours by concern: :mod:`auditor.services.cache` (the cached audits and sizing cases,
the data version), :mod:`auditor.services.meter_charts` (a meter's chart data) and
:mod:`auditor.services.import_views` (import batches and data quality). Everything here reads
the store and calls the audit and correction services; nothing is recomputed by hand.

References
----------
.. [1] IEEE Std 1459-2010, sinusoidal definitions: PF = 1 / √(1 + tan² φ) (tariff thresholds).
"""
from __future__ import annotations

from dataclasses import dataclass
from datetime import date

from auditor.services.correction import list_scenarios
from auditor.services.meters import list_meters
from auditor.store import Store
from auditor.tariffs import Tariff, threshold_pfs
from auditor.tariffs.catalog import TariffChoice, find_tariff, load_named_tariff, tariff_choices

__all__ = ["TariffChoice", "tariff_choices", "find_tariff", "load_named_tariff", "tariff_threshold_pf",
           "portfolio_summary", "portfolio_page", "PortfolioPage", "meter_summaries", "tariff_digest"]


# --------------------------------------------------------------------------------------------
# tariffs by name
# --------------------------------------------------------------------------------------------
def tariff_threshold_pf(tariff: Tariff) -> list[dict]:
    """The power factors at which the tariff's reactive clauses start to charge (see
    :func:`auditor.tariffs.facts.threshold_pfs`)."""
    return threshold_pfs(tariff)


# --------------------------------------------------------------------------------------------
# portfolio: per-meter summaries kept in the database
# --------------------------------------------------------------------------------------------
def _year_before(d: date) -> date:
    try:
        return d.replace(year=d.year - 1)
    except ValueError:  # 29 February
        return d.replace(year=d.year - 1, day=28)


def tariff_digest(tariff: Tariff, billing_day: int | None = None) -> str:
    """SHA-256 of what the tariff says (every clause and price; not where its file lies nor
    when it was touched) and of the billing day it is applied with: summaries computed under it
    stay valid while both are the same."""
    import dataclasses
    import hashlib

    content = dataclasses.replace(tariff, source=None) if dataclasses.is_dataclass(tariff) else tariff
    text = repr(content) if billing_day is None else f"{content!r}|billing_day={billing_day}"
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _data_key(version: tuple, multiplier: float, interval_minutes: int | None, timezone: str) -> str:
    """What a meter's audit depends on besides the tariff: its data version (the import batch
    that last changed its readings, their span and count), multiplier, interval and time zone."""
    import hashlib
    import json

    return hashlib.sha256(json.dumps([list(version), multiplier, interval_minutes, timezone]).encode()).hexdigest()


def summary_of(document: dict, row: dict) -> dict:
    """A meter's portfolio figures from its audit document (:meth:`MeterAudit.to_dict`) and its
    batch-table row: ``latest_pf`` and ``latest_period`` (the last billing period with a PF),
    ``reactive_12m``, ``total_12m`` and ``months_12m`` (periods ending within the last 12 months
    of data), and the row's kWh, energy PF, reactive charges, total, coverage and worst month."""
    from auditor.quantities import BillingPeriod

    periods = document["periods"]
    with_pf = [p for p in periods if p["pf"] is not None]
    out = {"latest_pf": None, "latest_period": None, "reactive_12m": None, "total_12m": None, "months_12m": 0,
           "error": None, **{k: row[k] for k in ("kwh", "pf", "reactive_total", "total", "coverage",
                                                  "worst_period", "worst_pf")}}
    if with_pf:
        last = with_pf[-1]
        out["latest_pf"] = last["pf"]
        out["latest_period"] = BillingPeriod(date.fromisoformat(last["start"]), date.fromisoformat(last["end"])).label
    if periods:
        cutoff = _year_before(date.fromisoformat(periods[-1]["end"]))
        recent = [p for p in periods if date.fromisoformat(p["end"]) > cutoff]
        out["reactive_12m"] = float(sum(p["reactive_total"] for p in recent))
        out["total_12m"] = float(sum(p["total"] for p in recent))
        out["months_12m"] = len(recent)
    return out


def meter_summaries(store: Store, tariff: Tariff, *, own: dict | None = None, workers: int | None = None,
                    recomputed: list[str] | None = None) -> dict[str, dict]:
    """Every meter with readings: its summary under ``tariff`` — or, for a meter in ``own``
    (:func:`auditor.services.meter_tariff.meter_tariffs`), under its own tariff and billing day —
    (see :func:`summary_of`; a meter whose audit fails has only ``error``).

    Summaries live in ``meter_summary``, keyed by the tariff's content digest and the meter's
    data key (:func:`_data_key`); only meters whose key changed since — the meters an import
    touched, whose multiplier or site time zone changed — are audited again, through the batch
    audit (:func:`auditor.services.batch.audit_meters`), and stored. ``recomputed``, when
    given, receives the names of the meters audited.
    """
    import json

    from sqlalchemy import select
    from sqlalchemy.exc import IntegrityError

    from auditor.services.batch import audit_meters
    from auditor.store.meter_data import ensure_current, versions
    from auditor.store.models import Meter, MeterSummary, Site
    from auditor.store.queries import now_utc

    own = own or {}

    def tariff_of(meter: str) -> tuple[Tariff, int | None]:
        return (own[meter].tariff, own[meter].billing_day) if meter in own else (tariff, None)

    digests = {tariff_digest(tariff)} | {tariff_digest(o.tariff, o.billing_day) for o in own.values()}
    with store.session() as s:
        conn = s.connection()
        ensure_current(conn)
        have = versions(conn)
        meters = s.execute(select(Meter.id, Meter.external_id, Meter.multiplier, Meter.interval_minutes,
                                  Site.timezone).join(Site)).all()
        stored = {(mid, d): (key, text) for mid, d, key, text in s.execute(
            select(MeterSummary.meter_id, MeterSummary.tariff_digest, MeterSummary.data_key, MeterSummary.summary)
            .where(MeterSummary.tariff_digest.in_(sorted(digests))))}
    out: dict[str, dict] = {}
    stale: dict[str, tuple[int, str, str]] = {}
    for mid, ext, mult, minutes, tz in meters:
        if mid not in have:
            continue
        key = _data_key(have[mid], mult, minutes, tz)
        digest = tariff_digest(*tariff_of(ext))
        if (mid, digest) in stored and stored[(mid, digest)][0] == key:
            out[ext] = json.loads(stored[(mid, digest)][1])
        else:
            stale[ext] = (mid, digest, key)
    if not stale:
        return out
    if recomputed is not None:
        recomputed.extend(stale)
    batch = audit_meters(store, list(stale), tariff_of, workers=workers)
    fresh = []
    for o in batch.outcomes:
        if o.internal:  # a bug: shown, never kept
            out[o.meter] = {"error": o.error}
            continue
        summary = summary_of(o.document, o.row) if o.document is not None else {"error": o.error}
        out[o.meter] = summary
        fresh.append((*stale[o.meter], json.dumps(summary)))
    try:
        with store.session() as s:
            conn = s.connection()
            mark = "?" if conn.dialect.paramstyle == "qmark" else "%s"
            now = now_utc()
            for mid, digest, key, text in fresh:
                cur = conn.exec_driver_sql(
                    f"UPDATE meter_summary SET data_key = {mark}, summary = {mark}, computed_at = {mark} "
                    f"WHERE meter_id = {mark} AND tariff_digest = {mark}", (key, text, now, mid, digest))
                if cur.rowcount == 0:
                    s.add(MeterSummary(meter_id=mid, tariff_digest=digest, data_key=key, summary=text,
                                       computed_at=now))
    except IntegrityError:
        pass  # another request stored the same summaries at the same moment
    return out


def _best_scenarios(store: Store) -> tuple[dict[str, dict], dict[str, int]]:
    """Per meter: the saved scenario with the best NPV among those that pass screening (the rule
    of :func:`auditor.services.correction.best_scenario`) and the number saved, in one query."""
    from auditor.services.correction import pick_best

    by_meter: dict[str, list[dict]] = {}
    for x in list_scenarios(store):
        by_meter.setdefault(x["meter"], []).append(x)
    best = {m: b for m, rows in by_meter.items() if (b := pick_best(rows)) is not None}
    return best, {m: len(rows) for m, rows in by_meter.items()}


def portfolio_summary(store: Store, tariff: Tariff, *, own_tariffs: bool = False,
                      workers: int | None = None) -> list[dict]:
    """One row per meter, worst power factor first.

    Keys: site, meter, latest_pf and latest_period (last billing period with a PF),
    reactive_12m and total_12m (charges of the periods ending within the last 12 months of
    data, in the tariff's currency), months_12m, coverage (intervals present / expected over
    the meter's span), best (the saved scenario with the best NPV: name, annual_savings,
    simple_payback_years, npv) and error (why a meter could not be audited); tariff, currency and
    tariff_source ("own" when ``own_tariffs`` and the meter has a tariff of its own, which is
    then used, with its billing day, instead of ``tariff``). The figures come from
    :func:`meter_summaries` (kept in the database, recomputed only for changed meters).
    """
    from auditor.services.meter_tariff import meter_tariffs

    own = meter_tariffs(store) if own_tariffs else {}
    summaries = meter_summaries(store, tariff, own=own, workers=workers)
    best, count = _best_scenarios(store)
    rows = []
    for m in list_meters(store):
        t = own[m["meter"]].tariff if m["meter"] in own else tariff
        row = {"site": m["site"], "meter": m["meter"], "coverage": m["coverage"],
               "first": m["first"], "last": m["last"], "intervals": m["intervals"],
               "latest_pf": None, "latest_period": None, "reactive_12m": None, "total_12m": None,
               "months_12m": 0, "currency": t.currency, "tariff": t.name,
               "tariff_source": "own" if m["meter"] in own else "chosen", "best": best.get(m["meter"]),
               "scenarios": count.get(m["meter"], 0), "error": None}
        if m["intervals"]:
            got = summaries.get(m["meter"], {"error": "not audited"})
            for k in ("latest_pf", "latest_period", "reactive_12m", "total_12m", "months_12m", "error"):
                if k in got:
                    row[k] = got[k]
        else:
            row["error"] = "no readings"
        rows.append(row)
    rows.sort(key=lambda r: (r["latest_pf"] is None, r["latest_pf"] if r["latest_pf"] is not None else 0.0))
    return rows


@dataclass(frozen=True)
class PortfolioPage:
    """One page of the portfolio: its rows, the totals of every meter the filter keeps, and
    what the controls need (sites to filter by, the page numbers)."""

    rows: list[dict]
    matched: int
    meters: int
    sites: list[str]
    totals: dict
    page: int
    pages: int
    per_page: int
    query: str
    site: str | None

    @property
    def first(self) -> int:
        return (self.page - 1) * self.per_page + 1 if self.matched else 0

    @property
    def last(self) -> int:
        return min(self.page * self.per_page, self.matched)


def portfolio_page(store: Store, tariff: Tariff, *, query: str = "", site: str | None = None, page: int = 1,
                   per_page: int = 50, own_tariffs: bool = False, workers: int | None = None) -> PortfolioPage:
    """The portfolio filtered by ``query`` (part of a meter id or site name, any case) and
    ``site`` (exact), worst power factor first, cut into pages of ``per_page`` rows. The totals
    count the reactive charges of the meters billed in ``tariff``'s currency
    (``other_currency`` counts the others)."""
    rows = portfolio_summary(store, tariff, own_tariffs=own_tariffs, workers=workers)
    sites = sorted({r["site"] for r in rows})
    q = query.strip().casefold()
    kept = [r for r in rows if (not site or r["site"] == site)
            and (not q or q in r["meter"].casefold() or q in r["site"].casefold())]
    per_page = max(1, min(int(per_page), 500))
    pages = max(1, -(-len(kept) // per_page))
    page = max(1, min(int(page), pages))
    totals = {
        "meters": len(kept),
        "sites": len({r["site"] for r in kept}),
        "reactive_12m": sum(r["reactive_12m"] or 0.0 for r in kept if r["currency"] == tariff.currency),
        "other_currency": sum(1 for r in kept if r["currency"] != tariff.currency),
        "savings": sum(r["best"]["annual_savings"] for r in kept
                       if r["best"] and (r["best"]["npv"] or 0) > 0 and r["best"]["tariff"] == r["tariff"]
                       and r["best"].get("recommended") is not False
                       and r["currency"] == tariff.currency and r["best"]["annual_savings"] is not None),
    }
    return PortfolioPage(rows=kept[(page - 1) * per_page: page * per_page], matched=len(kept), meters=len(rows),
                         sites=sites, totals=totals, page=page, pages=pages, per_page=per_page, query=query.strip(),
                         site=site or None)
