"""The dashboard in a real headless Chromium (Debian's package), driven by Playwright.

The real server (waitress, as ``auditor serve`` runs it) is started on 127.0.0.1 and a free
port against the demo database. Without a local Chromium these tests skip with the reason;
with ``AUDITOR_REQUIRE_BROWSER=1`` (set by CI) they fail instead.
"""
from __future__ import annotations

import os
import shutil
import tempfile
import threading
from contextlib import contextmanager
from pathlib import Path
from urllib.parse import quote

import pytest
from conftest import DEMO_SCENARIO

pytestmark = pytest.mark.browser

CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def chromium_path() -> str:
    """Debian's Chromium (env AUDITOR_CHROMIUM, else /usr/bin/chromium), or skip / fail."""
    path = os.environ.get("AUDITOR_CHROMIUM") or "/usr/bin/chromium"
    reason = None
    if not (Path(path).is_file() and os.access(path, os.X_OK)):
        reason = f"no Chromium at {path} (apt-get install chromium, or set AUDITOR_CHROMIUM)"
    else:
        try:
            import playwright.sync_api  # noqa: F401
        except ImportError:
            reason = "playwright (python) is not installed"
    if reason:
        if os.environ.get("AUDITOR_REQUIRE_BROWSER") == "1":
            pytest.fail(reason + " but AUDITOR_REQUIRE_BROWSER=1 demands the browser tests")
        pytest.skip(reason)
    return path


@contextmanager
def serving(store, instance: Path, token: str | None = None, **config):
    """The dashboard on ``store`` as ``auditor serve`` runs it (waitress, a thread of this
    process, a free port on 127.0.0.1): yields its base URL; stopped afterwards."""
    from auditor.commands.serve import make_server

    srv = make_server(store, "127.0.0.1", 0, token=token,
                      config={"INSTANCE_PATH": str(instance), "WARM_CACHE": False, **config})
    thread = threading.Thread(target=srv.run, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{srv.effective_port}"
    finally:
        srv.close()
        thread.join(timeout=10)


@contextmanager
def chromium(viewport: dict, args: list[str] = CHROMIUM_ARGS, **options):
    """Debian's Chromium with a new, empty profile (a persistent context of Playwright's): yields
    the context; closed and its profile removed afterwards."""
    path = chromium_path()
    from playwright.sync_api import sync_playwright

    profile = tempfile.mkdtemp(prefix="auditor-chromium-")
    with sync_playwright() as p:
        ctx = p.chromium.launch_persistent_context(profile, executable_path=path, headless=True, args=args,
                                                   viewport=viewport, **options)
        try:
            yield ctx
        finally:
            ctx.close()
            shutil.rmtree(profile, ignore_errors=True)


@contextmanager
def served_page(store, instance: Path, **config):
    """The dashboard (see :func:`serving`) and one Chromium page of 1280 × 800 that accepts
    downloads and collects the page's script errors: yields ``(page, base_url, errors)``."""
    with serving(store, instance, **config) as base, \
            chromium({"width": 1280, "height": 800}, accept_downloads=True) as ctx:
        page = ctx.new_page()
        page.set_default_timeout(60_000)
        errors: list[str] = []
        page.on("pageerror", lambda e: errors.append(str(e)))
        yield page, base, errors


@pytest.fixture(scope="module")
def server(demo_db, tmp_path_factory):
    with serving(demo_db, tmp_path_factory.mktemp("browser-instance")) as base:
        yield base


@pytest.fixture(scope="module")
def browser_context():
    with chromium({"width": 1400, "height": 900}, accept_downloads=True) as ctx:
        yield ctx


@pytest.fixture
def page(browser_context):
    pg = browser_context.new_page()
    errors: list[str] = []
    pg.on("console", lambda m: errors.append(f"console: {m.text}") if m.type == "error" else None)
    pg.on("pageerror", lambda e: errors.append(f"page error: {e}"))
    pg.errors = errors
    pg.set_default_timeout(60_000)
    yield pg
    pg.close()


def wait_charts(pg, expected: int) -> None:
    pg.wait_for_function(f"document.querySelectorAll('[data-figure][data-drawn]').length >= {expected}")
    assert pg.locator("[data-figure]").count() == expected
    # every chart drew plotly's SVG
    assert pg.locator("[data-figure] .main-svg").count() >= expected


def test_meter_page_charts_render(server, page):
    page.goto(f"{server}/meters/KQ-MAIN", wait_until="networkidle")
    wait_charts(page, 6)
    assert page.locator("#chart-heatmap .heatmaplayer, #chart-heatmap .hm").count() >= 1
    assert page.errors == []


def test_portfolio_sorts(server, page):
    page.goto(f"{server}/", wait_until="networkidle")
    meters = page.locator("#portfolio tbody tr td:nth-child(1)")
    first = meters.all_inner_texts()
    assert first[0] == "KQ-MAIN"  # worst PF first
    page.locator("#portfolio th", has_text="Latest PF").click()  # ascending (already so)
    page.locator("#portfolio th", has_text="Latest PF").click()  # descending
    assert meters.all_inner_texts() == list(reversed(first))
    assert page.errors == []


def test_scenario_form_submits_and_shows_payback(server, page, demo_db):
    from auditor.services.correction import get_scenario

    page.goto(f"{server}/scenario?meter=KQ-DOCKS", wait_until="networkidle")
    assert page.locator("#fixed_kvar").is_hidden()  # optimiser chosen: the bank fields hide
    page.check("input[name=design][value=fixed]")
    assert page.locator("#fixed_kvar").is_visible()
    page.fill("#fixed_kvar", "25")
    page.fill("#name", "browser docks 25")
    page.click("#scenario-form button[type=submit]")
    page.wait_for_url(f"**/scenarios/{quote('browser docks 25')}")
    saved = get_scenario(demo_db, "browser docks 25")["result"]
    assert page.locator("#payback").inner_text() == f"{saved['simple_payback_years']:.1f} years"
    assert "Before anyone buys or installs a bank" in page.content()
    # four charts since the frequency scan joined the scenario page (before/after, savings,
    # cash flow, scan)
    wait_charts(page, 4)
    assert page.locator("#chart-scan .scatterlayer .trace").count() >= 2  # without and with the bank
    assert page.errors == []


def test_export_downloads_and_opens_offline(server, page, browser_context, tmp_path):
    page.goto(f"{server}/scenarios/{quote(DEMO_SCENARIO)}", wait_until="networkidle")
    with page.expect_download() as info:
        page.click("#export-html")
    download = info.value
    target = tmp_path / download.suggested_filename
    download.save_as(target)
    assert target.suffix == ".html" and target.stat().st_size > 4_000_000
    assert page.errors == []
    # the report opens with the network cut off and draws every chart
    offline = browser_context.new_page()
    errors: list[str] = []
    offline.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    offline.on("pageerror", lambda e: errors.append(str(e)))
    requested: list[str] = []
    offline.route("http*://**/*", lambda route: (requested.append(route.request.url), route.abort()))
    offline.goto(target.as_uri(), wait_until="load")
    offline.wait_for_function("document.querySelectorAll('[data-figure] .main-svg').length >= 8")
    assert requested == [] and errors == []
    offline.close()
