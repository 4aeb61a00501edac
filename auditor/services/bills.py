"""Bill use cases: import and enter bills, list them, check them against the interval data and
the tariff, and write a dispute summary.

Import rules: a file whose SHA-256 digest was imported before changes nothing (and says so);
otherwise each bill is inserted, or, when the same meter already has a bill with the same
period, updated if any figure differs (the result lists what changed) and left alone if not.
A bill for a meter the database does not know is an error naming its line and column (bills
are checked against interval data, so the meter's data must be imported first). A bill whose
period overlaps a stored bill of the same meter with other dates is kept beside it, with a
warning; the check audits overlapping bills separately. The account and invoice numbers are
stored as given; a later file or entry without them keeps the numbers already stored.
"""
from __future__ import annotations

import hashlib
import textwrap
from importlib import resources
from pathlib import Path

from sqlalchemy import select

from auditor.bills import BILL_FIELDS, FIELD_DIGITS, BillRecord, Tolerances, cause_label, check
from auditor.errors import InputError, Problem, UsageError
from auditor.ingest.bills_csv import NUMBER_FIELDS, load_bill_profile, read_bills, validate_bill
from auditor.render import WIDTH
from auditor.services.audit import resolve_tariff
from auditor.services.meters import load_meter
from auditor.store import Store
from auditor.store.models import Bill, BillFile, Meter
from auditor.store.queries import get_meter, now_utc
from auditor.tariffs import Tariff

__all__ = ["add_bill", "check_bills", "demo_bill_check", "dispute_summary", "import_bills", "list_bills"]

DEMO_BILLS = "bills_demo.csv"
DEMO_METERS = ("KQ-MAIN", "KQ-DOCKS", "AR-01")


def _record_of(row: Bill, meter: str, file_name: str | None) -> BillRecord:
    return BillRecord(meter=meter, period_start=row.period_start, period_end=row.period_end,
                      **{f: getattr(row, f) for f in BILL_FIELDS + NUMBER_FIELDS},
                      source=file_name or "manual entry", line=row.source_line)


def _same(a: float | None, b: float | None) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= 1e-9 * max(1.0, abs(a), abs(b))


def _store_records(s, records: list[BillRecord], file_row: BillFile | None, meters: dict[str, Meter]) -> dict:
    """Insert or update bills in the session; returns counts, changes and warnings."""
    inserted, unchanged = 0, 0
    updated: list[dict] = []
    warnings: list[str] = []
    now = now_utc()
    for r in records:
        m = meters[r.meter]
        row = s.scalar(select(Bill).where(Bill.meter_id == m.id, Bill.period_start == r.period_start,
                                          Bill.period_end == r.period_end))
        if row is None:
            overlap = s.scalar(select(Bill).where(Bill.meter_id == m.id, Bill.period_start < r.period_end,
                                                  Bill.period_end > r.period_start))
            if overlap is not None:
                warnings.append(f"bill {r.meter} {r.period_start}..{r.period_end} overlaps the stored bill "
                                f"{overlap.period_start}..{overlap.period_end}; both are kept")
            s.add(Bill(meter_id=m.id, period_start=r.period_start, period_end=r.period_end,
                       **{f: getattr(r, f) for f in BILL_FIELDS + NUMBER_FIELDS},
                       source_file_id=file_row.id if file_row else None, source_line=r.line,
                       created_at=now, updated_at=now))
            inserted += 1
            continue
        changes = {f: {"was": getattr(row, f), "now": getattr(r, f)} for f in BILL_FIELDS
                   if not _same(getattr(row, f), getattr(r, f))}
        changes.update({f: {"was": getattr(row, f), "now": getattr(r, f)} for f in NUMBER_FIELDS
                        if getattr(r, f) is not None and getattr(r, f) != getattr(row, f)})
        if not changes:
            unchanged += 1
            continue
        for f in changes:
            setattr(row, f, getattr(r, f))
        row.source_file_id = file_row.id if file_row else None
        row.source_line = r.line
        row.updated_at = now
        updated.append({"meter": r.meter, "period_start": r.period_start.isoformat(),
                        "period_end": r.period_end.isoformat(), "changes": changes})
    return {"inserted": inserted, "updated": updated, "unchanged": unchanged, "warnings": warnings}


