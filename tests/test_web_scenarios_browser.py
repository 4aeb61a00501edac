"""The scenario page in a real headless Chromium at 1280×800: a failing rule is seen first,
without scrolling, and the frequency scan draws."""
from __future__ import annotations

import pytest
from test_web_browser import browser_context, page, server  # noqa: F401  (fixtures)

pytestmark = pytest.mark.browser


def wait_drawn(pg, expected: int) -> None:
    """Every chart drew (locators, not a JavaScript string: the page's CSP forbids eval)."""
    pg.locator("[data-figure][data-drawn]").nth(expected - 1).wait_for()
    assert pg.locator("[data-figure]").count() == expected
    assert pg.locator("[data-figure] .main-svg").count() >= expected


def test_failing_rule_is_above_the_fold_and_the_scan_draws(server, page):  # noqa: F811
    page.set_viewport_size({"width": 1280, "height": 800})
    page.goto(f"{server}/scenario?meter=KQ-MAIN", wait_until="networkidle")
    page.check("input[name=design][value=fixed]")
    page.fill("#fixed_kvar", "175")
    page.click("#scenario-form button[type=submit]")
    page.wait_for_selector("#screening-failed")
    wait_drawn(page, 4)
    box = page.locator("#screening-failed").bounding_box()
    assert box is not None and box["y"] + 40 < 800  # its heading is on the first screen
    assert page.locator("#screening-failed").is_visible()
    assert "over correction" in page.locator("#screening-failed").inner_text()
    # the scan: without the bank, and with it (a fixed bank: one stage), on a log axis
    assert page.locator("#chart-scan .scatterlayer .trace").count() == 2
    assert page.locator("#chart-scan .ytick").count() >= 3
    assert page.errors == []


def test_reactor_form_fields_follow_the_design(server, page):  # noqa: F811
    page.goto(f"{server}/scenario?meter=AR-01", wait_until="networkidle")
    assert page.locator("#reactor_kvar").is_hidden()
    page.check("input[name=design][value=reactor]")
    assert page.locator("#reactor_kvar").is_visible() and page.locator("#fixed_kvar").is_hidden()
    page.fill("#reactor_kvar", "15")
    page.click("#scenario-form button[type=submit]")
    page.wait_for_selector("#specification")
    assert "shunt reactor 15 kvar, switched" in page.locator("#result h2").first.inner_text()
    assert page.errors == []
