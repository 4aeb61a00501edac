"""The dashboard through Flask's test client: every route, CSRF, escaping, headers, uploads."""
from __future__ import annotations

import io
import re
from urllib.parse import quote

import numpy as np
import pytest
from conftest import DEMO_SCENARIO
from ingest_helpers import day_rows, write_csv

from auditor.ingest.pipeline import ImportOptions
from auditor.services.audit import audit_meter
from auditor.services.correction import get_scenario, list_scenarios
from auditor.services.demo import DEMO_TARIFF
from auditor.services.ingest import import_files
from auditor.services.meters import set_site

EVIL = "<script>alert(1)</script>"


def csrf_token(html: bytes) -> str:
    m = re.search(rb'name="csrf_token" type="hidden" value="([^"]+)"', html) or \
        re.search(rb'name="csrf_token" value="([^"]+)"', html)
    assert m, "no CSRF token in the page"
    return m.group(1).decode()


# --------------------------------------------------------------------------------------------
# every page
# --------------------------------------------------------------------------------------------
def test_portfolio_lists_every_meter_worst_pf_first(client, demo_db):
    r = client.get("/")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    # the order of the rows follows each meter's latest-period PF from the audit service
    pfs = {m: audit_meter(demo_db, m, DEMO_TARIFF).result.periods[-1].pf for m in ("KQ-MAIN", "KQ-DOCKS", "AR-01")}
    expected = sorted(pfs, key=pfs.get)
    positions = [html.index(f">{m}</a>") for m in expected]
    assert positions == sorted(positions)
    for pf in pfs.values():
        assert f"{pf:.3f}" in html
    assert "Kestrel Quay Cold Store" in html and "Alder Row Offices" in html
    assert "does not certify" in html


def test_portfolio_reactive_charges_are_the_audits(client, demo_db):
    html = client.get("/").get_data(as_text=True)
    a = audit_meter(demo_db, "KQ-DOCKS", DEMO_TARIFF).result
    total = sum(p.reactive_total for p in a.periods)  # the demo is exactly twelve months
    assert f"{total:,.2f}" in html


def test_meter_page_has_table_and_every_chart(client, demo_db):
    r = client.get("/meters/KQ-MAIN")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    for fig in ("pf", "reactive", "peaks", "heatmap", "scatter", "duration"):
        assert f'data-figure="fig-{fig}"' in html
        assert f'id="fig-{fig}"' in html
    a = audit_meter(demo_db, "KQ-MAIN", DEMO_TARIFF).result
    assert len(a.periods) == 12
    for p in a.periods:
        assert f"{p.kwh:,.0f}" in html
    assert "Energy (kWh)" in html and "Peak (kVA)" in html  # units in the headers
    assert "/vendor/plotly.min.js" in html and "cdn" not in html.lower()


def test_meter_heatmap_is_days_by_slots(client):
    html = client.get("/meters/KQ-MAIN").get_data(as_text=True)
    import json

    block = re.search(r'<script type="application/json" id="fig-heatmap">(.*?)</script>', html, re.S).group(1)
    fig = json.loads(block)
    z = fig["data"][0]["z"]
    assert fig["data"][0]["transpose"] is True
    assert len(z) == 365 and all(len(row) == 96 for row in z)
    scatter = json.loads(re.search(r'id="fig-scatter">(.*?)</script>', html, re.S).group(1))
    assert len(scatter["data"][0]["x"]) <= 4000


def test_meter_unknown_is_404(client):
    r = client.get("/meters/NO-SUCH-METER")
    assert r.status_code == 404
    assert "no meter" in r.get_data(as_text=True)


def test_meter_bad_target_pf_is_400(client):
    assert client.get("/meters/KQ-MAIN?target_pf=2").status_code == 400
    assert client.get("/meters/KQ-MAIN?target_pf=abc").status_code == 400


def test_unknown_tariff_is_404(client):
    r = client.get("/?tariff=../../etc/passwd")
    assert r.status_code == 404
    assert "known tariffs" in r.get_data(as_text=True)


