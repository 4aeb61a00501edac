"""Any meter id that imports works on every page and export: ids holding "/", "?", "#", "%",
spaces, commas and quotes, non-ASCII letters, a leading dot, "." and "..", backslashes, "~",
markup. Every page and export that takes a meter is requested for each (Flask test client),
the command-line exports are run for a few, and one real browser follows the links.
"""
from __future__ import annotations

import csv
import html
import io
import posixpath
import re
import threading
from pathlib import Path
from urllib.parse import unquote, urlsplit

import pytest
from markupsafe import escape

from tests.ingest_helpers import day_rows
from tests.test_cli_grammar import invoke

TARIFF = "millbrook_commercial_pf"
ODD_IDS = [
    "PLANT/7", "/lead", "trail/", "a//b", "Feeder 2 #A", "q?x=1&y=2", "50%", "a%2Fb", "a%41",
    "Zählpunkt-電", ".spare", ".", "..", "x/../y", "back\\slash", "~tilde~7E", 'Line 3, bay "2"',
    "<b>bold</b>", "name.csv", "+plus;semi:colon@at",
]


def kwh_of(meter: str) -> float:
    """Each meter its own load, so an export shows whose data it holds."""
    return 20.0 + ODD_IDS.index(meter)


def total_kwh(meter: str) -> float:
    """Two days of 96 intervals of kwh_of(meter) + i × 0.01 (tests.ingest_helpers.day_rows)."""
    return 2 * (96 * kwh_of(meter) + 0.01 * sum(range(96)))


@pytest.fixture(scope="module")
def odd_db(tmp_path_factory):
    """A database holding two days of data for each odd meter id, one saved scenario on
    "PLANT/7" and one stored bill of it."""
    from auditor.services.correction import SizeRequest, save_scenario, size_meter
    from auditor.store import open_store

    folder = tmp_path_factory.mktemp("odd-ids")
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["meter", "start", "kwh", "kvarh_lag", "kvarh_lead"])
    for meter in ODD_IDS:
        for day in ("2025-03-03", "2025-03-04"):
            for row in day_rows(meter="X", day=day, kwh=kwh_of(meter), lag=15.0):
                w.writerow([meter, *row.split(",")[1:]])
    data = folder / "odd.csv"
    data.write_text(buf.getvalue(), encoding="utf-8")
    url = f"sqlite:///{folder / 'odd.sqlite3'}"
    r = invoke("import", data, db=url)
    assert r.exit_code == 0, r.output
    bills = folder / "bills.csv"
    bills.write_text("meter,period_start,period_end,kwh,kvarh,peak_kw,peak_kva,pf,reactive_charge,total\n"
                     "PLANT/7,2025-03-03,2025-03-05,3900,2900,,,,12.5,\n", encoding="utf-8")
    r = invoke("bills", "import", bills, db=url)
    assert r.exit_code == 0, r.output
    store = open_store(url)
    case = size_meter(store, SizeRequest(meter="PLANT/7", tariff=TARIFF, fixed_kvar=50.0))
    save_scenario(store, "odd meter case", case)
    try:
        yield store
    finally:
        store.dispose()


@pytest.fixture(scope="module")
def client(odd_db, tmp_path_factory):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path_factory.mktemp("odd-instance")), "TESTING": True,
                      "DEFAULT_TARIFF": TARIFF}, store=odd_db)
    return app.test_client()


def test_every_odd_id_imported(odd_db):
    from auditor.services.meters import list_meters

    assert {m["meter"] for m in list_meters(odd_db)} == set(ODD_IDS)


def local_links(page: str) -> list[str]:
    """Every address on this server that ``page`` links to or posts to (not static files)."""
    found = [html.unescape(u) for u in re.findall(r'(?:href|action)="([^"]+)"', page)]
    return [u for u in found if u.startswith("/") and not u.startswith(("/static/", "/vendor/"))]


def form_actions(page: str) -> set[str]:
    """The addresses ``page``'s POST forms send to."""
    forms = re.findall(r"<form\b[^>]*>", page)
    return {html.unescape(a) for f in forms if re.search(r'method="post"', f, re.I)
            for a in re.findall(r'action="([^"]+)"', f)}


