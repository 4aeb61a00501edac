"""Dashboard use cases: the portfolio summary, per-meter chart data, imports and data quality.

Everything here reads the store and calls the audit and correction services; nothing is
recomputed by hand. Audits, chart data and sizing cases are cached in-process per
(database, meter, tariff file, data version): the data version changes with every import
batch and with the meter's multiplier and site facts, so a cached figure is never stale.

References
----------
.. [1] IEEE Std 1459-2010, section 3.1.1: PF = P / S (per-interval PF of the heat map).
.. [2] IEEE Std 1036-2010: required compensation Qc = P (tan φ1 − tan φ2) (the target-PF line
   and the duration curve of the kvar needed).
"""
from __future__ import annotations

import json
import math
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable, Iterable
from dataclasses import dataclass
from datetime import UTC, date, datetime
from pathlib import Path

import numpy as np
import pandas as pd
from sqlalchemy import func, select

from auditor.correction import size_required, tan_phi
from auditor.errors import NotFoundError, TariffError, UsageError
from auditor.quantities import power_factor
from auditor.services.audit import MeterAudit, audit_meter
from auditor.services.correction import (
    SizeCase,
    SizeRequest,
    best_scenario,
    list_scenarios,
    size_meter,
)
from auditor.services.ingest import list_meters
from auditor.services.meters import load_meter
from auditor.store import Store
from auditor.store.models import ImportBatch, Meter, QualityFlag, Site
from auditor.store.queries import batches
from auditor.tariffs import EXAMPLES_DIR, Tariff, load_tariff

__all__ = [
    "TariffChoice", "MeterProfile", "tariff_choices", "find_tariff", "load_named_tariff",
    "data_version", "cached_audit", "cached_size", "meter_profile", "portfolio_summary",
    "tariff_threshold_pf", "import_overview", "quality_overview", "clear_caches",
    "SCATTER_MAX_POINTS",
]

#: The P–Q scatter is thinned to at most this many points (a meter-year has 35,040).
SCATTER_MAX_POINTS = 4000
_CACHE_SIZE = 64


# --------------------------------------------------------------------------------------------
# a small thread-safe LRU (the WSGI server runs several threads)
# --------------------------------------------------------------------------------------------
class _LRU:
    def __init__(self, size: int):
        self.size = size
        self._data: OrderedDict[Hashable, object] = OrderedDict()
        self._lock = threading.Lock()

    def get_or_make(self, key: Hashable, make: Callable[[], object]):
        with self._lock:
            if key in self._data:
                self._data.move_to_end(key)
                return self._data[key]
        value = make()  # outside the lock: two threads may compute once each, never block
        with self._lock:
            self._data[key] = value
            while len(self._data) > self.size:
                self._data.popitem(last=False)
        return value

    def clear(self) -> None:
        with self._lock:
            self._data.clear()


_audits = _LRU(_CACHE_SIZE)
_profiles = _LRU(_CACHE_SIZE)
_sizes = _LRU(_CACHE_SIZE)


def clear_caches() -> None:
    for c in (_audits, _profiles, _sizes):
        c.clear()


# --------------------------------------------------------------------------------------------
# tariffs by name
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TariffChoice:
    """A tariff file the dashboard offers: its name (file stem), path and title."""

    name: str
    path: Path
    title: str
    error: str | None = None


def tariff_choices(extra_dirs: Iterable[str | Path] = ()) -> list[TariffChoice]:
    """The shipped example tariffs and the ``*.toml`` files of ``extra_dirs``, by name.

    A file in ``extra_dirs`` overrides an example of the same name. A file that does not
    validate is listed with its error rather than hidden.
    """
    found: dict[str, Path] = {p.stem: p for p in sorted(EXAMPLES_DIR.glob("*.toml"))}
    for d in extra_dirs:
        d = Path(d)
        if d.is_dir():
            found.update({p.stem: p for p in sorted(d.glob("*.toml"))})
    out = []
    for name, path in sorted(found.items()):
        try:
            out.append(TariffChoice(name, path, _load_cached(path).name))
        except TariffError as exc:
            out.append(TariffChoice(name, path, name, error=exc.message))
    return out


def find_tariff(name: str, extra_dirs: Iterable[str | Path] = ()) -> TariffChoice:
    """The tariff called ``name`` (a file stem, never a path: the browser chooses by name)."""
    for c in tariff_choices(extra_dirs):
        if c.name == name:
            if c.error:
                raise TariffError("-", c.error)
            return c
    known = ", ".join(c.name for c in tariff_choices(extra_dirs))
    raise NotFoundError(f"no tariff {name!r}; known tariffs: {known}")