def test_tariffs_page_shows_clauses(client):
    from auditor.tariffs import EXAMPLES_DIR, describe_tariff, load_tariff

    r = client.get("/tariffs")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    from markupsafe import escape

    for path in EXAMPLES_DIR.glob("*.toml"):
        for clause in describe_tariff(load_tariff(path)):
            assert str(escape(clause)) in html


def test_saved_scenario_page(client, demo_db):
    saved = get_scenario(demo_db, DEMO_SCENARIO)
    r = client.get(f"/scenarios/{quote(DEMO_SCENARIO)}")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert f"{saved['result']['simple_payback_years']:.1f} years" in html
    assert "Before anyone buys or installs a bank" in html
    from auditor.correction import CAUTIONS

    for c in CAUTIONS:
        assert c in html
    assert 'data-figure="fig-cashflow"' in html
    assert "/case.html?scenario=" in html and "/case.pdf?scenario=" in html


def test_scenario_list_and_new_form(client):
    r = client.get("/scenarios")
    assert r.status_code == 200 and DEMO_SCENARIO in r.get_data(as_text=True)
    r = client.get("/scenario?meter=KQ-DOCKS")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert re.search(r'<option selected value="KQ-DOCKS"', html)
    assert 'name="csrf_token"' in html


def test_scenario_form_prefilled_from_saved(client):
    html = client.get(f"/scenario?from={quote(DEMO_SCENARIO)}").get_data(as_text=True)
    assert 'id="fixed_kvar"' in html and 'value="150.0"' in html


def test_unknown_saved_scenario_is_404(client):
    assert client.get("/scenarios/nope-nope").status_code == 404


def test_imports_page(client):
    r = client.get("/imports")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert "kestrel_quay_main_2025.csv" in html
    assert "revised" in html  # the revised March export of the demo
    assert "Data quality by meter" in html
    assert "gap" in html


def test_static_assets(client):
    r = client.get("/vendor/plotly.min.js")
    assert r.status_code == 200 and r.mimetype == "text/javascript" and len(r.data) > 1_000_000
    assert client.get("/static/app.js").status_code == 200
    assert client.get("/static/style.css").status_code == 200


def test_security_headers(client):
    r = client.get("/")
    h = r.headers
    assert "script-src 'self'" in h["Content-Security-Policy"]
    assert "frame-ancestors 'none'" in h["Content-Security-Policy"]
    assert "unsafe-eval" not in h["Content-Security-Policy"]
    assert h["X-Content-Type-Options"] == "nosniff"
    assert h["X-Frame-Options"] == "DENY"
    assert h["Referrer-Policy"] == "no-referrer"
    # no inline script in any page: only src= scripts and JSON data blocks
    html = r.get_data(as_text=True) + client.get("/meters/KQ-MAIN").get_data(as_text=True)
    for tag in re.findall(r"<script[^>]*>", html):
        assert "src=" in tag or 'type="application/json"' in tag, tag


def test_secret_key_kept_in_instance_folder(web_app, tmp_path):
    key_file = tmp_path / "instance" / "secret_key"
    assert key_file.read_text().strip() == web_app.config["SECRET_KEY"]
    assert len(web_app.config["SECRET_KEY"]) == 64
    assert (key_file.stat().st_mode & 0o077) == 0


# --------------------------------------------------------------------------------------------
# exports
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("fmt, mime", [("csv", "text/csv"), ("xlsx", "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"),
                                       ("html", "text/html")])
def test_exports_download(client, fmt, mime):
    r = client.get(f"/export/KQ-MAIN.{fmt}?scenario={quote(DEMO_SCENARIO)}")
    assert r.status_code == 200
    assert r.mimetype == mime
    assert "attachment" in r.headers["Content-Disposition"]
    assert r.headers["Content-Disposition"].endswith(f'.{fmt}"')


def test_html_export_has_nonce_policy(client):
    r = client.get("/export/KQ-MAIN.html")
    csp = r.headers["Content-Security-Policy"]
    nonce = re.search(r"'nonce-([^']+)'", csp).group(1)
    html = r.get_data(as_text=True)
    scripts = re.findall(r"<script[^>]*>", html)
    for tag in scripts:
        assert f'nonce="{nonce}"' in tag or 'type="application/json"' in tag


