"""Clause shapes, each with a hand-worked month of invented figures: marginal tiers of excess,
a time band worked out on its own for kvarh_excess, a trigger and a cap on the PF demand
adjustment, rounding of kW and of PF to a step and direction, the larger of lagging and leading
energy per interval, daily blocks across a daylight-saving change, several windows at minute
resolution on a leading-kvarh clause; then the validation of every new key (named-key errors)
and what the clause facts say about them.

Published clauses of these shapes are billed in tests/test_tariffs_published.py: the cap on a
PF demand adjustment (a US public power district), marginal tiers of excess and the daily
integration period (the Portuguese regulator's tan phi tiers) and the excess worked out per
half-hour on the larger of import and export reactive energy (the UK distribution charge). A
trigger apart from the ratio has no published source found yet; it is tested here only.

Base month: tests.audit_helpers.june_frame (June 2025, Europe/Berlin, hourly 100 kWh / 60 kvarh,
one hour of 250 kWh / 150 kvarh): kWh 72,150, kvarh 43,290, PF 0.857493.
"""
from __future__ import annotations

import math

import pytest
from numpy.testing import assert_allclose

from auditor.audit import audit
from auditor.errors import TariffError
from auditor.tariffs import clause_facts, describe_tariff, pf_threshold, tariff_from_dict
from tests.audit_helpers import BASE_TARIFF, TZ, june_frame, local_hours, set_at, tariff


def one(t, frame=None, minutes=60, **kw):
    return audit(june_frame() if frame is None else frame, t, tz=TZ, interval_minutes=minutes, **kw).periods[0]


def line_of(t, key):
    return next(s for s in describe_tariff(t) if s.startswith(f"{key}:"))


# ---------------------------------------------------------------------------------------------
# 3. Tiers of excess inside one clause; a kvarh_excess worked out per time band
# ---------------------------------------------------------------------------------------------
def test_marginal_tiers_of_excess():
    """kvarh between 33 % and 75 % of kWh at 0.02, above 75 % at 0.05.
    June: 43,290 kvarh against 0.33 x 72,150 = 23,809.5 and 0.75 x 72,150 = 54,112.5: all the
    excess (19,480.5) is in the first tier -> 389.61. With kvarh = 0.9 x kWh (64,935):
    first tier 54,112.5 - 23,809.5 = 30,303 x 0.02 = 606.06, second 64,935 - 54,112.5
    = 10,822.5 x 0.05 = 541.125 -> 1,147.185."""
    t = tariff([{"kind": "kvarh_excess", "tan_phi_limit": 0.33, "price_per_kvarh": 0.02,
                 "tiers": [{"above_tan_phi": 0.75, "price_per_kvarh": 0.05}]}])
    assert_allclose(one(t).charges["kvarh_excess"], 389.61)
    f = june_frame()
    f["kvarh_lag"] = 0.9 * f["kwh"]
    assert_allclose(one(t, f).charges["kvarh_excess"], 1147.185)
    assert "0.02 EUR per kvarh of lagging kvarh above 0.33 x kWh (tan phi 0.33) up to 0.75 x kWh, " \
           "0.05 EUR per kvarh above 0.75 x kWh" in line_of(t, "kvarh_excess")


def test_kvarh_excess_per_time_band_with_a_free_night():
    """Day band 06-22 and evening band 22-24 worked out on their own, nights free. Every hour
    100 kWh; 60 kvarh by day except 20 kvarh from 06 to 14 (tan 0.2), 90 kvarh 22-24.
    Day 06-22, 16 h x 30 = 480 h (the 250 kWh hour at 10:00 has 150 kvarh): kWh 48,150,
    kvarh 8 x 30 x 20 - 20 + 150 + 8 x 30 x 60 = 19,330 -> 19,330 - 0.4 x 48,150 = 70 kvarh.
    Evening 60 h: 6,000 kWh, 5,400 kvarh -> 3,000 kvarh. Sum 3,070 x 0.05 = 153.50 (over the
    whole of both bands: 24,730 - 0.4 x 54,150 = 3,070 as well; the bands differ when one band
    is below its limit: with 10 kvarh by day 06-22 the day band has 4,940 - 19,260 < 0 -> 0 and
    the charge stays 3,000 x 0.05 = 150.00 instead of 0 over both bands together)."""
    f = june_frame()
    h = local_hours(f)
    f.loc[(h >= 6) & (h < 14), "kvarh_lag"] = 20.0
    set_at(f, "2025-06-10 10:00", kvarh_lag=150.0)
    f.loc[h >= 22, "kvarh_lag"] = 90.0
    t = tariff([{"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05, "per": "window",
                 "windows": [{"name": "day", "hours": [6, 22]}, {"name": "evening", "hours": [22, 24]}]}])
    assert_allclose(one(t, f).charges["kvarh_excess"], 153.50)
    f.loc[(h >= 6) & (h < 22), "kvarh_lag"] = 10.0
    assert_allclose(one(t, f).charges["kvarh_excess"], 150.00)
    together = tariff([{"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05,
                        "windows": [{"hours": [6, 24]}]}])
    assert one(together, f).charges["kvarh_excess"] == 0.0


