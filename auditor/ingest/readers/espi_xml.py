"""ESPI XML usage feeds (NAESB REQ.21, the open "energy usage information" exchange).

A feed is an Atom document whose entries carry a ``UsagePoint``, ``MeterReading``,
``ReadingType`` or ``IntervalBlock`` in their ``content``. Each MeterReading is one channel; its
ReadingType says what the channel measures; its IntervalBlocks hold ``IntervalReading`` elements
(``timePeriod`` start + duration in UTC epoch seconds, integer ``value``).

Which channel is which (the ReadingType codes are from memory of the standard and of the
IEC 61968-9 enumerations it uses):

=========  =====================================  =================
uom        flowDirection                          canonical column
=========  =====================================  =================
72 (Wh)    1 forward (delivered to the customer)  ``kwh``
72 (Wh)    19 reverse (received from it)          ``kwh_received``
73 (VArh)  2 lagging, 15 quadrant 1, 1 forward    ``kvarh_lag``
73 (VArh)  3 leading, 18 quadrant 4, 19 reverse   ``kvarh_lead``
=========  =====================================  =================

ESPI itself has no field that says "quadrant" for a VArh channel other than flowDirection; a
feed that gives reactive energy as forward/reverse is read as forward = lagging (Q1, inductive,
reactive power imported with the active power) and reverse = leading (Q4, capacitive), which
holds for a site that imports active energy (the load view of DEVELOPERS.md). Values are
``value × 10^powerOfTenMultiplier`` in the ReadingType's unit, divided by 1000 for kWh/kvarh.
Channels of other units (W, VAr, VA demand) are skipped with a warning. Only interval (delta)
data is read: ``accumulationBehaviour`` 4, or absent.

Channels are tied together through the Atom links (a block's ``up``/``self`` href lies under
its MeterReading's ``self`` href; the MeterReading's ``related`` links name its ReadingType).
A document without links (or a bare ``MeterReading`` document) pairs each IntervalBlock with the
nearest ReadingType before it. The meter id is the UsagePoint's title, else its id in the href,
else the file name.

Parsing is streaming, through :mod:`defusedxml` (entity declarations and external references
are refused, so an entity-expansion "bomb" is a clear rejection), and the ``line`` of each row is
the source line of its active-energy IntervalReading.
"""
from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from xml.etree.ElementTree import ParseError

import numpy as np
import pandas as pd
from defusedxml import DefusedXmlException
from defusedxml.ElementTree import DefusedXMLParser

from auditor.errors import InputError, Problem
from auditor.ingest.frame import (
    ALLOWED_INTERVALS,
    MAX_PROBLEMS,
    ReadInfo,
    ReadOptions,
    ReadOutput,
    canonical,
    check_window,
)

FORMAT = "espi_xml"
_SNIFF_RE = re.compile(r"<(?:\w+:)?(?:IntervalBlock|ReadingType|UsagePoint|MeterReading)\b")
_KINDS = ("UsagePoint", "MeterReading", "ReadingType", "IntervalBlock")
_RT_FIELDS = ("uom", "flowDirection", "powerOfTenMultiplier", "intervalLength", "accumulationBehaviour",
              "kind", "commodity", "phase")
UOM_WH, UOM_VARH = 72, 73
FLOW_ACTIVE = {1: "kwh", 19: "kwh_received"}
FLOW_REACTIVE = {1: "kvarh_lag", 2: "kvarh_lag", 15: "kvarh_lag", 19: "kvarh_lead", 3: "kvarh_lead", 18: "kvarh_lead"}
DELTA_DATA = 4
# QualityOfReading codes meaning "estimated" (8 reference day, 9 linear interpolation,
# 12 projected); from memory.
ESTIMATED_QUALITY = {"8", "9", "12"}
_BLOCK = 1 << 20


def sniff(path: Path, head: str) -> bool:
    text = head.lstrip("\ufeff").lstrip()
    return text.startswith("<") and ("naesb.org/espi" in text or bool(_SNIFF_RE.search(text)))


