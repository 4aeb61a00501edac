"""The case document and the comparison in a real headless Chromium (Playwright): every chart
drawn, and in print media on A4 and Letter no table runs past the page; on a 1280 × 800 screen
nothing scrolls sideways."""
from __future__ import annotations

from pathlib import Path

import pytest
from conftest import DEMO_SCENARIO
from test_web_browser import chromium, serving

pytestmark = pytest.mark.browser

#: the text width of the printed page in CSS pixels (96 px an inch): page less 2 × 14 mm
PRINT_WIDTH_PX = {"a4": (210 - 28) / 25.4 * 96, "letter": (215.9 - 28) / 25.4 * 96}

OVERFLOW = """() => {
  const page = document.documentElement.clientWidth;
  const out = [];
  document.querySelectorAll('table').forEach((t, i) => {
    const r = t.getBoundingClientRect();
    if (t.scrollWidth > t.clientWidth + 1 || r.right > page + 1 || r.left < -1) {
      out.push(`table ${i} (${(t.querySelector('caption, th') || {}).textContent}): ${Math.round(r.width)} px in ${page}`);
    }
  });
  document.querySelectorAll('.chart').forEach((c) => {
    const r = c.getBoundingClientRect();
    if (r.right > page + 1) { out.push(`chart ${c.id}: right ${Math.round(r.right)} px in ${page}`); }
  });
  if (document.documentElement.scrollWidth > page + 1) { out.push(`page scrolls: ${document.documentElement.scrollWidth} in ${page}`); }
  return out;
}"""


@pytest.fixture(scope="module")
def browser():
    with chromium({"width": 1280, "height": 800}) as ctx:
        yield ctx


@pytest.fixture(scope="module")
def documents(demo_db, tmp_path_factory):
    """The case document (A4 and Letter) and a comparison, written as files."""
    from auditor.services import compare as cp
    from auditor.services import report as rp

    folder = tmp_path_factory.mktemp("docs")
    report = rp.build_case(demo_db, DEMO_SCENARIO)
    out = {}
    for paper in ("a4", "letter"):
        out[paper] = folder / f"case-{paper}.html"
        out[paper].write_text(rp.render_html(report, paper=paper), encoding="utf-8")
    from auditor.services.correction import SizeRequest, save_scenario, size_meter
    from auditor.services.demo import DEMO_TARIFF

    others = ["browser docks 3x10", "browser main 4x50"]
    for name, meter, steps in zip(others, ("KQ-DOCKS", "KQ-MAIN"), ("3x10", "4x50"), strict=True):
        save_scenario(demo_db, name, size_meter(demo_db, SizeRequest(meter=meter, tariff=DEMO_TARIFF, steps=steps)))
    out["compare"] = folder / "compare.html"
    out["compare"].write_text(cp.render_html(cp.compare_scenarios(demo_db, [DEMO_SCENARIO, *others])),
                              encoding="utf-8")
    return out


def open_doc(browser, path: Path, width: int, media: str):
    page = browser.new_page()
    page.set_viewport_size({"width": width, "height": 1000})
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    requested: list[str] = []
    page.route("http*://**/*", lambda route: (requested.append(route.request.url), route.abort()))
    page.emulate_media(media=media)
    page.goto(path.as_uri(), wait_until="load")
    page.wait_for_function("document.body.getAttribute('data-charts-drawn') === '1'", timeout=60_000)
    assert errors == [] and requested == []
    return page


@pytest.mark.parametrize("paper", ["a4", "letter"])
def test_printed_case_has_no_clipped_table(browser, documents, paper):
    page = open_doc(browser, documents[paper], int(PRINT_WIDTH_PX[paper]), "print")
    try:
        assert page.evaluate(OVERFLOW) == []
        # every section starts a page; every chart drew its SVG
        breaks = page.evaluate("() => Array.from(document.querySelectorAll('section.sheet')).slice(1)"
                               ".map(s => getComputedStyle(s).breakBefore)")
        assert breaks and set(breaks) == {"page"}
        drawn = page.evaluate("() => Array.from(document.querySelectorAll('.chart')).map(c => "
                              "c.querySelectorAll('.main-svg').length > 0 && c.getBoundingClientRect().width > 300)")
        assert len(drawn) >= 8 and all(drawn)
    finally:
        page.close()


def test_case_on_screen_does_not_scroll_sideways(browser, documents):
    page = open_doc(browser, documents["a4"], 1280, "screen")
    try:
        assert page.evaluate(OVERFLOW) == []
    finally:
        page.close()


def test_printed_comparison_fits_the_page(browser, documents):
    page = open_doc(browser, documents["compare"], int(PRINT_WIDTH_PX["a4"]), "print")
    try:
        assert page.evaluate(OVERFLOW) == []
    finally:
        page.close()


@pytest.fixture(scope="module")
def server(demo_db, documents, tmp_path_factory):
    with serving(demo_db, tmp_path_factory.mktemp("inst")) as base:
        yield base


def test_compare_page_draws_its_chart_and_fits_the_screen(browser, server):
    from urllib.parse import quote

    page = browser.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    try:
        page.set_viewport_size({"width": 1280, "height": 800})
        page.goto(f"{server}/scenarios", wait_until="networkidle")
        page.click("#compare-link")
        for name in (DEMO_SCENARIO, "browser docks 3x10", "browser main 4x50"):
            page.check(f"input[name=scenario][value='{name}']")
        page.click("#compare-form button[type=submit]")
        page.wait_for_url("**/compare?scenario=*")
        page.wait_for_function("document.querySelectorAll('[data-figure][data-drawn] .main-svg').length >= 1")
        assert page.locator("#side-by-side thead th").count() == 4
        assert page.evaluate("document.documentElement.scrollWidth") <= 1280
        assert errors == []
        page.goto(f"{server}/scenarios/{quote(DEMO_SCENARIO)}", wait_until="networkidle")
        assert page.locator("#export-pdf").is_visible() and page.locator("#cover-form").is_visible()
        assert errors == []
    finally:
        page.close()
