"""Malformed input, generated: every case is imported or rejected with errors naming the file,
never an exception, and a rejection leaves the stored readings exactly as they were.

The number of cases tried is printed (``pytest -s``) and written to ``fuzz_counts.json`` in the
test's temporary folder.
"""
from __future__ import annotations

import json
import tempfile
from collections import Counter
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from auditor.ingest.pipeline import import_file
from auditor.store import open_store
from tests.espi_helpers import feed
from tests.ingest_helpers import day_rows, stored_rows

EXAMPLES = 300
COUNTS: Counter = Counter()
LOCATED: Counter = Counter()

HEADER = "meter,start,kwh,kvarh_lag,kvarh_lead"
BASE_CSV = (HEADER + "\n" + "\n".join(day_rows(meter="FZ-1", day="2025-02-03", n=24)) + "\n").encode()
OBIS_CSV = ("meter,end,1-0:1.29.0 [Wh],1-0:5.29.0 [varh],1-0:8.29.0 [varh]\n" + "\n".join(
    f"FZ-2,2025-02-03T{h:02d}:{m:02d}:00+01:00,{1000 + h * 10 + m},{400 + m},0"
    for h in range(1, 4) for m in (0, 15, 30, 45)) + "\n").encode()
BASE_XML = feed([(72, 1, 0, [1200, 1300, 1250, 1275]), (73, 1, 0, [500, 510, 520, 530]),
                 (73, 19, 0, [0, 0, 10, 0])], title="Fuzz Yard").encode()
BOMB = (b'<?xml version="1.0"?>\n<!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol2 "&lol;&lol;&lol;&lol;">'
        b'<!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;">]>\n<feed><title>&lol3;</title></feed>\n')

AWKWARD_CELLS = ["NaN", "nan", "inf", "-inf", "1e309", "9" * 400, "-0", "", " ", "0x10", "1,5", "１２",
                 "\u00e9", "\x00", '"', '""', "2025-02-03T00:00:00", "2025-02-03T00:00:00+14:00",
                 "2025-02-03T00:00:00Z", "1e-320", "-5", "E", "A"]


@pytest.fixture(scope="module")
def world():
    folder = Path(tempfile.mkdtemp(prefix="fuzz-ingest-"))
    store = open_store(f"sqlite:///{folder / 'fuzz.sqlite3'}")
    base = folder / "base.csv"
    base.write_bytes(BASE_CSV)
    assert import_file(store, base).status == "imported"
    yield store, folder
    (folder / "fuzz_counts.json").write_text(json.dumps({"cases": dict(COUNTS), "located": dict(LOCATED)}))
    print(f"\nfuzz cases tried: {sum(COUNTS.values())} {dict(COUNTS)}; rejections with a line: {dict(LOCATED)}")
    store.dispose()


def _snapshot(store) -> list[tuple]:
    return [r[:7] for r in stored_rows(store)]  # meter_id, start, the quantities, flags


def check(world, kind: str, data: bytes, suffix: str) -> None:
    store, folder = world
    COUNTS[kind] += 1
    path = folder / f"case{sum(COUNTS.values())}{suffix}"
    path.write_bytes(data)
    before = _snapshot(store)
    out = import_file(store, path)  # must not raise
    assert out.status in ("imported", "unchanged", "revised", "rejected")
    if out.status == "rejected":
        assert out.errors, out
        assert str(path) in out.message, out.message
        if any(p.line is not None for p in out.errors):
            LOCATED[kind] += 1
        assert _snapshot(store) == before, "a rejected file changed the stored readings"
    path.unlink()


def _mutate(data: bytes, cuts, cells) -> bytes:
    lines = data.decode("utf-8", errors="surrogateescape").split("\n")
    for (row, col), cell in zip(cuts, cells, strict=False):
        r = row % len(lines)
        parts = lines[r].split(",")
        parts[col % len(parts)] = cell
        lines[r] = ",".join(parts)
    return "\n".join(lines).encode("utf-8", errors="surrogateescape")


