"""What the tariffs package answers about each clause (threshold PF, lagging or leading), the
lookup of tariffs by name, and the loader's messages (closest known key, file line).

Threshold PFs come from tan phi limits by PF = 1 / sqrt(1 + tan^2 phi) (IEEE Std 1459-2010,
section 3.1.1): tan phi 0.4 -> 0.928477, 0.5 -> 0.894427, 0.33 -> 0.949465.
"""
from __future__ import annotations

import math
import os
import time

import pytest
from numpy.testing import assert_allclose

from auditor.audit import audit
from auditor.errors import NotFoundError, TariffError
from auditor.tariffs import (
    EXAMPLES_DIR,
    clause_facts,
    find_tariff,
    lagging_keys,
    leading_keys,
    load_named_tariff,
    load_tariff,
    pf_threshold,
    tariff_from_dict,
    threshold_pfs,
)
from auditor.tariffs.loader import _V, KNOWN_KEYS
from tests.audit_helpers import BASE_TARIFF, TZ, june_frame, set_at, tariff


def example(name: str):
    return load_tariff(EXAMPLES_DIR / f"{name}.toml")


# ---------------------------------------------------------------------------------------------
# Clause facts
# ---------------------------------------------------------------------------------------------


def test_facts_of_the_shipped_examples():
    """Harrowgate: kvarh above tan phi 0.4 (PF 0.928477, lagging) and night leading kvarh (no
    threshold, leading). Millbrook: demand adjusted below PF 0.90 (period PF) and kvar above
    0.5 x kW (PF 0.894427 per interval). Tidewater counts lag + lead, so its banded clause (tan
    phi 0.33 -> PF 0.949465) and its percentage clause (0.85) charge both senses."""
    h = {f.key: f for f in clause_facts(example("harrowgate_industrial_tou"))}
    assert_allclose(h["reactive_daytime"].threshold_pf, 1 / math.sqrt(1.16))
    assert (h["reactive_daytime"].pf_measure, h["reactive_daytime"].sense, h["reactive_daytime"].windowed) == \
        ("period", "lagging", True)
    assert h["leading_kvarh"].threshold_pf is None and h["leading_kvarh"].sense == "leading"

    m = {f.key: f for f in clause_facts(example("millbrook_commercial_pf"))}
    assert (m["pf_demand_adjust"].threshold_pf, m["pf_demand_adjust"].pf_measure) == (0.90, "period")
    assert_allclose(m["kvar_demand"].threshold_pf, 1 / math.sqrt(1.25))
    assert m["kvar_demand"].pf_measure == "interval" and m["kvar_demand"].sense == "lagging"

    t = {f.key: f for f in clause_facts(example("tidewater_banded_kva"))}
    assert_allclose(t["kvarh_banded"].threshold_pf, 1 / math.sqrt(1 + 0.33**2))
    assert t["kvarh_banded"].sense == "both" and t["pf_percent"].sense == "both"
    assert t["pf_percent"].to_dict()["threshold_pf"] == 0.85