# ---------------------------------------------------------------------------------------------
# 2. A trigger apart from the ratio, and a cap
# ---------------------------------------------------------------------------------------------
def test_pf_demand_adjust_trigger_and_cap():
    """Billed demand = kW / PF (base 1.0) only when the PF is below 0.96, at most +10 %.
    June PF 0.86 (rounded): 250 / 0.86 = 290.698 kW -> +16.3 % capped at +10 % -> 275 kW:
    +25 kW x 10 = 250.00. Without the cap: 406.98. With kvarh = 0.25 x kWh (PF 0.9701 -> 0.97,
    above the trigger): nothing, although 0.97 < 1.0. With kvarh = 0.3 x kWh (PF 0.96 after
    rounding, not below 0.96): nothing; 0.32 x kWh (PF 0.9524 -> 0.95): 250 / 0.95 = 263.158
    -> 131.58."""
    m = {"kind": "pf_demand_adjust", "base_pf": 1.0, "apply_below_pf": 0.96, "max_increase_percent": 10}
    t = tariff([m])
    assert_allclose(one(t).charges["pf_demand_adjust"], 250.0)
    assert_allclose(one(tariff([dict(m, max_increase_percent=None)])).charges["pf_demand_adjust"],
                    (250 / 0.86 - 250) * 10)
    for ratio, expected in ((0.25, 0.0), (0.3, 0.0), (0.32, (250 / 0.95 - 250) * 10)):
        f = june_frame()
        f["kvarh_lag"] = ratio * f["kwh"]
        assert_allclose(one(t, f).charges["pf_demand_adjust"], expected)
    assert line_of(t, "pf_demand_adjust") == ("pf_demand_adjust: when the period's PF is below 0.96, billing demand "
                                              "is peak kW / PF, at most 10 % above peak kW.")
    assert clause_facts(t)[0].threshold_pf == 0.96


# ---------------------------------------------------------------------------------------------
# 1. Rounding per quantity
# ---------------------------------------------------------------------------------------------
def test_demand_to_one_decimal_and_pf_to_four_decimals_down():
    """Demand rounded half up to 0.1 kW: a 250.04 kW peak bills 250.0 kW, 250.05 bills 250.1.
    PF truncated to four decimals (step 0.0001, down): PF 0.857493 -> 0.8574; a pf_percent
    clause of 1 % per 0.01 below 0.90 (unrounded difference) then charges
    (0.90 - 0.8574) x 100 = 4.26 % of 7,215 energy = 307.359."""
    t = tariff(demand={"price_per_kw": 10.0, "rounding": {"step": 0.1}})
    f = june_frame()
    set_at(f, "2025-06-10 10:00", kwh=250.04)
    assert_allclose(one(t, f).charges["demand"], 2500.0)
    set_at(f, "2025-06-10 10:00", kwh=250.05)
    assert_allclose(one(t, f).charges["demand"], 2501.0)
    p = tariff([{"kind": "pf_percent", "threshold_pf": 0.90, "percent_per_hundredth": 1, "applies_to": ["energy"]}],
               pf_rounding={"step": 0.0001, "mode": "down"})
    r = one(p)
    assert_allclose(r.billing_pf, 0.8574)
    assert_allclose(r.charges["pf_percent"], 4.26 * 72.15)
    assert any("rounded down to a whole 0.0001 (parts discarded) before any comparison" in s for s in describe_tariff(p))


