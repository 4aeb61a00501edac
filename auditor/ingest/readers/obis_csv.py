"""CSV load profiles whose value columns are named by OBIS codes (IEC 62056-61).

Layout: a ``meter`` column (or the OBIS device-id code ``0-0:96.1.0``), a ``start`` or ``end``
column (ISO 8601, as in the plain CSV), an optional ``flag`` (A/E), and value columns headed by
OBIS codes in any of the usual spellings: ``1.29``, ``1.29.0``, ``1-0:1.29.0``,
``1-0:1.29.0*255``, ``1.0.1.29.0.255``; optionally followed by a unit in brackets or
parentheses, ``1-0:1.29.0 [Wh]``. Without a unit, values are kWh / kvarh.

The code's C group names the quantity and D the processing; only D = 29 (energy per load-profile
interval) is interval energy (from memory of the standard):

=====  ==========================================  =================
C      quantity                                    canonical column
=====  ==========================================  =================
1      active energy import (+A)                   ``kwh``
2      active energy export (−A)                   ``kwh_received``
5      reactive energy quadrant I (inductive)      ``kvarh_lag``
8      reactive energy quadrant IV (capacitive)    ``kvarh_lead``
3, 4   reactive import / export (+R / −R)          ``kvarh_lag`` / ``kvarh_lead`` when 5 / 8 are absent
=====  ==========================================  =================

+R is Q1 + Q2 and −R is Q3 + Q4; at a site that imports active energy Q2 and Q3 are empty, so
they equal Q1 and Q4 (a warning says the assumption was made). Columns for Q2/Q3 (C = 6, 7) and
apparent energy (9, 10) are not needed by the audit and are skipped with a warning; cumulative
registers (D = 8) are an error (they are readings of a counter, not interval energy).
"""
from __future__ import annotations

import re
from pathlib import Path

from auditor.errors import InputError, Problem
from auditor.ingest.frame import ReadInfo, ReadOptions, ReadOutput
from auditor.ingest.readers import plain_csv

FORMAT = "obis_csv"
_UNIT_RE = re.compile(r"^(?P<code>[^\[\(]+?)\s*(?:[\[\(]\s*(?P<unit>[A-Za-z]+)\s*[\]\)])?$")
_OBIS_RE = re.compile(r"^(?:(?P<a>\d+)-(?P<b>\d+):)?(?P<c>\d+)\.(?P<d>\d+)(?:\.(?P<e>\d+))?(?:[*&.](?P<f>\d+))?$")
_OBIS6_RE = re.compile(r"^(?P<a>\d+)\.(?P<b>\d+)\.(?P<c>\d+)\.(?P<d>\d+)\.(?P<e>\d+)(?:\.(?P<f>\d+))?$")
DEVICE_ID_CODES = ("96.1.0", "0-0:96.1.0", "0.0.96.1.0.255", "0-0:96.1.0*255")
INTERVAL_ENERGY = 29
CUMULATIVE = 8
PRIMARY = {1: "kwh", 2: "kwh_received", 5: "kvarh_lag", 8: "kvarh_lead"}
FALLBACK = {3: "kvarh_lag", 4: "kvarh_lead"}
SKIPPED = {6: "reactive quadrant II", 7: "reactive quadrant III", 9: "apparent import", 10: "apparent export"}
# power of ten from the file's unit to kWh / kvarh
ACTIVE_UNITS = {"wh": -3, "kwh": 0, "mwh": 3}
REACTIVE_UNITS = {"varh": -3, "kvarh": 0, "mvarh": 3}


def parse_code(cell: str) -> tuple[int, int, str | None] | None:
    """(C, D, unit) of an OBIS-coded header cell, or None when the cell is not one."""
    m = _UNIT_RE.match(cell.strip())
    if not m:
        return None
    code = m.group("code").strip()
    o = _OBIS_RE.match(code) or _OBIS6_RE.match(code)
    if not o:
        return None
    if o.group("a") is not None and o.group("a") != "1":
        return None  # A = 1 is electricity; anything else is not a channel of ours
    return int(o.group("c")), int(o.group("d")), (m.group("unit") or None)


def _header(head: str, limit: int = -1) -> list[str]:
    first = head.lstrip("\ufeff").split("\n", 1)[0].rstrip("\r") if head.strip() else ""
    cols = first.split(",", limit)
    return [c.strip() for c in (cols[:limit] if limit >= 0 else cols)]


def sniff(path: Path, head: str) -> bool:
    cols = _header(head, 256)
    low = [c.lower() for c in cols]
    has_time = "start" in low or "end" in low
    # an OBIS load profile has a handful of columns: look at the first few only
    return has_time and any(c.lower() not in DEVICE_ID_CODES and parse_code(c) for c in cols)


