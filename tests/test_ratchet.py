"""The demand ratchet: earlier stored periods count when an audit starts later (``audit
--from``), the tariff says whether the ratchet looks back at measured or at PF-adjusted demand,
and a month without load or PF shows no PF charge, as its warning says.

Ratchets of this form ("billing demand at least x % of the highest demand of the previous 11
months") are common practice in demand tariffs; the figures below are invented.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.audit import audit
from auditor.errors import TariffError
from auditor.ingest.pipeline import ImportOptions
from auditor.services.audit import audit_meter, earlier_demand
from auditor.services.ingest import import_files
from auditor.store import open_store
from auditor.tariffs import describe_tariff, tariff_from_dict
from tests.audit_helpers import BASE_TARIFF, TZ, interval_frame, set_at, tariff

RATCHET = {"basis": "kw", "price_per_kw": 10.0, "ratchet_percent": 80, "ratchet_periods": 11}
TOML = ('name = "Ratchet"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = 0.10\n'
        '[demand]\nprice_per_kw = 10.0\nratchet_percent = 80\n')


def _csv(path):
    """December 2024 and January 2025, hourly: 150 kWh and 50 kvarh every hour, one December
    hour of 1,000 kWh (meter M1)."""
    idx = pd.date_range("2024-12-01", "2025-02-01", freq="60min", tz=TZ, inclusive="left")
    kwh = [1000.0 if t == pd.Timestamp("2024-12-11 10:00", tz=TZ) else 150.0 for t in idx]
    pd.DataFrame({"meter": "M1", "start": [t.isoformat() for t in idx], "kwh": kwh, "kvarh_lag": 50.0,
                  "kvarh_lead": 0.0}).to_csv(path, index=False)
    return path


@pytest.fixture
def loaded(store, tmp_path):
    import_files(store, [_csv(tmp_path / "m1.csv")], ImportOptions(site="Ratchet site", timezone=TZ))
    return store


def test_audit_from_takes_the_stored_periods_before_it(loaded, tmp_path):
    """A 1,000 kW December peak, January at 150 kW, an 80 % / 11-period ratchet: January is billed
    on 800 kW (8,000.00) whether the audit starts in December or in January (it was billed on
    150 kW, 1,500.00, when the audit started in January)."""
    t = tariff(demand=RATCHET)
    from_jan = audit_meter(loaded, "M1", t, start=pd.Timestamp("2025-01-01").date())
    assert [p.start.isoformat() for p in from_jan.result.periods] == ["2025-01-01"]
    assert_allclose(from_jan.result.periods[0].charges["demand"], 8000.0)
    whole = audit_meter(loaded, "M1", t, start=pd.Timestamp("2024-12-01").date())
    assert_allclose([p.charges["demand"] for p in whole.result.periods], [10000.0, 8000.0])
    assert earlier_demand(loaded, "M1", t, pd.Timestamp("2025-01-01").date()) == [1000.0]
    assert earlier_demand(loaded, "M1", tariff(), pd.Timestamp("2025-01-01").date()) is None  # no ratchet


def test_audit_from_on_the_command_line(tmp_path):
    db = tmp_path / "r.sqlite3"
    store = open_store(f"sqlite:///{db}")
    import_files(store, [_csv(tmp_path / "m1.csv")], ImportOptions(site="Ratchet site", timezone=TZ))
    store.dispose()
    (tmp_path / "ratchet.toml").write_text(TOML, encoding="utf-8")
    env = dict(os.environ, AUDITOR_DB_URL=f"sqlite:///{db}")
    r = subprocess.run([sys.executable, "-m", "auditor", "audit", "--meter", "M1", "--tariff",
                        str(tmp_path / "ratchet.toml"), "--from", "2025-01-01", "--json"],
                       capture_output=True, text=True, env=env, timeout=300)
    assert r.returncode == 0, r.stderr
    assert_allclose(json.loads(r.stdout)["periods"][0]["charges"]["demand"], 8000.0)


def two_months():
    """May 2025: 100 kWh / 60 kvarh every hour and one hour of 1,000 kWh / 1,333.33 kvarh: energy
    PF of May = 75,300 / sqrt(75,300^2 + 45,913.33^2) = 0.8538 -> 0.85. June 2025: no load at all
    (every hour 0 kWh, 0 kvarh): no PF."""
    may = interval_frame("2025-05-01", "2025-06-01", kwh=100.0, kvarh_lag=60.0)
    set_at(may, "2025-05-13 10:00", kwh=1000.0, kvarh_lag=1333.33)
    june = interval_frame("2025-06-01", "2025-07-01", kwh=0.0, kvarh_lag=0.0)
    return pd.concat([may, june])


ADJUST = [{"kind": "pf_demand_adjust", "base_pf": 0.90}]


def test_a_month_without_load_shows_no_pf_charge():
    """May: measured 1,000 kW, adjusted 1,000 x 0.90 / 0.85 = 1,058.82 kW: demand 10,000.00 and
    pf_demand_adjust 588.24. June (no load, no PF): the floor is 80 % of May's measured demand,
    800 kW, for demand and for the PF-adjusted demand alike: demand 8,000.00, pf_demand_adjust
    0.00, as June's warning says (it was 0.8 x 1,058.82 - 800 = 47.06 kW x 10 = 470.59 billed as
    a PF charge in the no-load month)."""
    r = audit(two_months(), tariff(ADJUST, demand=RATCHET), tz=TZ, interval_minutes=60)
    may, june = r.periods
    assert_allclose([may.charges["demand"], may.charges["pf_demand_adjust"]], [10000.0, (1000 * 0.9 / 0.85 - 1000) * 10])
    assert_allclose([june.charges["demand"], june.charges["pf_demand_adjust"]], [8000.0, 0.0])
    assert any(w.startswith("2025-06") and "PF clauses charge nothing" in w for w in r.warnings)


def test_ratchet_on_pf_adjusted_billing_demand():
    """ratchet_on = "billing": the floor is 80 % of May's PF-adjusted demand, 0.8 x 1,058.82 =
    847.06 kW, all of it demand (June has no PF of its own): demand 8,470.59, pf_demand_adjust
    0.00. A stored history is taken as given (the engine of the earlier audit computed it on the
    same basis): with history [1,200] May's floor is 960 kW, below its own 1,000 / 1,058.82, so
    May is unchanged (10,000.00 + 588.24); June's floor is 0.8 x max(1,200, 1,058.82) = 960 kW
    -> demand 9,600.00."""
    t = tariff(ADJUST, demand=dict(RATCHET, ratchet_on="billing"))
    may, june = audit(two_months(), t, tz=TZ, interval_minutes=60).periods
    assert_allclose([june.charges["demand"], june.charges["pf_demand_adjust"]], [0.8 * 1000 * 0.9 / 0.85 * 10, 0.0])
    may, june = audit(two_months(), t, tz=TZ, interval_minutes=60, history_peak_kw=[1200.0]).periods
    assert_allclose([may.charges["demand"], may.charges["pf_demand_adjust"]], [10000.0, (1000 * 0.9 / 0.85 - 1000) * 10])
    assert_allclose(june.charges["demand"], 9600.0)
    lines = [s for s in describe_tariff(t) if s.startswith("Demand ratchet")]
    assert lines == ["Demand ratchet: billing demand is at least 80 % of the highest PF-adjusted demand of the "
                     "previous 11 billing periods."]


def test_ratchet_on_is_validated():
    with pytest.raises(TariffError) as e:
        tariff_from_dict(dict(BASE_TARIFF, demand=dict(RATCHET, ratchet_on="peak")))
    assert e.value.key == "demand.ratchet_on" and '"measured" or "billing"' in str(e.value)
    with pytest.raises(TariffError) as e:
        tariff_from_dict(dict(BASE_TARIFF, demand={"price_per_kw": 1, "ratchet_on": "billing"}))
    assert e.value.key == "demand.ratchet_on" and "only applies with ratchet_percent" in str(e.value)
