"""Audit use cases: one meter under one tariff, per billing period."""
from __future__ import annotations

from dataclasses import dataclass
from datetime import date
from pathlib import Path

from auditor.audit import AuditResult, audit
from auditor.services.meters import MeterData, load_meter
from auditor.store import Store
from auditor.tariffs import Tariff, load_tariff


@dataclass(frozen=True)
class MeterAudit:
    data: MeterData
    tariff: Tariff
    result: AuditResult

    def to_dict(self) -> dict:
        d = self.result.to_dict(meter=self.data.meter)
        d["site"] = self.data.site
        d["timezone"] = self.data.timezone
        d["interval_minutes"] = self.data.interval_minutes
        return d


def resolve_tariff(tariff: str | Path | Tariff) -> Tariff:
    """A tariff object, a path, or the name of a shipped example (with or without .toml)."""
    if isinstance(tariff, Tariff):
        return tariff
    from auditor.tariffs import EXAMPLES_DIR

    p = Path(tariff)
    if not p.exists():
        cand = EXAMPLES_DIR / (p.name if p.suffix == ".toml" else f"{p.name}.toml")
        if cand.exists():
            p = cand
    return load_tariff(p)


def audit_meter(store: Store, meter: str, tariff: str | Path | Tariff, *, start: date | None = None,
                end: date | None = None, billing_day: int | None = None) -> MeterAudit:
    t = resolve_tariff(tariff)
    data = load_meter(store, meter, start, end)
    if data.frame.empty:
        from auditor.errors import UsageError

        span = f" between {start} and {end}" if start or end else ""
        raise UsageError(f"meter {meter} has no readings{span}")
    result = audit(data.frame, t, tz=data.timezone, interval_minutes=data.interval_minutes,
                   start=start, end=end, billing_day=billing_day)
    return MeterAudit(data, t, result)
