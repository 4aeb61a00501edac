"""Tables that fit, in a real headless Chromium against the real server (waitress).

At 1280 × 800 no page scrolls sideways (the document is no wider than the window), the columns
a reader came for are in sight on arrival (portfolio: saving, payback, coverage; meter: the
charges; bills: the amount in question) and detail columns wait behind "All columns"; a table
that still scrolls keeps its first column in sight. In print media no table, chart or page runs
past the printable width of an A4 or a Letter page (the style sheet's 12 mm margins).
"""
from __future__ import annotations

import sqlite3
from urllib.parse import quote

import pytest
import test_web_browser as browser
from conftest import DEMO_SCENARIO

browser_context = browser.browser_context  # the same Chromium fixtures as the other browser tests
page = browser.page

pytestmark = pytest.mark.browser

MM = 96 / 25.4  # CSS pixels per millimetre
MARGIN_MM = 12  # @page margin in style.css
PAPER = {"A4": round((210 - 2 * MARGIN_MM) * MM, 1), "Letter": round((215.9 - 2 * MARGIN_MM) * MM, 1)}

#: every dashboard page of the meters, imports, bills and tariffs (and the error page)
OWN_PAGES = ["/", "/meters/KQ-MAIN", "/meters/KQ-DOCKS", "/meters/AR-01", "/imports", "/bills?meter=KQ-MAIN",
             "/bills?meter=AR-01", "/tariffs", "/tariffs/edit", "/tariffs/edit?name=harrowgate_industrial_tou",
             "/meters/NO-SUCH-METER"]
#: a saved optimiser case (its candidate tables), saved by the server fixture
OPTIMISED = "KQ-MAIN optimised"
#: the scenario pages (their own tables; they pass the document-width check too)
SCENARIO_PAGES = ["/scenario", "/scenario?meter=KQ-DOCKS", "/scenarios", f"/scenarios/{quote(DEMO_SCENARIO)}",
                  f"/scenarios/{quote(OPTIMISED)}"]


@pytest.fixture(scope="module")
def server(demo_db, tmp_path_factory):
    """The dashboard on a copy of the demo database holding the demo bills too."""
    from auditor.services.bills import demo_bills_path, import_bills
    from auditor.store import open_store

    browser.chromium_path()
    folder = tmp_path_factory.mktemp("layout")
    src = sqlite3.connect(demo_db.url.removeprefix("sqlite:///"))
    dst = sqlite3.connect(folder / "demo.sqlite3")
    with dst:
        src.backup(dst)  # the pages see the session's demo database, write-ahead log included
    src.close()
    dst.close()
    store = open_store(f"sqlite:///{folder / 'demo.sqlite3'}")
    import_bills(store, demo_bills_path())
    from auditor.services.correction import ScenarioRequest, save_scenario, scenario_for_meter
    from auditor.services.demo import DEMO_TARIFF

    save_scenario(store, OPTIMISED, scenario_for_meter(store, ScenarioRequest(meter="KQ-MAIN", tariff=DEMO_TARIFF,
                                                                              optimise=True)))
    try:
        with browser.serving(store, folder / "instance") as base:
            yield base
    finally:
        store.dispose()


def _open(pg, url: str) -> None:
    pg.set_viewport_size({"width": 1280, "height": 800})
    pg.emulate_media(media="screen")
    pg.goto(url, wait_until="networkidle")
    if pg.locator("[data-figure]").count():
        pg.wait_for_function("document.querySelectorAll('[data-figure]').length === "
                             "document.querySelectorAll('[data-figure][data-drawn]').length")


def document_width(pg) -> int:
    return pg.evaluate("document.documentElement.scrollWidth")


def in_sight(pg, table: str, header: str) -> bool:
    """The column's heading lies inside the table's frame and the window, without scrolling sideways."""
    th = pg.locator(f"{table} thead th", has_text=header).first
    th.scroll_into_view_if_needed()
    return pg.evaluate("""th => { const r = th.getBoundingClientRect(), f = th.closest('.scroll').getBoundingClientRect();
                                  return r.width > 0 && r.left >= f.left - 1 && r.right <= f.right + 1
                                         && r.right <= window.innerWidth; }""", th.element_handle())


@pytest.mark.parametrize("path", OWN_PAGES + SCENARIO_PAGES)
def test_no_page_scrolls_sideways_at_1280(server, page, path):
    _open(page, server + path)
    assert document_width(page) <= 1280, f"{path} is {document_width(page)} px wide"
    # the error page answers 404 on purpose; nothing else may go wrong
    assert [e for e in page.errors if not (path.endswith("NO-SUCH-METER") and "404" in e)] == []


@pytest.mark.parametrize("path", OWN_PAGES)
def test_tables_of_own_pages_need_no_sideways_scroll(server, page, path):
    _open(page, server + path)
    frames = page.evaluate("Array.from(document.querySelectorAll('.scroll')).map(s => [s.scrollWidth, s.clientWidth])")
    assert all(w <= c + 1 for w, c in frames), f"{path}: a table scrolls inside its frame: {frames}"


