"""The Alerts page, the portfolio badge and the marks on the meter charts in a real headless
Chromium (Debian's), served by waitress as `auditor serve` runs it, at 1280 x 800. Screenshots go
to the test's folder (or to AUDITOR_SCREENSHOTS when set, to look at them)."""
from __future__ import annotations

import os
from pathlib import Path

import pytest
from monitoring_helpers import planted_store
from test_web_browser import chromium, serving

from auditor.services.alerts import list_alerts

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    store = planted_store(tmp_path_factory.mktemp("planted-browser"))
    yield store
    store.dispose()


@pytest.fixture(scope="module")
def server(planted, tmp_path_factory):
    with serving(planted, tmp_path_factory.mktemp("alerts-instance")) as base:
        yield base


@pytest.fixture(scope="module")
def browser():
    with chromium({"width": 1280, "height": 800}) as ctx:
        yield ctx


@pytest.fixture
def page(browser):
    pg = browser.new_page()
    errors: list[str] = []
    pg.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    pg.on("pageerror", lambda e: errors.append(str(e)))
    pg.errors = errors
    pg.set_default_timeout(60_000)
    yield pg
    pg.close()


def shot(page, tmp_path, name: str) -> Path:
    folder = Path(os.environ.get("AUDITOR_SCREENSHOTS") or tmp_path)
    folder.mkdir(parents=True, exist_ok=True)
    target = folder / f"{name}.png"
    page.screenshot(path=str(target), full_page=False)
    assert target.stat().st_size > 10_000
    return target


def test_alerts_page_filters_and_marks_seen(server, page, planted, tmp_path):
    page.goto(f"{server}/alerts", wait_until="networkidle")
    rows = page.locator("#alerts tbody tr")
    assert rows.count() == 2
    assert page.locator("#nav-alerts .badge").inner_text() == "2"
    # the table fits the 1280 px window: no cell is pushed past the right edge
    shot(page, tmp_path, "alerts")
    box = page.locator("#alerts").bounding_box()
    assert box["x"] >= 0 and box["x"] + box["width"] <= 1280
    page.select_option("#f-kind", "data_stopped")  # filters submit themselves
    page.wait_for_url("**/alerts?*kind=data_stopped*")
    assert rows.count() == 1 and "KQ-DOCKS" in rows.first.inner_text()
    page.goto(f"{server}/alerts", wait_until="networkidle")
    step = next(a for a in list_alerts(planted) if a["kind"] == "correction_loss")
    page.check(f"#alert-{step['id']} input[type=checkbox]")
    page.click("#alert-list button[type=submit]:not([name])")
    page.wait_for_load_state("networkidle")
    assert "1 alert marked seen." in page.content()
    assert page.locator(f"#alert-{step['id']} .pill", has_text="seen").count() == 1
    assert page.locator("#nav-alerts .badge").inner_text() == "1"
    assert page.errors == []


def test_portfolio_badge_and_meter_marks(server, page, tmp_path):
    page.goto(f"{server}/", wait_until="networkidle")
    badge = page.locator("#portfolio a.alert-badge[href='/alerts?meter=KQ-MAIN']")
    assert badge.count() == 1 and badge.inner_text().startswith("⚑")
    shot(page, tmp_path, "portfolio")
    page.goto(f"{server}/meters/KQ-MAIN", wait_until="networkidle")
    page.wait_for_function("document.querySelectorAll('[data-figure][data-drawn]').length >= 6")
    # the alert's mark is drawn on the period chart and on the heat map
    assert "correction lost 2025-09-15" in page.locator("#chart-pf").inner_text()
    assert "correction lost 2025-09-15" in page.locator("#chart-heatmap").inner_text()
    assert page.locator("#meter-alerts").is_visible()
    shot(page, tmp_path, "meter-top")
    page.locator("#chart-heatmap").scroll_into_view_if_needed()
    shot(page, tmp_path, "meter-heatmap")
    assert page.errors == []
