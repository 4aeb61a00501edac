"""A generator of bad inputs for every reader, mapping profiles and bills.

Every case is an input that must be rejected: each reader's file formats, mapping profiles and
bill files and hand-entered bills, in the classes that once crashed the program (exit 3) or
were stored as if they were readings — dates of year 0000, negative years, 0001, 1677, 1900 and
9999, values of 1e300 or 1e23 kWh, TRUE as a number, full-width and other non-ASCII digits,
fields over the csv module's 131,072-byte limit, XML declaring unknown encodings, profiles with
codecs that are not text or with absurd multipliers, bill periods of millennia — and the usual
malformed structure. ``cases()`` returns them all; the tests run them through the services and
through the command line and check: rejected (exit 1 or 2), no traceback, nothing stored.
"""
from __future__ import annotations

import encodings.aliases
import itertools
import random
from dataclasses import dataclass

import pandas as pd

from tests.espi_helpers import feed

HEADER = "meter,start,kwh,kvarh_lag,kvarh_lead"
WIDE_COLUMNS = ",".join(str(i) for i in range(1, 101))
FIELD_LIMIT = 131_072  # the csv module's default field_size_limit


@dataclass(frozen=True)
class Case:
    kind: str  # the class of bad input
    name: str  # file name (its suffix tells the reader nothing: detection is by content)
    data: bytes
    args: tuple[str, ...] = ()  # extra ``auditor import`` options
    profile: str | None = None  # a mapping profile's TOML (passed as --profile)
    target: str = "import"  # "import" (meter data), "bills" (a bill file), "bill" (manual entry)
    bill: dict | None = None  # manual entry: add_bill keyword arguments


def _rows(meter: str = "BX-1", day: str = "2025-02-03", n: int = 4, tz: str = "+00:00") -> list[str]:
    t0 = pd.Timestamp(f"{day}T00:00:00{tz}")
    return [f"{meter},{(t0 + pd.Timedelta(minutes=15 * i)).isoformat()},{10 + i * 0.5:.3f},{4 + i * 0.1:.3f},0.000"
            for i in range(n)]


def _csv(lines: list[str], header: str = HEADER, eol: str = "\n") -> bytes:
    return (header + eol + eol.join(lines) + eol).encode("utf-8")


def _set(line: str, col: int, cell: str) -> str:
    parts = line.split(",")
    parts[col] = cell
    return ",".join(parts)


BAD_YEARS = ["0000", "-001", "-0001", "0001", "1677", "1900", "1989", "9999", "10000", "2262", "2999"]
BAD_STAMPS = [f"{y}-01-01T00:00:00+00:00" for y in BAD_YEARS] + [
    "9999-12-31T23:45:00+00:00", "1989-12-31T23:45:00+00:00", "2099-06-01T00:00:00Z",
    "２０２５-02-03T00:00:00+00:00", "2025-０２-03T00:00:00+00:00", "٢٠٢٥-02-03T00:00:00+00:00",
    "2025-02-03T00:00:00+99:00", "2025-02-30T00:00:00+00:00", "NaT", "null", "2025-02-03T24:00:00+00:00",
]
# at 15 minutes the default bound is 500,000 kWh (2,000,000 kW on average)
BAD_NUMBERS = ["1e300", "1e23", "1e308", "1.7976931348623157e308", "1e309", "-1e300", "1000001", "500000.5", "2e6",
               "TRUE", "FALSE", "true", "１２", "١٢", "߁߂", "0x10", "1_0", "nan", "inf", "-inf", "NaN",
               "Infinity", "--1", "1e", "e5", "1,5", "", "٫5"]
XML_ENCODINGS = ["x-nothing", "klingon", "utf-99", "rot13", "zlib", "hex", "base64", "bz2", "uu", "undefined",
                 "mbcs", "idna"]


