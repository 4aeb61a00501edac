"""Any scenario name works on every scenario route and export: names holding "/", "?", "#", "%",
"~", backslashes, quotes, markup, non-ASCII letters, a leading dot, "." and "..", and the name of
a route ("delete"). The page of each name, its links, its exports, the cover form, the form that
saves it, the comparison and deletion are requested (Flask test client); the command line's
report, comparison and deletion are run for a few.
"""
from __future__ import annotations

import csv
import html
import io
import posixpath
import re
from urllib.parse import quote, urlsplit

import pytest
from markupsafe import escape

from tests.ingest_helpers import day_rows
from tests.test_cli_grammar import invoke

TARIFF = "millbrook_commercial_pf"
METER = "NAMES-1"
ODD_NAMES = [
    "Bay 3 / west", "/lead", "trail/", "a//b", "Case #2", "q?x=1&y=2", "50% detuned", "a%2Fb", "a%41",
    "Zählpunkt 電 — 7 %", ".hidden", ".", "..", "x/../y", "back\\slash", "~tilde~7E", 'say "two"',
    "<b>bold</b>", "name.csv", "+plus;semi:colon@at", "delete", "=2+3",
]


@pytest.fixture(scope="module")
def names_db(tmp_path_factory):
    """Two days of one meter and one saved scenario (a fixed 50 kvar bank) under each odd name."""
    from auditor.services.correction import ScenarioRequest, save_scenario, scenario_for_meter
    from auditor.store import open_store

    folder = tmp_path_factory.mktemp("odd-names")
    lines = ["meter,start,kwh,kvarh_lag,kvarh_lead"]
    for day in ("2025-03-03", "2025-03-04"):
        lines += day_rows(meter=METER, day=day, kwh=30.0, lag=20.0)
    data = folder / "names.csv"
    data.write_text("\n".join(lines) + "\n", encoding="utf-8")
    url = f"sqlite:///{folder / 'names.sqlite3'}"
    r = invoke("import", data, db=url)
    assert r.exit_code == 0, r.output
    store = open_store(url)
    case = scenario_for_meter(store, ScenarioRequest(meter=METER, tariff=TARIFF, fixed_kvar=50.0))
    for name in ODD_NAMES:
        save_scenario(store, name, case)
    try:
        yield store
    finally:
        store.dispose()


@pytest.fixture(scope="module")
def client(names_db, tmp_path_factory):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path_factory.mktemp("names-instance")), "TESTING": True,
                      "DEFAULT_TARIFF": TARIFF}, store=names_db)
    return app.test_client()


def get_ok(client, url: str):
    r = client.get(url)
    assert r.status_code == 200, (url, r.status_code, r.get_data(as_text=True)[:300])
    return r


def local_links(page: str) -> list[str]:
    found = [html.unescape(u) for u in re.findall(r'(?:href|action)="([^"]+)"', page)]
    return [u for u in found if u.startswith("/") and not u.startswith(("/static/", "/vendor/"))]


def heading(name: str) -> str:
    return f"<h1>Scenario “{escape(name)}”</h1>"


def url_of(client, name: str) -> str:
    from flask import url_for

    with client.application.test_request_context():
        return url_for("scenarios.show", name=name)


def csrf(page: str) -> str:
    m = re.search(r'name="csrf_token" type="hidden" value="([^"]+)"', page) or \
        re.search(r'name="csrf_token" value="([^"]+)"', page)
    return m.group(1)


def test_the_list_links_every_name_to_its_own_page(client):
    page = get_ok(client, "/scenarios").get_data(as_text=True)
    links = {html.unescape(text): html.unescape(href)
             for href, text in re.findall(r'<a href="(/scenarios/[^"]+)">(.*?)</a>', page)}
    assert set(links) == set(ODD_NAMES)
    for name, url in links.items():
        path = urlsplit(url).path
        assert path.count("/") == 2 and posixpath.normpath(path) == path and "\\" not in path, url
        assert heading(name) in get_ok(client, url).get_data(as_text=True), (name, url)


@pytest.mark.parametrize("name", ODD_NAMES)
def test_every_link_and_export_of_an_odd_name(client, name):
    page = get_ok(client, url_of(client, name)).get_data(as_text=True)
    assert heading(name) in page
    links = local_links(page)
    exports = [u for u in links if u.startswith("/case.")]
    assert len(exports) >= 5, exports
    for url in links:
        if url.startswith(("/case.pdf", "/case/cover", "/scenarios/delete")):
            continue  # Chromium's print of the HTML below; forms are posted, not fetched
        r = get_ok(client, url)
        if url.startswith("/case.html"):
            assert str(escape(name)) in r.get_data(as_text=True)
        elif url.startswith("/case.xlsx"):
            from openpyxl import load_workbook

            book = load_workbook(io.BytesIO(r.data), read_only=True)
            assert name in {c for ws in book.worksheets for row in ws.iter_rows(values_only=True) for c in row}
        elif url.startswith("/case.csv"):
            assert list(csv.reader(io.StringIO(r.get_data(as_text=True))))
        if url.startswith("/case."):
            disposition = r.headers["Content-Disposition"]
            assert disposition.startswith("attachment; filename=") and "/" not in disposition.split(";")[1]
            if name.startswith("Zählpunkt"):  # the name kept for the downloaded file (RFC 6266)
                from urllib.parse import unquote

                full = unquote(disposition.split("filename*=UTF-8''")[1])
                # the name, then the format (a CSV adds the table it holds: ``_summary.csv``)
                assert re.match(rf"{METER}_Zählpunkt_電_—_7_%(_[a-z]+)?\.[a-z]+$", full) and "/" not in full
        if url.startswith("/compare"):
            assert f'value="{escape(name)}" checked' in r.get_data(as_text=True)