def test_export_of_a_scenario_for_another_meter_is_refused(client):
    r = client.get(f"/export/KQ-DOCKS.csv?scenario={quote(DEMO_SCENARIO)}")
    assert r.status_code == 400
    assert "is for meter KQ-MAIN" in r.get_data(as_text=True)


def test_export_unknown_format_is_404(client):
    assert client.get("/export/KQ-MAIN.pdf").status_code == 404


# --------------------------------------------------------------------------------------------
# forms: CSRF, validation, the scenario run
# --------------------------------------------------------------------------------------------
def test_scenario_post_without_csrf_is_rejected(client, demo_db):
    before = len(list_scenarios(demo_db))
    r = client.post("/scenario", data={"meter": "KQ-MAIN", "tariff": DEMO_TARIFF, "target_pf": "0.95",
                                       "design": "fixed", "fixed_kvar": "100", "detuning": "0", "name": "forged"})
    assert r.status_code == 400
    assert "security token" in r.get_data(as_text=True)
    assert len(list_scenarios(demo_db)) == before


def test_delete_without_csrf_is_rejected(client, demo_db):
    r = client.post("/scenarios/delete", data={"name": DEMO_SCENARIO})
    assert r.status_code == 400
    assert get_scenario(demo_db, DEMO_SCENARIO)["name"] == DEMO_SCENARIO


def test_upload_without_csrf_is_rejected(client):
    r = client.post("/imports", data={"file": (io.BytesIO(b"meter,start\n"), "x.csv")},
                    content_type="multipart/form-data")
    assert r.status_code == 400


def test_login_post_without_csrf_is_rejected(demo_db, tmp_path):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "i"), "AUTH_TOKEN": "correct-horse-battery"}, store=demo_db)
    r = app.test_client().post("/login", data={"token": "correct-horse-battery"})
    assert r.status_code == 400


def test_scenario_form_saves_and_shows_payback(client, demo_db):
    token = csrf_token(client.get("/scenario?meter=KQ-DOCKS").data)
    r = client.post("/scenario", data={
        "csrf_token": token, "meter": "KQ-DOCKS", "tariff": DEMO_TARIFF, "target_pf": "0.95",
        "design": "automatic", "steps": "4x10", "detuning": "0", "life_years": "12", "discount_rate": "6",
        "name": "routes test docks"})
    assert r.status_code == 302
    assert r.headers["Location"].endswith("/scenarios/routes%20test%20docks")
    saved = get_scenario(demo_db, "routes test docks")
    assert saved["request"]["steps"] == "4x10"
    assert saved["request"]["costs"] == {"life_years": 12, "discount_rate": 0.06}
    assert saved["result"]["life_years"] == 12
    np.testing.assert_allclose(saved["result"]["discount_rate"], 0.06)
    html = client.get(r.headers["Location"]).get_data(as_text=True)
    assert f"{saved['result']['simple_payback_years']:.1f} years" in html
    assert "automatic 4x10 kvar" in html
    # delete it again through the form
    token = csrf_token(client.get("/scenarios").data)
    r = client.post("/scenarios/delete", data={"csrf_token": token, "name": "routes test docks"})
    assert r.status_code == 302
    assert "routes test docks" not in [s["name"] for s in list_scenarios(demo_db)]


def test_scenario_form_without_name_shows_the_case_unsaved(client, demo_db):
    before = len(list_scenarios(demo_db))
    token = csrf_token(client.get("/scenario").data)
    r = client.post("/scenario", data={"csrf_token": token, "meter": "AR-01", "tariff": DEMO_TARIFF,
                                       "target_pf": "0.95", "design": "fixed", "fixed_kvar": "20", "detuning": "0"})
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert "fixed 20 kvar" in html and "Simple payback" in html
    assert "Give the scenario a name" in html
    assert len(list_scenarios(demo_db)) == before