def plain_cases() -> list[Case]:
    out = []
    for i, stamp in enumerate(BAD_STAMPS):
        for row in (0, 2):
            lines = _rows()
            lines[row] = _set(lines[row], 1, stamp)
            out.append(Case("plain: bad date", f"plain-date-{i}-{row}.csv", _csv(lines)))
    for i, cell in enumerate(BAD_NUMBERS):
        for col in (2, 3, 4):
            lines = _rows()
            lines[1] = _set(lines[1], col, cell)
            out.append(Case("plain: bad value", f"plain-value-{i}-{col}.csv", _csv(lines)))
    for col in range(5):
        for row in (0, 2):
            lines = _rows()
            lines[row] = _set(lines[row], col, '"' + "9" * (FIELD_LIMIT + 1) + '"')
            out.append(Case("plain: field over 131,072 bytes", f"plain-long-{col}-{row}.csv", _csv(lines)))
    for n in (2_000, 200_000):
        header = HEADER + "," + ",".join(f"extra{j}" for j in range(n))
        out.append(Case("plain: huge header", f"plain-wide-header-{n}.csv", _csv(_rows(), header)))
    header = ",".join(f"junk{j}" for j in range(5_000)) + "," + HEADER
    out.append(Case("plain: huge header", "plain-junk-first.csv", _csv(_rows(), header)))
    ids = ["x" * 201, "a\x01b", "tab\tid", "\x7f", "line\u2028sep"]
    for i, meter in enumerate(ids):
        out.append(Case("plain: meter id", f"plain-meter-{i}.csv", _csv(_rows(meter=meter))))
    naive = [r.replace("+00:00", "") for r in _rows()]
    out += [
        Case("plain: wall time", "plain-naive.csv", _csv(naive)),
        Case("plain: wall time", "plain-naive-bad-zone.csv", _csv(naive), ("--timezone", "Mars/Olympus")),
        Case("plain: wall time", "plain-spring-gap.csv", _csv(["BX-1,2025-03-30T01:45:00,1,1,0",
                                                                 "BX-1,2025-03-30T02:00:00,1,1,0"]),
             ("--timezone", "Europe/Berlin")),
        Case("plain: wall time", "plain-one-pass.csv", _csv(["BX-1,2025-10-26T02:00:00,1,1,0",
                                                               "BX-1,2025-10-26T02:15:00,1,1,0",
                                                               "BX-1,2025-10-26T03:00:00,1,1,0"]),
             ("--timezone", "Europe/Berlin")),
    ]
    structure = {
        "empty": b"", "header only": (HEADER + "\n").encode(), "blank": b"\n\n\n",
        "nul bytes": _csv(_rows()).replace(b"BX-1", b"BX\x00"), "short row": _csv(_rows() + ["BX-1,2025"]),
        "long row": _csv(_rows() + [_rows()[0] + ",1,2"]), "open quote": _csv(_rows() + ['BX-1,"2025,1,1,0']),
        "utf-16": _csv(_rows()).decode().encode("utf-16"), "latin-1 id": _csv(_rows(meter="Büro")).decode().encode("latin-1"),
        "duplicate differs": _csv(_rows() + [_set(_rows()[0], 2, "99")]), "negative": _csv([_set(_rows()[0], 2, "-1")]),
        "off grid": _csv(_rows() + ["BX-1,2025-02-03T01:07:00+00:00,1,1,0"]),
    }
    out += [Case("plain: structure", f"plain-{k.replace(' ', '-')}.csv", v) for k, v in structure.items()]
    return out