@dataclass
class _Entry:
    line: int
    kind: str | None = None
    title: str = ""
    links: list[tuple[str, str]] = field(default_factory=list)
    fields: dict[str, str] = field(default_factory=dict)  # ReadingType
    starts: list[str] = field(default_factory=list)  # IntervalBlock readings, as text
    durations: list[str] = field(default_factory=list)
    values: list[str] = field(default_factory=list)
    quality: list[str] = field(default_factory=list)
    lines: list[int] = field(default_factory=list)

    def href(self, rel: str) -> list[str]:
        return [h.rstrip("/") for r, h in self.links if r == rel]


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


class _Collector:
    """ElementTree parser target: keeps only what the reader needs, element by element."""

    def __init__(self):
        self.parser = None  # the expat parser, for line numbers
        self.entries: list[_Entry] = []
        self.entry: _Entry | None = None
        self.in_atom_entry = False
        self.stack: list[str] = []
        self.text: list[str] = []
        self.reading: dict | None = None

    def _line(self) -> int:
        return self.parser.CurrentLineNumber

    def start(self, tag, attrib):
        name = _local(tag)
        self.stack.append(name)
        self.text = []
        if name == "entry":
            self.entry = _Entry(self._line())
            self.entries.append(self.entry)
            self.in_atom_entry = True
        elif name == "link" and self.entry is not None and self.in_atom_entry:
            self.entry.links.append((attrib.get("rel", ""), attrib.get("href", "")))
        elif name in _KINDS:
            if self.entry is None or not self.in_atom_entry or self.entry.kind is not None:
                # a bare document (no Atom entries) or several objects in one entry
                self.entry = _Entry(self._line())
                self.entries.append(self.entry)
            self.entry.kind = name
        elif name == "IntervalReading" and self.entry is not None and self.entry.kind == "IntervalBlock":
            self.reading = {"line": self._line(), "start": "", "duration": "", "value": "", "quality": ""}

    def data(self, text):
        self.text.append(text)

    def end(self, tag):
        name = self.stack.pop()
        parent = self.stack[-1] if self.stack else ""
        entry = self.entry
        if entry is None:
            return
        if name == "entry":
            self.in_atom_entry = False
        elif name == "title" and parent == "entry":
            entry.title = "".join(self.text).strip()
        elif entry.kind == "ReadingType" and parent == "ReadingType" and name in _RT_FIELDS:
            entry.fields[name] = "".join(self.text).strip()
        elif self.reading is not None:
            r = self.reading
            if name in ("start", "duration") and parent == "timePeriod" and len(self.stack) >= 2 \
                    and self.stack[-2] == "IntervalReading":
                r[name] = "".join(self.text).strip()
            elif name == "value" and parent == "IntervalReading":
                r["value"] = "".join(self.text).strip()
            elif name == "quality" and parent == "ReadingQuality":
                r["quality"] = "".join(self.text).strip()
            elif name == "IntervalReading":
                entry.starts.append(r["start"])
                entry.durations.append(r["duration"])
                entry.values.append(r["value"])
                entry.quality.append(r["quality"])
                entry.lines.append(r["line"])
                self.reading = None
        self.text = []

    def close(self):
        return self.entries


def _parse(path: Path, file: str) -> list[_Entry]:
    target = _Collector()
    parser = DefusedXMLParser(target=target, forbid_dtd=False, forbid_entities=True, forbid_external=True)
    target.parser = parser.parser
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(_BLOCK), b""):
                parser.feed(block)
        return parser.close()
    except DefusedXmlException as exc:
        what = {"EntitiesForbidden": "declares XML entities", "DTDForbidden": "has a DTD",
                "ExternalReferenceForbidden": "refers to an external entity"}.get(type(exc).__name__, "uses a refused XML feature")
        raise InputError(file, Problem(f"the XML {what}, which is refused for safety (entity expansion); "
                                       "a usage feed needs none", target.parser.CurrentLineNumber)) from None
    except ParseError as exc:
        line, col = getattr(exc, "position", (None, None))
        msg = str(exc).split(":", 1)[0]
        raise InputError(file, Problem(f"malformed XML: {msg}", line, f"char {col + 1}" if col is not None else None)) from None
    except OSError as exc:
        raise InputError(file, Problem(f"cannot read the file: {exc.strerror}")) from None
    except (LookupError, ValueError) as exc:
        # expat asks Python for the codec the XML declaration names: an unknown one ends here
        raise InputError(file, Problem(f"the XML declares an encoding Python cannot read ({exc}); usage feeds "
                                       "are UTF-8", target.parser.CurrentLineNumber or 1, "encoding")) from None