def test_the_columns_a_reader_came_for_are_in_sight(server, page):
    _open(page, server + "/")
    for header in ("Latest PF", "Reactive charges", "Saving a year", "Payback", "Coverage", "Best saved scenario"):
        assert in_sight(page, "#portfolio", header), header
    _open(page, server + "/meters/KQ-MAIN")
    for header in ("Energy PF", "Peak (kW)", "energy (EUR)", "demand (EUR)", "reactive daytime (EUR)",
                   "Reactive charges", "Total", "Coverage"):
        assert in_sight(page, "#audit", header), header
    _open(page, server + "/bills?meter=KQ-MAIN")
    for header in ("Period", "Total", "Status", "In question"):
        assert in_sight(page, "#bills", header), header
    for header in ("Billed", "Expected", "Probable cause", "Money"):
        assert in_sight(page, "#findings", header), header


CANDIDATE_HEADLINE = ("Rank", "Design", "NPV", "Payback", "Screening")


def _candidates_in_sight(page) -> None:
    for header in CANDIDATE_HEADLINE:
        assert in_sight(page, "#candidates", header), header
    detail = page.locator("#candidates thead th.detail")
    assert detail.count() == 5 and not detail.first.is_visible()
    # a design that fails shows the rules it fails under its verdict, in sight too
    failing = page.locator("#candidates-more tbody tr", has_text="fails").first
    page.locator("#candidates-more").locator("xpath=ancestor::details").evaluate("d => { d.open = true; }")
    cell = failing.locator("td").nth(4)
    assert cell.locator(".pill.bad").inner_text() == "fails" and cell.locator(".hint").inner_text()
    frame = page.locator("#candidates-more").locator("xpath=..")
    assert frame.evaluate("f => f.scrollWidth <= f.clientWidth + 1")
    page.locator("label[for=candidates-all]").click()
    assert detail.first.is_visible() and document_width(page) <= 1280


def test_the_candidates_headline_columns_are_in_sight(server, page):
    """The saved case and the form's result: design, NPV, payback and the screening verdict (with
    the rules a design fails) in sight without sideways scrolling; the rest behind "All columns"."""
    _open(page, server + f"/scenarios/{quote(OPTIMISED)}")
    _candidates_in_sight(page)
    _open(page, server + "/scenario?meter=KQ-MAIN")
    page.locator("input[name=design][value=optimise]").check()
    page.locator("#scenario-form button[type=submit]").click()
    page.wait_for_selector("#candidates", timeout=120_000)
    page.wait_for_load_state("networkidle")
    assert document_width(page) <= 1280
    _candidates_in_sight(page)


def test_detail_columns_wait_behind_a_toggle_and_the_first_column_stays(server, page):
    _open(page, server + "/meters/KQ-MAIN")
    detail = page.locator("#audit thead th.detail")
    assert detail.count() >= 8 and not detail.first.is_visible()
    page.locator("label[for=audit-all]").click()
    assert detail.first.is_visible() and page.locator("#audit thead th", has_text="Load factor").is_visible()
    frame = page.locator("#audit").locator("xpath=..")
    assert frame.evaluate("f => f.scrollWidth > f.clientWidth")  # now it scrolls, inside its frame only
    assert document_width(page) <= 1280
    frame.evaluate("f => { f.scrollLeft = f.scrollWidth; }")
    page.wait_for_timeout(100)
    first, box = page.evaluate("""() => { const f = document.querySelector('#audit').parentElement;
        return [document.querySelector('#audit tbody td').getBoundingClientRect().left, f.getBoundingClientRect().left]; }""")
    assert abs(first - box) <= 1.5  # the period column stays at the frame's left edge
    assert page.locator("#audit tbody tr").first.locator("td").first.inner_text() == "2025-01"
    # peaks carry their local time, the zone named
    cell = page.locator("#audit tbody tr").first.locator("td", has_text="2025-01-03").first.inner_text()
    assert "13:15 CET" in cell


@pytest.mark.parametrize("paper", sorted(PAPER))
def test_in_print_nothing_runs_past_the_page(server, page, paper):
    width = PAPER[paper]
    for path in OWN_PAGES + SCENARIO_PAGES:
        _open(page, server + path)
        page.set_viewport_size({"width": int(width), "height": 1000})
        page.emulate_media(media="print")
        page.wait_for_timeout(150)  # the charts redraw for paper
        assert document_width(page) <= width + 0.5, f"{path} on {paper}: {document_width(page)} px"
        rights = page.evaluate("""Array.from(document.querySelectorAll('table, [data-figure] .main-svg'))
            .filter(e => e.getClientRects().length).map(e => e.getBoundingClientRect().right)""")
        assert all(r <= width + 0.5 for r in rights), f"{path} on {paper}: {max(rights)} > {width}"
    assert [e for e in page.errors if "404" not in e] == []


def test_login_page_fits(demo_db, tmp_path, page):
    with browser.serving(demo_db, tmp_path / "instance", token="layout-test-token-123") as base:
        _open(page, f"{base}/login")
        assert page.locator("input[name=token]").is_visible()
        assert document_width(page) <= 1280
