"""Tariff spec validation and one hand-worked month per mechanism.

Every hand-worked month uses tests.audit_helpers.june_frame: June 2025 in Europe/Berlin, 720
hourly intervals of 100 kWh / 60 kvarh lagging, except Tuesday 10 June 10:00 with 250 kWh /
150 kvarh. So kWh = 72,150, kvarh_lag = 43,290, tan phi = 0.6, PF = 1/sqrt(1.36) = 0.857493
(0.86 rounded), peak kW = 250, peak kvar = 150, peak kVA = sqrt(250^2 + 150^2) = 291.548.
Base tariff: 0.10 per kWh, 10.0 per kW of demand.
"""
from __future__ import annotations

import math
from datetime import date

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from auditor.audit import audit
from auditor.errors import TariffError
from auditor.tariffs import EXAMPLES_DIR, MECHANISMS, describe_tariff, load_tariff, tariff_from_dict
from auditor.tariffs.engine import pf_percent_adjustment, ratcheted_demand
from tests.audit_helpers import BASE_TARIFF, TZ, june_frame, local_hours, tariff

PF_JUNE = 1 / math.sqrt(1.36)


def run(t, frame=None, **kw):
    r = audit(june_frame() if frame is None else frame, t, tz=TZ, interval_minutes=60, **kw)
    return r.periods[0] if len(r.periods) == 1 else r


# ---------------------------------------------------------------------------------------------
# Base charges
# ---------------------------------------------------------------------------------------------


def test_base_charges_of_the_month():
    """energy = 72,150 kWh x 0.10 = 7,215.00; demand = 250 kW x 10 = 2,500.00; fixed 25.00."""
    p = run(tariff(fixed={"price_per_period": 25.0}))
    assert_allclose([p.charges["energy"], p.charges["demand"], p.charges["fixed"]], [7215.0, 2500.0, 25.0])
    assert p.reactive_total == 0.0
    assert_allclose(p.total, 9740.0)


def test_kva_demand_basis():
    """demand = peak kVA 291.548 x 10 = 2,915.48 (peak kVA uses Q_net)."""
    p = run(tariff(demand={"basis": "kva", "price_per_kw": 10.0}))
    assert_allclose(p.charges["demand"], 10 * math.hypot(250, 150))


def test_time_of_use_energy_with_public_holidays():
    """Peak window Mon-Fri 08-20 at 0.20, the rest at 0.10, holidays of DE-BY billed as Sundays.
    June 2025 has 21 weekdays; Whit Monday (9 June) and Corpus Christi (19 June) are Bavarian
    public holidays (holidays library), leaving 19 x 12 = 228 peak hours, one of them the
    250 kWh hour: peak kWh = 227 x 100 + 250 = 22,950 -> 4,590.00; off-peak 49,200 -> 4,920.00;
    energy = 9,510.00. Without a calendar: 21 x 12 = 252 peak hours, 251 x 100 + 250 = 25,350 kWh
    -> 5,070.00, off-peak 46,800 kWh -> 4,680.00, energy = 9,750.00.
    """
    energy = {"price_per_kwh": 0.10, "windows": [{"name": "peak", "days": "weekdays", "hours": [8, 20], "price_per_kwh": 0.20}]}
    p = run(tariff(energy=energy, calendar={"country": "DE", "subdivision": "BY"}))
    assert_allclose(p.charges["energy"], 9510.0)
    p = run(tariff(energy=energy))
    assert_allclose(p.charges["energy"], 9750.0)


# ---------------------------------------------------------------------------------------------
# 1. kvarh_excess
# ---------------------------------------------------------------------------------------------


