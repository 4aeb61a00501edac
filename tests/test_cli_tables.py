"""Terminal tables fit 120 columns on the demo (detail behind ``--wide``), and every time they
show is the site's local time with the zone named."""
from __future__ import annotations

import json
import sqlite3
from datetime import UTC, datetime
from zoneinfo import ZoneInfo

import pytest
from test_cli_grammar import invoke

from auditor.render import WIDTH, local_time, table

TARIFF = "harrowgate_industrial_tou"
METERS = ("KQ-MAIN", "KQ-DOCKS", "AR-01")


@pytest.fixture(scope="module")
def db(demo_db, tmp_path_factory):
    """A copy of the session's demo database with the demo bills imported."""
    from auditor.services.bills import demo_bills_path, import_bills
    from auditor.store import open_store

    path = tmp_path_factory.mktemp("tables") / "demo.sqlite3"
    src, dst = sqlite3.connect(demo_db.url.removeprefix("sqlite:///")), sqlite3.connect(path)
    with dst:
        src.backup(dst)
    src.close()
    dst.close()
    store = open_store(f"sqlite:///{path}")
    import_bills(store, demo_bills_path())
    store.dispose()
    return f"sqlite:///{path}"


SIZE_CASES = (
    ("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "150"),  # fails screening (resonance)
    ("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "175"),  # fails (over-correction)
    ("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--optimize"),
    ("size", "--meter", "AR-01", "--tariff", TARIFF, "--reactor", "10"),
    ("size", "--meter", "AR-01", "--tariff", TARIFF, "--optimize"),
    ("size", "--site", "Kestrel Quay Cold Store", "--tariff", TARIFF, "--mode", "per-meter", "--fixed", "100"),
    ("size", "--site", "Kestrel Quay Cold Store", "--tariff", TARIFF, "--optimize"),
)


def commands():
    yield ("meters",)
    yield ("sites",)
    yield ("scenarios",)
    yield ("bills", "list")
    for m in METERS:
        yield ("audit", "--meter", m, "--tariff", TARIFF)
        yield ("bills", "check", "--meter", m, "--tariff", TARIFF)
    yield from SIZE_CASES


@pytest.mark.parametrize("args", list(commands()), ids=" ".join)
def test_every_line_fits_120_columns(db, args):
    r = invoke(*args, db=db)
    assert r.exit_code == 0, r.output
    lines = r.output.splitlines()
    assert len(lines) >= 3
    too_long = [line for line in lines if len(line) > WIDTH]
    assert too_long == [], f"{' '.join(args)}: {len(too_long[0])} columns: {too_long[0]}"


def test_wide_shows_the_detail_columns(db):
    narrow = invoke("audit", "--meter", "KQ-MAIN", "--tariff", TARIFF, db=db).output
    wide = invoke("audit", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--wide", db=db).output
    for head in ("kvarh lag", "kvarh lead", "tan φ", "peak kVA at", "load factor %", "reactive_daytime"):
        assert head not in narrow.splitlines()[1] and head in wide.splitlines()[1]
    assert max(len(x) for x in wide.splitlines()) > WIDTH  # nothing is shortened with --wide
    assert "timezone" in invoke("meters", "--wide", db=db).output.splitlines()[0]
    assert "timezone" not in invoke("meters", db=db).output.splitlines()[0]


def test_size_shows_the_failing_rule_first_and_hides_only_detail_columns(db):
    """The failing rule is the first thing said about a design; wrapping keeps every word of it
    (the JSON's message, re-joined), and --wide adds the candidates' detail columns."""
    args = ("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "150")
    text = invoke(*args, db=db).output
    d = json.loads(invoke(*args, "--json", db=db).output)
    lines = text.splitlines()
    fail = [r for r in d["screening"]["rules"] if r["status"] == "fail"][0]
    assert lines[1].startswith("NOT RECOMMENDED") and lines[2].startswith(f"  FAIL {fail['rule']}: ")
    block = []
    for line in lines[2:]:
        if block and not line.startswith("    "):
            break
        block.append(line.strip())
    assert " ".join(block) == f"FAIL {fail['rule']}: {fail['message']}"
    # a message is said once: the over-correction caution is not repeated as a warning
    caution = next(r for r in d["screening"]["rules"] if r["status"] == "caution")
    assert " ".join(x.strip() for x in lines).count(caution["message"]) == 1

    site = invoke("size", "--site", "Kestrel Quay Cold Store", "--tariff", TARIFF, "--mode", "per-meter",
                  "--fixed", "100", db=db).output.splitlines()
    assert site[1].startswith("NOT RECOMMENDED — fails screening: ") and "KQ-DOCKS (over_correction" in site[1]

    narrow = invoke("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--optimize", db=db).output.splitlines()
    wide = invoke("size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--optimize", "--wide", db=db).output.splitlines()
    head_n = next(x for x in narrow if x.lstrip().startswith("#  design")).split()
    head_w = next(x for x in wide if x.lstrip().startswith("#  design")).split()
    assert head_n == ["#", "design", "saving/yr", "NPV", "payback", "y", "screen"]
    assert head_w == ["#", "design", "kvar", "capex", "saving/yr", "NPV", "payback", "y", "PF", "after", "screen"]


def test_audit_peaks_show_their_local_time(db):
    d = json.loads(invoke("audit", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--json", db=db).output)
    text = invoke("audit", "--meter", "KQ-MAIN", "--tariff", TARIFF, db=db).output
    assert "Europe/Berlin" in text.splitlines()[0]
    for p in d["periods"]:
        at = datetime.fromisoformat(p["peak_kw_at"])
        abbr = at.astimezone(ZoneInfo("Europe/Berlin")).tzname()  # CET in winter, CEST in summer
        assert f"{at:%Y-%m-%d %H:%M} {abbr}" in text
    # the JSON keeps ISO strings (with the offset), and now the kVA peak's time too
    assert all(p["peak_kva_at"] and p["peak_kva_at"][19:] in ("+01:00", "+02:00") for p in d["periods"])


def test_meters_list_shows_the_data_span_in_local_time(db):
    text = invoke("meters", db=db).output
    assert "2025-01-01 00:00 CET" in text and "2026-01-01 00:00 CET" in text
    data = json.loads(invoke("meters", "--json", db=db).output)
    assert data["meters"][0]["first"].endswith("Z")  # the JSON stays UTC


def test_bills_check_names_the_peak_time_and_the_cause_alike(db):
    text = invoke("bills", "check", "--meter", "KQ-MAIN", "--tariff", TARIFF, db=db).output
    assert "computed peak at" in text and "2025-08-14 14:00 CEST" in text
    assert text.count("wrong meter multiplier") >= 7  # the bill's summary, each finding, the explanation
    assert "multiplier," not in text.split("\n\n")[0]  # no raw key in the summary


# --------------------------------------------------------------------------------------------
# local_time and the table's fit, against the standard library's zoneinfo
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("instant, tz, shown", [
    # EU summer time starts at 01:00 UTC on the last Sunday of March and ends at 01:00 UTC on the
    # last Sunday of October (Directive 2000/84/EC)
    ("2025-03-30T00:59:00Z", "Europe/Berlin", "2025-03-30 01:59 CET"),
    ("2025-03-30T01:00:00Z", "Europe/Berlin", "2025-03-30 03:00 CEST"),
    ("2025-10-26T00:30:00+00:00", "Europe/Berlin", "2025-10-26 02:30 CEST"),  # the repeated hour, once ...
    ("2025-10-26T01:30:00+00:00", "Europe/Berlin", "2025-10-26 02:30 CET"),  # ... and twice: told apart
    ("2025-07-01T12:00:00+02:00", "Europe/London", "2025-07-01 11:00 BST"),
    ("2025-07-01T12:00:00+02:00", None, "2025-07-01 12:00 UTC+02:00"),
    ("2025-07-01T08:00:00Z", "Asia/Dubai", "2025-07-01 12:00 +04"),  # a zone without letters
])
def test_local_time(instant, tz, shown):
    assert local_time(instant, tz) == shown


def test_local_time_takes_epoch_seconds_and_datetimes():
    epoch = 1751371200  # 2025-07-01T12:00:00Z
    assert datetime.fromtimestamp(epoch, UTC).isoformat() == "2025-07-01T12:00:00+00:00"
    assert local_time(epoch, "Europe/Berlin") == "2025-07-01 14:00 CEST"
    assert local_time(datetime(2025, 7, 1, 12), "Europe/Berlin") == "2025-07-01 14:00 CEST"  # naive = UTC
    assert local_time(None, "Europe/Berlin") == "-" and local_time("", None) == "-"
    assert local_time(epoch, "Europe/Berlin", zone=False) == "2025-07-01 14:00"


def test_table_shortens_only_text_and_never_numbers():
    rows = [["M" * 90, "x" * 80, 123456789.123], ["short", "y", None]]
    out = table(["meter", "note", "kWh"], rows, width=60)
    assert max(len(x) for x in out.splitlines()) <= 60
    assert "123,456,789.12" in out and "…" in out
    full = table(["meter", "note", "kWh"], rows, width=60, wide=True)
    assert "M" * 90 in full and "x" * 80 in full
    hidden = table(["a", "b"], [[1, 2]], detail=[False, True])
    assert hidden.splitlines()[0].split() == ["a"]