def test_kvar_demand_threshold_is_an_interval_pf_not_a_period_pf():
    """The decision documented in auditor.tariffs.model: kvar_demand charges on peaks, so the
    period's energy PF does not decide it; PF 1/sqrt(1 + r^2) at every interval does.

    Month A: every hour 100 kWh / 45 kvarh (PF 0.9119, above 0.8944 for r = 0.5): peak kvar 45
    = 0.45 x 100 kW, within 0.5 x 100 -> 0.00, although the period PF 0.91 is below the 0.95 a
    period-PF threshold would suggest for anything. Month B: every hour 100 / 20 (PF 0.98), one
    hour 100 / 80: the energy PF is still 0.98 but peak kvar 80 - 50 = 30 kvar x 2 = 60.00.
    """
    t = tariff([{"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 2.0}])
    facts = clause_facts(t)[0]
    assert_allclose(facts.threshold_pf, 1 / math.sqrt(1.25))
    assert facts.pf_measure == "interval"
    assert pf_threshold(t) is None  # the bill check compares period PFs: not counted there
    assert [d["key"] for d in threshold_pfs(t)] == ["kvar_demand"]  # the dashboard's lines: counted
    a = june_frame(kwh=100.0, kvarh_lag=45.0)
    set_at(a, "2025-06-10 10:00", kwh=100.0, kvarh_lag=45.0)
    assert audit(a, t, tz=TZ, interval_minutes=60).periods[0].charges["kvar_demand"] == 0.0
    b = june_frame(kwh=100.0, kvarh_lag=20.0)
    set_at(b, "2025-06-10 10:00", kwh=100.0, kvarh_lag=80.0)
    p = audit(b, t, tz=TZ, interval_minutes=60).periods[0]
    assert p.pf > 0.97
    assert_allclose(p.charges["kvar_demand"], 60.0)


def test_lagging_and_leading_keys():
    t = tariff([
        {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05},
        {"kind": "leading_kvarh", "price_per_kvarh": 0.03, "hours": [22, 6]},
        {"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 2.0},
        {"kind": "pf_demand_adjust", "base_pf": 0.9, "pf": "at_peak"},
    ])
    assert lagging_keys(t) == ("kvarh_excess", "pf_demand_adjust")
    assert leading_keys(t) == ("leading_kvarh",)
    assert_allclose(pf_threshold(t), 1 / math.sqrt(1.16))  # max(0.928, 0.90)
    assert [f.pf_measure for f in clause_facts(t)] == ["period", None, "interval", "peak"]


def test_the_other_layers_ask_the_tariffs_package():
    from auditor import bills
    from auditor.correction import scenario
    from auditor.services import portfolio
    from auditor.tariffs import catalog, facts

    assert bills.pf_threshold is facts.pf_threshold and bills.lagging_keys is facts.lagging_keys
    assert portfolio.find_tariff is catalog.find_tariff
    assert portfolio.load_named_tariff is catalog.load_named_tariff
    t = example("millbrook_commercial_pf")
    assert portfolio.tariff_threshold_pf(t) == threshold_pfs(t)
    assert scenario._leading_keys(example("harrowgate_industrial_tou")) == ("leading_kvarh",)


def test_old_import_paths_keep_working():
    from auditor.tariffs import spec

    for name in ("Band", "Calendar", "DemandCharge", "EnergyCharge", "KvarDemand", "KvarhBanded", "KvarhExcess",
                 "LeadingKvarh", "MECHANISMS", "PfDemandAdjust", "PfPercent", "Tariff", "Window",
                 "describe_tariff", "load_tariff", "tariff_from_dict"):
        assert hasattr(spec, name), name


# ---------------------------------------------------------------------------------------------
# Tariffs by name
# ---------------------------------------------------------------------------------------------


def test_find_and_load_by_name_with_the_mtime_cache(tmp_path):
    src = (EXAMPLES_DIR / "millbrook_commercial_pf.toml").read_text(encoding="utf-8")
    (tmp_path / "site_rate.toml").write_text(src, encoding="utf-8")
    c = find_tariff("site_rate", [tmp_path])
    assert c.title == "Millbrook General Service PF" and c.error is None
    first = load_named_tariff("site_rate", [tmp_path])
    assert load_named_tariff("site_rate", [tmp_path]) is first  # cached
    (tmp_path / "site_rate.toml").write_text(src.replace("price_per_kw = 14.25", "price_per_kw = 15.0"),
                                             encoding="utf-8")
    later = time.time() + 5
    os.utime(tmp_path / "site_rate.toml", (later, later))
    changed = load_named_tariff("site_rate", [tmp_path])
    assert changed is not first and changed.demand.price_per_kw == 15.0
    with pytest.raises(NotFoundError, match="known tariffs: .*harrowgate_industrial_tou"):
        find_tariff("no_such_rate", [tmp_path])
    (tmp_path / "broken.toml").write_text('name = "B"\n', encoding="utf-8")
    with pytest.raises(TariffError, match="currency"):
        find_tariff("broken", [tmp_path])


# ---------------------------------------------------------------------------------------------
# Loader messages
# ---------------------------------------------------------------------------------------------


def error_of(d) -> TariffError:
    with pytest.raises(TariffError) as e:
        tariff_from_dict(d, source="t.toml")
    return e.value


def with_reactive(*clauses):
    return dict(BASE_TARIFF, reactive=list(clauses))


def test_a_misspelt_key_is_named_with_the_closest_known_key():
    e = error_of(with_reactive({"kind": "kvarh_excess", "tan_phi_limt": 0.4, "price_per_kvarh": 0.05}))
    assert e.key == "reactive[0].tan_phi_limt"
    assert "did you mean 'tan_phi_limit'?" in str(e) and "is required" not in str(e).split("(")[0]
    e = error_of(with_reactive({"kind": "pf_percent", "threshold_pf": 0.9, "percent_per_hundredth": 1,
                                "applies_to": ["energy"], "max_surcharge_percnt": 5}))
    assert e.key == "reactive[0].max_surcharge_percnt" and "did you mean 'max_surcharge_percent'?" in str(e)
    e = error_of(with_reactive({"kind": "kvarh_exces", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05}))
    assert e.key == "reactive[0].kind" and "did you mean 'kvarh_excess'?" in str(e)
    e = error_of(dict(BASE_TARIFF, curency="EUR"))
    assert e.key == "curency" and "did you mean 'currency'?" in str(e)


def test_a_legitimate_key_read_later_is_not_taken_for_a_misspelling():
    """rebate_percent_per_hundredth looks like percent_per_hundredth, but it is a known key: the
    missing one is reported as required."""
    e = error_of(with_reactive({"kind": "pf_percent", "threshold_pf": 0.9, "applies_to": ["energy"],
                                "rebate_above_pf": 0.95, "rebate_percent_per_hundredth": 0.5}))
    assert e.key == "reactive[0].percent_per_hundredth" and "is required" in str(e)


def test_every_key_the_validator_reads_is_in_the_vocabulary():
    for path in EXAMPLES_DIR.glob("*.toml"):
        load_tariff(path)
    for m in ({"kind": "pf_percent", "threshold_pf": 0.9, "percent_per_hundredth": 1, "applies_to": ["energy"],
               "rebate_above_pf": 0.95, "rebate_percent_per_hundredth": 0.5, "max_rebate_percent": 1,
               "max_surcharge_percent": 9, "kvarh": "net"},
              {"kind": "pf_demand_adjust", "base_pf": 0.9, "credit": True, "max_credit_percent": 5, "pf": "at_peak"},
              {"kind": "kvarh_banded", "tan_phi_limit": 0.3, "bands": [{"min_pf": 0, "price_per_kvarh": 0.01}]}):
        tariff_from_dict(with_reactive(m))
    assert _V.seen <= KNOWN_KEYS, sorted(_V.seen - KNOWN_KEYS)


def test_errors_in_a_file_name_the_line(tmp_path):
    p = tmp_path / "rate.toml"
    p.write_text(
        'name = "X"\n'                         # 1
        'currency = "EUR"\n'                   # 2
        '[energy]\n'                           # 3
        'price_per_kwh = 0.1\n'                # 4
        '[demand]\n'                           # 5
        'price_per_kw = 4.0\n'                 # 6
        '\n'                                   # 7
        '[[reactive]]   # first clause\n'      # 8
        'kind = "kvarh_excess"\n'              # 9
        'tan_phi_limit = 0.4\n'                # 10
        'price_per_kvarh = 0.05\n'             # 11
        '[[reactive]]\n'                       # 12
        'kind = "kvarh_banded"\n'              # 13
        'tan_phi_limit = 0.3\n'                # 14
        '[[reactive.bands]]\n'                 # 15
        'min_pf = 0.9\n'                       # 16
        'price_per_kvarh = 0.0\n'              # 17
        '[[reactive.bands]]\n'                 # 18
        'min_pf = 0.0\n'                       # 19
        'price_per_kvarh = -0.02\n',           # 20
        encoding="utf-8")
    with pytest.raises(TariffError) as e:
        load_tariff(p)
    assert e.value.key == "reactive[1].bands[1].price_per_kvarh" and e.value.line == 20
    assert str(e.value).startswith(f"{p}, line 20: tariff key 'reactive[1].bands[1].price_per_kvarh'")
    assert e.value.file == str(p)
    text = p.read_text(encoding="utf-8")
    p.write_text(text.replace("price_per_kvarh = 0.05\n", ""), encoding="utf-8")  # a missing key
    with pytest.raises(TariffError) as e:
        load_tariff(p)
    assert e.value.key == "reactive[0].price_per_kvarh" and e.value.line == 8  # its table's header
    p.write_text(text.replace("price_per_kw = 4.0", 'price_per_kw = 4.0\nratchet_periods = 6'), encoding="utf-8")
    with pytest.raises(TariffError) as e:
        load_tariff(p)
    assert (e.value.key, e.value.line) == ("demand.ratchet_periods", 7)