def _mapping(cols: list[str], file: str, warnings: list[Problem]) -> tuple[list[str], dict[str, int], dict[str, str]]:
    """Canonical names for the header cells, the unit's power of ten and source unit of each quantity."""
    names: list[str] = []
    powers: dict[str, int] = {}
    units: dict[str, str] = {}
    problems: list[Problem] = []
    by_c: dict[int, int] = {}
    for i, cell in enumerate(cols):
        low = cell.lower()
        if low in DEVICE_ID_CODES:
            names.append("meter")
            continue
        parsed = parse_code(cell)
        if parsed is None:
            names.append(low)  # meter, start, end, flag (plain_csv checks the rest)
            continue
        c, d, unit = parsed
        if d == CUMULATIVE:
            problems.append(Problem(f"{cell!r} is a cumulative register (D = 8), not energy per interval; "
                                    "export the load profile (D = 29)", 1, cell))
        elif d != INTERVAL_ENERGY:
            problems.append(Problem(f"{cell!r}: only energy per load-profile interval (D = 29) can be read", 1, cell))
        elif c in by_c:
            problems.append(Problem(f"{cell!r} names the same quantity as column {cols[by_c[c]]!r}", 1, cell))
        by_c.setdefault(c, i)
        names.append(f"__obis_{c}")
    if problems:
        raise InputError(file, problems)
    quantity_of: dict[int, str] = {}
    for c in by_c:
        if c in PRIMARY:
            quantity_of[c] = PRIMARY[c]
        elif c in FALLBACK:
            q = FALLBACK[c]
            if (5 if q == "kvarh_lag" else 8) in by_c:
                warnings.append(Problem(f"column {cols[by_c[c]]!r} skipped: the quadrant column is read instead",
                                        1, cols[by_c[c]]))
                continue
            quantity_of[c] = q
            warnings.append(Problem(f"column {cols[by_c[c]]!r} ({'+R' if c == 3 else '−R'}) read as "
                                    f"{q} (quadrant {'I' if c == 3 else 'IV'}): right for a site that only "
                                    "imports active energy", 1, cols[by_c[c]]))
        else:
            what = SKIPPED.get(c, f"C = {c}")
            warnings.append(Problem(f"column {cols[by_c[c]]!r} ({what}) is not needed and was skipped", 1,
                                    cols[by_c[c]]))
    out = []
    for name, cell in zip(names, cols, strict=True):
        if not name.startswith("__obis_"):
            out.append(name)
            continue
        c = int(name[7:])
        q = quantity_of.get(c)
        if q is None:
            out.append(f"__skip_{c}")
            continue
        _, _, unit = parse_code(cell)
        table = ACTIVE_UNITS if q.startswith("kwh") else REACTIVE_UNITS
        default = "kWh" if q.startswith("kwh") else "kvarh"
        key = (unit or default).lower()
        if key not in table:
            raise InputError(file, Problem(f"unit {unit!r} does not fit {cell!r} (use one of "
                                           f"{', '.join(table)})", 1, cell))
        powers[q] = table[key]
        units[q] = unit or default
        out.append(q)
    missing = [q for q in ("kwh", "kvarh_lag", "kvarh_lead") if q not in out]
    if missing:
        need = {"kwh": "1.29 (active import)", "kvarh_lag": "5.29 (reactive Q1)", "kvarh_lead": "8.29 (reactive Q4)"}
        raise InputError(file, [Problem(f"no column for {q}: expected OBIS {need[q]}", 1) for q in missing])
    return out, powers, units


def read(path: Path, options: ReadOptions) -> ReadOutput:
    file = str(path)
    head = plain_csv.read_header_line(path, file)
    info = ReadInfo(format=FORMAT)
    cols, powers, units = _mapping(_header(head), file, info.warnings)
    time_col = plain_csv.check_header([c for c in cols if not c.startswith("__skip_")], file)
    info.quantities = tuple(q for q in ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received") if q in cols)
    info.source_units = units
    info.label = time_col
    return ReadOutput(info, _scaled(plain_csv._chunks(path, cols, time_col, options, file), powers))


def scale(values, power: int):
    """values × 10^power, by one correctly rounded operation (1250 Wh → 1.25 kWh exactly as typed)."""
    if power == 0:
        return values
    return values * 10.0 ** power if power > 0 else values / 10.0 ** -power


def _scaled(chunks, powers):
    # skipped channels (``__skip_C``) are read by pandas but never copied into the canonical frame
    for chunk in chunks:
        for q, p in powers.items():
            chunk[q] = scale(chunk[q], p)
        yield chunk
