"""The dashboard's views of the imports: import batches with their located errors, and the
data-quality findings (VEE flags) per meter."""
from __future__ import annotations

import json
from datetime import UTC, datetime

import pandas as pd
from sqlalchemy import select

from auditor.services.meters import list_meters
from auditor.store import Store
from auditor.store.models import Meter, QualityFlag, Site
from auditor.store.queries import batches

__all__ = ["import_overview", "quality_overview"]


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