def test_rounding_modes_at_the_half():
    from auditor.tariffs.model import Rounding
    x = [2.5, 2.4999, 2.0000000001, 0.845, 3.55]
    assert list(Rounding(1, "half_up").apply(x)[:3]) == [3.0, 2.0, 2.0]
    assert list(Rounding(1, "half_down").apply(x)[:3]) == [2.0, 2.0, 2.0]
    assert list(Rounding(1, "up").apply(x)[:3]) == [3.0, 3.0, 2.0]
    assert list(Rounding(1, "down").apply(x)[:3]) == [2.0, 2.0, 2.0]
    assert Rounding(0.01, "half_up").apply(x)[3] == 0.85  # 0.845 stored as 0.84499999...
    assert Rounding(0.1, "half_down").apply(x)[4] == 3.5


# ---------------------------------------------------------------------------------------------
# 4. The larger of lagging and leading energy, interval by interval
# ---------------------------------------------------------------------------------------------
def test_larger_of_lagging_and_leading_per_interval():
    """Each hour's chargeable kvarh is the larger of its lagging and leading energy, less 0.33 x
    its kWh; the hours' excesses are summed. Nights 00-06 (180 h): 0 lagging, 70 leading at 100
    kWh -> 37 each -> 6,660. Hours 06-08 (60 h): 60 lagging and 30 leading -> 27 each. Other
    hours: 60 lagging -> 27 each (539 h in all from 06 to 24) and the 250 kWh hour
    150 - 82.5 = 67.5 -> 14,553 + 67.5 = 14,620.5. Total 21,280.5 x 0.01 = 212.805.
    Over the period instead: the larger total is lagging 32,490 (leading 14,400) against
    23,809.5 -> 8,680.5 x 0.01 = 86.805; lag + lead over the period 46,890 -> 230.805."""
    f = june_frame()
    h = local_hours(f)
    f.loc[h < 6, "kvarh_lag"] = 0.0
    f.loc[h < 6, "kvarh_lead"] = 70.0
    f.loc[(h >= 6) & (h < 8), "kvarh_lead"] = 30.0
    m = {"kind": "kvarh_excess", "tan_phi_limit": 0.33, "price_per_kvarh": 0.01, "kvarh": "max_lag_lead"}
    assert_allclose(one(tariff([dict(m, per="interval")]), f).charges["kvarh_excess"], 212.805)
    assert_allclose(one(tariff([m]), f).charges["kvarh_excess"], 86.805)
    assert_allclose(one(tariff([dict(m, kvarh="lag_plus_lead")]), f).charges["kvarh_excess"], 230.805)
    facts = clause_facts(tariff([dict(m, per="interval")]))[0]
    assert (facts.sense, facts.pf_measure) == ("both", "interval")


def test_daily_blocks_keep_the_25_hour_day_whole():
    """Blocks of a local day (1440): 26 October 2025 in Berlin has 25 hours (02:00-03:00 twice),
    100 quarter-hours. Every quarter-hour 25 kWh and no kvarh, except 225 kvarh in each quarter
    of 01:00-02:00 (900) and 125 kvarh in each quarter of the second 02:00-03:00 (500). The day
    as one block: 1,400 - 0.5 x 2,500 = 150. Cut where the clock goes back, it would be two
    blocks: 00:00 to the first 03:00 (12 quarters, 300 kWh, 900 kvarh: 750) and the rest (500
    kvarh on 2,200 kWh: nothing) = 750. Hour by hour: (900 - 50) + (500 - 50) = 1,300, the same
    as quarter by quarter: 4 x 212.5 + 4 x 112.5."""
    from tests.audit_helpers import interval_frame
    f = interval_frame("2025-10-01", "2025-11-01", minutes=15, kwh=25.0, kvarh_lag=0.0)
    local = f.index.tz_convert(TZ)
    assert (local.day == 26).sum() == 100
    f.loc["2025-10-25 23:00Z":"2025-10-25 23:45Z", "kvarh_lag"] = 225.0  # 01:00-02:00 summer time
    f.loc["2025-10-26 01:00Z":"2025-10-26 01:45Z", "kvarh_lag"] = 125.0  # the second 02:00-03:00
    m = {"kind": "kvarh_excess", "tan_phi_limit": 0.5, "price_per_kvarh": 1.0, "per": "interval"}
    assert_allclose(one(tariff([dict(m, block_minutes=1440)]), f, minutes=15).charges["kvarh_excess"], 150.0)
    assert_allclose(one(tariff([dict(m, block_minutes=60)]), f, minutes=15).charges["kvarh_excess"], 1300.0)
    assert_allclose(one(tariff([m]), f, minutes=15).charges["kvarh_excess"], 1300.0)
    assert line_of(tariff([dict(m, block_minutes=1440)]), "kvarh_excess").endswith(
        "worked out for each local day and summed over the period.")