def obis_cases() -> list[Case]:
    header = "meter,end,1-0:1.29.0 [Wh],1-0:5.29.0 [varh],1-0:8.29.0 [varh]"
    rows = [f"OB-1,2025-02-03T{h:02d}:{m:02d}:00+01:00,{1000 + m},{400 + m},0" for h in (1, 2) for m in (0, 15, 30, 45)]
    out = []
    for i, cell in enumerate(["1e300", "1e26", "TRUE", "１０００", "1e309"]):
        out.append(Case("obis: bad value", f"obis-value-{i}.csv", _csv([_set(rows[0], 2, cell)] + rows[1:], header)))
    for i, stamp in enumerate(["0000-01-01T00:00:00+01:00", "9999-12-31T00:00:00+01:00", "1677-09-21T00:00:00Z"]):
        out.append(Case("obis: bad date", f"obis-date-{i}.csv", _csv([_set(rows[0], 1, stamp)] + rows[1:], header)))
    out.append(Case("obis: cumulative register", "obis-register.csv",
                    _csv(rows, header.replace("1-0:1.29.0", "1-0:1.8.0"))))
    out.append(Case("obis: field over 131,072 bytes", "obis-long.csv",
                    _csv([_set(rows[0], 2, "7" * (FIELD_LIMIT + 5))] + rows[1:], header)))
    return out


def _wide(day: str, values: list[str], meter: str = "WD-1", quantity: str = "kwh") -> str:
    return f"{meter},{day},{quantity}," + ",".join(values + [""] * (100 - len(values)))


def wide_cases() -> list[Case]:
    ok = ["1.5"] * 96
    header = f"meter,date,quantity,{WIDE_COLUMNS}"
    out = []
    for zone in ("Europe/Berlin", "America/Chicago", "Asia/Tokyo", "Pacific/Kiritimati", "UTC"):
        for day in ("9999-12-31", "0001-01-01", "1677-09-21", "1900-01-01", "2262-04-12", "10000-01-01"):
            out.append(Case("wide: bad date", f"wide-{day}-{zone.replace('/', '-')}.csv",
                            _csv([_wide(day, ok)], header), ("--timezone", zone)))
    for i, day in enumerate(["２０２５-02-03", "2025-٠٢-03", "2025/02/03", "2025-02-30"]):
        out.append(Case("wide: bad date", f"wide-text-date-{i}.csv", _csv([_wide(day, ok)], header),
                        ("--timezone", "Europe/Berlin")))
    for i, cell in enumerate(["TRUE", "true", "FALSE", "1e300", "1e23", "１", "1e309", "nan"]):
        for where in ("all", "first", "middle"):
            vals = [cell] * 96 if where == "all" else [cell] + ok[1:] if where == "first" else ok[:50] + [cell] + ok[51:]
            out.append(Case("wide: bad value", f"wide-value-{i}-{where}.csv", _csv([_wide("2025-02-03", vals)], header),
                            ("--timezone", "Europe/Berlin")))
    out.append(Case("wide: wrong count", "wide-count.csv", _csv([_wide("2025-02-03", ok[:95])], header),
                    ("--timezone", "Europe/Berlin")))
    out.append(Case("wide: field over 131,072 bytes", "wide-long.csv",
                    _csv([_wide("2025-02-03", ["8" * (FIELD_LIMIT + 1)] + ok[1:])], header),
                    ("--timezone", "Europe/Berlin")))
    return out