def _meters(s, records: list[BillRecord], file: str) -> dict[str, Meter]:
    ids = sorted({r.meter for r in records})
    found = {m.external_id: m for m in s.scalars(select(Meter).where(Meter.external_id.in_(ids)))}
    missing = [r for r in records if r.meter not in found]
    if missing:
        known = s.scalars(select(Meter.external_id).order_by(Meter.external_id).limit(20)).all()
        hint = f" (known meters: {', '.join(known)})" if known else " (the database has no meters yet)"
        raise InputError(file, [Problem(f"unknown meter {r.meter!r}{hint}; import its interval data first",
                                        r.line, "meter") for r in missing[:50]])
    return found


def _message(result: dict) -> str:
    if result["status"] == "unchanged" and result.get("previous_file_id"):
        return f"already imported as bill file {result['previous_file_id']}; nothing changed"
    parts = [f"{result['inserted']} new", f"{len(result['updated'])} updated", f"{result['unchanged']} unchanged"]
    text = ", ".join(parts)
    if result["updated"]:
        text += " (replaced by this newer file: " + "; ".join(
            f"{u['meter']} {u['period_start']}..{u['period_end']}: {', '.join(u['changes'])}" for u in result["updated"]) + ")"
    if not result["inserted"] and not result["updated"]:
        text += "; nothing changed"
    return text