def test_half_hour_blocks_from_quarter_hours():
    """15-minute data, 30-minute blocks: in one half hour 5 + 40 kvarh on 25 + 25 kWh; per
    block 45 - 0.33 x 50 = 28.5; per 15-minute interval 0 + (40 - 8.25) = 31.75."""
    from tests.audit_helpers import interval_frame
    f = interval_frame("2025-06-01", "2025-07-01", minutes=15, kwh=25.0, kvarh_lag=0.0)
    set_at(f, "2025-06-10 10:00", kvarh_lag=5.0)
    set_at(f, "2025-06-10 10:15", kvarh_lag=40.0)
    m = {"kind": "kvarh_excess", "tan_phi_limit": 0.33, "price_per_kvarh": 1.0, "per": "interval"}
    assert_allclose(one(tariff([dict(m, block_minutes=30)]), f, minutes=15).charges["kvarh_excess"], 28.5)
    assert_allclose(one(tariff([m]), f, minutes=15).charges["kvarh_excess"], 31.75)


# ---------------------------------------------------------------------------------------------
# 6. Several windows, at minute resolution, on a leading-kvarh clause
# ---------------------------------------------------------------------------------------------
def test_leading_kvarh_in_several_minute_windows():
    """Leading kvarh counted 22:30-06:00 and 12:00-13:30 (15-minute data). 20 kvarh leading in
    each interval 22:00-22:30 (not counted: 60 intervals), 22:30-23:00 (counted: 60),
    12:00-13:30 (counted: 180) and 13:30-14:00 (not counted). Counted 240 x 20 = 4,800 x 0.01
    = 48.00."""
    from tests.audit_helpers import interval_frame
    f = interval_frame("2025-06-01", "2025-07-01", minutes=15, kwh=25.0, kvarh_lag=5.0)
    local = f.index.tz_convert(TZ)
    minute = local.hour * 60 + local.minute
    lead = ((minute >= 22 * 60) & (minute < 23 * 60)) | ((minute >= 12 * 60) & (minute < 14 * 60))
    f.loc[lead, "kvarh_lead"] = 20.0
    t = tariff([{"kind": "leading_kvarh", "price_per_kvarh": 0.01,
                 "windows": [{"hours": ["22:30", "06:00"]}, {"hours": ["12:00", "13:30"]}]}])
    assert_allclose(one(t, f, minutes=15).charges["leading_kvarh"], 48.0)
    assert "every day 22:30-06:00 local time; every day 12:00-13:30 local time" in line_of(t, "leading_kvarh")


# ---------------------------------------------------------------------------------------------
# Validation of the new keys
# ---------------------------------------------------------------------------------------------
def bad(reactive=None, key="", *fragments, **top):
    d = dict(BASE_TARIFF, **top)
    if reactive is not None:
        d["reactive"] = [reactive]
    with pytest.raises(TariffError) as e:
        tariff_from_dict(d, source="t.toml")
    assert e.value.key == key, str(e.value)
    for frag in fragments:
        assert frag in str(e.value), str(e.value)


KX = {"kind": "kvarh_excess", "tan_phi_limit": 0.4, "price_per_kvarh": 0.05}