def espi_cases() -> list[Case]:
    base = feed([(72, 1, 0, [1200, 1300, 1250, 1275]), (73, 1, 0, [500, 510, 520, 530])], title="Fen Road")
    out = []
    for enc in XML_ENCODINGS:
        out.append(Case("espi: declared encoding", f"espi-enc-{enc}.xml",
                        base.replace('encoding="UTF-8"', f'encoding="{enc}"').encode("utf-8")))
    for i, value in enumerate(["1e99", "1e300", "1e26", "1e309", "TRUE", "１２００", "-5"]):
        out.append(Case("espi: bad value", f"espi-value-{i}.xml",
                        base.replace("<value>1300</value>", f"<value>{value}</value>", 1).encode()))
    for i, start in enumerate(["1e99", "-62135596800", "253402300799", "0", "-1", "99999999999999999999", "1.5e9"]):
        out.append(Case("espi: bad start", f"espi-start-{i}.xml",
                        base.replace("<start>1736900100</start>", f"<start>{start}</start>", 1).encode()))
    for i, dur in enumerate(["1e30", "-900", "0", "86401", "899"]):
        out.append(Case("espi: bad duration", f"espi-duration-{i}.xml",
                        base.replace("<duration>900</duration>", f"<duration>{dur}</duration>", 1).encode()))
    for i, length in enumerate(["1000000000000000000000", "-900", "0"]):
        out.append(Case("espi: bad interval length", f"espi-length-{i}.xml",
                        base.replace("<intervalLength>900</intervalLength>",
                                     f"<intervalLength>{length}</intervalLength>", 1).encode()))
    out.append(Case("espi: root not closed", "espi-open.xml", base.replace("</feed>", "").encode()))
    out.append(Case("espi: entities", "espi-bomb.xml",
                    b'<?xml version="1.0"?>\n<!DOCTYPE f [<!ENTITY a "aaaa"><!ENTITY b "&a;&a;&a;">]>\n'
                    b"<feed><title>&b;</title></feed>\n"))
    return out


PROFILE = """
[file]
{file}
[meter]
column = "meter"
{meter}
[time]
column = "start"
interval_minutes = 15
{time}
[quantities.kwh]
column = "kwh"
unit = "kWh"
{kwh}
"""


def _profile(file: str = "", meter: str = "", time: str = "", kwh: str = "") -> str:
    return PROFILE.format(file=file, meter=meter, time=time, kwh=kwh)


def _non_text_codecs() -> list[str]:
    import codecs

    names = sorted(set(encodings.aliases.aliases.values()))
    out = []
    for n in names:
        try:
            if not getattr(codecs.lookup(n), "_is_text_encoding", True):
                out.append(n)
        except LookupError:
            pass
    return out


def _awkward_text_codecs() -> list[str]:
    """Text codecs that cannot decode an ordinary CSV, or decode it oddly."""
    return ["utf-16", "utf-32", "utf_16_be", "utf-32-le", "undefined", "punycode", "cp037", "cp500",
            "mbcs", "oem", "x-nothing"]


def profile_cases() -> list[Case]:
    data = _csv(_rows(day="2025-02-04"))  # not the stored file: each profile is read
    out = []
    for enc in ["rot13", "zlib", "hex", *_non_text_codecs()]:
        out.append(Case("profile: not a text codec", f"profile-enc-{enc}.csv", data,
                        profile=_profile(file=f'encoding = "{enc}"')))
    for enc in _awkward_text_codecs():
        out.append(Case("profile: awkward codec", f"profile-enc2-{enc}.csv", data,
                        profile=_profile(file=f'encoding = "{enc}"')))
    for i, m in enumerate(["1e308", "1.7976931348623157e308", "inf", "nan", "0", "-1", "1e-300", "1e9", '"2"', "true"]):
        out.append(Case("profile: multiplier", f"profile-mult-{i}.csv", data, profile=_profile(meter=f"multiplier = {m}")))
        out.append(Case("profile: multiplier", f"profile-qmult-{i}.csv", data, profile=_profile(kwh=f"multiplier = {m}")))
    strptime_rows = [f"BX-1,0{d}.02.2025 00:{m:02d},1,1,0" for d in (3,) for m in (0, 15, 30)]
    for i, bad in enumerate(["０３.02.2025 00:45", "03.٠٢.2025 00:45", "03.02.２０２５ 00:45", "31.02.2025 00:45",
                             "03.02.0000 00:45", "31.12.9999 00:45", "03.02.1677 00:45"]):
        rows = strptime_rows + [f"BX-1,{bad},1,1,0"]
        out.append(Case("profile: strptime", f"profile-strptime-{i}.csv", _csv(rows),
                        profile=_profile(time='format = "%d.%m.%Y %H:%M"\ntimezone = "Europe/Berlin"')))
    for i, cell in enumerate(["1e300", "１２", "TRUE", "1e23"]):
        lines = _rows()
        lines[1] = _set(lines[1], 2, cell)
        out.append(Case("profile: bad value", f"profile-value-{i}.csv", _csv(lines), profile=_profile()))
    keys = [('header_line = 1000000000', ""), ('delimiter = ""', ""), ('decimal = ";"', ""),
            ("", 'interval_minutes = 7'), ("", 'timezone = "Mars/Olympus"'), ("", 'label = "middle"'),
            ("", 'format = "%Q"')]
    for i, (f, t) in enumerate(keys):
        text = _profile(file=f, time=t)
        if "interval_minutes = 7" in t:
            text = text.replace("interval_minutes = 15\n", "")
        out.append(Case("profile: bad key", f"profile-key-{i}.csv", data, profile=text))
    out.append(Case("profile: field over 131,072 bytes", "profile-long-header.csv",
                    _csv(_rows(), "meter,start,kwh," + "h" * (FIELD_LIMIT + 1)), profile=_profile()))
    return out