@pytest.mark.parametrize("name", ["Bay 3 / west", "..", "q?x=1&y=2", "Zählpunkt 電 — 7 %", "delete"])
def test_saving_the_cover_and_the_form_lead_back_to_the_same_name(client, name):
    page = get_ok(client, url_of(client, name)).get_data(as_text=True)
    r = client.post("/case/cover", data={"csrf_token": csrf(page), "name": name, "client": "Tern Harbour Foods"})
    assert r.status_code == 302
    back = get_ok(client, r.headers["Location"].split("#")[0]).get_data(as_text=True)
    assert heading(name) in back and 'value="Tern Harbour Foods"' in back
    form = get_ok(client, f"/scenario?meter={quote(METER)}").get_data(as_text=True)
    r = client.post("/scenario", data={"csrf_token": csrf(form), "meter": METER, "tariff": TARIFF,
                                       "target_pf": "0.95", "design": "fixed", "fixed_kvar": "40",
                                       "detuning": "0", "name": name})
    assert r.status_code == 302, r.get_data(as_text=True)[:500]
    again = get_ok(client, r.headers["Location"]).get_data(as_text=True)
    assert heading(name) in again and 'value="40.0"' in again


def test_comparing_and_deleting_odd_names(client, names_db):
    a, b = "Bay 3 / west", "q?x=1&y=2"
    query = f"scenario={quote(a, safe='')}&scenario={quote(b, safe='')}"
    page = get_ok(client, f"/compare?{query}").get_data(as_text=True)
    for url in local_links(page):
        if url.startswith("/compare.") and not url.startswith("/compare.pdf"):
            assert get_ok(client, url).data
        if url.startswith("/scenarios/") and url != "/scenarios/delete":
            get_ok(client, url)
    from auditor.services.correction import list_scenarios

    listing = get_ok(client, "/scenarios").get_data(as_text=True)
    r = client.post("/scenarios/delete", data={"csrf_token": csrf(listing), "name": "x/../y"})
    assert r.status_code == 302
    assert "x/../y" not in {s["name"] for s in list_scenarios(names_db)}
    assert client.get(url_of(client, "x/../y")).status_code == 404


def test_an_address_typed_by_hand_still_works(client):
    """Plain names keep their plain addresses; an address of the former form, the name's "/"
    as a path separator, is sent on to the scenario's own address."""
    assert url_of(client, "delete") == "/scenarios/delete"
    assert heading("delete") in get_ok(client, "/scenarios/delete").get_data(as_text=True)
    assert heading("Bay 3 / west") in get_ok(client, "/scenarios/Bay 3 ~2F west").get_data(as_text=True)
    r = client.get("/scenarios/Bay 3 / west")
    assert r.status_code == 308 and r.headers["Location"].endswith(url_of(client, "Bay 3 / west"))
    assert client.get("/scenarios/no such case").status_code == 404


def test_the_converter_round_trips_any_name():
    from hypothesis import given
    from hypothesis import strategies as st

    from auditor.web.urls import ScenarioNameConverter

    conv = ScenarioNameConverter(None)

    @given(st.text(min_size=1))
    def check(text):
        url = conv.to_url(text)
        assert "/" not in url and not url.startswith(".")
        from urllib.parse import unquote

        assert conv.to_python(unquote(url)) == text

    check()


@pytest.mark.parametrize("name", ["Bay 3 / west", "..", "Zählpunkt 電 — 7 %", "=2+3"])
def test_command_line_exports_of_an_odd_name(names_db, tmp_path, name):
    for fmt in ("csv", "xlsx", "html"):
        out = tmp_path / f"case.{fmt}"
        r = invoke("report", "--scenario", name, "--out", out, db=names_db.url)
        assert r.exit_code == 0 and out.stat().st_size > 100, r.output
    r = invoke("scenarios", "compare", name, "+plus;semi:colon@at", "--json", db=names_db.url)
    assert r.exit_code == 0, r.output


# --------------------------------------------------------------------------------------------
# one real browser (browsers fold "." and ".." segments and read a backslash as a slash)
# --------------------------------------------------------------------------------------------
@pytest.mark.browser
def test_a_browser_follows_odd_scenario_links(names_db, tmp_path):
    from tests.test_web_browser import served_page

    with served_page(names_db, tmp_path / "i", DEFAULT_TARIFF=TARIFF) as (page, base, errors):
        for name in ("..", "back\\slash", "Case #2", "Zählpunkt 電 — 7 %", "Bay 3 / west"):
            page.goto(f"{base}/scenarios", wait_until="domcontentloaded")
            page.get_by_role("link", name=name, exact=True).first.click()
            page.wait_for_load_state("domcontentloaded")
            assert page.locator("h1").inner_text() == f"Scenario “{name}”", page.url
            with page.expect_download() as dl:
                page.locator("#export-xlsx").click()
            assert dl.value.suggested_filename.endswith(".xlsx")
        assert errors == []