def test_kvarh_excess_month():
    """Excess = 43,290 - 0.4 x 72,150 = 43,290 - 28,860 = 14,430 kvarh; x 0.05 = 721.50."""
    p = run(tariff([{"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05}]))
    assert_allclose(p.charges["kvarh_excess"], 721.50)
    assert_allclose(p.reactive_total, 721.50)
    assert_allclose(p.total, 7215.0 + 2500.0 + 721.50)


def test_kvarh_excess_inside_windows_only():
    """Counted Mon-Fri 06-22 only, holidays as Sundays (DE-BY): 19 working days x 16 h = 304 h,
    including the peak hour: kWh = 303 x 100 + 250 = 30,550, kvarh = 303 x 60 + 150 = 18,330,
    excess = 18,330 - 0.4 x 30,550 = 6,110 kvarh; x 0.05 = 305.50."""
    m = {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05,
         "windows": [{"days": "weekdays", "hours": [6, 22]}]}
    p = run(tariff([m], calendar={"country": "DE", "subdivision": "BY"}))
    assert_allclose(p.charges["kvarh_excess"], 305.50)


def test_kvarh_excess_counting_leading():
    """Leading 10 kvarh in each hour 00-06 (6 h x 30 days = 1,800 kvarh).
    lag_plus_lead: 43,290 + 1,800 - 28,860 = 16,230 -> 811.50.
    net:           43,290 - 1,800 - 28,860 = 12,630 -> 631.50.
    lag (default): 721.50 as without leading energy."""
    f = june_frame()
    f.loc[local_hours(f) < 6, "kvarh_lead"] = 10.0
    base = {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05}
    got = [run(tariff([dict(base, kvarh=k)]), f).charges["kvarh_excess"] for k in ("lag_plus_lead", "net", "lag")]
    assert_allclose(got, [811.50, 631.50, 721.50])


# ---------------------------------------------------------------------------------------------
# 2. kvarh_banded
# ---------------------------------------------------------------------------------------------

BANDS = [
    {"min_pf": 0.95, "price_per_kvarh": 0.0},
    {"min_pf": 0.80, "price_per_kvarh": 0.02},
    {"min_pf": 0.0, "price_per_kvarh": 0.04},
]


def test_kvarh_banded_month():
    """Excess above tan phi 0.33: 43,290 - 0.33 x 72,150 = 43,290 - 23,809.5 = 19,480.5 kvarh.
    PF 0.857 -> 0.86, band 0.80-0.95 at 0.02: 389.61.
    Same kWh with kvarh = 0.8 x kWh (57,720; PF 0.781 -> 0.78, band below 0.80 at 0.04):
    (57,720 - 23,809.5) x 0.04 = 1,356.42.
    With kvarh = 0.3 x kWh (PF 0.958 -> 0.96, band >= 0.95): free, 0.00."""
    m = {"kind": "kvarh_banded", "tan_phi_limit": 0.33, "bands": BANDS}
    t = tariff([m])
    assert_allclose(run(t).charges["kvarh_banded"], 389.61)
    f = june_frame()
    f["kvarh_lag"] = 0.8 * f["kwh"]
    assert_allclose(run(t, f).charges["kvarh_banded"], 1356.42)
    f["kvarh_lag"] = 0.3 * f["kwh"]
    assert run(t, f).charges["kvarh_banded"] == 0.0


def test_kvarh_banded_pf_rounding_decides_the_band():
    """kvarh chosen so that PF = 0.7996: rounded to 2 decimals it is 0.80 (middle band, 0.02);
    unrounded it is below 0.80 (0.04). Excess = (tan(acos 0.7996) - 0.33) x 72,150."""
    f = june_frame()
    tan = math.tan(math.acos(0.7996))
    f["kvarh_lag"] = tan * f["kwh"]
    m = {"kind": "kvarh_banded", "tan_phi_limit": 0.33, "bands": BANDS}
    excess = (tan - 0.33) * 72150
    assert_allclose(run(tariff([m]), f).charges["kvarh_banded"], 0.02 * excess)
    assert_allclose(run(tariff([m], pf_rounding="none"), f).charges["kvarh_banded"], 0.04 * excess)


# ---------------------------------------------------------------------------------------------
# 3. pf_demand_adjust
# ---------------------------------------------------------------------------------------------


def test_pf_demand_adjust_month():
    """PF 0.86 (rounded) < base 0.90: billing demand = 250 x 0.90 / 0.86 = 261.6279 kW;
    extra = 11.6279 kW x 10 = 116.28 (itemised); demand stays 2,500.00.
    Unrounded PF 0.857493: 250 x 0.90 x sqrt(1.36) = 262.3928 kW -> extra 123.93."""
    m = {"kind": "pf_demand_adjust", "base_pf": 0.90}
    p = run(tariff([m]))
    assert_allclose(p.charges["demand"], 2500.0)
    assert_allclose(p.charges["pf_demand_adjust"], (250 * 0.90 / 0.86 - 250) * 10)
    assert_allclose(p.reactive_total, p.charges["pf_demand_adjust"])
    assert_allclose(p.billing_demand, 250 * 0.90 / 0.86)
    p = run(tariff([m], pf_rounding="none"))
    assert_allclose(p.charges["pf_demand_adjust"], (250 * 0.90 * math.sqrt(1.36) - 250) * 10)


def test_pf_demand_adjust_credit_and_cap():
    """kvarh = 0.3 x kWh: PF = 1/sqrt(1.09) = 0.9578 -> 0.96 > 0.90.
    Credit: demand x 0.90 / 0.96 = 234.375 kW -> -156.25. With max_credit_percent 5 the factor is
    floored at 0.95: 237.5 kW -> -125.00. Without credit: 0.00."""
    f = june_frame()
    f["kvarh_lag"] = 0.3 * f["kwh"]
    got = [
        run(tariff([{"kind": "pf_demand_adjust", "base_pf": 0.90, "credit": True}]), f),
        run(tariff([{"kind": "pf_demand_adjust", "base_pf": 0.90, "credit": True, "max_credit_percent": 5}]), f),
        run(tariff([{"kind": "pf_demand_adjust", "base_pf": 0.90}]), f),
    ]
    assert_allclose([p.charges["pf_demand_adjust"] for p in got], [-156.25, -125.0, 0.0])


def test_pf_demand_adjust_at_peak():
    """Peak hour with 250 kvarh: PF at the kW peak = 250 / sqrt(2 x 250^2) = 0.7071 -> 0.71;
    billing demand = 250 x 0.90 / 0.71 = 316.901 kW -> extra 669.01."""
    f = june_frame()
    f.loc[f["kwh"] == 250.0, "kvarh_lag"] = 250.0
    p = run(tariff([{"kind": "pf_demand_adjust", "base_pf": 0.90, "pf": "at_peak"}]), f)
    assert_allclose(p.charges["pf_demand_adjust"], (250 * 0.90 / 0.71 - 250) * 10)
    assert_allclose(p.pf_at_peak, 1 / math.sqrt(2))


def test_pf_demand_adjust_under_a_binding_ratchet_costs_nothing_extra():
    """History peak 400 kW, ratchet 80 % -> floor 320 kW, above both 250 and the PF-adjusted
    261.63: billing demand 320 kW, demand 3,200.00, pf_demand_adjust 0.00 (the adjustment does
    not change the bill)."""
    t = tariff([{"kind": "pf_demand_adjust", "base_pf": 0.90}],
               demand={"basis": "kw", "price_per_kw": 10.0, "ratchet_percent": 80})
    p = run(t, history_peak_kw=[400.0])
    assert_allclose([p.charges["demand"], p.charges["pf_demand_adjust"]], [3200.0, 0.0])


# ---------------------------------------------------------------------------------------------
# 4. pf_percent
# ---------------------------------------------------------------------------------------------


def test_pf_percent_month():
    """Threshold 0.90, 1 % per 0.01 of energy + demand (7,215 + 2,500 = 9,715).
    PF 0.86: 4 hundredths -> 4 % -> 388.60. Capped at 3 %: 291.45.
    Unrounded PF 0.857493: (0.90 - 0.857493) x 100 = 4.2507 hundredths -> 412.96."""
    m = {"kind": "pf_percent", "threshold_pf": 0.90, "percent_per_hundredth": 1.0, "applies_to": ["energy", "demand"]}
    assert_allclose(run(tariff([m])).charges["pf_percent"], 388.60)
    assert_allclose(run(tariff([dict(m, max_surcharge_percent=3)])).charges["pf_percent"], 291.45)
    assert_allclose(run(tariff([m], pf_rounding="none")).charges["pf_percent"], (0.90 - PF_JUNE) * 100 * 97.15)


def test_pf_percent_rebate():
    """kvarh = 0.2 x kWh: PF = 1/sqrt(1.04) = 0.98058 -> 0.98; 3 hundredths above 0.95 at 0.5 %
    each: 1.5 % rebate of 9,715 = -145.725. Capped at 1 %: -97.15."""
    f = june_frame()
    f["kvarh_lag"] = 0.2 * f["kwh"]
    m = {"kind": "pf_percent", "threshold_pf": 0.90, "percent_per_hundredth": 1.0, "applies_to": ["energy", "demand"],
         "rebate_above_pf": 0.95, "rebate_percent_per_hundredth": 0.5}
    assert_allclose(run(tariff([m]), f).charges["pf_percent"], -145.725)
    assert_allclose(run(tariff([dict(m, max_rebate_percent=1)]), f).charges["pf_percent"], -97.15)


def test_pf_percent_counts_whole_hundredths_exactly():
    # 0.85 - 0.83 is 0.0200000000000000178 in binary; it must count as exactly 2 hundredths.
    assert_allclose(pf_percent_adjustment(np.array([0.83]), np.array([1000.0]), 0.85, 1.0), [20.0])
    assert pf_percent_adjustment(np.array([np.nan]), np.array([1000.0]), 0.85, 1.0)[0] == 0.0


# ---------------------------------------------------------------------------------------------
# 5. kvar_demand
# ---------------------------------------------------------------------------------------------


def test_kvar_demand_month():
    """Peak kvar 150 - 0.5 x peak kW 250 = 25 kvar x 2.00 = 50.00; with ratio 0.7 (allowance
    175 kvar) nothing."""
    p = run(tariff([{"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 2.0}]))
    assert_allclose(p.charges["kvar_demand"], 50.0)
    p = run(tariff([{"kind": "kvar_demand", "allowance_ratio": 0.7, "price_per_kvar": 2.0}]))
    assert p.charges["kvar_demand"] == 0.0


# ---------------------------------------------------------------------------------------------
# 6. leading_kvarh
# ---------------------------------------------------------------------------------------------


def test_leading_kvarh_month():
    """Leading 10 kvarh each hour 00-06 (1,800 kvarh, inside 22-06) and 4 kvarh at 12-14
    (240 kvarh, outside). Charge 1,800 x 0.03 = 54.00. With an allowance of tan phi 0.05 on the
    kWh inside the hours (8 h x 30 days x 100 kWh = 24,000 kWh -> 1,200 kvarh free):
    600 x 0.03 = 18.00."""
    f = june_frame()
    h = local_hours(f)
    f.loc[h < 6, "kvarh_lead"] = 10.0
    f.loc[(h >= 12) & (h < 14), "kvarh_lead"] = 4.0
    m = {"kind": "leading_kvarh", "price_per_kvarh": 0.03, "hours": [22, 6]}
    assert_allclose(run(tariff([m]), f).charges["leading_kvarh"], 54.0)
    assert_allclose(run(tariff([dict(m, tan_phi_limit=0.05)]), f).charges["leading_kvarh"], 18.0)


# ---------------------------------------------------------------------------------------------
# Ratchet, labels, several mechanisms together
# ---------------------------------------------------------------------------------------------


def test_ratchet_within_the_range_and_from_history():
    """June peak 250 kW; July at 150 kW -> floor 0.8 x 250 = 200 kW, July demand 2,000.00.
    History [1000] + 11 x [100]: the 1000 kW period is 12 periods back, outside the previous 11,
    so June keeps 250 kW (the floor is 80)."""
    t = tariff(demand={"basis": "kw", "price_per_kw": 10.0, "ratchet_percent": 80})
    f = june_frame()
    july = june_frame()
    july.index = july.index + (date(2025, 7, 1) - date(2025, 6, 1))
    july["kwh"] = 150.0
    r = audit(pd.concat([f, july]), t, tz=TZ, interval_minutes=60)
    assert_allclose([p.charges["demand"] for p in r.periods], [2500.0, 2000.0])
    p = run(t, history_peak_kw=[1000.0] + [100.0] * 11)
    assert_allclose(p.charges["demand"], 2500.0)
    assert_allclose(ratcheted_demand(np.array([10.0, 5.0, 5.0]), 50, 1), [10.0, 5.0, 5.0])


def test_labels_name_charges_and_two_mechanisms_of_a_kind():
    """Two kvarh_excess clauses with their own labels, itemised separately: tan phi 0.4 at 0.05
    gives 721.50 (as above), tan phi 0.5 at 0.10:
    43,290 - 36,075 = 7,215 x 0.10 = 721.50."""
    t = tariff([
        {"kind": "kvarh_excess", "label": "kvarh_a", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05},
        {"kind": "kvarh_excess", "label": "kvarh_b", "tan_phi_limit": 0.5, "price_per_kvarh": 0.10},
    ])
    p = run(t)
    assert list(p.charges) == ["energy", "demand", "fixed", "kvarh_a", "kvarh_b"]
    assert_allclose([p.charges["kvarh_a"], p.charges["kvarh_b"]], [721.50, 721.50])
    assert_allclose(p.reactive_total, 1443.0)


# ---------------------------------------------------------------------------------------------
# Example tariffs
# ---------------------------------------------------------------------------------------------


def test_examples_together_use_every_mechanism_and_describe():
    kinds = set()
    paths = sorted(EXAMPLES_DIR.glob("*.toml"))
    assert len(paths) == 3
    for path in paths:
        t = load_tariff(path)
        kinds |= {m.kind for m in t.reactive}
        lines = describe_tariff(t)
        assert len(lines) >= 4 + len(t.reactive)
        for key in t.reactive_keys:
            assert any(line.startswith(f"{key}:") for line in lines)
        r = audit(june_frame(), t, tz=TZ, interval_minutes=60)
        assert set(r.periods[0].charges) == set(t.charge_keys)
    assert kinds == set(MECHANISMS)
    assert any(load_tariff(p).demand.ratchet_percent for p in paths)
    assert any(load_tariff(p).fixed_per_period > 0 for p in paths)
    assert {load_tariff(p).pf_rounding for p in paths} == {2, None}


# ---------------------------------------------------------------------------------------------
# Validation
# ---------------------------------------------------------------------------------------------


def bad(d, key, *fragments):
    with pytest.raises(TariffError) as e:
        tariff_from_dict(d, source="t.toml")
    assert e.value.key == key, str(e.value)
    for frag in fragments:
        assert frag in str(e.value), str(e.value)
    assert str(e.value).startswith("t.toml: ")


def with_(**kw):
    d = dict(BASE_TARIFF)
    d.update(kw)
    return d


def test_validation_names_key_and_allowed_values():
    bad(with_(demand={"basis": "kvah", "price_per_kw": 1}), "demand.basis", '"kw" or "kva"', "'kvah'")
    bad(with_(colour="red"), "colour", "unknown key", "allowed here:", "currency")
    bad({k: v for k, v in BASE_TARIFF.items() if k != "currency"}, "currency", "required")
    bad(with_(currency="euro"), "currency", "three-letter")
    bad(with_(energy={"price_per_kwh": True}), "energy.price_per_kwh", "must be a price")
    bad(with_(energy={"price_per_kwh": -1}), "energy.price_per_kwh", "at least 0")
    bad(with_(pf_rounding=2.5), "pf_rounding", '"none"')
    bad(with_(kvarh_basis="both"), "kvarh_basis", '"lag", "net", "lag_plus_lead"')
    bad(with_(reactive=[{"kind": "kvarh_excess", "tan_phi_limit": 0.4}]), "reactive[0].price_per_kvarh", "required")
    bad(with_(reactive=[{"kind": "kvarh_fee"}]), "reactive[0].kind", "kvarh_excess", "leading_kvarh")
    bad(with_(reactive=[{"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 1, "base_pf": 0.9}]),
        "reactive[0].base_pf", "unknown key for kind 'kvar_demand'")
    bad(with_(reactive=[{"kind": "pf_percent", "threshold_pf": 0.9, "percent_per_hundredth": 1, "applies_to": ["energy", "tax"]}]),
        "reactive[0].applies_to", "energy", "demand", "fixed")
    bad(with_(reactive=[{"kind": "pf_demand_adjust", "base_pf": 1.2}]), "reactive[0].base_pf", "power factor")


def test_validation_of_structure_and_combinations():
    banded = {"kind": "kvarh_banded", "tan_phi_limit": 0.3, "bands": [{"min_pf": 0.9, "price_per_kvarh": 0.01}]}
    bad(with_(reactive=[banded]), "reactive[0].bands", "min_pf = 0")
    bad(with_(reactive=[{**banded, "bands": [{"min_pf": 0, "price_per_kvarh": 0.01, "max_pf": 1}]}]),
        "reactive[0].bands[0].max_pf", "unknown key")
    two = {"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 1}
    bad(with_(reactive=[two, two]), "reactive[1].label", "used twice")
    bad(with_(reactive=[{**two, "label": "energy"}]), "reactive[0].label", "base charges")
    bad(with_(demand={"basis": "kva", "price_per_kw": 1}, reactive=[{"kind": "pf_demand_adjust", "base_pf": 0.9}]),
        "reactive[0].kind", 'demand.basis = "kw"')
    bad({k: v for k, v in with_(reactive=[{"kind": "pf_demand_adjust", "base_pf": 0.9}]).items() if k != "demand"},
        "reactive[0].kind", "[demand]")
    bad(with_(reactive=[{"kind": "leading_kvarh", "price_per_kvarh": 0.01, "hours": [6, 6]}]), "reactive[0].hours", "start_hour")
    bad(with_(reactive=[{"kind": "leading_kvarh", "price_per_kvarh": 0.01, "hours": [22, 6], "days": ["monday"]}]),
        "reactive[0].days", '"weekdays"', "mon")
    bad(with_(calendar={"country": "XX"}), "calendar.country", "ISO 3166")
    bad(with_(calendar={"country": "DE", "subdivision": "ZZ"}), "calendar.subdivision", "BY")
    bad(with_(demand={"price_per_kw": 1, "ratchet_periods": 6}), "demand.ratchet_periods", "ratchet_percent")
    bad(with_(reactive={"kind": "kvar_demand"}), "reactive", "array of tables")
    bad(with_(reactive=[{"kind": "pf_percent", "threshold_pf": 0.9, "percent_per_hundredth": 1, "applies_to": ["energy"],
                         "rebate_above_pf": 0.95}]), "reactive[0].rebate_percent_per_hundredth", "together")


def test_toml_syntax_error_names_the_line(tmp_path):
    p = tmp_path / "broken.toml"
    p.write_text('name = "X"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = = 0.1\n', encoding="utf-8")
    with pytest.raises(TariffError, match=r"line 4, column \d+") as e:
        load_tariff(p)
    assert str(p) in str(e.value)
    with pytest.raises(TariffError, match="no such tariff file"):
        load_tariff(tmp_path / "missing.toml")


def test_bad_key_in_a_file_names_file_and_key(tmp_path):
    p = tmp_path / "t.toml"
    p.write_text('name = "X"\ncurrency = "EUR"\n[energy]\nprice_per_kwh = 0.1\n[[reactive]]\nkind = "kvarh_excess"\n'
                 'tan_phi_limit = 0.4\nprice_per_kvarh = 0.05\ntan_phi_limt = 0.3\n', encoding="utf-8")
    with pytest.raises(TariffError) as e:
        load_tariff(p)
    assert e.value.key == "reactive[0].tan_phi_limt" and e.value.file == str(p)


def test_tariff_is_frozen():
    t = tariff()
    with pytest.raises(AttributeError):
        t.name = "other"  # type: ignore[misc]
