"""Utility bills from CSV: the bill contract, and a mapping profile for other bill layouts.

The contract
------------
A header row, then one bill per row::

    meter,period_start,period_end,kwh,kvarh,peak_kw,peak_kva,pf,reactive_charge,total,account,invoice

``meter``, ``period_start`` and ``period_end`` are required columns; the others are optional
(a column may be left out, a cell may be empty: the bill does not show that figure). Dates are
ISO ``YYYY-MM-DD`` in the site's local calendar, the end exclusive (a March bill runs
2025-03-01 to 2025-04-01). Numbers use a decimal point; energies in kWh / kvarh, demands in
kW / kVA, ``pf`` a ratio (0, 1], charges in the tariff's currency (negative for a credit).
``kvarh`` is the reactive energy the bill counts. ``account`` and ``invoice`` are the utility's
account and invoice numbers as printed (text, kept as written: leading zeros and letters stay;
at most 64 characters, no control characters). An unknown or repeated column, a bad date or
number, an end not after the start, or two rows for the same meter and period are errors
naming the file, line and column; all problems of a file are collected (the first 50) before
anything is stored. So is a period longer than ``MAX_BILL_DAYS`` (400 days: an annual bill with
some slack) or with a date outside ``EARLIEST_BILL`` (1990-01-01) to 400 days after today — a
stray or mistyped date, such as 0001-01-01 to 9999-12-31 — and a number or date written with
digits other than ASCII 0-9 (full-width digits pasted from elsewhere). Whether the meter exists is checked where the store is known
(:mod:`auditor.services.bills`: an unknown meter is an error there).

Bill profiles (TOML; every key checked, unknown keys are errors naming them)
---------------------------------------------------------------------------
Top level ``name`` (text), ``description`` (text).
``[file]`` (optional) ``delimiter`` one character (default ``","``), ``decimal`` ``"."`` or
``","``, ``thousands`` one character or absent, ``encoding`` a codec (default ``"utf-8"``; a
byte-order mark is skipped), ``header_line`` 1-based line of the header row (default 1).
``[meter]`` (required) exactly one of ``column`` (header name) and ``id`` (one meter per file).
``[period]`` (required) ``start_column``, ``end_column`` (header names), ``format`` ``"iso"``
(default) or a strptime pattern with day, month and year (``"%d.%m.%Y"``), ``end``
``"exclusive"`` (default) or ``"inclusive"`` (the printed end date is the last day billed; one
day is added).
``[fields.<name>]`` (at least one) ``<name>`` one of ``kwh``, ``kvarh``, ``peak_kw``, ``peak_kva``,
``pf``, ``reactive_charge``, ``total``; ``column`` the header name; ``unit`` (optional):
``Wh``/``kWh``/``MWh`` for kwh, ``varh``/``kvarh``/``Mvarh`` for kvarh, ``W``/``kW``/``MW`` for
peak_kw, ``VA``/``kVA``/``MVA`` for peak_kva, ``ratio``/``percent`` for pf, ``currency``/``cents``
for the charges; default the contract's unit.
"""
from __future__ import annotations

import codecs
import csv
import io
import math
import tomllib
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta
from pathlib import Path

from auditor.bills import BILL_FIELDS, NUMBER_MAX, BillRecord
from auditor.errors import InputError, Problem, ProfileError, UsageError
from auditor.ingest.frame import MAX_PROBLEMS

__all__ = ["BillProfile", "BillsRead", "CONTRACT_COLUMNS", "load_bill_profile", "read_bills", "validate_bill"]

NUMBER_FIELDS = ("account", "invoice")  # text as printed on the bill, optional
CONTRACT_COLUMNS = ("meter", "period_start", "period_end") + BILL_FIELDS + NUMBER_FIELDS
REQUIRED_COLUMNS = ("meter", "period_start", "period_end")
QUANTITY_FIELDS = ("kwh", "kvarh", "peak_kw", "peak_kva")
SIGNED_FIELDS = ("reactive_charge", "total")  # credits may be negative
UNITS = {
    "kwh": {"Wh": 1e-3, "kWh": 1.0, "MWh": 1e3},
    "kvarh": {"varh": 1e-3, "kvarh": 1.0, "Mvarh": 1e3},
    "peak_kw": {"W": 1e-3, "kW": 1.0, "MW": 1e3},
    "peak_kva": {"VA": 1e-3, "kVA": 1.0, "MVA": 1e3},
    "pf": {"ratio": 1.0, "percent": 1e-2},
    "reactive_charge": {"currency": 1.0, "cents": 1e-2},
    "total": {"currency": 1.0, "cents": 1e-2},
}
# Plausible bill periods (module docstring)
MAX_BILL_DAYS = 400
EARLIEST_BILL = date(1990, 1, 1)
_TOP = ("name", "description", "file", "meter", "period", "fields")
_FILE = ("delimiter", "decimal", "thousands", "encoding", "header_line")
_METER = ("column", "id")
_PERIOD = ("start_column", "end_column", "format", "end")
_FIELD = ("column", "unit")