def meter_links(page: str) -> dict[str, str]:
    """The meter page links of a page: {the id shown in the link: the address}."""
    out = {}
    for href, text in re.findall(r'<a href="(/meters/[^"]+)"[^>]*>(.*?)</a>', page):
        out[html.unescape(text)] = html.unescape(href)
    return out


def get_ok(client, url: str):
    r = client.get(url)
    assert r.status_code == 200, (url, r.status_code, r.get_data(as_text=True)[:300])
    return r


def test_the_portfolio_links_every_meter_to_its_own_page(client):
    page = get_ok(client, "/").get_data(as_text=True)
    links = meter_links(page)
    assert set(links) == set(ODD_IDS)
    for meter, url in links.items():
        path = urlsplit(url).path
        assert posixpath.normpath(path) == path and "\\" not in path, url  # nothing a browser folds
        shown = get_ok(client, url).get_data(as_text=True)
        assert f"<h1>Meter {str(escape(meter))} " in shown, (meter, url)


@pytest.mark.parametrize("meter", ODD_IDS)
def test_every_page_and_export_of_an_odd_meter(client, meter):
    from flask import url_for

    with client.application.test_request_context():
        page_url = url_for("meters.meter", meter=meter)
        exports = {fmt: url_for("meters.export", meter=meter, fmt=fmt, tariff=TARIFF)
                   for fmt in ("csv", "xlsx", "html")}
        others = [url_for("scenarios.new", meter=meter), url_for("bills.index", meter=meter)]
    assert urlsplit(page_url).path.count("/") == 2  # one segment, whatever the id holds
    page = get_ok(client, page_url).get_data(as_text=True)
    assert str(escape(meter)) in page
    # every local link of the meter page answers (its exports, the scenario form, the portfolio);
    # a form that posts (the meter's own tariff) reaches its route: refused for want of a token,
    # not "no such page"
    posted = {html.unescape(u) for u in re.findall(r'<form method="post" action="([^"]+)"', page)}
    for url in local_links(page):
        if url in posted:
            assert client.post(url).status_code == 400, url
        else:
            get_ok(client, url)
    for fmt, url in exports.items():
        r = get_ok(client, url)
        assert r.headers["Content-Disposition"].startswith("attachment; filename=")
        assert len(r.data) > 100
        if fmt == "csv":
            rows = list(csv.DictReader(io.StringIO(r.get_data(as_text=True))))
            assert sum(float(x["Energy (kWh)"]) for x in rows) == pytest.approx(total_kwh(meter))
        elif fmt == "html":
            assert str(escape(meter)) in r.get_data(as_text=True)
        else:
            from openpyxl import load_workbook

            book = load_workbook(io.BytesIO(r.data), read_only=True)
            cells = {c for ws in book.worksheets for row in ws.iter_rows(values_only=True) for c in row}
            assert meter in cells
    for url in others:
        body = get_ok(client, url).get_data(as_text=True)
        selected = re.search(r'<option selected value="([^"]*)"|<option value="([^"]*)" selected', body)
        assert selected and html.unescape(selected.group(1) or selected.group(2)) == meter, url


def test_the_saved_scenario_of_an_odd_meter_and_its_exports(client):
    page = get_ok(client, "/scenarios/odd meter case").get_data(as_text=True)
    links = local_links(page)
    # the case document's exports name the scenario in the query string (no path converter needed)
    exports = [u for u in links if u.startswith("/case.")]
    assert len(exports) == 7 and all("scenario=odd" in u for u in exports), exports
    for url in links:
        # the PDF is Chromium's print of the HTML below; the cover form is posted, not fetched
        if not url.startswith(("/case.pdf", "/case/cover")):
            get_ok(client, url)
    html_doc = get_ok(client, next(u for u in exports if u.startswith("/case.html"))).get_data(as_text=True)
    assert "PLANT/7" in html.unescape(html_doc)
    listing = get_ok(client, "/scenarios").get_data(as_text=True)
    for url in local_links(listing):
        if url.startswith("/meters/"):
            assert "<h1>Meter PLANT/7 " in get_ok(client, url).get_data(as_text=True)


