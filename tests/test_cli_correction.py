"""The correction case as a consultant runs it: screening first, reactors for leading sites,
measured harmonics, settings from the command line and the site file, the specification."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from auditor.services.correction import ScenarioRequest, scenario_for_meter, site_settings
from auditor.services.demo import DEMO_TARIFF, load_demo
from auditor.store import open_store

TARIFF = "harrowgate_industrial_tou"
STRONG_5_7 = """# An invented measurement at the Kestrel Quay incomer, compressor drives running
# kw = 300
# pf = 0.80
order,current_pct,voltage_pct
5,25.0,1.2
7,12.0,0.8
11,6.0,0.4
13,4.0,0.3
"""


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory):
    db = tmp_path_factory.mktemp("demo-correction") / "demo.sqlite3"
    store = open_store(f"sqlite:///{db}")
    load_demo(store)
    store.dispose()
    return db


def run(db, *args, rc=0):
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
    r = subprocess.run([sys.executable, "-m", "auditor", *args], capture_output=True, text=True, env=env, timeout=300)
    assert r.returncode == rc, (r.returncode, r.stdout[-2000:], r.stderr[-2000:])
    assert "Traceback" not in r.stderr
    return r


def test_no_demo_recommendation_fails_its_own_screening_and_the_office_gets_a_reactor(demo_db):
    store = open_store(f"sqlite:///{demo_db}")
    try:
        for meter in ("KQ-MAIN", "KQ-DOCKS", "AR-01"):
            d = scenario_for_meter(store, ScenarioRequest(meter=meter, tariff=DEMO_TARIFF, optimise=True)).to_dict()
            assert d["recommended"] is d["screening"]["passed"] is True, (meter, d["screening"]["rules"])
            assert d["specification"]["recommended"] and d["specification"]["rows"]
            for c in d["candidates"]:
                if c["recommended"]:
                    assert c["passed_screening"]
            if meter == "AR-01":
                # the office's reactive cost is leading energy at night: a reactor or switch-off
                assert d["bank"]["kind"] in ("reactor", "switch_off"), d["bank"]["label"]
                assert d["specification"]["kind"] == d["bank"]["kind"]
            if meter == "KQ-MAIN":
                # the undetuned fixed 175 kvar bank that used to be chosen now fails
                fixed = next(c for c in d["candidates"] if c["label"] == "fixed 175 kvar")
                assert not fixed["passed_screening"] and "over_correction" in fixed["failed_rules"]
    finally:
        store.dispose()


def test_a_failing_fixed_bank_is_shown_failing_first(demo_db):
    out = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "175").stdout
    lines = out.splitlines()
    assert lines[1].startswith("NOT RECOMMENDED")
    assert lines[2].startswith("  FAIL over_correction")
    assert out.index("FAIL over_correction") < out.index("Design:") < out.index("Specification")
    assert "Nearest design that passes:" in out
    d = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "175", "--json").stdout)
    assert d["screening"]["passed"] is False and d["recommended"] is False
    assert d["screening"]["rules"][0]["status"] == "fail"
    assert {"resonance_order", "voltage_rise_percent", "leading_intervals"} <= set(d["screening"])
    assert d["warnings"][0] == d["screening"]["rules"][0]["message"]
    assert d["alternative"]["label"] and d["specification"]["recommended"] is False


def test_reactor_for_the_leading_office(demo_db):
    d = json.loads(run(demo_db, "size", "--meter", "AR-01", "--tariff", TARIFF, "--reactor", "15", "--json").stdout)
    assert d["bank"]["kind"] == "reactor" and d["bank"]["total_kvar"] == 15
    assert d["savings_by_charge"]["leading_kvarh"] > 0
    assert d["specification"]["kind"] == "reactor" and d["request"]["reactor_kvar"] == 15
    out = run(demo_db, "size", "--meter", "AR-01", "--tariff", TARIFF, "--switch-off", "17").stdout
    assert "switch 17 kvar of existing capacitance off while leading" in out
    r = run(demo_db, "size", "--meter", "AR-01", "--tariff", TARIFF, "--reactor", "15", "--fixed", "10", rc=2)
    assert "exactly one of" in r.stderr


def test_measured_harmonics_make_the_plain_bank_fail_and_offer_its_detuned_version(demo_db, tmp_path):
    spectrum = tmp_path / "kq.csv"
    spectrum.write_text(STRONG_5_7)
    d = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--bank", "6x50",
                       "--harmonics", str(spectrum), "--json").stdout)
    failed = [r["rule"] for r in d["screening"]["rules"] if r["status"] == "fail"]
    assert "resonance" in failed and "harmonic_distortion" in failed
    assert d["harmonics"]["source"] == "measured" and d["harmonics"]["thd_v_pct_with"] > 8.0
    assert d["alternative"]["label"] == "automatic 6x50 kvar, 7 % detuned"
    assert d["request"]["harmonics"]["name"] == "kq.csv"
    best = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--optimise",
                          "--harmonics", str(spectrum), "--json").stdout)
    assert best["bank"]["detuning"] is not None and best["screening"]["passed"]
    bad = tmp_path / "bad.csv"
    bad.write_text("order,current_pct\n5,twenty\n")
    r = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--optimise", "--harmonics", str(bad), rc=1)
    assert f"{bad}, line 2, column 'current_pct'" in r.stderr
    nofund = tmp_path / "nofund.csv"
    nofund.write_text("order,current_pct\n5,20\n")
    r = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--optimise", "--harmonics", str(nofund), rc=1)
    assert "nofund.csv" in r.stderr and "fundamental" in r.stderr
    ok = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "50", "--harmonics", str(nofund),
             "--fundamental-a", "480", "--json").stdout
    assert json.loads(ok)["harmonics"]["orders"][0]["current_a"] == pytest.approx(96.0)


def test_drive_share_estimate_is_labelled(demo_db):
    out = run(demo_db, "size", "--meter", "KQ-DOCKS", "--tariff", TARIFF, "--bank", "3x10", "--drive-share",
              "0.4").stdout
    assert "ESTIMATED" in out and "Harmonics, ESTIMATED (not measured)" in out


def test_screening_settings_on_the_command_line(demo_db):
    d = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "150",
                       "--screening", "resonance_fail_percent=3", "--screening", "resonance_caution_percent=5",
                       "--json").stdout)
    assert d["screening_settings"]["resonance_fail_percent"] == 3
    res = next(r for r in d["screening"]["rules"] if r["rule"] == "resonance")
    assert res["status"] == "caution"  # 10.54 is 4.2 % from the 11th: outside ±3 %, inside ±5 %
    r = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "150",
            "--screening", "resonance_fail_percnt=3", rc=2)
    assert "did you mean 'resonance_fail_percent'" in r.stderr
    r = run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "150", "--screening", "x", rc=2)
    assert "KEY=VALUE" in r.stderr


def test_site_file_screening_harmonics_and_drive_share(demo_db, tmp_path):
    (tmp_path / "kq.csv").write_text(STRONG_5_7)
    good = tmp_path / "sites.toml"
    good.write_text('''[screening]
voltage_change_caution_percent = 1.5

[[site]]
name = "Kestrel Quay Cold Store"
timezone = "Europe/Berlin"
meters = ["KQ-MAIN", "KQ-DOCKS"]
harmonics = "kq.csv"

[site.screening]
light_load_percentile = 10

[[site]]
name = "Alder Row Offices"
timezone = "Europe/Berlin"
meters = ["AR-01"]
drive_share = 0.1
''')
    run(demo_db, "sites", "load", str(good))
    store = open_store(f"sqlite:///{demo_db}")
    try:
        kq = site_settings(store, "KQ-MAIN")
        assert kq["screening"] == {"voltage_change_caution_percent": 1.5, "light_load_percentile": 10}
        assert kq["harmonics"]["name"] == "kq.csv" and kq["harmonics"]["orders"] == [5, 7, 11, 13]
        assert site_settings(store, "AR-01")["drive_share"] == 0.1
    finally:
        store.dispose()
    d = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "100", "--json").stdout)
    assert d["screening_settings"]["light_load_percentile"] == 10
    assert d["harmonics"]["source"] == "measured"
    # a request's own setting wins over the site's
    d = json.loads(run(demo_db, "size", "--meter", "KQ-MAIN", "--tariff", TARIFF, "--fixed", "100", "--screening",
                       "light_load_percentile=5", "--json").stdout)
    assert d["screening_settings"]["light_load_percentile"] == 5
    bad = tmp_path / "bad.toml"
    for body, words in (
        ('[[site]]\nname = "X"\n[site.screening]\nresonance_band = 8\n', "site[0].screening.resonance_band"),
        ('[screening]\nvoltage_change_fail_percent = "high"\n[[site]]\nname = "X"\n', "screening.voltage_change_fail_percent"),
        ('[[site]]\nname = "X"\ndrive_share = 2\n', "site[0].drive_share"),
        ('[[site]]\nname = "X"\nharmonics = "missing.csv"\n', "missing.csv"),
    ):
        bad.write_text(body)
        r = run(demo_db, "sites", "load", str(bad), rc=1)
        assert words in r.stderr, r.stderr
    # nothing of a rejected file was stored
    r = json.loads(run(demo_db, "sites", "list", "--json").stdout)
    assert "X" not in {s["site"] for s in r["sites"]}
