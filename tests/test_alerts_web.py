"""The Alerts page, the badges, the alert marks on the meter page's charts and the meter's own
tariff form, through Flask's test client on the planted case."""
from __future__ import annotations

import json
import re

import pytest
from monitoring_helpers import planted_store

from auditor.services.alerts import list_alerts
from auditor.services.meter_tariff import meter_tariff, set_meter_tariff


def csrf_token(html: str) -> str:
    m = re.search(r'name="csrf_token" value="([^"]+)"', html)
    assert m, "no CSRF token in the page"
    return m.group(1)


@pytest.fixture
def planted(tmp_path):
    store = planted_store(tmp_path)
    yield store
    store.dispose()


@pytest.fixture
def client(planted, tmp_path):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "instance"), "TESTING": True}, store=planted)
    return app.test_client()


def figure(html: str, key: str) -> dict:
    m = re.search(rf'<script type="application/json" id="fig-{key}">(.*?)</script>', html, re.S)
    assert m, key
    return json.loads(m.group(1))


def test_alerts_page_lists_and_filters(client, planted):
    html = client.get("/alerts").get_data(as_text=True)
    alerts = list_alerts(planted)
    assert len(alerts) == 2
    for a in alerts:
        assert f'id="alert-{a["id"]}"' in html
    step = next(a for a in alerts if a["kind"] == "correction_loss")
    assert f"{step['money_per_month']:,.0f} EUR" in html and "correction lost" in html and "data stopped" in html
    assert 'id="nav-alerts">Alerts <span class="badge" title="2 new">2</span>' in html
    only = client.get("/alerts?kind=data_stopped").get_data(as_text=True)
    assert "KQ-DOCKS" in only and f'id="alert-{step["id"]}"' not in only
    assert "No alerts" in client.get("/alerts?state=resolved&meter=AR-01").get_data(as_text=True)
    assert f'id="alert-{step["id"]}"' in client.get("/alerts?meter=KQ-MAIN&since=2025-09-01").get_data(as_text=True)
    assert f'id="alert-{step["id"]}"' not in client.get("/alerts?since=2025-09-20").get_data(as_text=True)
    for bad in ("state=later", "kind=fire", "since=yesterday"):
        r = client.get(f"/alerts?{bad}")
        assert r.status_code == 400 and "must be" in r.get_data(as_text=True)


def test_mark_seen_needs_the_form_token(client, planted):
    step = next(a for a in list_alerts(planted) if a["kind"] == "correction_loss")
    assert client.post("/alerts/seen", data={"id": step["id"]}).status_code == 400
    token = csrf_token(client.get("/alerts").get_data(as_text=True))
    r = client.post("/alerts/seen", data={"id": step["id"], "csrf_token": token, "next": "//elsewhere.invalid/x"})
    assert r.status_code == 302 and r.headers["Location"].endswith("/alerts")
    states = {a["kind"]: a["state"] for a in list_alerts(planted)}
    assert states == {"correction_loss": "seen", "data_stopped": "new"}
    html = client.get("/alerts").get_data(as_text=True)
    assert 'title="1 new">1</span>' in html and "1 alert marked seen." in html
    client.post("/alerts/seen", data={"all": "1", "csrf_token": token})
    assert {a["state"] for a in list_alerts(planted)} == {"seen"}
    assert 'class="badge"' not in client.get("/alerts").get_data(as_text=True)


def test_portfolio_badges_and_own_tariffs(client, planted):
    html = client.get("/").get_data(as_text=True)
    assert 'href="/alerts?meter=KQ-MAIN"' in html and 'href="/alerts?meter=KQ-DOCKS"' in html
    assert 'href="/alerts?meter=AR-01"' not in html
    assert html.count('title="audited under its own tariff: Harrowgate Industrial TOU">own tariff</span>') == 3


def test_alerts_marked_on_the_meter_charts(client):
    html = client.get("/meters/KQ-MAIN").get_data(as_text=True)
    assert 'id="meter-alerts"' in html and "Lagging reactive power up" in html
    pf = figure(html, "pf")
    assert any(s.get("x0") == "2025-09" and s["line"]["dash"] == "dot" for s in pf["layout"]["shapes"])
    assert any("correction lost 2025-09-15" in a["text"] for a in pf["layout"]["annotations"])
    heat = figure(html, "heatmap")
    assert any(s.get("x0") == "2025-09-15" for s in heat["layout"]["shapes"])
    for key in ("reactive", "peaks"):
        assert any(s.get("x0") == "2025-09" for s in figure(html, key)["layout"]["shapes"])
    docks = client.get("/meters/KQ-DOCKS").get_data(as_text=True)
    assert any("data stopped 2025-09-24" in a["text"] for a in figure(docks, "heatmap")["layout"]["annotations"])
    quiet = client.get("/meters/AR-01").get_data(as_text=True)
    assert 'id="meter-alerts"' not in quiet
    assert not any("⚑" in a.get("text", "") for a in figure(quiet, "pf")["layout"].get("annotations", []))


def test_meter_tariff_form(client, planted):
    page = client.get("/meters/AR-01").get_data(as_text=True)
    assert "Billed under <strong>Harrowgate Industrial TOU</strong>" in page
    token = csrf_token(page)
    r = client.post("/meters/AR-01/tariff", data={"tariff": "tidewater_banded_kva", "billing_day": "12",
                                                   "csrf_token": token})
    assert r.status_code == 302
    own = meter_tariff(planted, "AR-01")
    assert own.tariff.name == "Tidewater kVA Banded" and own.billing_day == 12
    page = client.get("/meters/AR-01").get_data(as_text=True)
    assert "under <strong>Tidewater kVA Banded</strong>" in page and "2025-08-12..2025-09-12" in page
    assert client.post("/meters/AR-01/tariff", data={"tariff": "nope", "csrf_token": token}).status_code == 404
    assert client.post("/meters/AR-01/tariff", data={"tariff": "tidewater_banded_kva", "billing_day": "x",
                                                      "csrf_token": token}).status_code == 400
    client.post("/meters/AR-01/tariff", data={"tariff": "", "csrf_token": token})
    assert meter_tariff(planted, "AR-01") is None
    set_meter_tariff(planted, "AR-01", "harrowgate_industrial_tou")


def test_run_the_checks_from_the_page(client):
    token = csrf_token(client.get("/alerts").get_data(as_text=True))
    r = client.post("/alerts/check", data={"csrf_token": token, "next": "/alerts?state=all"})
    assert r.status_code == 302 and r.headers["Location"].endswith("/alerts?state=all")
    html = client.get("/alerts?state=all").get_data(as_text=True)
    assert "checked 3 meters as of" in html