@pytest.mark.parametrize("fields, message", [
    ({"design": "fixed"}, "Give the size of the fixed bank"),
    ({"design": "automatic"}, "Give the steps"),
    ({"design": "fixed", "fixed_kvar": "50", "target_pf": "1.5"}, "Number must be between 0.5 and 1"),
    ({"design": "automatic", "steps": "banana"}, "step"),
])
def test_scenario_form_errors_are_shown(client, fields, message):
    token = csrf_token(client.get("/scenario").data)
    data = {"csrf_token": token, "meter": "KQ-MAIN", "tariff": DEMO_TARIFF, "target_pf": "0.95", "detuning": "0"}
    data.update(fields)
    r = client.post("/scenario", data=data)
    assert r.status_code == 400
    assert message in r.get_data(as_text=True)


# --------------------------------------------------------------------------------------------
# escaping of user text
# --------------------------------------------------------------------------------------------
@pytest.fixture
def evil_app(store, tmp_path):
    """A small database whose site is named like a script, with a saved scenario named so too."""
    from auditor.services.correction import SizeRequest, save_scenario, size_meter
    from auditor.web import create_app

    set_site(store, EVIL, meters=["EV-1"], timezone="UTC", transformer_kva=400.0,
             transformer_impedance_percent=5.0, nominal_voltage_v=400.0)
    rows = [r for d in ("2025-01-06", "2025-01-07", "2025-01-08") for r in day_rows("EV-1", d, kwh=10.0, lag=9.0)]
    out = import_files(store, [write_csv(tmp_path / "evil.csv", rows)], ImportOptions(site=EVIL))
    assert out[0].status == "imported", out[0].message
    case = size_meter(store, SizeRequest(meter="EV-1", tariff=DEMO_TARIFF, fixed_kvar=20.0))
    save_scenario(store, EVIL, case)
    return create_app({"INSTANCE_PATH": str(tmp_path / "instance")}, store=store)


def test_site_named_like_a_script_is_escaped_everywhere(evil_app):
    c = evil_app.test_client()
    pages = ["/", "/meters/EV-1", "/imports", "/scenario?meter=EV-1", "/scenarios",
             f"/scenarios/{quote(EVIL, safe='')}", f"/export/EV-1.html?scenario={quote(EVIL, safe='')}"]
    for url in pages:
        r = c.get(url, follow_redirects=True)  # a "/" in a name typed as %2F: sent on to its address
        assert r.status_code == 200, url
        html = r.get_data(as_text=True)
        assert EVIL not in html, url
        assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html or "\\u003cscript\\u003e" in html, url


def test_upload_imports_through_the_pipeline(store, tmp_path):
    from auditor.services.ingest import list_meters
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "instance")}, store=store)
    c = app.test_client()
    token = csrf_token(c.get("/imports").data)
    body = ("meter,start,kwh,kvarh_lag,kvarh_lead\n" + "\n".join(day_rows("UP-1", "2025-02-03"))).encode()
    r = c.post("/imports", data={"csrf_token": token, "file": (io.BytesIO(body), "upload one.csv"),
                                 "site": "Upload Yard", "timezone": "", "profile": "", "estimate_gaps": "no"},
               content_type="multipart/form-data")
    assert r.status_code == 302
    meters = {m["meter"]: m for m in list_meters(store)}
    assert meters["UP-1"]["intervals"] == 96 and meters["UP-1"]["site"] == "Upload Yard"
    html = c.get("/imports").get_data(as_text=True)
    assert "upload_one.csv" in html and "imported" in html


def test_upload_of_a_bad_file_shows_located_errors(store, tmp_path):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "instance")}, store=store)
    c = app.test_client()
    token = csrf_token(c.get("/imports").data)
    body = b"meter,start,kwh,kvarh_lag,kvarh_lead\nB1,2025-02-03T00:00:00Z,abc,1,0\n"
    r = c.post("/imports", data={"csrf_token": token, "file": (io.BytesIO(body), "bad.csv"),
                                 "profile": "", "estimate_gaps": "no"}, content_type="multipart/form-data")
    assert r.status_code == 422
    html = r.get_data(as_text=True)
    assert "bad.csv was rejected" in html and "line 2" in html
    assert "Rejected files" in html and "bad.csv" in html


