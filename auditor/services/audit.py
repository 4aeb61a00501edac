"""Audit use cases: one meter under one tariff, per billing period."""
from __future__ import annotations

from dataclasses import dataclass
from datetime import date
from pathlib import Path

from auditor.audit import AuditResult, audit
from auditor.errors import AuditorError
from auditor.quantities import BillingPeriod, check_periods
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
        else:
            from auditor.errors import NotFoundError

            shipped = ", ".join(sorted(x.stem for x in EXAMPLES_DIR.glob("*.toml")))
            raise NotFoundError(f"no tariff file {str(tariff)!r}, and no shipped example of that name "
                             f"(examples: {shipped})")
    return load_tariff(p)


def read_periods_file(path: str | Path) -> list[BillingPeriod]:
    """Billing periods from a CSV with columns ``start,end`` (local dates, end exclusive)."""
    import csv

    from auditor.errors import InputError, Problem

    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(str(path), Problem(f"cannot read the periods file: {exc}")) from None
    rows = list(csv.reader(text.splitlines()))
    if not rows or [c.strip().lower() for c in rows[0]][:2] != ["start", "end"]:
        raise InputError(str(path), Problem("the header must be start,end", 1))
    out = []
    for n, row in enumerate(rows[1:], start=2):
        if not any(c.strip() for c in row):
            continue
        if len(row) != 2:
            raise InputError(str(path), Problem(f"expected 2 fields, found {len(row)}", n))
        try:
            a, b = (date.fromisoformat(c.strip()) for c in row)
        except ValueError:
            col = "start"
            try:
                date.fromisoformat(row[0].strip())
                col = "end"
            except ValueError:
                pass
            raise InputError(str(path), Problem("not a date (YYYY-MM-DD)", n, col)) from None
        if b <= a:
            raise InputError(str(path), Problem(f"end {b} is not after start {a}", n, "end"))
        out.append(BillingPeriod(a, b))
    if not out:
        raise InputError(str(path), Problem("no periods in the file"))
    try:
        return check_periods(out)
    except AuditorError as exc:
        raise InputError(str(path), Problem(exc.message)) from None


def audit_meter(store: Store, meter: str, tariff: str | Path | Tariff | None, *, start: date | None = None,
                end: date | None = None, billing_day: int | None = None,
                periods: list[BillingPeriod] | None = None) -> MeterAudit:
    """Audit ``meter`` under ``tariff``; None means the meter's own tariff (and its billing day
    unless ``billing_day`` or ``periods`` is given)."""
    if tariff is None:
        from auditor.services.meter_tariff import meter_tariff, tariff_for_meter

        t = tariff_for_meter(store, meter, None)
        if billing_day is None and not periods:
            billing_day = meter_tariff(store, meter).billing_day
    else:
        t = resolve_tariff(tariff)
    start, end = audit_span(start, end, periods)
    data = load_meter(store, meter, start, end)
    return audit_loaded(store, data, t, start=start, end=end, billing_day=billing_day, periods=periods)


def audit_span(start: date | None, end: date | None,
               periods: list[BillingPeriod] | None) -> tuple[date | None, date | None]:
    """The local dates whose readings an audit reads: those given, else the billing periods' span."""
    if periods:
        return start or periods[0].start, end or periods[-1].end
    return start, end


def audit_loaded(store: Store, data: MeterData, tariff: Tariff, *, start: date | None = None,
                 end: date | None = None, billing_day: int | None = None,
                 periods: list[BillingPeriod] | None = None) -> MeterAudit:
    """The audit of a meter whose data are loaded (``start``/``end`` as :func:`audit_span`
    gives them): the step :func:`audit_meter` and the batch audit share."""
    if data.frame.empty:
        from auditor.errors import UsageError

        span = f" between {start} and {end}" if start or end else ""
        raise UsageError(f"meter {data.meter} has no readings{span}")
    history = earlier_demand(store, data.meter, tariff, start, billing_day) if start else None
    result = audit(data.frame, tariff, tz=data.timezone, interval_minutes=data.interval_minutes,
                   start=start, end=end, billing_day=billing_day, periods=periods, history_peak_kw=history)
    return MeterAudit(data, tariff, result)


def earlier_demand(store: Store, meter: str, tariff: Tariff, start: date,
                   billing_day: int | None = None) -> list[float] | None:
    """The demand of the stored billing periods before ``start`` that the tariff looks back at
    (its ratchet, a kvar allowance on earlier kW), oldest first: what ``audit --from`` passes as
    ``history_peak_kw``. Computed by the same engine over those periods, so it is measured or
    PF-adjusted demand as ``demand.ratchet_on`` says. None when the tariff looks back at nothing
    or nothing is stored before ``start``."""
    from datetime import timedelta

    from auditor.audit import prepare_audit

    d = tariff.demand
    back = max([d.ratchet_periods if d is not None and d.ratchet_percent is not None else 0]
               + [getattr(m, "allowance_lookback_periods", None) or 0 for m in tariff.reactive])
    if not back:
        return None
    data = load_meter(store, meter, start - timedelta(days=31 * (back + 1)), start)
    if data.frame.empty:
        return None
    prepared = prepare_audit(data.frame, tariff, tz=data.timezone, interval_minutes=data.interval_minutes,
                             end=start, billing_day=billing_day)
    return [float(x) for x in prepared.run_charges().ratchet_basis[-back:]]
