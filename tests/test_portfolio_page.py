"""The portfolio page at more meters than one page holds: search, site filter and paging, through
the WSGI test client and in Chromium."""
from __future__ import annotations

import re

import pytest

from auditor.ingest.pipeline import import_file
from auditor.services.meters import set_site
from auditor.store import open_store
from tests.ingest_helpers import day_rows, write_csv
from tests.test_web_browser import browser_context, chromium_path, page, serving  # noqa: F401  (fixtures)

SITES = {"Alder Mill": 25, "Birch Depot": 20, "Cedar Labs": 15}  # 60 meters


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    folder = tmp_path_factory.mktemp("many")
    store = open_store(f"sqlite:///{folder / 'many.sqlite3'}")
    lines, by_site, k = [], {}, 0
    for site, n in SITES.items():
        names = []
        for _ in range(n):
            name = f"{site.split()[0][:3].upper()}-{k:03d}"
            lines += day_rows(meter=name, day="2025-06-02", kwh=10.0 + k % 7, lag=3.0 + k % 5)
            names.append(name)
            k += 1
        by_site[site] = names
    assert import_file(store, write_csv(folder / "many.csv", lines)).status == "imported"
    for site, names in by_site.items():
        set_site(store, site, meters=names)
    yield store
    store.dispose()


@pytest.fixture(scope="module")
def client(many, tmp_path_factory):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path_factory.mktemp("inst")), "TESTING": True, "WARM_CACHE": False},
                     store=many)
    return app.test_client()


def meters_on(html: str) -> list[str]:
    return re.findall(r'<td><a href="/meters/[^"]+">([A-Z]{3}-\d{3})</a>', html)


def test_first_page_and_the_next(client):
    html = client.get("/").get_data(as_text=True)
    assert len(meters_on(html)) == 50 and "Meters 1–50 of 60" in html
    assert 'rel="next"' in html and 'rel="prev"' not in html
    html2 = client.get("/?page=2").get_data(as_text=True)
    assert len(meters_on(html2)) == 10 and "Meters 51–60 of 60" in html2
    assert set(meters_on(html)).isdisjoint(meters_on(html2))
    assert len(set(meters_on(html)) | set(meters_on(html2))) == 60


def test_site_filter_and_search(client):
    html = client.get("/?site=Birch+Depot").get_data(as_text=True)
    names = meters_on(html)
    assert len(names) == 20 and all(n.startswith("BIR-") for n in names)
    assert "Meters 1–20 of 20 (of 60)" in html and 'rel="next"' not in html
    html = client.get("/?q=ced").get_data(as_text=True)  # part of a site name, any case
    assert len(meters_on(html)) == 15
    html = client.get("/?q=alD-00").get_data(as_text=True)  # part of a meter id
    assert sorted(meters_on(html)) == [f"ALD-00{i}" for i in range(10)]
    html = client.get("/?q=nothing-like-this").get_data(as_text=True)
    assert meters_on(html) == [] and "No meter matches" in html
    # the page count follows the filter: 25 meters at 10 a page
    html = client.get("/?site=Alder+Mill&per_page=10&page=3").get_data(as_text=True)
    assert "Meters 21–25 of 25" in html and len(meters_on(html)) == 5


@pytest.fixture(scope="module")
def server(many, tmp_path_factory):
    with serving(many, tmp_path_factory.mktemp("b")) as base:
        yield base


def test_controls_in_the_browser(server, page):  # noqa: F811  (the page fixture)
    page.set_viewport_size({"width": 1280, "height": 800})
    page.goto(f"{server}/", wait_until="networkidle")
    assert page.locator("#portfolio tbody tr").count() == 50
    page.select_option("#site", "Cedar Labs")  # choosing a site shows it at once
    page.wait_for_url(re.compile(r".*site=Cedar\+Labs.*"))
    assert page.locator("#portfolio tbody tr").count() == 15
    page.fill("#q", "")
    page.select_option("#site", "")
    page.wait_for_load_state("networkidle")
    page.click("text=next ›")
    page.wait_for_url(re.compile(r".*page=2.*"))
    assert page.locator("#portfolio tbody tr").count() == 10
    page.fill("#q", "bir-03")
    page.click("form[role=search] button[type=submit]")
    page.wait_for_url(re.compile(r".*q=bir-03.*"))
    shown = page.locator("#portfolio tbody tr td:nth-child(1) > a").all_inner_texts()
    assert sorted(shown) == [f"BIR-0{i}" for i in range(30, 40)]
    assert page.errors == []