@dataclass(frozen=True)
class BillProfile:
    """A validated bill profile (keys in the module docstring)."""

    name: str
    start_column: str
    end_column: str
    columns: dict[str, str]  # bill field -> header name
    factors: dict[str, float]  # bill field -> unit factor to the contract's unit
    meter_column: str | None = None
    meter_id: str | None = None
    date_format: str = "iso"
    end_inclusive: bool = False
    delimiter: str = ","
    decimal: str = "."
    thousands: str | None = None
    encoding: str = "utf-8"
    header_line: int = 1
    description: str = ""
    source: str | None = None
    numbers: dict[str, str] = field(default_factory=dict)  # account / invoice -> header name


CONTRACT = BillProfile(name="bill contract", start_column="period_start", end_column="period_end",
                       columns={f: f for f in BILL_FIELDS}, factors={f: 1.0 for f in BILL_FIELDS},
                       meter_column="meter", numbers={f: f for f in NUMBER_FIELDS})


@dataclass(frozen=True)
class BillsRead:
    records: list[BillRecord]
    format: str  # "bills_csv" or "bills_profile:<name>"
    warnings: list[Problem] = field(default_factory=list)


# --------------------------------------------------------------------------------------------
# Profile loading
# --------------------------------------------------------------------------------------------
def _table(value, key: str, allowed: tuple[str, ...], file: str) -> dict:
    if not isinstance(value, dict):
        raise ProfileError(key, f"must be a table ([{key}])", file)
    for k in value:
        if k not in allowed:
            raise ProfileError(f"{key}.{k}" if key else k, "unknown key; allowed here: " + ", ".join(allowed), file)
    return value


def _text(t: dict, key: str, name: str, file: str, required: bool = False, default: str | None = None) -> str | None:
    if name not in t:
        if required:
            raise ProfileError(f"{key}.{name}" if key else name, "missing (text)", file)
        return default
    v = t[name]
    if not isinstance(v, str) or not v.strip():
        raise ProfileError(f"{key}.{name}" if key else name, f"must be a non-empty text, not {v!r}", file)
    return v


