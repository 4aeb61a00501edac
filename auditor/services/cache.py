"""In-process caches of the dashboard's computations, keyed so that a cached figure is never stale.

Audits, sizing cases and chart data are kept per (database, meter, tariff file and mtime,
:func:`data_version`): the data version changes with every import batch and with the meter's
multiplier and site facts. A small thread-safe LRU holds each kind (the WSGI server runs
several threads).
"""
from __future__ import annotations

import json
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from pathlib import Path

from sqlalchemy import func, select

from auditor.errors import NotFoundError
from auditor.services.audit import MeterAudit, audit_meter
from auditor.services.correction import SizeCase, SizeRequest, size_meter
from auditor.store import Store
from auditor.store.models import ImportBatch, Meter, Site
from auditor.tariffs import Tariff

__all__ = ["LRU", "chart_cache", "cached_audit", "cached_size", "clear_caches", "data_version", "tariff_key", "CACHE_SIZE"]

CACHE_SIZE = 64


class LRU:
    """A small thread-safe least-recently-used map (the WSGI server runs several threads)."""

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


_audits = LRU(CACHE_SIZE)
_sizes = LRU(CACHE_SIZE)
#: The meter charts' cache (filled by :mod:`auditor.services.meter_charts`) lives beside the
#: others so that one call clears them all.
chart_cache = LRU(CACHE_SIZE)


def clear_caches() -> None:
    for c in (_audits, chart_cache, _sizes):
        c.clear()



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


def tariff_key(tariff: Tariff) -> tuple:
    src = tariff.source
    if src and Path(src).exists():
        return (str(src), Path(src).stat().st_mtime)
    return (tariff.name, id(tariff))


def cached_audit(store: Store, meter: str, tariff: Tariff, billing_day: int | None = None) -> MeterAudit:
    """:func:`auditor.services.audit.audit_meter`, cached per data version, tariff file and
    billing day."""
    key = (store.url, meter, tariff_key(tariff), billing_day, data_version(store, meter))
    return _audits.get_or_make(key, lambda: audit_meter(store, meter, tariff, billing_day=billing_day))


def cached_size(store: Store, req: SizeRequest, tariff: Tariff) -> SizeCase:
    """:func:`auditor.services.correction.size_meter`, cached per request, tariff and data."""
    key = (store.url, json.dumps(req.to_dict(), sort_keys=True, default=str), tariff_key(tariff),
           data_version(store, req.meter))
    return _sizes.get_or_make(key, lambda: size_meter(store, req, tariff))
