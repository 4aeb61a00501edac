"""Per-meter data versions and the portfolio's stored summaries, on SQLite and PostgreSQL:
an import that touches one meter makes only that meter be audited again."""
from __future__ import annotations

import pytest

from auditor.ingest.pipeline import import_file
from auditor.services.audit import audit_meter, resolve_tariff
from auditor.services.meters import list_meters, set_multiplier, set_site
from auditor.services.portfolio import (
    meter_summaries,
    portfolio_page,
    portfolio_summary,
    tariff_digest,
)
from tests.ingest_helpers import day_rows, write_csv

TARIFF = "harrowgate_industrial_tou"
METERS = ("PQ-1", "PQ-2", "PQ-3", "PQ-4")


@pytest.fixture
def four(store, tmp_path):
    lines = []
    for k, m in enumerate(METERS):
        for d in range(3):
            lines += day_rows(meter=m, day=f"2025-05-{6 + d:02d}", kwh=10.0 + k, lag=4.0 + 2 * k)
    assert import_file(store, write_csv(tmp_path / "four.csv", lines)).status == "imported"
    set_site(store, "Harbour", meters=["PQ-1", "PQ-2"])
    set_site(store, "Quarry", meters=["PQ-3", "PQ-4"])
    return store


def recomputed(store, tariff) -> list[str]:
    seen: list[str] = []
    meter_summaries(store, tariff, workers=1, recomputed=seen)
    return sorted(seen)


def test_only_the_meters_an_import_touches_are_audited_again(four, tmp_path):
    tariff = resolve_tariff(TARIFF)
    assert recomputed(four, tariff) == list(METERS)
    assert recomputed(four, tariff) == []  # warm: nothing audited
    # a nightly file: one new day for PQ-3
    assert import_file(four, write_csv(tmp_path / "n1.csv", day_rows(meter="PQ-3", day="2025-05-09"))).status == "imported"
    assert recomputed(four, tariff) == ["PQ-3"]
    # a revised day for PQ-2 (same intervals, other values)
    f = write_csv(tmp_path / "n2.csv", day_rows(meter="PQ-2", day="2025-05-07", kwh=30.0))
    assert import_file(four, f).status == "revised"
    assert recomputed(four, tariff) == ["PQ-2"]
    # the same file again changes nothing
    assert import_file(four, f).status == "unchanged"
    assert recomputed(four, tariff) == []
    # a multiplier or a site's time zone changes the audit: those meters again
    set_multiplier(four, "PQ-4", 40.0)
    assert recomputed(four, tariff) == ["PQ-4"]
    set_site(four, "Harbour", timezone="Europe/Lisbon")
    assert recomputed(four, tariff) == ["PQ-1", "PQ-2"]
    # another tariff is another set of summaries; the first one's stay
    other = resolve_tariff("millbrook_commercial_pf")
    assert recomputed(four, other) == list(METERS)
    assert recomputed(four, tariff) == []


def test_summaries_agree_with_the_audit(four):
    tariff = resolve_tariff(TARIFF)
    sums = meter_summaries(four, tariff, workers=1)
    for m in METERS:
        a = audit_meter(four, m, tariff).to_dict()
        s = sums[m]
        assert s["kwh"] == pytest.approx(a["totals"]["kwh"]) and s["pf"] == pytest.approx(a["totals"]["pf"])
        assert s["latest_pf"] == pytest.approx(a["periods"][-1]["pf"])
        assert s["reactive_12m"] == pytest.approx(sum(p["reactive_total"] for p in a["periods"]))
    # kWh from the file itself: 3 days x 96 intervals of (10 + k + 0.01 i) for meter k
    assert sums["PQ-2"]["kwh"] == pytest.approx(3 * sum(11.0 + 0.01 * i for i in range(96)))


def test_the_digest_is_the_tariffs_content_not_its_file(tmp_path):
    from auditor.tariffs import EXAMPLES_DIR

    src = (EXAMPLES_DIR / f"{TARIFF}.toml").read_text(encoding="utf-8")
    a = tmp_path / "a.toml"
    a.write_text(src, encoding="utf-8")
    b = tmp_path / "b.toml"
    b.write_text("# a comment changes no price\n" + src, encoding="utf-8")
    assert tariff_digest(resolve_tariff(a)) == tariff_digest(resolve_tariff(b))
    c = tmp_path / "c.toml"
    c.write_text(src.replace("price_per_kwh = 0.092", "price_per_kwh = 0.093"), encoding="utf-8")
    assert tariff_digest(resolve_tariff(c)) != tariff_digest(resolve_tariff(a))


def test_meter_versions_rebuild_when_an_import_left_no_mark(four, tmp_path):
    """Data written without the version mark (the safety net): the versions are rebuilt from
    the readings, so the listing and the summaries still see the change."""
    tariff = resolve_tariff(TARIFF)
    meter_summaries(four, tariff, workers=1)
    from auditor.store import meter_data

    real = meter_data.record_write
    meter_data.record_write = lambda *a, **k: None
    try:
        import auditor.ingest.pipeline as pipeline

        pipeline.record_write = meter_data.record_write
        assert import_file(four, write_csv(tmp_path / "x.csv", day_rows(meter="PQ-1", day="2025-05-20"))).status \
            == "imported"
    finally:
        meter_data.record_write = real
        pipeline.record_write = real
    listed = {m["meter"]: m for m in list_meters(four)}
    assert listed["PQ-1"]["intervals"] == 4 * 96 and listed["PQ-1"]["last"].startswith("2025-05-21T00:00")
    assert recomputed(four, tariff) == ["PQ-1"]


def test_portfolio_page_filters_and_pages(four):
    tariff = resolve_tariff(TARIFF)
    rows = portfolio_summary(four, tariff, workers=1)
    assert sorted(r["meter"] for r in rows) == list(METERS)
    pfs = [r["latest_pf"] for r in rows]
    assert pfs == sorted(pfs)  # worst power factor first
    p = portfolio_page(four, tariff, site="Quarry", workers=1)
    assert [r["site"] for r in p.rows] == ["Quarry", "Quarry"] and p.matched == 2 and p.meters == 4
    p = portfolio_page(four, tariff, query="pq-", per_page=3, page=2, workers=1)
    assert (p.page, p.pages, p.first, p.last, len(p.rows)) == (2, 2, 4, 4, 1)
    p = portfolio_page(four, tariff, query="harb", workers=1)  # a site name matches too
    assert sorted(r["meter"] for r in p.rows) == ["PQ-1", "PQ-2"]
    assert p.totals["reactive_12m"] == pytest.approx(sum(r["reactive_12m"] for r in p.rows))
    p = portfolio_page(four, tariff, page=99, workers=1)  # past the end: the last page
    assert p.page == p.pages == 1