def import_bills(store: Store, path: str | Path, profile: str | Path | None = None) -> dict:
    """Import a bills file (the CSV contract, or any layout through a bill profile).

    Returns ``{"file", "sha256", "format", "status": "imported" | "updated" | "unchanged",
    "inserted", "updated": [{meter, period_start, period_end, changes}], "unchanged", "bills",
    "warnings", "message"}``.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise UsageError(f"{path}: {exc.strerror or exc}") from None
    digest = hashlib.sha256(raw).hexdigest()
    base = {"file": str(path), "sha256": digest, "inserted": 0, "updated": [], "unchanged": 0, "warnings": []}
    with store.session() as s:
        prior = s.scalar(select(BillFile).where(BillFile.sha256 == digest).order_by(BillFile.id))
        if prior is not None:
            n = prior.bills_inserted + prior.bills_updated + prior.bills_unchanged
            out = {**base, "format": prior.format, "status": "unchanged", "previous_file_id": prior.id,
                   "bills": n, "unchanged": n}
            out["message"] = _message(out)
            return out
    prof = load_bill_profile(profile) if profile else None
    read = read_bills(path, prof)
    encoding = prof.encoding if prof else "utf-8-sig"
    text = raw.decode("utf-8-sig" if encoding.lower().replace("_", "-") in ("utf-8", "utf8") else encoding)
    with store.session() as s:
        meters = _meters(s, read.records, str(path))
        file_row = BillFile(file_name=path.name, sha256=digest, format=read.format, content=text,
                            imported_at=now_utc())
        s.add(file_row)
        s.flush()
        res = _store_records(s, read.records, file_row, meters)
        file_row.bills_inserted = res["inserted"]
        file_row.bills_updated = len(res["updated"])
        file_row.bills_unchanged = res["unchanged"]
        file_id = file_row.id
    status = "imported" if res["inserted"] else ("updated" if res["updated"] else "unchanged")
    out = {**base, **res, "format": read.format, "status": status, "file_id": file_id, "bills": len(read.records),
           "warnings": [w.describe(str(path)) for w in read.warnings] + res["warnings"]}
    out["message"] = _message(out)
    return out


def add_bill(store: Store, meter: str, period_start, period_end, **fields) -> dict:
    """Enter one bill by hand (validated like a CSV row). Same meter and period: updated."""
    rec = validate_bill(meter, period_start, period_end, **fields)
    with store.session() as s:
        meters = _meters(s, [rec], "manual entry")
        res = _store_records(s, [rec], None, meters)
    status = "imported" if res["inserted"] else ("updated" if res["updated"] else "unchanged")
    return {"status": status, "bill": rec.to_dict(), **res}


def list_bills(store: Store, meter: str | None = None) -> list[dict]:
    """Stored bills (optionally of one meter), by meter and period."""
    with store.session() as s:
        q = (select(Bill, Meter.external_id, BillFile.file_name)
             .join(Meter, Meter.id == Bill.meter_id)
             .outerjoin(BillFile, BillFile.id == Bill.source_file_id)
             .order_by(Meter.external_id, Bill.period_start, Bill.period_end))
        if meter:
            get_meter(s, meter)
            q = q.where(Meter.external_id == meter)
        out = []
        for row, ext, fname in s.execute(q):
            d = _record_of(row, ext, fname).to_dict()
            d["id"] = row.id
            d["updated_at"] = row.updated_at.isoformat() if row.updated_at else None
            out.append(d)
        return out


def _records(store: Store, meter: str) -> list[BillRecord]:
    with store.session() as s:
        m = get_meter(s, meter)
        rows = s.execute(select(Bill, BillFile.file_name).outerjoin(BillFile, BillFile.id == Bill.source_file_id)
                         .where(Bill.meter_id == m.id).order_by(Bill.period_start, Bill.period_end)).all()
        return [_record_of(r, meter, f) for r, f in rows]


def check_bills(store: Store, meter: str, tariff: str | Path | Tariff, tolerances: Tolerances | None = None) -> dict:
    """Check every stored bill of ``meter`` against its interval data under ``tariff``.

    Returns the JSON contract: ``meter``, ``site``, ``tariff``, ``currency``, ``tolerances``,
    ``bills`` (each with its billed and expected figures, coverage, status, causes,
    disputable), ``findings`` (``period_start``, ``field``, ``billed``, ``expected``,
    ``difference``, ``severity``, ``cause``, ``money`` and more), ``total_disputable`` and
    ``warnings``.
    """
    t = resolve_tariff(tariff)
    records = _records(store, meter)
    if not records:
        raise UsageError(f"meter {meter} has no bills stored; import its bills first",
                         cli_hint="auditor bills import FILE")
    data = load_meter(store, meter)
    rec = check(records, data.frame, t, tz=data.timezone, interval_minutes=data.interval_minutes,
                tolerances=tolerances)
    d = rec.to_dict()
    return {"meter": meter, "site": data.site, "timezone": data.timezone,
            "interval_minutes": data.interval_minutes, **d}


# --------------------------------------------------------------------------------------------
# Dispute summary
# --------------------------------------------------------------------------------------------
FIELD_NAMES = {"kwh": "active energy (kWh)", "kvarh": "reactive energy (kvarh)", "peak_kw": "peak demand (kW)",
               "peak_kva": "peak apparent demand (kVA)", "pf": "power factor", "reactive_charge": "reactive charge",
               "total": "bill total"}


def _fmt(x, digits: int = 2) -> str:
    if x is None:
        return "-"
    return f"{x:,.{digits}f}"


def _digits(field: str) -> int:
    return FIELD_DIGITS.get(field, 2)


def _bill_numbers(b: dict) -> str:
    """``invoice 123, account 55-7`` as far as the bill gives them (empty when it gives none)."""
    return ", ".join(f"{k} {b[k]}" for k in ("invoice", "account") if b.get(k))


def _summary_rows(d: dict) -> list[dict]:
    from auditor.render import local_time

    bills = {(b["period_start"], b["period_end"]): b for b in d["bills"]}
    rows = []
    for f in d["findings"]:
        bill = bills.get((f["period_start"], f["period_end"]), {})
        at = f.get("expected_at")
        rows.append({"period": f"{f['period_start']} to {f['period_end']}", "field": FIELD_NAMES.get(f["field"], f["field"]),
                     "invoice": bill.get("invoice") or "", "account": bill.get("account") or "",
                     "billed": _fmt(f["billed"], _digits(f["field"])), "expected": _fmt(f["expected"], _digits(f["field"])),
                     "expected_at": local_time(at, d.get("timezone")) if at else "",
                     "difference": _fmt(f["difference"], _digits(f["field"])), "severity": f["severity"],
                     "money": _fmt(f["money"]), "cause": cause_label(f["cause"]), "explanation": f["explanation"]})
    return rows


def dispute_summary(check_dict: dict, fmt: str = "text") -> str:
    """A summary of a bill check for a billing query to the utility, as plain text or HTML.

    Rendered from the templates ``documents/billing_query.txt`` and ``.html`` (the report's
    plain Jinja environment); every value from the check (meter, tariff, explanations) is
    escaped in the HTML form.
    """
    from auditor.presentation import document_environment

    if fmt not in ("text", "html"):
        raise UsageError(f"summary format must be 'text' or 'html', not {fmt!r}")
    name = "documents/billing_query." + ("txt" if fmt == "text" else "html")
    return document_environment().get_template(name).render(**_query_context(check_dict))


def _query_context(d: dict) -> dict:
    """What the billing-query templates show, with every number already formatted."""
    cur = d.get("currency", "")
    tol = d["tolerances"]
    intro = (f"Meter {d.get('meter')} ({d.get('site') or 'site not named'}), tariff {d.get('tariff')}. "
             f"Each bill was compared with the same period computed from the meter's interval data under the "
             f"tariff, within tolerances of {tol['energy_percent']:g} % on energy, "
             f"{tol['demand_percent']:g} % on demand, {tol['pf']:g} on power factor and "
             f"{tol['charge_percent']:g} % or {tol['charge_abs']:g} {cur} on charges.")
    closing = ("These figures are computed from interval data and the tariff as we understand it; they are offered "
               "for review and correction, not as a certified statement. We would be grateful for a corrected bill "
               "or an explanation of each difference.")
    disputed = [b for b in d["bills"] if b.get("disputable")]
    accounts = sorted({b["account"] for b in d["bills"] if b.get("account")})
    if accounts:
        intro = f"Account {', '.join(accounts)}. " + intro
    if d.get("timezone"):
        intro += f" Times are local ({d['timezone']})."
    per_bill = []
    for b in disputed:
        numbers = _bill_numbers(b)
        per_bill.append(f"{b['period_start']} to {b['period_end']}" + (f" ({numbers})" if numbers else "")
                        + f": {_fmt(b['disputable'])} {cur}")
    return {
        "meter": str(d.get("meter")), "currency": cur, "intro": intro, "closing": closing,
        "rows": _summary_rows(d),
        "total": f"Amount in question: {_fmt(d.get('total_disputable'))} {cur}",
        "per_bill": per_bill,
        "notes": list(d.get("warnings", [])),
    }


# --------------------------------------------------------------------------------------------
# Demo
# --------------------------------------------------------------------------------------------
def demo_bills_path() -> Path:
    return Path(str(resources.files("auditor.demo_data"))) / DEMO_BILLS


def demo_bill_check(store: Store) -> dict:
    """Import the demo bills (idempotent) and check the demo meters under the demo tariff."""
    from auditor.services.demo import DEMO_TARIFF

    imported = import_bills(store, demo_bills_path())
    checks = {m: check_bills(store, m, DEMO_TARIFF) for m in DEMO_METERS}
    cur = next(iter(checks.values()))["currency"]
    lines = [f"Bill check ({DEMO_BILLS}: {imported['message']}):"]
    for m, c in checks.items():
        n = len(c["bills"])
        if not c["findings"]:
            lines.append(f"  {m}: {n} bills, no difference beyond tolerance")
            continue
        lines.append(f"  {m}: {n} bills, {len(c['findings'])} findings, {c['total_disputable']:,.2f} {cur} in question")
        for b in c["bills"]:
            if b["status"] != "findings":
                continue
            fields = [f for f in c["findings"] if f["period_start"] == b["period_start"]]
            causes = ", ".join(b["cause_labels"]) or "unexplained"
            lines += textwrap.wrap(f"{b['period_start']}..{b['period_end']}: {', '.join(f['field'] for f in fields)}"
                                   f" (cause: {causes}; {b['disputable']:,.2f} {cur})", WIDTH,
                                   initial_indent="    ", subsequent_indent="      ")
            lines += textwrap.wrap(fields[0]["explanation"], WIDTH, initial_indent="      ",
                                   subsequent_indent="      ")
    total = sum(c["total_disputable"] for c in checks.values())
    lines.append(f"  Total in question: {total:,.2f} {cur} (auditor bills dispute --meter M --tariff "
                 f"{DEMO_TARIFF} --out query.html)")
    return {"data": {"import": imported, "checks": checks, "total_disputable": round(total, 2)},
            "text": "\n".join(lines)}