_tariff_cache: dict[tuple[str, float], Tariff] = {}
_tariff_lock = threading.Lock()


def _load_cached(path: Path) -> Tariff:
    key = (str(path), path.stat().st_mtime)
    with _tariff_lock:
        if key in _tariff_cache:
            return _tariff_cache[key]
    t = load_tariff(path)
    with _tariff_lock:
        _tariff_cache[key] = t
    return t


def load_named_tariff(name: str, extra_dirs: Iterable[str | Path] = ()) -> Tariff:
    return _load_cached(find_tariff(name, extra_dirs).path)


def tariff_threshold_pf(tariff: Tariff) -> list[dict]:
    """The power factors at which the tariff's reactive clauses start to charge.

    tan φ limits are turned into PF by PF = 1 / √(1 + tan² φ) (IEEE Std 1459-2010, sinusoidal
    definitions); clauses without a PF threshold (kVA demand, leading energy) are left out.
    """
    out = []
    for m in tariff.reactive:
        key = Tariff.key_of(m)
        if m.kind in ("kvarh_excess", "kvarh_banded"):
            out.append({"key": key, "pf": 1.0 / math.hypot(1.0, m.tan_phi_limit)})
        elif m.kind == "pf_demand_adjust":
            out.append({"key": key, "pf": m.base_pf})
        elif m.kind == "pf_percent":
            out.append({"key": key, "pf": m.threshold_pf})
        elif m.kind == "kvar_demand":
            out.append({"key": key, "pf": 1.0 / math.hypot(1.0, m.allowance_ratio)})
    return out


# --------------------------------------------------------------------------------------------
# data version and the cached computations
# --------------------------------------------------------------------------------------------
def data_version(store: Store, meter: str) -> tuple:
    """What a meter's results depend on in the store: the last import batch, the meter's
    multiplier and interval, and its site's facts. Any import or edit changes it."""
    with store.session() as s:
        last_batch = s.scalar(select(func.max(ImportBatch.id)))
        row = s.execute(select(Meter, Site).join(Site).where(Meter.external_id == meter)).first()
        if row is None:
            raise NotFoundError(f"no meter {meter!r}")
        m, site = row
        return (last_batch, m.multiplier, m.interval_minutes, site.name, site.timezone,
                site.nominal_voltage_v, site.transformer_kva, site.transformer_impedance_percent)


def _tariff_key(tariff: Tariff) -> tuple:
    src = tariff.source
    if src and Path(src).exists():
        return (str(src), Path(src).stat().st_mtime)
    return (tariff.name, id(tariff))


def cached_audit(store: Store, meter: str, tariff: Tariff, billing_day: int | None = None) -> MeterAudit:
    """:func:`auditor.services.audit.audit_meter`, cached per data version and tariff file."""
    key = (store.url, meter, _tariff_key(tariff), billing_day, data_version(store, meter))
    return _audits.get_or_make(key, lambda: audit_meter(store, meter, tariff, billing_day=billing_day))


def cached_size(store: Store, req: SizeRequest, tariff: Tariff) -> SizeCase:
    """:func:`auditor.services.correction.size_meter`, cached per request, tariff and data."""
    key = (store.url, json.dumps(req.to_dict(), sort_keys=True, default=str), _tariff_key(tariff),
           data_version(store, req.meter))
    return _sizes.get_or_make(key, lambda: size_meter(store, req, tariff))


# --------------------------------------------------------------------------------------------
# chart data of one meter
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class MeterProfile:
    """Interval-level chart data of one meter, already reduced for a browser.

    Attributes
    ----------
    days : list of str
        Local dates (ISO) of the heat map rows.
    slot_minutes : int
        Width of a heat-map column (the meter's interval).
    pf_matrix : numpy.ndarray
        (days, slots per day) PF per interval from kWh and net kvarh (|P| / |S|, IEEE Std
        1459-2010), NaN where no data or no load.
    leading_matrix : numpy.ndarray of bool
        Where the interval's net reactive energy is leading (capacitive).
        On the autumn DST day the repeated hour keeps its second occurrence; on the spring
        day the skipped hour stays empty.
    scatter_kw, scatter_kvar : numpy.ndarray
        A time-ordered, evenly strided sample of (kW, net kvar) of at most
        :data:`SCATTER_MAX_POINTS` intervals.
    n_intervals : int
        Intervals the sample was drawn from.
    duration_percent, duration_kvar : list of float
        Duration curve of the kvar needed to reach ``target_pf`` (101 points).
    kvar_at_95, kvar_max, kvar_from_totals : float
        Figures of :func:`auditor.correction.size_required` at 95 %.
    target_pf : float
    """

    meter: str
    timezone: str
    days: list[str]
    slot_minutes: int
    pf_matrix: np.ndarray
    leading_matrix: np.ndarray
    scatter_kw: np.ndarray
    scatter_kvar: np.ndarray
    n_intervals: int
    duration_percent: list[float]
    duration_kvar: list[float]
    kvar_at_95: float
    kvar_max: float
    kvar_from_totals: float
    target_pf: float