def _int_field(entry: _Entry, name: str, file: str, default: int | None = None) -> int | None:
    raw = entry.fields.get(name)
    if raw is None or raw == "":
        return default
    try:
        return int(raw)
    except ValueError:
        raise InputError(file, Problem(f"ReadingType {name} must be an integer, not {raw[:40]!r}",
                                       entry.line, f"ReadingType/{name}")) from None


@dataclass
class _Channel:
    quantity: str
    power: int  # value × 10^power is kWh / kvarh
    interval_s: int | None
    unit: str
    line: int


def _channel(rt: _Entry, file: str, warnings: list[Problem]) -> _Channel | None:
    uom = _int_field(rt, "uom", file)
    flow = _int_field(rt, "flowDirection", file, 1)
    power = _int_field(rt, "powerOfTenMultiplier", file, 0)
    length = _int_field(rt, "intervalLength", file)
    acc = _int_field(rt, "accumulationBehaviour", file)
    if uom not in (UOM_WH, UOM_VARH):
        warnings.append(Problem(f"ReadingType with uom {uom} skipped: only 72 (Wh) and 73 (VArh) interval "
                                "energy is read", rt.line))
        return None
    if acc is not None and acc != DELTA_DATA:
        raise InputError(file, Problem(
            f"ReadingType accumulationBehaviour {acc}: only interval (delta) data, 4, can be read; "
            "export interval usage rather than register readings", rt.line, "ReadingType/accumulationBehaviour"))
    table = FLOW_ACTIVE if uom == UOM_WH else FLOW_REACTIVE
    if flow not in table:
        allowed = ", ".join(str(k) for k in table)
        raise InputError(file, Problem(
            f"ReadingType flowDirection {flow} for uom {uom} cannot be mapped (known: {allowed})",
            rt.line, "ReadingType/flowDirection"))
    if length is not None and not 0 < length <= 86_400:
        raise InputError(file, Problem(f"ReadingType intervalLength {length} s: it must be 300, 900, 1800 or 3600 s",
                                       rt.line, "ReadingType/intervalLength"))
    if not -12 <= power <= 12:
        raise InputError(file, Problem(f"powerOfTenMultiplier {power} is out of range",
                                       rt.line, "ReadingType/powerOfTenMultiplier"))
    return _Channel(table[flow], power - 3, length, "Wh" if uom == UOM_WH else "VArh", rt.line)


def _meter_of(block: _Entry, usage_points: list[_Entry], fallback: str) -> str:
    hrefs = block.href("self") + block.href("up")
    for up in usage_points:
        for own in up.href("self"):
            if any(h.startswith(own + "/") or h == own for h in hrefs) and up.title:
                return up.title
    for h in hrefs:
        m = re.search(r"/UsagePoint/([^/]+)", h)
        if m:
            return m.group(1)
    titled = [u.title for u in usage_points if u.title]
    return titled[0] if len(titled) == 1 else fallback


def _reading_type_of(i: int, block: _Entry, entries: list[_Entry], meter_readings: list[_Entry],
                     rt_by_href: dict[str, _Entry]) -> _Entry | None:
    hrefs = block.href("up") + block.href("self")
    for mr in meter_readings:
        for own in mr.href("self"):
            if any(h == own or h.startswith(own + "/") for h in hrefs):
                for rel in mr.href("related"):
                    if rel in rt_by_href:
                        return rt_by_href[rel]
    for e in reversed(entries[:i]):  # no links: the nearest ReadingType before the block
        if e.kind == "ReadingType":
            return e
    rts = [e for e in entries if e.kind == "ReadingType"]
    return rts[0] if len(rts) == 1 else None


def read(path: Path, options: ReadOptions) -> ReadOutput:
    file = str(path)
    entries = _parse(path, file)
    info = ReadInfo(format=FORMAT)
    return ReadOutput(info, _chunks(entries, info, file, path.stem, options.time_window()))