BILL_HEADER = "meter,period_start,period_end,kwh,kvarh,peak_kw,peak_kva,pf,reactive_charge,total"


def bill_cases() -> list[Case]:
    out = []
    periods = [("0001-01-01", "9999-12-31"), ("2025-01-01", "2026-03-01"), ("1899-01-01", "1899-02-01"),
               ("2025-01-01", "9999-01-01"), ("２０２５-01-01", "2025-02-01"), ("2025-01-01", "2025-０２-01")]
    for i, (a, b) in enumerate(periods):
        out.append(Case("bills: period", f"bills-period-{i}.csv",
                        (f"{BILL_HEADER}\nBX-1,{a},{b},1000,500,10,12,0.9,1,100\n").encode(), target="bills"))
        out.append(Case("bills: period (manual entry)", f"bill-period-{i}", b"", target="bill",
                        bill={"meter": "BX-1", "period_start": a, "period_end": b, "kwh": 1000}))
    for i, n in enumerate(["１０００", "١٠٠٠", "1e309", "nan", "TRUE"]):
        out.append(Case("bills: number", f"bills-number-{i}.csv",
                        (f"{BILL_HEADER}\nBX-1,2025-01-01,2025-02-01,{n},500,10,12,0.9,1,100\n").encode(), target="bills"))
        out.append(Case("bills: number (manual entry)", f"bill-number-{i}", b"", target="bill",
                        bill={"meter": "BX-1", "period_start": "2025-01-01", "period_end": "2025-02-01", "kwh": n}))
    out.append(Case("bills: field over 131,072 bytes", "bills-long.csv",
                    (f"{BILL_HEADER}\nBX-1,2025-01-01,2025-02-01,{'1' * (FIELD_LIMIT + 1)},500,10,12,0.9,1,100\n").encode(),
                    target="bills"))
    return out


def mutated_cases(n: int = 200, seed: int = 20251203) -> list[Case]:
    """Seeded random combinations of the bad cells above in random places of a good plain CSV."""
    rng = random.Random(seed)
    cells = [("date", s) for s in BAD_STAMPS] + [("value", v) for v in BAD_NUMBERS if v not in ("",)]
    out = []
    for i in range(n):
        lines = _rows(n=8)
        picks = rng.sample(cells, rng.randint(1, 3))
        for what, cell in picks:
            row = rng.randrange(len(lines))
            col = 1 if what == "date" else rng.randint(2, 4)
            lines[row] = _set(lines[row], col, cell)
        eol = rng.choice(["\n", "\r\n"])
        out.append(Case("mixed: random bad cells", f"mixed-{i}.csv", _csv(lines, eol=eol)))
    return out


def cases() -> list[Case]:
    return list(itertools.chain(plain_cases(), obis_cases(), wide_cases(), espi_cases(), profile_cases(),
                                bill_cases(), mutated_cases()))