def test_new_keys_are_validated_by_name():
    bad(dict(KX, excess_rounding={"step": 1, "mode": "sideways"}), "reactive[0].excess_rounding.mode",
        '"up", "down", "half_up", "half_down"')
    bad(dict(KX, excess_rounding={"step": 0}), "reactive[0].excess_rounding.step", "positive step")
    bad(dict(KX, excess_rounding={"stpe": 1}), "reactive[0].excess_rounding.stpe", "did you mean 'step'?")
    bad(dict(KX, tiers=[{"above_tan_phi": 0.3, "price_per_kvarh": 0.1}]), "reactive[0].tiers[0].above_tan_phi",
        "above the previous limit (0.4)")
    bad(dict(KX, per="month"), "reactive[0].per", '"period", "window", "interval"')
    bad(dict(KX, per="window"), "reactive[0].per", "needs [[reactive.windows]]")
    bad(dict(KX, block_minutes=30), "reactive[0].block_minutes", 'only applies with per = "interval"')
    bad(dict(KX, per="interval", block_minutes=45), "reactive[0].block_minutes", "one of 5, 10, 15, 30, 60, 1440")
    bad(dict(KX, per="interval", block_minutes=720), "reactive[0].block_minutes", "got 720")
    bad(dict(KX, windows=[{"hours": [6, 22], "kvarh": "lead"}]), "reactive[0].windows[0].kvarh",
        'only applies with per = "interval"')
    bad(dict(KX, reference_pf=0.92), "reactive[0].tan_phi_limit", "does not combine with reference_pf")
    bad({"kind": "kvarh_excess", "reference_pf": 0.92}, "reactive[0].price_per_kwh", "required")
    bad({"kind": "leading_kvarh", "price_per_kvarh": 0.01, "hours": ["22:30", "6:00"],
         "windows": [{"hours": [1, 2]}]}, "reactive[0].hours", "not both")
    bad({"kind": "leading_kvarh", "price_per_kvarh": 0.01, "hours": ["22:70", "06:00"]}, "reactive[0].hours",
        '"HH:MM"')
    bad({"kind": "pf_percent", "threshold_pf": 0.9, "percent_per_hundredth": 1, "applies_to": ["energy"],
         "slopes": [{"below_pf": 0.95, "percent_per_hundredth": 2}]}, "reactive[0].slopes[0].below_pf",
        "below the previous threshold (0.9)")
    bad({"kind": "pf_demand_adjust", "base_pf": 0.9, "credit": True, "apply_below_pf": 0.95},
        "reactive[0].apply_below_pf", "does not combine with credit")
    bad({"kind": "pf_demand_adjust", "base_pf": 0.9, "adjusted_rounding": {"step": 0.01, "mode": "nearest"}},
        "reactive[0].adjusted_rounding.mode", '"up", "down", "half_up", "half_down"')
    bad({"kind": "pf_demand_adjust", "base_pf": 0.9, "adjusted_rounding": {"step": -1}},
        "reactive[0].adjusted_rounding.step", "positive step")
    bad({"kind": "pf_demand_adjust", "base_pf": 0.9, "adjusted_rouding": {"step": 0.01}},
        "reactive[0].adjusted_rouding", "did you mean 'adjusted_rounding'?")
    bad({"kind": "pf_demand_adjust", "base_pf": 0.9, "pf": "peak"}, "reactive[0].pf",
        '"energy", "at_peak", "peak_kva"', "did you mean 'at_peak'?")
    bad({"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 1, "allowance_lookback_periods": 0},
        "reactive[0].allowance_lookback_periods", "from 1 to 36")
    bad({"kind": "kvar_demand", "allowance_ratio": 0.5, "price_per_kvar": 1, "allowance_lookback_periods": 11},
        "reactive[0].allowance_lookback_periods", 'demand.basis = "kw"', demand={"basis": "kva", "price_per_kw": 1})
    bad(None, "demand.windows[1].excess_over", "must name another demand window", "'peak'",
        demand={"price_per_kw": 0, "windows": [{"name": "peak", "hours": [18, 21], "price_per_kw": 1},
                                               {"name": "day", "hours": [8, 18], "price_per_kw": 1,
                                                "excess_over": "peek"}]})
    bad(None, "demand.rounding.mode", "half_down", demand={"price_per_kw": 1, "rounding": {"step": 1, "mode": "even"}})
    bad(None, "pf_rounding.step", "at most 0.1", pf_rounding={"step": 1})


def test_facts_of_the_new_shapes():
    """An interval-by-interval clause is compared per interval, so the period-PF question of the
    bill check leaves it out; the kWh-equivalent form's threshold is its reference PF; a band
    clause keeps the period measure; windows that name leading energy make the clause charge it."""
    t = tariff([
        {"kind": "kvarh_excess", "label": "hourly", "reference_pf": 0.92, "price_per_kwh": 0.3, "per": "interval",
         "windows": [{"hours": [6, 24], "kvarh": "lag"}, {"hours": [0, 6], "kvarh": "lead"}]},
        {"kind": "kvarh_banded", "label": "banded", "tan_phi_limit": 0.33, "per": "window",
         "bands": [{"min_pf": 0, "price_per_kvarh": 0.01}], "windows": [{"name": "P1", "hours": [8, 20]}]},
    ])
    hourly, banded = clause_facts(t)
    assert (hourly.threshold_pf, hourly.pf_measure, hourly.sense) == (0.92, "interval", "both")
    assert banded.pf_measure == "period" and banded.sense == "lagging"
    assert_allclose(pf_threshold(t), 1 / math.sqrt(1 + 0.33**2))
