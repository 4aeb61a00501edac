"""The bills page of the dashboard (Flask test client): findings highlighted, CSRF on every
form, user text escaped, manual entry, upload and the billing-query exports."""
from __future__ import annotations

import io
import re

import pytest

from auditor.ingest.pipeline import ImportOptions
from auditor.services.bills import import_bills, list_bills
from auditor.services.ingest import import_files
from tests.audit_helpers import TZ
from tests.test_bills_service import JULY, JUNE, _bills, _meter_csv

TARIFF_TOML = ('name = "Web test tariff"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = 0.10\n[demand]\n'
               'price_per_kw = 10.0\n[[reactive]]\nkind = "kvarh_excess"\ntan_phi_limit = 0.4\nprice_per_kvarh = 0.02\n')


@pytest.fixture
def client(tmp_path):
    from auditor.store import open_store
    from auditor.web import create_app

    store = open_store(f"sqlite:///{tmp_path / 'web.sqlite3'}")
    import_files(store, [_meter_csv(tmp_path / "m1.csv")], ImportOptions(site="Test site", timezone=TZ))
    inst = tmp_path / "instance"
    (inst / "tariffs").mkdir(parents=True)
    (inst / "tariffs" / "webtest.toml").write_text(TARIFF_TOML, encoding="utf-8")
    app = create_app({"TESTING": True, "INSTANCE_PATH": str(inst), "DEFAULT_TARIFF": "webtest"}, store=store)
    c = app.test_client()
    c.store = store
    c.tmp = tmp_path
    yield c
    store.engine.dispose()


def _token(html: str, prefix: str) -> str:
    m = re.search(rf'name="{prefix}-csrf_token" type="hidden" value="([^"]+)"', html) or \
        re.search(rf'id="{prefix}-csrf_token" name="{prefix}-csrf_token" type="hidden" value="([^"]+)"', html)
    assert m, f"no CSRF token for {prefix}"
    return m.group(1)


def test_page_highlights_findings(client):
    wrong_total = JULY.replace("8737.60", "9500.00")
    import_bills(client.store, _bills(client.tmp, JUNE, wrong_total))
    r = client.get("/bills?meter=M1&tariff=webtest")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert html.count('<tr class="finding">') == 1  # the July bill only
    assert 'class="num flagged"' in html
    assert "762.40" in html  # 9,500 - 8,737.60 in question


def test_forms_need_csrf(client):
    r = client.post("/bills/add", data={"bill-meter": "M1", "bill-period_start": "2025-06-01",
                                        "bill-period_end": "2025-07-01"})
    assert r.status_code == 400
    assert list_bills(client.store) == []


def test_manual_entry_and_escaping(client):
    html = client.get("/bills?meter=M1&tariff=webtest").get_data(as_text=True)
    token = _token(html, "bill")
    r = client.post("/bills/add?tariff=webtest", data={
        "bill-csrf_token": token, "bill-meter": "M1", "bill-period_start": "2025-06-01",
        "bill-period_end": "2025-07-01", "bill-kwh": "72000", "bill-total": "8600"}, follow_redirects=True)
    assert r.status_code == 200
    assert [b["total"] for b in list_bills(client.store)] == [8600.0]
    page = r.get_data(as_text=True)
    assert "manual entry" in page and '<tr class="finding">' in page
    # a bad entry comes back with the located problem, escaped
    r = client.post("/bills/add?tariff=webtest", data={
        "bill-csrf_token": token, "bill-meter": "M1", "bill-period_start": "2025-07-01",
        "bill-period_end": "2025-06-01"})
    assert r.status_code == 400 and "not after" in r.get_data(as_text=True)
    # text from the request never comes back as markup
    r = client.get("/bills?meter=M1&tariff=<b>x</b>")
    assert r.status_code == 404
    body = r.get_data(as_text=True)
    assert "<b>x</b>" not in body and "&lt;b&gt;x&lt;/b&gt;" in body


def test_upload_and_dispute_exports(client):
    html = client.get("/bills?meter=M1&tariff=webtest").get_data(as_text=True)
    token = _token(html, "upload")
    data = {"upload-csrf_token": token,
            "upload-file": (io.BytesIO(("\n".join([
                "meter,period_start,period_end,kwh,total", "M1,2025-06-01,2025-07-01,90000,9000"]) + "\n").encode()),
                "bills.csv")}
    r = client.post("/bills/upload?meter=M1&tariff=webtest", data=data, content_type="multipart/form-data",
                    follow_redirects=True)
    assert r.status_code == 200 and "1 new" in r.get_data(as_text=True)
    t = client.get("/bills/dispute.txt?meter=M1&tariff=webtest")
    assert t.status_code == 200 and t.mimetype == "text/plain"
    assert "attachment" in t.headers["Content-Disposition"] and "BILLING QUERY" in t.get_data(as_text=True)
    h = client.get("/bills/dispute.html?meter=M1&tariff=webtest")
    assert h.mimetype == "text/html" and "<table>" in h.get_data(as_text=True)
    assert client.get("/bills/dispute.pdf?meter=M1").status_code == 404


def test_bad_upload_is_reported_not_raised(client):
    html = client.get("/bills?meter=M1&tariff=webtest").get_data(as_text=True)
    data = {"upload-csrf_token": _token(html, "upload"),
            "upload-file": (io.BytesIO(b"meter,period_start,period_end\nM1,2025-13-01,2025-07-01\n"), "b.csv")}
    r = client.post("/bills/upload?meter=M1", data=data, content_type="multipart/form-data")
    assert r.status_code == 400 and "line 2" in r.get_data(as_text=True)