def load_bill_profile(path: str | Path) -> BillProfile:
    """Load and validate a bill profile; every problem is a ProfileError naming its key."""
    path = Path(path)
    file = str(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise UsageError(f"{path}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ProfileError("(file)", "is not UTF-8 text", file) from None
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError("(file)", f"not valid TOML: {exc}", file) from None
    _table(data, "", _TOP, file)
    name = _text(data, "", "name", file, default=path.stem)
    description = _text(data, "", "description", file, default="") or ""

    f = _table(data.get("file", {}), "file", _FILE, file)
    delimiter = _text(f, "file", "delimiter", file, default=",")
    if delimiter == "\\t":
        delimiter = "\t"
    if len(delimiter) != 1:
        raise ProfileError("file.delimiter", f"must be one character, not {delimiter!r}", file)
    decimal = f.get("decimal", ".")
    if decimal not in (".", ","):
        raise ProfileError("file.decimal", f'must be "." or ",", not {decimal!r}', file)
    thousands = f.get("thousands")
    if thousands is not None and (not isinstance(thousands, str) or len(thousands) != 1 or thousands == decimal):
        raise ProfileError("file.thousands", f"must be one character other than the decimal mark, not {thousands!r}", file)
    encoding = _text(f, "file", "encoding", file, default="utf-8")
    try:
        codec = codecs.lookup(encoding)
    except LookupError:
        raise ProfileError("file.encoding", f"unknown encoding {encoding!r}", file) from None
    if not getattr(codec, "_is_text_encoding", True):
        raise ProfileError("file.encoding", f"{encoding!r} is not a text encoding; use a character set such as "
                                            "utf-8, cp1252 or latin-1", file)
    header_line = f.get("header_line", 1)
    if isinstance(header_line, bool) or not isinstance(header_line, int) or header_line < 1:
        raise ProfileError("file.header_line", f"must be a whole number of at least 1, not {header_line!r}", file)

    if "meter" not in data:
        raise ProfileError("meter", "missing table: give [meter] column or id", file)
    m = _table(data["meter"], "meter", _METER, file)
    if ("column" in m) == ("id" in m):
        raise ProfileError("meter", "give exactly one of column (a header name) and id (one meter per file)", file)
    meter_column = _text(m, "meter", "column", file)
    meter_id = _text(m, "meter", "id", file)

    if "period" not in data:
        raise ProfileError("period", "missing table: give [period] start_column and end_column", file)
    p = _table(data["period"], "period", _PERIOD, file)
    start_column = _text(p, "period", "start_column", file, required=True)
    end_column = _text(p, "period", "end_column", file, required=True)
    fmt = _text(p, "period", "format", file, default="iso")
    if fmt != "iso":
        if not all(x in fmt for x in ("%d", "%m")) or not ("%Y" in fmt or "%y" in fmt):
            raise ProfileError("period.format", f'must be "iso" or a strptime pattern with %d, %m and %Y, not {fmt!r}', file)
    end = _text(p, "period", "end", file, default="exclusive")
    if end not in ("exclusive", "inclusive"):
        raise ProfileError("period.end", f'must be "exclusive" or "inclusive", not {end!r}', file)

    fields_t = data.get("fields")
    if not isinstance(fields_t, dict) or not fields_t:
        raise ProfileError("fields", "missing: map at least one bill field ([fields.kwh] column = ...)", file)
    columns: dict[str, str] = {}
    factors: dict[str, float] = {}
    for name_, spec in fields_t.items():
        key = f"fields.{name_}"
        if name_ not in BILL_FIELDS:
            raise ProfileError(key, "unknown bill field; allowed: " + ", ".join(BILL_FIELDS), file)
        t = _table(spec, key, _FIELD, file)
        columns[name_] = _text(t, key, "column", file, required=True)
        units = UNITS[name_]
        unit = t.get("unit", next(u for u, v in units.items() if v == 1.0))
        if unit not in units:
            raise ProfileError(f"{key}.unit", f"must be one of {', '.join(units)}, not {unit!r}", file)
        factors[name_] = units[unit]
    used = [c for c in [meter_column, start_column, end_column, *columns.values()] if c]
    dup = next((c for c in used if used.count(c) > 1), None)
    if dup:
        raise ProfileError("fields", f"column {dup!r} is mapped twice", file)
    return BillProfile(name=name, description=description, start_column=start_column, end_column=end_column,
                       columns=columns, factors=factors, meter_column=meter_column, meter_id=meter_id,
                       date_format=fmt, end_inclusive=end == "inclusive", delimiter=delimiter, decimal=decimal,
                       thousands=thousands, encoding=encoding, header_line=header_line, source=file)


# --------------------------------------------------------------------------------------------
# Cell parsing (shared with manual entry)
# --------------------------------------------------------------------------------------------
def parse_date(text: str, fmt: str = "iso") -> date:
    text = text.strip()
    if not text.isascii():
        raise ValueError("digits other than ASCII")
    if fmt == "iso":
        return date.fromisoformat(text) if len(text) == 10 else _bad_date()
    return datetime.strptime(text, fmt).date()


def _bad_date():
    raise ValueError("not YYYY-MM-DD")


def parse_number(text: str, decimal: str = ".", thousands: str | None = None) -> float:
    t = text.strip().replace("\u00a0", "").replace(" ", "")
    if not t.isascii():
        raise ValueError("digits other than ASCII")  # float() would read full-width digits
    if thousands:
        t = t.replace(thousands, "")
    if decimal == ",":
        t = t.replace(",", ".")
    v = float(t)  # ValueError for text
    if not math.isfinite(v) or t.lower().strip("+-") in ("nan", "inf", "infinity"):
        raise ValueError("not a finite number")
    return v


def _check_value(name: str, v: float) -> str | None:
    """A problem text for a value out of range, else None."""
    if name in QUANTITY_FIELDS and v < 0:
        return f"must not be negative, got {v:g}"
    if name == "pf" and not 0 < v <= 1:
        return f"a power factor is greater than 0 and at most 1, got {v:g}"
    return None


def _row_record(cells: dict[str, str], line: int, profile: BillProfile, file: str,
                problems: list[Problem]) -> BillRecord | None:
    n_before = len(problems)
    meter = profile.meter_id if profile.meter_id else cells.get(profile.meter_column, "").strip()
    if not meter:
        problems.append(Problem("empty meter id", line, profile.meter_column))
    elif len(meter) > 200:
        problems.append(Problem("meter id longer than 200 characters", line, profile.meter_column))
    dates = {}
    for role, col in (("start", profile.start_column), ("end", profile.end_column)):
        text = cells.get(col, "").strip()
        if not text:
            problems.append(Problem(f"empty period {role} date", line, col))
            continue
        try:
            dates[role] = parse_date(text, profile.date_format)
        except ValueError:
            want = "YYYY-MM-DD" if profile.date_format == "iso" else profile.date_format
            problems.append(Problem(f"not a date ({want}): {text[:40]!r}", line, col))
    if "end" in dates and profile.end_inclusive:
        dates["end"] = dates["end"] + timedelta(days=1)
    if len(dates) == 2 and dates["end"] <= dates["start"]:
        shown = "last day" if profile.end_inclusive else "end"
        problems.append(Problem(f"period {shown} {cells.get(profile.end_column, '').strip()} is not after its start "
                                f"{dates['start'].isoformat()}", line, profile.end_column))
    elif len(dates) == 2:
        latest = date.today() + timedelta(days=MAX_BILL_DAYS)
        for role, col in (("start", profile.start_column), ("end", profile.end_column)):
            if not EARLIEST_BILL <= dates[role] <= latest:
                problems.append(Problem(f"period {role} {dates[role].isoformat()} is outside the plausible range "
                                        f"{EARLIEST_BILL.isoformat()} to {latest.isoformat()}", line, col))
        days = (dates["end"] - dates["start"]).days
        if days > MAX_BILL_DAYS:
            problems.append(Problem(f"a bill period of {days:,} days; a bill covers at most {MAX_BILL_DAYS} days",
                                    line, profile.end_column))
    values: dict[str, float | None] = {}
    for name, col in profile.columns.items():
        text = cells.get(col)
        if text is None or not text.strip():
            values[name] = None
            continue
        try:
            v = parse_number(text, profile.decimal, profile.thousands) * profile.factors[name]
        except ValueError:
            problems.append(Problem(f"not a number: {text.strip()[:40]!r}", line, col))
            continue
        bad = _check_value(name, v)
        if bad:
            problems.append(Problem(f"{name} {bad}", line, col))
            continue
        values[name] = v
    for name, col in profile.numbers.items():
        text = (cells.get(col) or "").strip()
        if len(text) > NUMBER_MAX:
            problems.append(Problem(f"{name} number longer than {NUMBER_MAX} characters", line, col))
        elif any(not ch.isprintable() for ch in text):
            problems.append(Problem(f"{name} number holds a control character", line, col))
        else:
            values[name] = text or None
    if len(problems) > n_before:
        return None
    return BillRecord(meter=meter, period_start=dates["start"], period_end=dates["end"], source=Path(file).name,
                      line=line, **values)


def validate_bill(meter: str, period_start, period_end, source: str = "manual entry", **fields) -> BillRecord:
    """A bill from typed-in values, checked like a CSV row; problems name the field.

    Dates may be ``date`` objects or ISO texts; figures numbers, numeric texts, or None/"" (not
    shown on the bill); ``account`` and ``invoice`` texts. Raises InputError (file ``source``,
    column = the field) on any problem.
    """
    unknown = [k for k in fields if k not in BILL_FIELDS + NUMBER_FIELDS]
    if unknown:
        raise InputError(source, [Problem("unknown bill field; fields: " + ", ".join(BILL_FIELDS + NUMBER_FIELDS),
                                          None, k) for k in unknown])
    cells = {"meter": str(meter or "").strip()}
    for role, v in (("period_start", period_start), ("period_end", period_end)):
        cells[role] = v.isoformat() if isinstance(v, date) else str(v or "")
    for k, v in fields.items():
        if k in NUMBER_FIELDS:
            cells[k] = "" if v is None else str(v)
            continue
        cells[k] = "" if v is None else (repr(float(v)) if isinstance(v, int | float) and not isinstance(v, bool) else str(v))
    problems: list[Problem] = []
    rec = _row_record(cells, None, CONTRACT, source, problems)
    if problems:
        raise InputError(source, problems)
    return replace_source(rec, source)


def replace_source(rec: BillRecord, source: str) -> BillRecord:
    from dataclasses import replace

    return replace(rec, source=source, line=None)


# --------------------------------------------------------------------------------------------
# Reading a file
# --------------------------------------------------------------------------------------------
def read_bills(path: str | Path, profile: BillProfile | None = None) -> BillsRead:
    """Bill records from a CSV file in the contract layout, or in ``profile``'s layout.

    Raises
    ------
    InputError
        Naming the file, line and column of every bad cell (the first 50).
    """
    path = Path(path)
    file = str(path)
    p = profile or CONTRACT
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise UsageError(f"{path}: {exc.strerror or exc}") from None
    enc = "utf-8-sig" if p.encoding.lower().replace("_", "-") in ("utf-8", "utf8") else p.encoding
    try:
        text = raw.decode(enc)
    except UnicodeError as exc:
        where = f" (byte {exc.start})" if isinstance(exc, UnicodeDecodeError) else f" ({exc})"
        raise InputError(file, Problem(f"not {p.encoding} text{where}", None, "file.encoding")) from None
    lines = text.splitlines()
    if len(lines) < p.header_line or not lines[p.header_line - 1].strip():
        raise InputError(file, Problem("no header row", p.header_line))
    reader = csv.reader(io.StringIO("\n".join(lines[p.header_line - 1:])), delimiter=p.delimiter)
    try:
        header = [h.strip() for h in next(reader)]
    except csv.Error as exc:
        raise InputError(file, Problem(f"unreadable header: {exc}", p.header_line)) from None
    problems: list[Problem] = []
    warnings: list[Problem] = []
    dup = [h for i, h in enumerate(header) if h and h in header[:i]]
    for h in dup:
        problems.append(Problem("column appears twice", p.header_line, h))
    if profile is None:
        for h in header:
            if h not in CONTRACT_COLUMNS:
                problems.append(Problem("unknown column; the bill columns are " + ", ".join(CONTRACT_COLUMNS),
                                        p.header_line, h or "(empty)"))
        for h in REQUIRED_COLUMNS:
            if h not in header:
                problems.append(Problem("required column missing", p.header_line, h))
    else:
        needed = [c for c in (p.meter_column, p.start_column, p.end_column) if c]
        for c in needed + list(p.columns.values()):
            if c not in header:
                problems.append(Problem(f"column named in profile {p.name!r} not in the header", p.header_line, c))
        ignored = [h for h in header if h and h not in needed and h not in p.columns.values()]
        if ignored:
            warnings.append(Problem("columns not mapped by the profile are ignored: " + ", ".join(ignored[:10]),
                                    p.header_line))
    if problems:
        raise InputError(file, problems[:MAX_PROBLEMS])

    records: list[BillRecord] = []
    seen: dict[tuple, int] = {}
    line = p.header_line
    try:
        for row in reader:  # bills: a few rows per meter and year
            line = p.header_line + reader.line_num - 1
            if not any(c.strip() for c in row):
                continue
            if len(row) > len(header):
                problems.append(Problem(f"{len(row)} fields but the header has {len(header)}", line))
                continue
            cells = dict(zip(header, row + [""] * (len(header) - len(row)), strict=True))
            rec = _row_record(cells, line, p, file, problems)
            if rec is None:
                continue
            key = (rec.meter, rec.period_start, rec.period_end)
            if key in seen:
                problems.append(Problem(f"a second bill for {rec.meter} {rec.period_start}..{rec.period_end} "
                                        f"(first on line {seen[key]})", line, p.start_column))
                continue
            seen[key] = line
            records.append(rec)
            if len(problems) >= MAX_PROBLEMS:
                break
    except csv.Error as exc:
        problems.append(Problem(f"unreadable CSV: {exc}", line + 1))
    if problems:
        raise InputError(file, problems[:MAX_PROBLEMS])
    by_meter: dict[str, list[BillRecord]] = {}
    for r in records:
        by_meter.setdefault(r.meter, []).append(r)
    for meter, rs in by_meter.items():
        rs = sorted(rs, key=lambda r: r.period_start)
        for a, b in zip(rs, rs[1:], strict=False):
            if b.period_start < a.period_end:
                problems.append(Problem(f"bill {b.period_start}..{b.period_end} of {meter} overlaps the bill "
                                        f"{a.period_start}..{a.period_end} on line {a.line}", b.line, p.start_column))
    if problems:
        raise InputError(file, problems[:MAX_PROBLEMS])
    if not records:
        raise InputError(file, Problem("no bills in the file", p.header_line + 1))
    fmt = "bills_csv" if profile is None else f"bills_profile:{p.name}"
    return BillsRead(records, fmt, warnings)
