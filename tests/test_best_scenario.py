"""A saved design that fails its own screening is never the portfolio's "best saved scenario"
while a design that passes is saved for the meter, and its saving is not counted among the
savings of saved cases; every list of saved scenarios says which fail."""
from __future__ import annotations

import json
import re

import pytest

from tests.ingest_helpers import day_rows, write_csv
from tests.test_cli_grammar import invoke

TARIFF = "millbrook_commercial_pf"


@pytest.fixture
def two_meters(store, tmp_path):
    """Two meters of one site, a week each; on B1 a plain fixed bank that resonates near the 13th
    harmonic (it fails screening, with the higher NPV on paper: no reactor to pay for) and its
    detuned version, which passes; on B2 only the failing one."""
    from auditor.ingest.pipeline import ImportOptions, import_file
    from auditor.services.correction import ScenarioRequest, save_scenario, scenario_for_meter
    from auditor.services.meters import set_site

    rows = [r for m in ("B1", "B2") for d in range(6, 13)
            for r in day_rows(meter=m, day=f"2025-01-{d:02d}", kwh=40.0, lag=30.0)]
    out = import_file(store, write_csv(tmp_path / "b.csv", rows), ImportOptions(site="Brine Works", timezone="Europe/Berlin"))
    assert out.status == "imported", out.message
    # S_sc = 800 kVA / 5 % = 16,000 kVA: 100 kvar resonates at h = √(16000/100) ≈ 12.6 (IEEE Std 1036)
    set_site(store, "Brine Works", transformer_kva=800.0, transformer_impedance_percent=5.0, nominal_voltage_v=400.0)
    cases = {}
    for name, meter, detuning in (("B1 big", "B1", 0.0), ("B1 small", "B1", 7.0), ("B2 big", "B2", 0.0)):
        case = scenario_for_meter(store, ScenarioRequest(meter=meter, tariff=TARIFF, fixed_kvar=100.0,
                                                         detuning_percent=detuning))
        save_scenario(store, name, case)
        cases[name] = case.to_dict()
    return cases


def test_the_best_scenario_passes_screening(store, two_meters, tmp_path):
    from auditor.services.correction import best_scenario, list_scenarios
    from auditor.services.portfolio import portfolio_summary
    from auditor.tariffs import load_named_tariff

    big, small = two_meters["B1 big"], two_meters["B1 small"]
    assert big["recommended"] is False and small["recommended"] is True
    assert big["npv"] > small["npv"]  # on paper the failing bank looks better
    verdicts = {s["name"]: s["recommended"] for s in list_scenarios(store)}
    assert verdicts == {"B1 big": False, "B1 small": True, "B2 big": False}
    assert best_scenario(store, "B1")["name"] == "B1 small"
    only = best_scenario(store, "B2")
    assert only["name"] == "B2 big" and only["recommended"] is False  # said, not hidden
    rows = {r["meter"]: r for r in portfolio_summary(store, load_named_tariff(TARIFF))}
    assert rows["B1"]["best"]["name"] == "B1 small" and rows["B2"]["best"]["recommended"] is False
    # the command line says it too
    listed = invoke("scenarios", db=store.url).output
    assert re.search(r"B1 big .* FAILS", listed) and re.search(r"B1 small .* passes", listed)
    assert json.loads(invoke("scenarios", "--json", db=store.url).output)["scenarios"][0]["recommended"] is False


def test_the_pages_say_which_saved_design_fails(store, two_meters, tmp_path):
    from auditor.web import create_app

    app = create_app({"INSTANCE_PATH": str(tmp_path / "instance"), "TESTING": True, "DEFAULT_TARIFF": TARIFF},
                     store=store)
    c = app.test_client()
    page = c.get("/").get_data(as_text=True)
    b1 = page.split('href="/meters/B1', 1)[1].split("</tr>", 1)[0]
    b2 = page.split('href="/meters/B2', 1)[1].split("</tr>", 1)[0]
    assert "B1 small" in b1 and "B1 big" not in b1 and "fails screening" not in b1
    assert "B2 big" in b2 and "fails screening" in b2
    # the savings of saved cases count the design that passes only
    small = two_meters["B1 small"]["annual_savings"]
    card = page.split("Savings in saved cases", 1)[1].split("</div></div>", 1)[0]
    assert f"{small:,.0f}" in card
    listing = c.get("/scenarios").get_data(as_text=True)
    big_row = listing.split(">B1 big</a>", 1)[1].split("</tr>", 1)[0]
    assert 'pill bad">fails' in big_row and "CET" in big_row  # saved at a local time, the zone named