def _chunks(entries: list[_Entry], info: ReadInfo, file: str, stem: str,
            window: tuple[int, int]) -> Iterator[pd.DataFrame]:
    yield _frame(entries, info, file, stem, window)


def _numbers(raw: list[str], lines: np.ndarray, column: str, file: str, integer: bool) -> np.ndarray:
    s = pd.Series(raw, dtype="string")
    out = pd.to_numeric(s, errors="coerce").to_numpy(dtype="float64", na_value=np.nan)
    bad = ~np.isfinite(out)
    if integer:
        bad |= np.isfinite(out) & (np.floor(out) != out)
    if bad.any():
        raise InputError(file, [Problem(
            ("missing " + column) if raw[i] == "" else f"not {'an integer' if integer else 'a number'}: {raw[i][:40]!r}",
            int(lines[i]), column) for i in np.flatnonzero(bad)[:MAX_PROBLEMS]])
    return out


def _scale(values: np.ndarray, power: int) -> np.ndarray:
    # one correctly rounded operation: 82 × 10^1 VArh is 0.82 kvarh, not 0.8200000000000001
    return values * 10.0 ** power if power >= 0 else values / 10.0 ** -power


def _frame(entries: list[_Entry], info: ReadInfo, file: str, stem: str, window: tuple[int, int]) -> pd.DataFrame:
    usage_points = [e for e in entries if e.kind == "UsagePoint"]
    meter_readings = [e for e in entries if e.kind == "MeterReading"]
    rt_by_href = {h: e for e in entries if e.kind == "ReadingType" for h in e.href("self")}
    parts = []
    channels: dict[int, _Channel | None] = {}
    for i, block in enumerate(entries):
        if block.kind != "IntervalBlock" or not block.lines:
            continue
        rt = _reading_type_of(i, block, entries, meter_readings, rt_by_href)
        if rt is None:
            raise InputError(file, Problem("IntervalBlock without a ReadingType (no link to one and none "
                                           "before it)", block.line, "IntervalBlock"))
        if id(rt) not in channels:
            channels[id(rt)] = _channel(rt, file, info.warnings)
        ch = channels[id(rt)]
        if ch is None:
            continue
        lines = np.asarray(block.lines, dtype="int64")
        start = _numbers(block.starts, lines, "timePeriod/start", file, True)
        check_window(start, lines, "timePeriod/start", file, window)  # before the cast to int64
        duration = (_numbers(block.durations, lines, "timePeriod/duration", file, True)
                    if any(block.durations) else np.full(len(lines), np.nan))
        value = _numbers(block.values, lines, "value", file, False)
        if np.isnan(duration).any() and ch.interval_s is None:
            i0 = int(np.flatnonzero(np.isnan(duration))[0])
            raise InputError(file, Problem("IntervalReading has no timePeriod duration and its ReadingType no "
                                           "intervalLength", int(lines[i0]), "timePeriod/duration"))
        duration = np.where(np.isnan(duration), ch.interval_s or 0, duration)
        odd = np.flatnonzero(~((duration > 0) & (duration <= 86_400)))
        if len(odd):
            raise InputError(file, [Problem(f"timePeriod duration {duration[i]:g} s: it must be 300, 900, 1800 or "
                                            "3600 s", int(lines[i]), "timePeriod/duration")
                                    for i in odd[:MAX_PROBLEMS]])
        parts.append(pd.DataFrame({
            "meter": _meter_of(block, usage_points, stem), "quantity": ch.quantity,
            "start": start.astype("int64"), "duration": duration.astype("int64"),
            "value": _scale(value, ch.power), "estimated": np.isin(np.asarray(block.quality, dtype=object),
                                                             list(ESTIMATED_QUALITY)),
            "line": lines, "declared": ch.interval_s if ch.interval_s is not None else -1,
        }))
    if not parts:
        raise InputError(file, Problem("no IntervalReading of active energy (ReadingType uom 72, Wh) in the feed", 1))
    long = pd.concat(parts, ignore_index=True)
    _check_lengths(long, info, file)
    long = _drop_duplicates(long, file)
    quantities = [q for q in ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received") if (long["quantity"] == q).any()]
    if "kwh" not in quantities:
        raise InputError(file, Problem("the feed has no active-energy channel delivered (ReadingType uom 72, "
                                       "flowDirection 1)", int(long["line"].min())))
    info.quantities = tuple(quantities)
    info.source_units = {q: ("Wh" if q.startswith("kwh") else "VArh") for q in quantities}
    wide = long.pivot(index=["meter", "start"], columns="quantity", values=["value", "line", "estimated"])
    values = wide["value"]
    lines = wide["line"]
    present = values.notna()
    missing = ~present[quantities].all(axis=1).to_numpy()
    if missing.any():
        problems = []
        for i in np.flatnonzero(missing)[:MAX_PROBLEMS]:
            row = present.iloc[i]
            have = [q for q in quantities if row[q]]
            lack = [q for q in quantities if not row[q]]
            line = int(lines.iloc[i][have[0]])
            problems.append(Problem(f"interval at {int(values.index[i][1])} (epoch s) has {', '.join(have)} "
                                    f"but no {', '.join(lack)} reading", line, "IntervalReading"))
        raise InputError(file, problems)
    idx = values.index
    est = wide["estimated"].fillna(False).astype(bool).any(axis=1).to_numpy()
    nan = np.full(len(idx), np.nan)
    col = {q: values[q].to_numpy(dtype="float64") if q in quantities else nan for q in
           ("kwh", "kvarh_lag", "kvarh_lead", "kwh_received")}
    return canonical(idx.get_level_values("meter").to_numpy(dtype=object), idx.get_level_values("start"),
                     col["kwh"], col["kvarh_lag"], col["kvarh_lead"],
                     col["kwh_received"] if "kwh_received" in quantities else None, est,
                     lines["kwh"].to_numpy(dtype="int64"))


def _check_lengths(long: pd.DataFrame, info: ReadInfo, file: str) -> None:
    dur = long["duration"].to_numpy()
    declared = long["declared"].to_numpy()
    lines = long["line"].to_numpy()
    off = np.flatnonzero((declared > 0) & (dur != declared))
    if len(off):
        raise InputError(file, [Problem(f"timePeriod duration {dur[i]} s differs from the ReadingType "
                                        f"intervalLength {declared[i]} s", int(lines[i]), "timePeriod/duration")
                                for i in off[:MAX_PROBLEMS]])
    lengths = np.unique(dur)
    bad = [int(x) for x in lengths if x % 60 or x // 60 not in ALLOWED_INTERVALS]
    if bad:
        i = int(np.flatnonzero(dur == bad[0])[0])
        raise InputError(file, Problem(f"interval length {bad[0]} s: it must be 300, 900, 1800 or 3600 s",
                                       int(lines[i]), "timePeriod/duration"))
    if len(lengths) > 1:
        i = int(np.flatnonzero(dur != lengths[0])[0])
        raise InputError(file, Problem(f"mixed interval lengths in one feed ({', '.join(str(int(x)) for x in lengths)} s); "
                                       "split it by interval length", int(lines[i]), "timePeriod/duration"))
    info.interval_minutes = int(lengths[0]) // 60


def _drop_duplicates(long: pd.DataFrame, file: str) -> pd.DataFrame:
    key = ["meter", "quantity", "start"]
    dup = long.duplicated(key, keep=False).to_numpy()
    if not dup.any():
        return long
    d = long.loc[dup].sort_values(key + ["line"])
    differ = d.groupby(key, sort=False)["value"].transform(lambda v: v.nunique() > 1).to_numpy(dtype=bool)
    if differ.any():
        rows = d.loc[differ]
        first = rows.groupby(key, sort=False)["line"].transform("min").to_numpy()
        probs = [Problem(f"{q} reading for interval {s} (epoch s) given twice with different values (first at "
                         f"line {f})", int(ln), "IntervalReading")
                 for q, s, ln, f in zip(rows["quantity"], rows["start"], rows["line"], first, strict=True) if ln != f]
        raise InputError(file, probs[:MAX_PROBLEMS])
    return long.drop_duplicates(key, keep="first")