def _profile(store: Store, meter: str, target_pf: float) -> MeterProfile:
    data = load_meter(store, meter)
    f = data.frame
    if f.empty:
        raise UsageError(f"meter {meter} has no readings")
    minutes = data.interval_minutes
    local = f.index.tz_convert(data.timezone)
    day = local.normalize().tz_localize(None)
    first = day.min()
    ndays = int((day.max() - first).days) + 1
    slots = 1440 // minutes
    row = ((day - first).days).to_numpy()
    col = ((local.hour * 60 + local.minute) // minutes).to_numpy()
    kwh = f["kwh"].to_numpy(dtype=float)
    kvarh_net = f["kvarh_lag"].to_numpy(dtype=float) - f["kvarh_lead"].to_numpy(dtype=float)
    pf, sense = power_factor(kwh, kvarh_net)
    matrix = np.full((ndays, slots), np.nan)
    matrix[row, col] = pf
    leading = np.zeros((ndays, slots), dtype=bool)
    leading[row, col] = sense == "lead"
    days = [d.date().isoformat() for d in pd.date_range(first, periods=ndays, freq="D")]
    to_demand = 60.0 / minutes
    kw = f["kwh"].to_numpy(dtype=float) * to_demand
    kvar = (f["kvarh_lag"].to_numpy(dtype=float) - f["kvarh_lead"].to_numpy(dtype=float)) * to_demand
    step = max(1, math.ceil(len(kw) / SCATTER_MAX_POINTS))
    sizing = size_required(f, minutes, target_pf, 0.95)
    curve = sizing.duration_curve(101)
    return MeterProfile(
        meter=meter, timezone=data.timezone, days=days, slot_minutes=minutes, pf_matrix=matrix,
        leading_matrix=leading,
        scatter_kw=kw[::step], scatter_kvar=kvar[::step], n_intervals=len(kw),
        duration_percent=[c["percent_of_intervals"] for c in curve],
        duration_kvar=[c["kvar"] for c in curve], kvar_at_95=sizing.kvar_at_quantile,
        kvar_max=sizing.kvar_max, kvar_from_totals=sizing.kvar_from_totals, target_pf=target_pf,
    )


def meter_profile(store: Store, meter: str, target_pf: float = 0.95) -> MeterProfile:
    """Heat map, P–Q sample and duration curve of one meter (cached per data version)."""
    key = (store.url, meter, round(float(target_pf), 4), data_version(store, meter))
    return _profiles.get_or_make(key, lambda: _profile(store, meter, target_pf))


def target_line_kvar(kw_max: float, target_pf: float) -> list[float]:
    """Two points of the target-PF line Q = P tan(arccos PF) from 0 to ``kw_max``
    (IEEE Std 1036-2010: the kvar a load may draw at the target PF)."""
    return [0.0, float(kw_max) * float(tan_phi(target_pf))]


# --------------------------------------------------------------------------------------------
# portfolio
# --------------------------------------------------------------------------------------------
def _year_before(d: date) -> date:
    try:
        return d.replace(year=d.year - 1)
    except ValueError:  # 29 February
        return d.replace(year=d.year - 1, day=28)


def portfolio_summary(store: Store, tariff: Tariff, own_tariffs: bool = False) -> list[dict]:
    """One row per meter, worst power factor first.

    Keys: site, meter, latest_pf and latest_period (last billing period with a PF),
    reactive_12m and total_12m (charges of the periods ending within the last 12 months of
    data, in the tariff's currency), months_12m, coverage (intervals present / expected over
    the meter's span), best (the saved scenario with the best NPV: name, annual_savings,
    simple_payback_years, npv) and error (why a meter could not be audited); tariff, currency and
    tariff_source ("own" when ``own_tariffs`` and the meter has a tariff of its own, which is
    then used instead of ``tariff``).
    """
    from auditor.services.meter_tariff import meter_tariffs

    own = meter_tariffs(store) if own_tariffs else {}
    rows = []
    for m in list_meters(store):
        t = own[m["meter"]].tariff if m["meter"] in own else tariff
        row = {"site": m["site"], "meter": m["meter"], "coverage": m["coverage"],
               "first": m["first"], "last": m["last"], "intervals": m["intervals"],
               "latest_pf": None, "latest_period": None, "reactive_12m": None, "total_12m": None,
               "months_12m": 0, "currency": t.currency, "tariff": t.name,
               "tariff_source": "own" if m["meter"] in own else "chosen", "best": best_scenario(store, m["meter"]),
               "scenarios": len(list_scenarios(store, m["meter"])), "error": None}
        if m["intervals"]:
            try:
                periods = cached_audit(store, m["meter"], t,
                                       own[m["meter"]].billing_day if m["meter"] in own else None).result.periods
            except (UsageError, NotFoundError) as exc:
                row["error"] = exc.message
                periods = []
            with_pf = [p for p in periods if p.intervals and math.isfinite(p.pf)]
            if with_pf:
                row["latest_pf"] = with_pf[-1].pf
                row["latest_period"] = with_pf[-1].label
            if periods:
                cutoff = _year_before(periods[-1].end)
                recent = [p for p in periods if p.end > cutoff]
                row["reactive_12m"] = float(sum(p.reactive_total for p in recent))
                row["total_12m"] = float(sum(p.total for p in recent))
                row["months_12m"] = len(recent)
        else:
            row["error"] = "no readings"
        rows.append(row)
    rows.sort(key=lambda r: (r["latest_pf"] is None, r["latest_pf"] if r["latest_pf"] is not None else 0.0))
    return rows


# --------------------------------------------------------------------------------------------
# imports and data quality
# --------------------------------------------------------------------------------------------
def _iso(dt: datetime | None) -> str | None:
    if dt is None:
        return None
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=UTC)
    return dt.isoformat(timespec="seconds")


