"""The scenario pages: failing rules first, the optimiser's verdict, the specification, the
harmonic measurement upload and the frequency scan; the exports carry the specification."""
from __future__ import annotations

import io
import json
import re

from test_web_routes import csrf_token

from auditor.services.correction import (
    ScenarioRequest,
    save_scenario,
    scenario_for_meter,
    site_settings,
    store_site_settings,
)
from auditor.services.demo import DEMO_TARIFF

STRONG_5_7 = b"""# kw = 300
# pf = 0.80
order,current_pct
5,25
7,12
11,6
13,4
"""


def _post(client, **fields):
    token = csrf_token(client.get("/scenario").data)
    data = {"csrf_token": token, "meter": "KQ-MAIN", "tariff": DEMO_TARIFF, "target_pf": "0.95", "detuning": "0"}
    data.update(fields)
    return client.post("/scenario", data=data, content_type="multipart/form-data")


def test_failing_design_shows_its_failing_rules_before_anything_else(client):
    r = _post(client, design="fixed", fixed_kvar="175")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    result = html[html.index('id="result"'):]
    assert 'id="screening-failed"' in result
    # the failing box comes before the cards, the charts and every table of the result
    fail_at = result.index('id="screening-failed"')
    for later in ('class="cards"', 'id="screening-rules"', 'id="specification"', "chart-before_after"):
        assert fail_at < result.index(later), later
    assert "over correction" in result[fail_at:result.index('class="cards"')]
    assert 'id="alternative"' in result  # the nearest design that passes
    assert "not recommended as it stands" in result


def test_optimiser_verdict_and_specification(client):
    html = _post(client, meter="AR-01", design="optimise").get_data(as_text=True)
    assert 'id="optimiser-verdict"' in html and "Recommended" in html
    assert 'id="screening-failed"' not in html
    assert 'id="specification"' in html and "Budget" in html
    assert "shunt reactor" in html or "existing capacitance" in html


def test_reactor_and_switch_off_through_the_form(client):
    html = _post(client, meter="AR-01", design="reactor", reactor_kvar="15").get_data(as_text=True)
    assert "shunt reactor 15 kvar, switched" in html and "voltage drop" in html
    r = _post(client, meter="AR-01", design="reactor")
    assert r.status_code == 400 and "Give the size of the reactor" in r.get_data(as_text=True)
    html = _post(client, meter="AR-01", design="switch_off", switch_off_kvar="17").get_data(as_text=True)
    assert "switch 17 kvar of existing capacitance off while leading" in html


def test_uploaded_measurement_is_used_and_kept_for_the_site(client, demo_db):
    try:
        r = _post(client, design="automatic", steps="6x50",
                  harmonics=(io.BytesIO(STRONG_5_7), "incomer spectrum.csv"), keep_harmonics="y")
        html = r.get_data(as_text=True)
        assert r.status_code == 200
        assert 'id="screening-failed"' in html and "harmonic distortion" in html
        assert 'id="harmonic-voltages"' in html and "chart-scan" in html
        assert "incomer spectrum.csv" in html and "measured" in html
        kept = site_settings(demo_db, "KQ-MAIN")["harmonics"]
        assert kept["name"] == "incomer spectrum.csv" and kept["orders"] == [5, 7, 11, 13]
        # the next computation uses the kept measurement without an upload
        html = _post(client, design="automatic", steps="6x50", detuning="7").get_data(as_text=True)
        assert "incomer spectrum.csv" in html and 'id="screening-failed"' not in html
    finally:
        store_site_settings(demo_db, "Kestrel Quay Cold Store", {"harmonics": None})


def test_bad_upload_names_the_file_line_and_column_not_a_server_path(client, demo_db):
    r = _post(client, design="fixed", fixed_kvar="50", harmonics=(io.BytesIO(b"order,current_pct\n5,lots\n"), "m.csv"))
    assert r.status_code == 400
    html = r.get_data(as_text=True)
    assert "m.csv, line 2, column &#39;current_pct&#39;" in html
    assert "/tmp" not in html
    assert site_settings(demo_db, "KQ-MAIN")["harmonics"] is None


def test_drive_share_estimate_is_labelled_on_the_page(client):
    html = _post(client, meter="KQ-DOCKS", design="automatic", steps="3x10", drive_share="0.4").get_data(as_text=True)
    assert 'id="harmonics-estimated"' in html and "estimated, not measured" in html


def test_exports_carry_the_specification_and_the_scan(client, demo_db):
    case = scenario_for_meter(demo_db, ScenarioRequest(meter="KQ-MAIN", tariff=DEMO_TARIFF, fixed_kvar=175.0))
    save_scenario(demo_db, "export spec test", case)
    html = client.get("/export/KQ-MAIN.html?scenario=export%20spec%20test").get_data(as_text=True)
    assert "Specification" in html and "not recommended" in html.lower() and "over correction" in html
    figures = [json.loads(m) for m in re.findall(r'<script type="application/json" id="fig-scan"[^>]*>(.*?)</script>',
                                                  html, re.S)]
    assert figures and figures[0]["layout"]["yaxis"]["type"] == "log"
    from openpyxl import load_workbook

    wb = load_workbook(io.BytesIO(client.get("/export/KQ-MAIN.xlsx?scenario=export%20spec%20test").data))
    assert "Specification" in wb.sheetnames
    rows = [[c.value for c in r] for r in wb["Specification"].iter_rows()]
    assert rows[0] == ["Section", "Label", "Value", "Unit", "Note"]
    assert rows[1][1].startswith("FAILS")


def test_a_scenario_saved_before_the_screening_rules_still_opens(client, demo_db):
    """Saved scenarios keep the JSON of their day: one without rules, specification or the
    new request keys (``optimize``) must still render and prefill the form."""
    from sqlalchemy import select

    from auditor.store.models import Scenario

    case = scenario_for_meter(demo_db, ScenarioRequest(meter="KQ-DOCKS", tariff=DEMO_TARIFF, optimise=True))
    save_scenario(demo_db, "old style", case)
    with demo_db.session() as s:
        row = s.scalar(select(Scenario).where(Scenario.name == "old style"))
        result = json.loads(row.result)
        for key in ("specification", "harmonics", "frequency_scan", "optimiser", "alternative", "recommended"):
            result.pop(key, None)
        result["screening"].pop("rules")
        result["screening"].pop("status")
        row.result = json.dumps(result)
        params = json.loads(row.params)
        params["optimize"] = params.pop("optimise")
        row.params = json.dumps(params)
    r = client.get("/scenarios/old%20style")
    assert r.status_code == 200
    html = r.get_data(as_text=True)
    assert re.search(r'<input checked[^>]*value="optimise"', html)
    assert client.get("/export/KQ-DOCKS.html?scenario=old%20style").status_code == 200
