"""ESPI XML usage feeds: channel mapping, units, lines, links, and refusals that name the place.

Code values (uom 72 Wh / 73 VArh, flowDirection 1 forward / 19 reverse, powerOfTenMultiplier,
intervalLength in seconds) are those of NAESB REQ.21, from memory.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from auditor.errors import InputError
from auditor.ingest import readers
from auditor.ingest.frame import ReadOptions
from auditor.ingest.pipeline import import_file
from auditor.ingest.readers import espi_xml
from tests.espi_helpers import feed, interval_block, meter_reading, reading_type
from tests.ingest_helpers import reading_count, readings

DATA = Path(__file__).parent / "data"
T0 = 1_736_899_200  # 2025-01-15T00:00:00Z


def frame_of(path: Path):
    out = espi_xml.read(path, ReadOptions())
    return out.info, next(out.chunks)


def write(tmp_path: Path, text: str, name: str = "feed.xml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_sample_feed_channels_units_and_flags():
    info, df = frame_of(DATA / "espi_birchfield_15min.xml")
    assert info.interval_minutes == 15
    assert info.quantities == ("kwh", "kvarh_lag", "kvarh_lead")
    assert set(df["meter"]) == {"Birchfield Bakery main"}  # the UsagePoint's title
    assert_allclose(df["start"].to_numpy(), T0 + 900 * np.arange(8))
    # Wh / 1000 = kWh; VArh × 10^1 / 1000 = kvarh (the sample's powerOfTenMultiplier is 1)
    assert_allclose(df["kwh"], np.array([1250, 1300, 1280, 1410, 1520, 1600, 1575, 1490]) / 1000)
    assert_allclose(df["kvarh_lag"], np.array([82, 85, 90, 95, 101, 110, 108, 99]) * 10 / 1000)
    assert_allclose(df["kvarh_lead"], np.array([0, 0, 0, 0, 5, 12, 0, 0]) * 10 / 1000)
    assert df["kwh_received"].isna().all()
    # quality 8 (estimated using a reference day) on the 4th and 5th readings
    assert df["estimated"].tolist() == [False, False, False, True, True, False, False, False]


def test_line_is_the_source_line_of_the_active_energy_reading():
    path = DATA / "espi_birchfield_15min.xml"
    _, df = frame_of(path)
    text = path.read_text().splitlines()
    block = next(i for i, t in enumerate(text) if "MeterReading/1/IntervalBlock/1" in t)
    expected = [i + 1 for i, t in enumerate(text) if "<IntervalReading>" in t and i > block][:8]
    assert df["line"].tolist() == expected


def test_links_not_document_order_decide_the_channel(tmp_path):
    # reading types listed in the opposite order from their meter readings
    text = feed([(72, 1, 0, [1000, 2000]), (73, 1, 0, [300, 400]), (73, 19, 0, [0, 50])])
    rts = [reading_type(n, u, f, 0) for n, (u, f) in enumerate([(72, 1), (73, 1), (73, 19)], 1)]
    for rt in rts:
        text = text.replace(rt, "")
    text = text.replace("</feed>", "".join(reversed(rts)) + "</feed>")
    assert text.index('rel="self" href="https://usage.example.net/espi/resource/ReadingType/3"') < text.index(
        'rel="self" href="https://usage.example.net/espi/resource/ReadingType/1"')
    _, df = frame_of(write(tmp_path, text))
    assert_allclose(df["kwh"], [1.0, 2.0])
    assert_allclose(df["kvarh_lag"], [0.3, 0.4])
    assert_allclose(df["kvarh_lead"], [0.0, 0.05])


def test_bare_document_pairs_blocks_with_preceding_reading_type():
    info, df = frame_of(DATA / "espi_bare_hourly.xml")
    assert info.interval_minutes == 60
    assert set(df["meter"]) == {"espi_bare_hourly"}  # no UsagePoint: the file name
    assert_allclose(df["kwh"], [12.0, 14.0, 13.0, 15.0])  # value × 10^3 Wh = kWh
    assert_allclose(df["kvarh_lag"], [7.0, 8.0, 8.0, 9.0])
    assert df["kvarh_lead"].isna().all()


def test_reverse_active_energy_is_received(tmp_path):
    path = write(tmp_path, feed([(72, 1, 0, [500, 600]), (72, 19, 0, [40, 0]), (73, 1, 0, [100, 100]),
                                 (73, 19, 0, [0, 0])]))
    info, df = frame_of(path)
    assert "kwh_received" in info.quantities
    assert_allclose(df["kwh_received"], [0.04, 0.0])


def test_negative_power_of_ten(tmp_path):
    path = write(tmp_path, feed([(72, 1, -2, [125000, 130000]), (73, 1, -2, [50000, 51000])]))
    _, df = frame_of(path)
    assert df["kwh"].tolist() == [1.25, 1.3]  # 125000 × 10^-2 Wh = 1.25 kWh, rounded once
    assert df["kvarh_lag"].tolist() == [0.5, 0.51]


def test_detected_by_content_not_by_name(tmp_path):
    path = write(tmp_path, feed([(72, 1, 0, [1, 2]), (73, 1, 0, [1, 1])]), name="export.txt")
    assert readers.detect(path) is espi_xml
    csv = tmp_path / "x.csv"
    csv.write_text("meter,start,kwh,kvarh_lag,kvarh_lead\nM,2025-01-01T00:00:00Z,1,1,0\n")
    assert readers.detect(csv).FORMAT == "plain_csv"


def test_import_through_the_store(store, tmp_path):
    out = import_file(store, DATA / "espi_birchfield_15min.xml")
    assert out.status == "imported", out.errors
    assert out.format == "espi_xml" and out.inserted == 8
    df = readings(store)
    assert_allclose(df["kvarh_lag"].to_numpy(), np.array([82, 85, 90, 95, 101, 110, 108, 99]) / 100)
    assert df["flags"].tolist()[3:5] == [1, 1]  # FLAG_ESTIMATED
    again = import_file(store, DATA / "espi_birchfield_15min.xml")
    assert again.status == "unchanged" and reading_count(store) == 8


BOMB = """<?xml version="1.0"?>
<!DOCTYPE feed [
 <!ENTITY a "aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa">
 <!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;">
 <!ENTITY c "&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;">
]>
<feed xmlns="http://www.w3.org/2005/Atom"><title>&c;</title>
<entry><content><IntervalBlock xmlns="http://naesb.org/espi"/></content></entry></feed>
"""

EXTERNAL = """<?xml version="1.0"?>
<!DOCTYPE feed [<!ENTITY secret SYSTEM "file:///etc/hostname">]>
<feed xmlns="http://www.w3.org/2005/Atom"><title>&secret;</title>
<entry><content><IntervalBlock xmlns="http://naesb.org/espi"/></content></entry></feed>
"""


def _rejected(store, path: Path):
    out = import_file(store, path)
    assert out.status == "rejected"
    assert out.errors, out
    assert str(path) in out.message
    assert reading_count(store) == 0
    return out


@pytest.mark.parametrize("text", [BOMB, EXTERNAL], ids=["entity-bomb", "external-entity"])
def test_entities_are_refused(store, tmp_path, text):
    out = _rejected(store, write(tmp_path, text))
    assert "entit" in out.errors[0].message and "refused" in out.errors[0].message
    assert out.errors[0].line is not None


def test_truncated_xml_names_line_and_column(store, tmp_path):
    text = feed([(72, 1, 0, [1, 2, 3]), (73, 1, 0, [1, 1, 1])])
    cut = text[: text.index("<value>3</value>") + 9]
    out = _rejected(store, write(tmp_path, cut))
    e = out.errors[0]
    assert e.message.startswith("malformed XML")
    assert e.line == cut.count("\n") + 1 and e.column.startswith("char ")


def test_bad_value_names_its_line(store, tmp_path):
    text = feed([(72, 1, 0, [1, "12x", 3]), (73, 1, 0, [1, 1, 1])])
    path = write(tmp_path, text)
    out = _rejected(store, path)
    e = out.errors[0]
    line = next(i + 1 for i, t in enumerate(text.splitlines()) if "<value>12x</value>" in t)
    assert (e.line, e.column) == (line, "value") and "12x" in e.message


@pytest.mark.parametrize("value", ["NaN", "INF", "1e400"])
def test_non_finite_values_rejected(store, tmp_path, value):
    out = _rejected(store, write(tmp_path, feed([(72, 1, 0, [1, value]), (73, 1, 0, [1, 1])])))
    assert out.errors[0].column == "value"


def test_reading_without_its_partner_channel(store, tmp_path):
    text = (feed([(72, 1, 0, [1, 2, 3]), (73, 1, 0, [1, 1])]))
    out = _rejected(store, write(tmp_path, text))
    e = out.errors[0]
    assert "has kwh but no kvarh_lag" in e.message
    assert e.line == next(i + 1 for i, t in enumerate(text.splitlines()) if f"<start>{T0 + 1800}</start>" in t)


def test_duration_must_match_interval_length(store, tmp_path):
    text = feed([(72, 1, 0, [1, 2]), (73, 1, 0, [1, 1])], duration=600)
    out = _rejected(store, write(tmp_path, text))
    assert out.errors[0].column == "timePeriod/duration" and "900" in out.errors[0].message


def test_interval_length_must_be_allowed(store, tmp_path):
    text = feed([(72, 1, 0, [1, 2]), (73, 1, 0, [1, 1])], duration=600, interval_s=600)
    out = _rejected(store, write(tmp_path, text))
    assert "600 s" in out.errors[0].message


def test_register_readings_refused(store, tmp_path):
    text = ('<feed xmlns="http://www.w3.org/2005/Atom">' + meter_reading(1)
            + reading_type(1, 72, 1, accumulation=1) + interval_block(1, T0, [5, 6]) + "</feed>")
    out = _rejected(store, write(tmp_path, text))
    assert out.errors[0].column == "ReadingType/accumulationBehaviour"


def test_unknown_flow_direction_named(store, tmp_path):
    out = _rejected(store, write(tmp_path, feed([(72, 4, 0, [1, 2])])))
    assert out.errors[0].column == "ReadingType/flowDirection" and "4" in out.errors[0].message


def test_demand_channel_skipped_with_warning(tmp_path):
    path = write(tmp_path, feed([(72, 1, 0, [1000, 2000]), (73, 1, 0, [10, 20]), (38, 1, 0, [4000, 8000])]))
    info, df = frame_of(path)
    assert any("uom 38" in w.message for w in info.warnings)
    assert_allclose(df["kwh"], [1.0, 2.0])


def test_no_active_energy_channel(store, tmp_path):
    out = _rejected(store, write(tmp_path, feed([(73, 1, 0, [1, 2])])))
    assert "active-energy" in out.errors[0].message


def test_utf16_feed_refused_clearly(store, tmp_path):
    p = tmp_path / "feed.xml"
    p.write_bytes(feed([(72, 1, 0, [1])]).replace('encoding="UTF-8"', 'encoding="UTF-16"').encode("utf-16"))
    out = _rejected(store, p)
    assert "UTF-8" in out.errors[0].message


def test_reader_raises_input_error_naming_the_file(tmp_path):
    path = write(tmp_path, BOMB)
    with pytest.raises(InputError) as exc:
        frame_of(path)
    assert exc.value.file == str(path)