def import_overview(store: Store, limit: int = 200) -> list[dict]:
    """Import batches, newest first, with their located errors decoded."""
    with store.session() as s:
        out = []
        for b in batches(s, limit):
            try:
                errors = json.loads(b.errors) if b.errors else []
            except ValueError:
                errors = [{"line": None, "column": None, "message": b.errors}]
            if isinstance(errors, dict):
                errors = [errors]
            out.append({"id": b.id, "file_name": b.file_name, "format": b.format, "status": b.status,
                        "rows_accepted": b.rows_accepted, "rows_rejected": b.rows_rejected,
                        "rows_revised": b.rows_revised, "started_at": _iso(b.started_at),
                        "finished_at": _iso(b.finished_at), "errors": errors})
        return out


def quality_overview(store: Store, max_items: int = 50) -> list[dict]:
    """Per meter: intervals present, expected and the VEE findings (gaps, estimated, spikes,
    zero runs, filled) as counts and the first ``max_items`` findings in local time."""
    summaries = {m["meter"]: m for m in list_meters(store)}
    out = []
    with store.session() as s:
        for meter, site in s.execute(select(Meter, Site).join(Site).order_by(Site.name, Meter.external_id)):
            flags = list(s.scalars(select(QualityFlag).where(QualityFlag.meter_id == meter.id)
                                   .order_by(QualityFlag.start)))
            counts: dict[str, dict] = {}
            for f in flags:
                c = counts.setdefault(f.kind, {"findings": 0, "intervals": 0})
                c["findings"] += 1
                c["intervals"] += int(f.intervals or 0)
            tz = site.timezone
            items = []
            for f in flags[:max_items]:
                items.append({
                    "kind": f.kind, "batch_id": f.batch_id, "intervals": f.intervals,
                    "start": pd.Timestamp(f.start, unit="s", tz="UTC").tz_convert(tz).isoformat(),
                    "end": pd.Timestamp(f.end, unit="s", tz="UTC").tz_convert(tz).isoformat(),
                    "detail": f.detail,
                })
            summ = summaries.get(meter.external_id, {})
            out.append({"meter": meter.external_id, "site": site.name, "timezone": tz,
                        "intervals": summ.get("intervals"), "coverage": summ.get("coverage"),
                        "first": summ.get("first"), "last": summ.get("last"),
                        "counts": counts, "findings": len(flags), "flags": items,
                        "more": max(0, len(flags) - max_items)})
    return out