FUZZ = settings(max_examples=EXAMPLES, deadline=None, database=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


@FUZZ
@given(base=st.sampled_from([BASE_CSV, OBIS_CSV]),
       cuts=st.lists(st.tuples(st.integers(0, 60), st.integers(0, 6)), min_size=1, max_size=4),
       cells=st.lists(st.one_of(st.sampled_from(AWKWARD_CELLS), st.text(max_size=12)), min_size=1, max_size=4))
def test_csv_cells(world, base, cuts, cells):
    check(world, "csv cells", _mutate(base, cuts, cells), ".csv")


@FUZZ
@given(base=st.sampled_from([BASE_CSV, OBIS_CSV, BASE_XML]), at=st.floats(0, 1),
       tail=st.sampled_from([b"", b"\n", b",", b"<", b"\xff", b"\xef\xbb\xbf"]))
def test_truncated(world, base, at, tail):
    check(world, "truncated", base[: int(len(base) * at)] + tail, ".xml" if base is BASE_XML else ".csv")


@FUZZ
@given(base=st.sampled_from([BASE_CSV, OBIS_CSV, BASE_XML]),
       encoding=st.sampled_from(["utf-8-sig", "utf-16", "utf-16-le", "latin-1", "cp1252", "utf-32"]),
       accent=st.booleans())
def test_encodings_and_boms(world, base, encoding, accent):
    text = base.decode()
    if accent:
        text = text.replace("FZ-", "Fußweg-").replace("Fuzz Yard", "Café Façade")
    check(world, f"encoding {encoding}", text.encode(encoding, errors="replace"), ".xml" if base is BASE_XML else ".csv")


@FUZZ
@given(value=st.one_of(st.sampled_from(AWKWARD_CELLS), st.text(max_size=10),
                       st.integers(-(10**30), 10**30).map(str)),
       where=st.sampled_from(["<value>1300</value>", "<start>1736900100</start>", "<duration>900</duration>",
                              "<uom>73</uom>", "<powerOfTenMultiplier>0</powerOfTenMultiplier>",
                              "<flowDirection>19</flowDirection>", "<intervalLength>900</intervalLength>"]),
       junk=st.sampled_from(["", "<", "&", "&amp;", "]]>", "<!-- x", "<x>", "\u0001"]))
def test_xml_fields(world, value, where, junk):
    tag = where[1:where.index(">")]
    escaped = value.replace("&", "&amp;").replace("<", "&lt;")
    data = BASE_XML.decode().replace(where, f"<{tag}>{escaped}{junk}</{tag}>", 1).encode("utf-8", errors="replace")
    check(world, "xml fields", data, ".xml")


@FUZZ
@given(offsets=st.lists(st.sampled_from(["+00:00", "+01:00", "Z", "", "+05:45", "-03:30", "+1", "+25:00"]),
                        min_size=24, max_size=24))
def test_mixed_offsets(world, offsets):
    rows = [r.replace("+00:00", off) for r, off in zip(day_rows(meter="FZ-3", day="2025-02-04", n=24), offsets,
                                                       strict=True)]
    check(world, "mixed offsets", (HEADER + "\n" + "\n".join(rows) + "\n").encode(), ".csv")


@FUZZ
@given(depth=st.integers(1, 6), external=st.booleans())
def test_entity_tricks(world, depth, external):
    if external:
        data = (b'<?xml version="1.0"?>\n<!DOCTYPE f [<!ENTITY x SYSTEM "file:///etc/passwd">]>\n'
                b'<feed xmlns="http://www.w3.org/2005/Atom"><title>&x;</title>' + BASE_XML.split(b"<feed", 1)[1].split(b">", 1)[1])
    else:
        ents = "".join(f'<!ENTITY e{i} "{f"&e{i - 1};" * 10 if i else "ha"}">' for i in range(depth))
        data = (f'<?xml version="1.0"?>\n<!DOCTYPE feed [{ents}]>\n<feed><title>&e{depth - 1};</title>'
                "<entry><content><IntervalBlock xmlns=\"http://naesb.org/espi\"/></content></entry></feed>").encode()
    check(world, "entities", data if depth % 2 else BOMB, ".xml")