@pytest.mark.parametrize("body, said", [
    (b"a,b,c\n1,2,3\n", "choose a mapping profile"),
    (b"meter,start,kwh,kvarh_lag,kvarh_lead\nL1,2025-02-03T00:00:00,1,1,0\n", "fill in the time zone"),
])
def test_upload_errors_speak_of_the_page(store, tmp_path, body, said):
    """A rejected upload names the file as uploaded, never the server's temporary folder, and
    says what to do on the page, not which command-line option to give."""
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "instance")}, store=store)
    c = app.test_client()
    token = csrf_token(c.get("/imports").data)
    r = c.post("/imports", data={"csrf_token": token, "file": (io.BytesIO(body), "odd.csv"),
                                 "profile": "", "estimate_gaps": "no"}, content_type="multipart/form-data")
    assert r.status_code == 422
    html = r.get_data(as_text=True)
    box = html.split('class="error-box"', 1)[1].split("</div>", 1)[0]
    assert said in box and "odd.csv" in box
    assert "--" not in box and "auditor-upload-" not in box and "/tmp" not in box
    listed = c.get("/imports").get_data(as_text=True)  # the rejected file in the list, later
    assert "odd.csv" in listed and said in listed and "auditor-upload-" not in listed and " --" not in listed


def test_upload_size_limit(store, tmp_path):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "instance"), "MAX_CONTENT_LENGTH": 2048}, store=store)
    c = app.test_client()
    token = csrf_token(c.get("/imports").data)
    r = c.post("/imports", data={"csrf_token": token, "file": (io.BytesIO(b"x" * 10_000), "big.csv")},
               content_type="multipart/form-data")
    assert r.status_code == 413
    assert "limited to" in r.get_data(as_text=True)


# --------------------------------------------------------------------------------------------
# access token
# --------------------------------------------------------------------------------------------
def test_token_required_when_configured(demo_db, tmp_path):
    from auditor.web import create_app

    token = "correct-horse-battery"
    app = create_app({"INSTANCE_PATH": str(tmp_path / "i"), "AUTH_TOKEN": token}, store=demo_db)
    c = app.test_client()
    r = c.get("/", headers={"Accept": "text/html"})
    assert r.status_code == 302 and "/login" in r.headers["Location"]
    assert c.get("/export/KQ-MAIN.csv", headers={"Accept": "text/csv"}).status_code == 401
    assert c.get("/?token=wrong-token-value").status_code == 401
    r = c.get(f"/tariffs?token={token}")
    assert r.status_code == 302 and r.headers["Location"] == "/tariffs"  # the token leaves the address
    assert "auditor_access=" in r.headers["Set-Cookie"] and "HttpOnly" in r.headers["Set-Cookie"]
    assert token not in r.headers["Set-Cookie"]
    assert c.get("/tariffs").status_code == 200  # the cookie now carries it


def test_login_page_beyond_loopback_says_so(demo_db, tmp_path):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "i"), "AUTH_TOKEN": "correct-horse-battery",
                      "SERVED_BEYOND_LOOPBACK": True}, store=demo_db)
    assert "beyond this computer" in app.test_client().get("/login").get_data(as_text=True)


def test_login_form(demo_db, tmp_path):
    from auditor.web import create_app

    token = "correct-horse-battery"
    app = create_app({"INSTANCE_PATH": str(tmp_path / "i"), "AUTH_TOKEN": token}, store=demo_db)
    c = app.test_client()
    page = c.get("/login?next=/imports")
    assert page.status_code == 200
    text = page.get_data(as_text=True)
    assert "beyond this computer" not in text and "--token" not in text  # loopback, and no CLI options
    csrf = csrf_token(page.data)
    assert c.post("/login", data={"csrf_token": csrf, "token": "nope", "next": "/imports"}).status_code == 401
    r = c.post("/login", data={"csrf_token": csrf, "token": token, "next": "//evil.example/"})
    assert r.status_code == 302 and r.headers["Location"] == "/"  # never off-site
    assert c.get("/imports").status_code == 200