def test_bills_and_billing_query_of_an_odd_meter(client):
    page = get_ok(client, "/bills?meter=PLANT/7").get_data(as_text=True)
    assert "2025-03-03" in page
    for url in local_links(page):
        if "dispute" in url:
            r = get_ok(client, url)
            assert "PLANT/7" in r.get_data(as_text=True)


def test_imports_page_links_reach_the_meters(client):
    page = get_ok(client, "/imports").get_data(as_text=True)
    for url in local_links(page):
        if url.startswith("/meters/"):
            assert unquote(url).startswith("/meters/")
            get_ok(client, url)


def test_an_address_typed_by_hand_still_works(client):
    """Plain ids keep their plain addresses; "%2F" is read as the id's own "/" by servers that
    pass it through, and "~2F" always."""
    assert get_ok(client, "/meters/name.csv")
    assert get_ok(client, "/export/name.csv.csv").headers["Content-Disposition"].endswith('.csv"')
    assert "<h1>Meter PLANT/7 " in get_ok(client, "/meters/PLANT~2F7").get_data(as_text=True)
    assert client.get("/meters/PLANT/7").status_code == 404  # two segments: no such page
    assert client.get("/export/PLANT~2F7.pdfx").status_code == 404


@pytest.mark.parametrize("meter", ["PLANT/7", "q?x=1&y=2", "..", "Zählpunkt-電"])
def test_command_line_exports_of_an_odd_meter(odd_db, tmp_path, meter):
    for fmt in ("csv", "xlsx", "html"):
        out = tmp_path / f"r.{fmt}"
        r = invoke("report", "--meter", meter, "--tariff", TARIFF, "--out", out, db=odd_db.url)
        assert r.exit_code == 0 and out.stat().st_size > 100, r.output


def test_the_converter_round_trips_any_text():
    from hypothesis import given
    from hypothesis import strategies as st

    from auditor.web.urls import escape_meter, unescape_meter

    @given(st.text(min_size=1))
    def check(text):
        escaped = escape_meter(text)
        assert "/" not in escaped and "\\" not in escaped and not escaped.startswith(".")
        assert unescape_meter(escaped) == text

    check()


# --------------------------------------------------------------------------------------------
# one real browser
# --------------------------------------------------------------------------------------------
@pytest.mark.browser
def test_a_browser_follows_odd_meter_links(odd_db, tmp_path):
    from tests.test_web_browser import CHROMIUM_ARGS, chromium_path

    path = chromium_path()
    from playwright.sync_api import sync_playwright

    from auditor.commands.serve import make_server

    srv = make_server(odd_db, "127.0.0.1", 0, config={"INSTANCE_PATH": str(tmp_path / "i"), "WARM_CACHE": False,
                                                    "DEFAULT_TARIFF": TARIFF})
    thread = threading.Thread(target=srv.run, daemon=True)
    thread.start()
    base = f"http://127.0.0.1:{srv.effective_port}"
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=path, headless=True, args=CHROMIUM_ARGS)
            ctx = browser.new_context(accept_downloads=True, viewport={"width": 1280, "height": 800})
            page = ctx.new_page()
            page.set_default_timeout(60_000)
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            for meter in ("PLANT/7", "..", "q?x=1&y=2", "Zählpunkt-電"):
                page.goto(f"{base}/", wait_until="domcontentloaded")
                page.get_by_role("link", name=meter, exact=True).first.click()
                page.wait_for_load_state("domcontentloaded")
                assert page.locator("h1").inner_text().startswith(f"Meter {meter}"), page.url
                with page.expect_download() as dl:
                    page.get_by_role("link", name="Periods CSV").click()
                saved = tmp_path / f"dl-{ODD_IDS.index(meter)}.csv"
                dl.value.save_as(saved)
                rows = list(csv.DictReader(io.StringIO(Path(saved).read_text(encoding="utf-8"))))
                assert sum(float(x["Energy (kWh)"]) for x in rows) == pytest.approx(total_kwh(meter))
            page.screenshot(path=str(tmp_path / "odd-meter.png"))
            assert errors == []
            browser.close()
    finally:
        srv.close()
        thread.join(timeout=10)
