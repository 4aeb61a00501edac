"""Reactive and power-factor clauses of real published tariffs, each written as one clause of
ours and billed against a month computed by hand from the published rule.

Each test names its source in our own words (utility or regulator, schedule, year) and shows the
month's arithmetic in its docstring. Where the source gives the rule but not a price (or gives
hours from another document), the test says which figure is a placeholder or from memory.
Sources (public pages, read for these tests):

* USA, Columbia River People's Utility District (Oregon), Schedule 92 "Power Factor Rate",
  effective for bills from October 2011 (crpud.net).
* Thailand, Metropolitan Electricity Authority (MEA), tariff schedule 5 "Specific Business
  Service", rate 5.2 (time of use) (mea.or.th).
* Thailand, Provincial Electricity Authority (PEA), time-of-day rate for large customers, as
  tabulated in a 2023 investment guide citing PEA (investtaiwan.nat.gov.tw).
* Spain, Royal Decree 1164/2001 art. 9.3 and Order ITC/688/2011, as explained by the Catalan
  Energy Institute and by an irrigation community's tariff page (icenergia.es,
  riegosaltoaragon.es).
* India, Kerala State Electricity Board, power factor incentive and penalty for HT/EHT and large
  LT industrial consumers (pgea.in).
* Malaysia, Tenaga Nasional Berhad, power factor surcharge for supplies below 132 kV, with three
  worked examples (a copy of TNB's explanation on pdfcoffee.com).
* Canada, Hydro-Quebec, Rate M (medium power): maximum power demand is the larger of real power
  and 90 % of apparent power (hydroquebec.com rate glossary).
* Brazil, ANEEL rules on excess reactive energy: reference PF 0.92, evaluated hour by hour since
  1996, inductive from 06:00 to 24:00 and capacitive from 00:00 to 06:00 (engeletrica.ind.br
  summary of the regulation; the hourly formula UFER = sum of kWh_t x (0.92 / PF_t - 1) is
  from memory of ANEEL Resolution 414/2010, art. 96).
* USA, a public utility district's clause quoted on the electrical-contractor.net forum (2004):
  kvar above 62 % of the maximum kW of the current or previous 11 months (the district is not
  named there and no price is quoted).
* USA, Norris Public Power District (Nebraska), irrigation newsletter on billing demand
  adjustments for a PF below 93 % measured in the billing demand interval, the increase limited
  to 10 %, with a worked example for the 2022 season (norrisppd.com). A cap on a PF demand
  surcharge.
* Portugal, the regulator's (ERSE) rules for inductive reactive energy outside the off-peak
  hours (Despachos 7253/2010 and 10/2010): multiplying factors 0.33, 1 and 3 on the reference
  price for tan phi from 0.3 to 0.4, from 0.4 to 0.5 and from 0.5 up, as tabulated on EDP
  Servico Universal's 2019 medium-voltage tariff page and in its reactive-energy FAQ, which
  also announces a daily integration period for MAT, AT and MT customers from 2012
  (edpsu.pt); the same table in a consultant's FAQ (zeben.pt). Marginal tiers of excess.
* United Kingdom, the common distribution charging methodology's excess reactive power charge
  for half-hourly metered sites (from April 2010): kvarh above 33 % of kWh, in a London Power
  Networks statement of charges (2011, a copy on pdfslide.us) and a capacitor supplier's
  explanation (powercapacitors.co.uk); assessed in every half-hour (an energy adviser's page,
  askomnium.co.uk). The excess worked out per half-hour.
"""
from __future__ import annotations

import math

import numpy as np
from numpy.testing import assert_allclose

from auditor.audit import audit
from auditor.tariffs import describe_tariff, tariff_from_dict
from auditor.tariffs.engine import pf_percent_adjustment
from auditor.tariffs.model import Slope
from tests.audit_helpers import TZ, interval_frame, june_frame, set_at


def one(frame, t, tz=TZ, minutes=60, **kw):
    r = audit(frame, t, tz=tz, interval_minutes=minutes, **kw)
    return r.periods[0] if len(r.periods) == 1 else r


def tan_of(pf: float) -> float:
    return math.tan(math.acos(pf))


# ---------------------------------------------------------------------------------------------
# USA: rounding the PF shortfall up ("each point or fraction thereof")
# ---------------------------------------------------------------------------------------------
CRPUD = {
    "name": "Columbia River PUD schedule 92 on a demand schedule",
    "currency": "USD",
    "pf_rounding": "none",
    "energy": {"price_per_kwh": 0.10},
    "demand": {"price_per_kw": 10.0},  # placeholder: schedule 92 raises the demand of another schedule
    "reactive": [{"kind": "pf_percent", "label": "power_factor", "threshold_pf": 0.95,
                  "percent_per_hundredth": 1.0, "applies_to": ["demand"],
                  "difference_rounding": {"step": 0.01, "mode": "up"}}],
}


def test_usa_crpud_schedule_92_each_point_or_fraction_thereof():
    """Columbia River PUD, Schedule 92 (2011): billing demand goes up one percentage point for
    each percentage point *or fraction thereof* by which the average lagging PF is below 95 %.

    June (tests.audit_helpers.june_frame): PF = 1/sqrt(1.36) = 0.857493, 0.092507 below 0.95,
    a fraction of a point counts whole -> 10 points -> +10 % of the demand charge
    250 kW x 10.00 = 2,500.00 -> 250.00 (not the 231.27 a pro-rata count would give).
    PF 0.945: 0.005 below -> 1 point -> 25.00. PF 0.93: exactly 2 points -> 50.00 (not 3).
    """
    t = tariff_from_dict(CRPUD)
    assert_allclose(one(june_frame(), t).charges["power_factor"], 250.0)
    for pf, expected in ((0.945, 25.0), (0.93, 50.0)):
        f = june_frame()
        f["kvarh_lag"] = tan_of(pf) * f["kwh"]
        assert_allclose(one(f, t).charges["power_factor"], expected)
    assert any("the PF difference rounded up to a whole 0.01 (a part counts as a whole)" in s
               for s in describe_tariff(t))


# ---------------------------------------------------------------------------------------------
# Thailand: kvar and kW to the nearest whole unit, halves discarded
# ---------------------------------------------------------------------------------------------
BKK = "Asia/Bangkok"
MEA = {
    "name": "MEA 5.2.3 Specific Business Service, TOU, below 12 kV",
    "currency": "THB",
    "energy": {"price_per_kwh": 2.6369,
               "windows": [{"name": "on_peak", "days": "weekdays", "hours": [9, 22], "price_per_kwh": 4.3297}]},
    "demand": {"price_per_kw": 0.0, "rounding": {"step": 1, "mode": "half_down"},
               "windows": [{"name": "on_peak", "days": "weekdays", "hours": [9, 22], "price_per_kw": 210.00}]},
    "fixed": {"price_per_period": 312.24},
    "reactive": [{"kind": "kvar_demand", "label": "power_factor_charge", "allowance_ratio": 0.6197,
                  "price_per_kvar": 56.07, "excess_rounding": {"step": 1, "mode": "half_down"}}],
}


def test_thailand_mea_schedule_5_whole_kvar_discarding_half():
    """MEA schedule 5, rate 5.2.3 (below 12 kV): on-peak Monday-Friday 09:00-22:00, energy
    4.3297 on-peak and 2.6369 off-peak per kWh, demand 210.00 per on-peak kW, service 312.24;
    billing demand to the nearest full kW discarding 0.5 kW; a PF charge of 56.07 per kvar of
    the maximum 15-minute kvar above 61.97 % of the maximum 15-minute kW, to the nearest whole
    kvar discarding 0.5 kvar. September 2025 in Bangkok has no public holiday.

    15-minute data, 100 kW / 70 kvar, except Tue 9 Sep 10:00 at 400.5 kW and Sun 14 Sep 03:00
    at 100 kW / 271.68985 kvar. 22 weekdays x 52 on-peak intervals = 1,144.
    Energy on-peak: 1,143 x 25 + 100.125 = 28,675.125 kWh x 4.3297 = 124,154.69;
    off-peak: (2,880 - 1,144) x 25 = 43,400 kWh x 2.6369 = 114,441.46; energy 238,596.15.
    Demand: 400.5 kW -> 400 (half discarded) x 210 = 84,000.00 (half up would bill 401).
    PF: 271.68985 - 0.6197 x 400.5 = 271.68985 - 248.18985 = 23.5 kvar -> 23 x 56.07 = 1,289.61.
    """
    f = interval_frame("2025-09-01", "2025-10-01", minutes=15, tz=BKK, kwh=25.0, kvarh_lag=17.5)
    set_at(f, "2025-09-09 10:00", tz=BKK, kwh=100.125)
    set_at(f, "2025-09-14 03:00", tz=BKK, kvarh_lag=271.68985 / 4)
    p = one(f, tariff_from_dict(MEA), tz=BKK, minutes=15)
    assert_allclose([p.charges["energy"], p.charges["demand"], p.charges["fixed"], p.charges["power_factor_charge"]],
                    [124154.69 + 114441.46, 84000.00, 312.24, 1289.61], atol=0.005)
    lines = describe_tariff(tariff_from_dict(MEA))
    assert any("rounded to the nearest 1 kW, halves discarded" in s for s in lines)
    assert any("the chargeable kvar rounded to the nearest 1 kvar, halves discarded" in s for s in lines)


# ---------------------------------------------------------------------------------------------
# Thailand: minute windows; demand on the excess of one window's peak over another's
# ---------------------------------------------------------------------------------------------
PEA = {
    "name": "PEA time-of-day rate 4.1.3, below 22 kV",
    "currency": "THB",
    "energy": {"price_per_kwh": 2.7160},
    "demand": {"price_per_kw": 0.0, "windows": [
        {"name": "peak", "hours": ["18:30", "21:30"], "price_per_kw": 332.71},
        {"name": "partial", "hours": ["08:00", "18:30"], "price_per_kw": 68.22, "excess_over": "peak"},
    ]},
    "fixed": {"price_per_period": 312.24},
}


def test_thailand_pea_tod_partial_demand_only_above_the_peak_window():
    """PEA time-of-day rate 4.1.3: peak 18:30-21:30 every day at 332.71 per kW; partial
    08:00-18:30 at 68.22 per kW, charged only on the partial-period demand above the peak
    recorded in the peak period; off-peak 21:30-08:00 free; energy 2.7160 per kWh; service
    312.24.

    15-minute data at 50 kW, except (June 2025, Bangkok) 10 Jun 18:15 500 kW (partial, just
    before 18:30), 10 Jun 19:00 300 kW (peak), 10 Jun 21:30 280 kW (off-peak, at the window's
    end), 12 Jun 10:15 420 kW (partial), 14 Jun 22:00 900 kW (off-peak).
    Peak-window peak 300 kW; partial peak 500 kW -> 200 kW above.
    Demand = 300 x 332.71 + 200 x 68.22 = 99,813.00 + 13,644.00 = 113,457.00.
    Energy = (2,880 x 12.5 + (450 + 250 + 230 + 370 + 850) / 4) kWh = 36,537.5 x 2.7160
    = 99,235.85.
    """
    f = interval_frame("2025-06-01", "2025-07-01", minutes=15, tz=BKK, kwh=12.5, kvarh_lag=5.0)
    for when, kw in (("2025-06-10 18:15", 500), ("2025-06-10 19:00", 300), ("2025-06-10 21:30", 280),
                     ("2025-06-12 10:15", 420), ("2025-06-14 22:00", 900)):
        set_at(f, when, tz=BKK, kwh=kw / 4)
    p = one(f, tariff_from_dict(PEA), tz=BKK, minutes=15)
    assert_allclose([p.charges["demand"], p.charges["energy"], p.charges["fixed"]], [113457.00, 99235.85, 312.24])
    lines = describe_tariff(tariff_from_dict(PEA))
    assert any("18:30-21:30" in s and "332.71 THB per kW of its highest kW" in s for s in lines)
    assert any("on the excess of its highest kW over the highest kW of peak" in s for s in lines)


# ---------------------------------------------------------------------------------------------
# Spain: each tariff period on its own, priced by its own PF, one period exempt
# ---------------------------------------------------------------------------------------------
MAD = "Europe/Madrid"
SPAIN = {
    "name": "Spanish access tariff with three periods (reactive term)",
    "currency": "EUR",
    "pf_rounding": "none",
    "energy": {"price_per_kwh": 0.10},
    "reactive": [{
        "kind": "kvarh_banded", "label": "reactive_energy", "tan_phi_limit": 0.33, "per": "window",
        "bands": [{"min_pf": 0.95, "price_per_kvarh": 0.0}, {"min_pf": 0.80, "price_per_kvarh": 0.041554},
                  {"min_pf": 0.0, "price_per_kvarh": 0.062332}],
        # Summer hours of the former three-period access tariff, from memory; period 3 (nights and
        # weekends) is exempt by the decree, so it is simply not listed.
        "windows": [{"name": "P1", "days": "weekdays", "hours": [11, 15], "holidays": "as_weekday"},
                    {"name": "P2", "days": "weekdays", "hours": [8, 11], "holidays": "as_weekday"},
                    {"name": "P2", "days": "weekdays", "hours": [15, 24], "holidays": "as_weekday"}],
    }],
}


def spain_june(p1_kvarh: float):
    f = interval_frame("2025-06-01", "2025-07-01", minutes=60, tz=MAD, kwh=100.0, kvarh_lag=90.0)
    local = f.index.tz_convert(MAD)
    weekday = local.day_of_week < 5
    f.loc[weekday & (local.hour >= 11) & (local.hour < 15), "kvarh_lag"] = p1_kvarh
    f.loc[weekday & (((local.hour >= 8) & (local.hour < 11)) | (local.hour >= 15)), "kvarh_lag"] = 40.0
    return f


def test_spain_reactive_term_per_tariff_period_with_period_3_exempt():
    """Royal Decree 1164/2001 art. 9.3 with the prices of Order ITC/688/2011: in each tariff
    period separately, the reactive energy above 33 % of that period's active energy is billed,
    at 0.041554 EUR/kvarh when that period's cos phi is from 0.80 to below 0.95 and 0.062332
    below 0.80; period 3 of the three-period tariffs is exempt.

    June 2025, hourly 100 kWh; 21 weekdays. P1 (weekdays 11-15, 84 h): 70 kvarh/h, cos phi
    1/sqrt(1.49) = 0.8192: 5,880 - 0.33 x 8,400 = 3,108 kvarh x 0.041554 = 129.149832.
    P2 (weekdays 08-11 and 15-24, 252 h): 40 kvarh/h, cos phi 0.9285: 10,080 - 0.33 x 25,200
    = 1,764 kvarh x 0.041554 = 73.301256. P3 (384 h at 90 kvarh/h, cos phi 0.74): exempt.
    Total 202.451088. The same energies billed over the whole month would give
    (50,520 - 23,760) x 0.041554 = 1,111.98.
    With 80 kvarh/h in P1 (cos phi 0.7809, below 0.80): 6,720 - 2,772 = 3,948 x 0.062332
    = 246.086736, + 73.301256 = 319.387992.
    """
    t = tariff_from_dict(SPAIN)
    assert_allclose(one(spain_june(70.0), t, tz=MAD).charges["reactive_energy"], 202.451088)
    assert_allclose(one(spain_june(80.0), t, tz=MAD).charges["reactive_energy"], 319.387992)
    line = next(s for s in describe_tariff(t) if s.startswith("reactive_energy:"))
    assert "separately in each time band (P1, P2)" in line and "other times exempt" in line


# ---------------------------------------------------------------------------------------------
# India and Malaysia: several slopes in one clause, and an incentive above
# ---------------------------------------------------------------------------------------------
KSEB = {
    "name": "KSEB HT industrial, PF incentive and penalty",
    "currency": "INR",
    "energy": {"price_per_kwh": 6.50},  # placeholder energy rate
    "reactive": [{"kind": "pf_percent", "label": "pf_incentive_penalty", "threshold_pf": 0.95,
                  "percent_per_hundredth": 0.5, "slopes": [{"below_pf": 0.90, "percent_per_hundredth": 1.0}],
                  "applies_to": ["energy"], "rebate_above_pf": 0.95, "rebate_percent_per_hundredth": 0.5}],
}


def test_india_kseb_two_penalty_slopes_and_an_incentive():
    """Kerala State Electricity Board: above 0.95 an incentive of 0.5 % of the energy charge per
    0.01 above 0.95; from 0.95 down to 0.90 a penalty of 0.5 % per 0.01; below 0.90, 1 % per
    0.01 below 0.90 (on top of the 2.5 % of the upper range).

    June: energy 72,150 kWh x 6.50 = 468,975.00. PF 0.8575 -> 0.86: 5 hundredths at 0.5 % +
    4 at 1 % = 6.5 % -> 30,483.375. With kvarh = 0.2 x kWh (PF 0.98): 3 hundredths above 0.95
    -> 1.5 % incentive -> -7,034.625.
    """
    t = tariff_from_dict(KSEB)
    assert_allclose(one(june_frame(), t).charges["pf_incentive_penalty"], 30483.375)
    f = june_frame()
    f["kvarh_lag"] = 0.2 * f["kwh"]
    assert_allclose(one(f, t).charges["pf_incentive_penalty"], -7034.625)


def test_malaysia_tnb_surcharge_against_the_published_examples():
    """Tenaga Nasional Berhad, supplies below 132 kV: 1.5 % of the bill for every 0.01 below PF
    0.85 and 3 % for every 0.01 below 0.75. The published examples on a bill of RM 2,000:
    PF 0.80 -> RM 150; PF 0.75 -> RM 300; PF 0.60 -> RM 300 + (0.75 - 0.60) / 0.01 x 3 % x 2,000
    = RM 1,200 (worked examples of the source, checked here directly).

    A June month with PF 0.71 (kvarh = tan(acos 0.71) x kWh, rounded 0.71) on a bill of energy
    7,215 + demand 2,500 = 9,715: 10 x 1.5 % + 4 x 3 % = 27 % -> 2,623.05.
    """
    slopes = (Slope(0.75, 3.0),)
    got = pf_percent_adjustment(np.array([0.80, 0.75, 0.60]), np.full(3, 2000.0), 0.85, 1.5, slopes=slopes)
    assert_allclose(got, [150.0, 300.0, 1200.0])
    t = tariff_from_dict({
        "name": "TNB PF surcharge", "currency": "MYR", "energy": {"price_per_kwh": 0.10},
        "demand": {"price_per_kw": 10.0},
        "reactive": [{"kind": "pf_percent", "label": "pf_surcharge", "threshold_pf": 0.85, "percent_per_hundredth": 1.5,
                      "slopes": [{"below_pf": 0.75, "percent_per_hundredth": 3.0}], "applies_to": ["energy", "demand"]}],
    })
    f = june_frame()
    f["kvarh_lag"] = tan_of(0.7104) * f["kwh"]
    assert_allclose(one(f, t).charges["pf_surcharge"], 2623.05)
    line = next(s for s in describe_tariff(t) if s.startswith("pf_surcharge:"))
    assert "1.5 % of the energy, demand charges per 0.01 of PF below 0.85, 3 % per 0.01 below 0.75" in line


# ---------------------------------------------------------------------------------------------
# Canada: billing demand is the larger of kW and 90 % of kVA
# ---------------------------------------------------------------------------------------------
HQ = {
    "name": "Hydro-Quebec Rate M (demand part)",
    "currency": "CAD",
    "pf_rounding": "none",
    "energy": {"price_per_kwh": 0.05},
    "demand": {"price_per_kw": 15.00},  # placeholder price
    "reactive": [{"kind": "pf_demand_adjust", "label": "apparent_power", "base_pf": 0.90, "pf": "peak_kva"}],
}


def test_canada_hydro_quebec_rate_m_larger_of_kw_and_90_percent_of_kva():
    """Hydro-Quebec, medium-power Rate M: the maximum power demand billed is the larger of real
    power (kW) and 90 % of apparent power (kVA).

    June: peak kW 250, peak kVA sqrt(250^2 + 150^2) = 291.548 -> 0.9 x 291.548 = 262.393 > 250:
    billing demand 262.393 kW; the apparent-power part (262.393 - 250) x 15 = 185.89.
    When the kVA peak falls elsewhere (an hour of 200 kW / 200 kvar, 282.843 kVA, while the kW
    peak hour has 250 kW / 60 kvar): max(250, 0.9 x 282.843 = 254.558) -> (4.558 x 15) = 68.38.
    With 60 kvar in every hour (peak kVA 257.099, 0.9 x = 231.39 < 250): nothing.
    """
    t = tariff_from_dict(HQ)
    p = one(june_frame(), t)
    assert_allclose(p.charges["apparent_power"], (0.9 * math.hypot(250, 150) - 250) * 15)
    assert_allclose(p.billing_demand, 262.3928353, rtol=1e-9)
    f = june_frame()
    set_at(f, "2025-06-10 10:00", kvarh_lag=60.0)
    set_at(f, "2025-06-20 15:00", kwh=200.0, kvarh_lag=200.0)
    assert_allclose(one(f, t).charges["apparent_power"], (0.9 * math.hypot(200, 200) - 250) * 15)
    set_at(f, "2025-06-20 15:00", kwh=100.0, kvarh_lag=60.0)
    assert one(f, t).charges["apparent_power"] == 0.0
    assert any("the larger of peak kW and 0.9 x peak kVA" in s for s in describe_tariff(t))


# ---------------------------------------------------------------------------------------------
# Brazil: the excess worked out hour by hour, inductive by day and capacitive at night
# ---------------------------------------------------------------------------------------------
SAO = "America/Sao_Paulo"
ANEEL = {
    "name": "Group A reactive excess (ANEEL rules)",
    "currency": "BRL",
    "energy": {"price_per_kwh": 0.50},
    "reactive": [{"kind": "kvarh_excess", "label": "ufer", "reference_pf": 0.92, "price_per_kwh": 0.30,
                  "per": "interval", "block_minutes": 60,
                  "windows": [{"hours": [6, 24], "kvarh": "lag"}, {"hours": [0, 6], "kvarh": "lead"}]}],
}


def test_brazil_aneel_hourly_reactive_excess():
    """ANEEL: reference PF 0.92, evaluated hour by hour; from 06:00 to 24:00 inductive energy
    counts, from 00:00 to 06:00 capacitive; each hour's excess is kWh_h x (0.92 / PF_h - 1)
    (= 0.92 x kVAh_h - kWh_h) when PF_h < 0.92, summed and priced at the energy tariff (0.30
    per kWh here, a placeholder).

    15-minute data, 25 kWh / 10 kvarh lagging per interval: each hour 100 kWh / 40 kvarh,
    PF 0.9285, no excess. 10 June 14:00-15:00: lagging 20, 20, 80, 80 -> the hour has 100 kWh /
    200 kvarh, PF 0.4472: 0.92 x sqrt(50,000) - 100 = 105.718254 kWh. 11 June 02:00-03:00:
    15 kvarh leading per interval -> 100 kWh / 60 kvarh leading, PF 0.8575: 0.92 x
    sqrt(13,600) - 100 = 7.289515 kWh (the night's lagging 40 kvarh does not count; nor does
    leading energy by day). Total 113.007769 kWh x 0.30 = 33.902331.
    Worked per 15-minute interval instead the same hour would give 2 x 4.454 + 2 x 52.110
    = 113.13 kWh: the hour is the unit the rule sets.
    """
    f = interval_frame("2025-06-01", "2025-07-01", minutes=15, tz=SAO, kwh=25.0, kvarh_lag=10.0)
    for mm, lag in (("00", 20.0), ("15", 20.0), ("30", 80.0), ("45", 80.0)):
        set_at(f, f"2025-06-10 14:{mm}", tz=SAO, kvarh_lag=lag)
        set_at(f, f"2025-06-11 02:{mm}", tz=SAO, kvarh_lead=15.0)
        set_at(f, f"2025-06-12 16:{mm}", tz=SAO, kvarh_lead=40.0)  # leading by day: not counted
    t = tariff_from_dict(ANEEL)
    hand = (0.92 * math.sqrt(50_000) - 100) + (0.92 * math.sqrt(13_600) - 100)
    assert_allclose(hand, 113.007769, atol=1e-6)
    assert_allclose(one(f, t, tz=SAO, minutes=15).charges["ufer"], 0.30 * hand)
    line = next(s for s in describe_tariff(t) if s.startswith("ufer:"))
    assert "each 60-minute block of local time" in line and "(leading kvarh)" in line


# ---------------------------------------------------------------------------------------------
# USA: a kvar allowance on the highest kW of the current or previous 11 months
# ---------------------------------------------------------------------------------------------
def test_usa_district_kvar_above_62_percent_of_the_highest_kw_of_12_months():
    """A public utility district's clause (quoted 2004): an additional charge for each kvar of
    the month's maximum 15-minute kvar demand above 62 % of the maximum kW demand of the current
    or previous 11 months. Price 0.50 per kvar (placeholder: not in the quote).

    May: 400 kW peak, 100 kvar. June: 250 kW peak, 200 kvar peak. June's allowance is 0.62 x
    400 = 248 kvar -> nothing (on June's own kW: 200 - 155 = 45 kvar -> 22.50).
    June with a 300 kvar peak: 300 - 248 = 52 kvar -> 26.00. With a stored history of 500 kW
    before May: 0.62 x 500 = 310 -> nothing in June.
    """
    t = tariff_from_dict({"name": "District", "currency": "USD", "energy": {"price_per_kwh": 0.05},
                          "demand": {"price_per_kw": 5.0},
                          "reactive": [{"kind": "kvar_demand", "allowance_ratio": 0.62, "price_per_kvar": 0.50,
                                        "allowance_lookback_periods": 11}]})
    may = interval_frame("2025-05-01", "2025-06-01", kwh=100.0, kvarh_lag=50.0)
    set_at(may, "2025-05-13 10:00", kwh=400.0, kvarh_lag=100.0)
    june = interval_frame("2025-06-01", "2025-07-01", kwh=100.0, kvarh_lag=50.0)
    set_at(june, "2025-06-10 10:00", kwh=250.0, kvarh_lag=200.0)
    frame = may.combine_first(june)
    r = one(frame, t)
    assert_allclose([p.charges["kvar_demand"] for p in r.periods], [0.0, 0.0])
    set_at(frame, "2025-06-10 10:00", kvarh_lag=300.0)
    r = one(frame, t)
    assert_allclose([p.charges["kvar_demand"] for p in r.periods], [0.0, 26.0])
    r = one(frame, t, history_peak_kw=[500.0])
    assert_allclose([p.charges["kvar_demand"] for p in r.periods], [0.0, 0.0])
    own = tariff_from_dict({"name": "Own", "currency": "USD", "energy": {"price_per_kwh": 0.05},
                            "reactive": [{"kind": "kvar_demand", "allowance_ratio": 0.62, "price_per_kvar": 0.50}]})
    set_at(frame, "2025-06-10 10:00", kvarh_lag=200.0)
    assert_allclose(one(frame, own).periods[1].charges["kvar_demand"], 22.50)
    assert any("above 0.62 x the highest kW of this and the previous 11 billing periods" in s
               for s in describe_tariff(t))


# ---------------------------------------------------------------------------------------------
# USA: billing demand at 93 % PF, the increase limited to 10 %
# ---------------------------------------------------------------------------------------------
CHICAGO = "America/Chicago"
NORRIS = {
    "name": "Norris PPD irrigation, Rate Schedule 13 (demand part)",
    "currency": "USD",
    "pf_rounding": 3,  # the newsletter states PFs to three decimals (.871, .846)
    "energy": {"price_per_kwh": 0.05},  # placeholder: the example concerns the demand charge only
    "demand": {"price_per_kw": 23.80},  # Schedule 13's annual demand charge per kW (newsletter)
    "reactive": [{"kind": "pf_demand_adjust", "label": "pf_adjustment", "base_pf": 0.93, "pf": "at_peak",
                  "max_increase_percent": 10, "adjusted_rounding": {"step": 0.01}}],
}


def norris_month(pf_at_peak: float):
    """July 2025 in 15-minute intervals at 30 kW and PF 0.70 (the month's PF does not count), with
    the season's 15-minute peak of 51.09 kW on 15 July at 14:00 at the given PF."""
    f = interval_frame("2025-07-01", "2025-08-01", minutes=15, tz=CHICAGO, kwh=7.5, kvarh_lag=7.5 * tan_of(0.70))
    return set_at(f, "2025-07-15 14:00", tz=CHICAGO, kwh=51.09 / 4, kvarh_lag=51.09 * tan_of(pf_at_peak) / 4)


def test_usa_norris_ppd_demand_at_93_percent_pf_capped_at_10_percent():
    """Norris Public Power District, irrigation services: when the PF measured in the billing
    demand interval is below 93 %, billing demand = recorded demand x 0.93 / PF, the increase
    limited to 10 %. The newsletter's example on Rate Schedule 13 (23.80 per kW): 51.09 kW at
    PF .871 -> 54.55 kW; 51.09 x 23.80 = 1,215.94 becomes 54.55 x 23.80 = 1,298.29, an increase of
    82.35. Unrounded the adjusted demand is 54.550746 kW (82.37 more); the example bills it to
    the hundredth of a kW, so the clause rounds the adjusted demand to 0.01 kW (the direction is
    not stated; half up and down agree here).

    Here the month's other intervals run at PF 0.70: only the PF of the peak interval counts.
    PF .80 at the peak: 0.93 / 0.80 = 1.1625, limited to 1.10 -> 56.199 -> 56.20 kW:
    (56.20 - 51.09) x 23.80 = 121.618. (The newsletter's shortcut, entering .846 for any lower
    PF, gives 51.09 x 0.93 / 0.846 = 56.16 kW, 9.93 % more: the clause says 10 %.)
    PF .930 at the peak: nothing, although the month's PF is 0.70.
    """
    t = tariff_from_dict(NORRIS)
    p = one(norris_month(0.871), t, tz=CHICAGO, minutes=15)
    assert_allclose([p.charges["demand"], p.charges["pf_adjustment"]], [1215.942, 82.348], atol=1e-9)
    assert_allclose(p.billing_demand, 54.55)
    assert round(p.charges["demand"], 2) == 1215.94
    assert round(p.charges["demand"] + p.charges["pf_adjustment"], 2) == 1298.29
    assert_allclose(one(norris_month(0.80), t, tz=CHICAGO, minutes=15).charges["pf_adjustment"], 121.618)
    assert one(norris_month(0.93), t, tz=CHICAGO, minutes=15).charges["pf_adjustment"] == 0.0
    line = next(s for s in describe_tariff(t) if s.startswith("pf_adjustment:"))
    assert line == ("pf_adjustment: when the PF at the kW peak is below 0.93, billing demand is peak kW x 0.93 / PF, "
                    "at most 10 % above peak kW; the adjusted demand rounded to the nearest 0.01 kW, halves up.")


# ---------------------------------------------------------------------------------------------
# Portugal: tiers of tan phi, each priced at its own multiple of the reference price
# ---------------------------------------------------------------------------------------------
LISBON = "Europe/Lisbon"
REF = 0.0300  # placeholder reference price of inductive reactive energy, EUR/kvarh
# Daily-cycle off-peak (vazio) 22:00-08:00, from memory; inductive energy counts outside it.
FORA_DE_VAZIO = [{"name": "fora de vazio", "hours": [8, 22]}]
ERSE_TIERS = {"kind": "kvarh_excess", "label": "energia_reativa", "tan_phi_limit": 0.3,
              "price_per_kvarh": round(0.33 * REF, 6),
              "tiers": [{"above_tan_phi": 0.4, "price_per_kvarh": 1.0 * REF},
                        {"above_tan_phi": 0.5, "price_per_kvarh": 3.0 * REF}],
              "windows": FORA_DE_VAZIO}


def erse(clause: dict) -> dict:
    return {"name": "Portuguese access tariff, inductive reactive energy", "currency": "EUR",
            "energy": {"price_per_kwh": 0.10},  # placeholder
            "reactive": [clause]}


def lisbon_june(fora_kvarh, vazio_kvarh: float = 40.0):
    """June 2025, hourly: 100 kWh per hour outside the off-peak hours (08-22, 420 h), 50 kWh per
    off-peak hour (300 h) with ``vazio_kvarh`` lagging; ``fora_kvarh`` per off-peak-free hour, or
    a function of the local day giving it."""
    f = interval_frame("2025-06-01", "2025-07-01", minutes=60, tz=LISBON, kwh=50.0, kvarh_lag=vazio_kvarh)
    local = f.index.tz_convert(LISBON)
    fora = (local.hour >= 8) & (local.hour < 22)
    f.loc[fora, "kwh"] = 100.0
    f.loc[fora, "kvarh_lag"] = fora_kvarh(local.day[fora]) if callable(fora_kvarh) else fora_kvarh
    return f


def test_portugal_erse_reactive_energy_tiers_by_tan_phi():
    """ERSE (Despachos 7253/2010 and 10/2010): inductive reactive energy outside the off-peak
    hours is billed by tiers of tan phi = kvarh / kWh: from 0.3 to 0.4 at 0.33 x the reference
    price, from 0.4 to 0.5 at 1 x, from 0.5 up at 3 x. That each tier's share of the kvarh is
    priced at its own factor (marginal tiers) is from memory of the despacho; the sources read
    give the tiers and factors only. Before 2011 only the kvarh above 0.4 x kWh was billed, at 1 x
    (gestorvirtualenergia.com).

    June 2025 (monthly integration, as for special low-voltage customers): outside the
    off-peak hours 420 h x 100 kWh = 42,000 kWh and 420 x 60 = 25,200 kvarh (tan phi 0.6);
    off-peak 300 h x 50 kWh with 40 kvarh (tan phi 0.8, not counted).
    0.3-0.4: 4,200 kvarh x 0.0099 = 41.58; 0.4-0.5: 4,200 x 0.03 = 126.00; above 0.5:
    25,200 - 21,000 = 4,200 x 0.09 = 378.00. Total 545.58 (the whole excess 12,600 kvarh at the
    top factor would be 1,134.00; the pre-2011 rule 4,200 + 4,200 = 8,400 x 0.03 = 252.00).
    """
    t = tariff_from_dict(erse(ERSE_TIERS))
    assert_allclose(one(lisbon_june(60.0), t, tz=LISBON).charges["energia_reativa"], 545.58)
    old = tariff_from_dict(erse({"kind": "kvarh_excess", "label": "energia_reativa", "tan_phi_limit": 0.4,
                                 "price_per_kvarh": REF, "windows": FORA_DE_VAZIO}))
    assert_allclose(one(lisbon_june(60.0), old, tz=LISBON).charges["energia_reativa"], 252.00)
    line = next(s for s in describe_tariff(t) if s.startswith("energia_reativa:"))
    assert ("0.0099 EUR per kvarh of lagging kvarh above 0.3 x kWh (tan phi 0.3) up to 0.4 x kWh, 0.03 EUR per kvarh "
            "above 0.4 x kWh up to 0.5 x kWh, 0.09 EUR per kvarh above 0.5 x kWh counted fora de vazio every day "
            "08:00-22:00 local time") in line


def test_portugal_erse_daily_integration_for_medium_voltage():
    """EDP Servico Universal's FAQ announces, from 2012, a daily integration period for MAT, AT
    and MT customers: the tiers are worked out on each day's energy outside the off-peak hours
    and summed (whether and when it took effect is not stated in the sources read).

    June 2025, outside the off-peak hours 1,400 kWh a day; 490 kvarh a day (tan phi 0.35) on
    1-29 June, 1,400 kvarh (tan phi 1.0) on 30 June. Daily: 29 x 0.05 x 1,400 = 2,030 kvarh plus
    140 in the first tier on 30 June = 2,170 x 0.0099 = 21.483; 140 x 0.03 = 4.20;
    (1.0 - 0.5) x 1,400 = 700 x 0.09 = 63.00. Total 88.683. Over the month the same energies give
    tan phi 15,610 / 42,000 = 0.3717: 15,610 - 12,600 = 3,010 x 0.0099 = 29.799.
    """
    month = lisbon_june(lambda day: np.where(day == 30, 1400.0 / 14, 490.0 / 14))
    daily = tariff_from_dict(erse(dict(ERSE_TIERS, per="interval", block_minutes=1440)))
    assert_allclose(one(month, daily, tz=LISBON).charges["energia_reativa"], 88.683)
    assert_allclose(one(month, tariff_from_dict(erse(ERSE_TIERS)), tz=LISBON).charges["energia_reativa"], 29.799)
    line = next(s for s in describe_tariff(daily) if s.startswith("energia_reativa:"))
    assert line.endswith("worked out for each local day and summed over the period.")


# ---------------------------------------------------------------------------------------------
# United Kingdom: the excess worked out in every half-hour, import or export reactive energy
# ---------------------------------------------------------------------------------------------
LONDON = "Europe/London"
UK = {
    "name": "Distribution use of system, half-hourly metered (excess reactive power)",
    "currency": "GBP",
    "energy": {"price_per_kwh": 0.03},  # placeholder unit rate
    "reactive": [{"kind": "kvarh_excess", "label": "excess_reactive_power", "tan_phi_limit": 0.33,
                  "price_per_kvarh": 0.0025,  # placeholder: statements publish a p/kVArh rate per tariff
                  "kvarh": "max_lag_lead", "per": "interval", "block_minutes": 30}],
}


def test_uk_excess_reactive_power_each_half_hour_import_or_export():
    """The common methodology's excess reactive power charge: in each half-hour the reactive
    energy above 33 % of the active energy imported is chargeable, and the half-hours are
    summed. The reactive energy of a half-hour is the larger of the reactive import and the
    reactive export (from memory of the methodology's formula, max(RI, RE) - 0.33 x AI; the
    sources read state the 33 % and the half-hourly assessment).

    June 2025, 1,440 half-hours of 50 kWh and 10 kvarh lagging, except weekdays 09:00-17:00
    (21 days x 16 = 336 half-hours) at 25 kvarh lagging: 25 - 16.5 = 8.5 each -> 2,856; and
    every night 00:00-06:00 (30 x 12 = 360 half-hours) at 20 kWh with 5 kvarh lagging and
    20 kvarh leading (capacitors left on): 20 - 6.6 = 13.4 each -> 4,824. Total 7,680 kvarh x
    0.0025 = 19.20. Netted over the month nothing is due: kWh 744 x 50 + 336 x 50 + 360 x 20
    = 61,200, allowance 20,196; lagging 7,440 + 8,400 + 1,800 = 17,640, leading 7,200. Counting
    lagging energy only, half-hour by half-hour: 2,856 x 0.0025 = 7.14.
    """
    f = interval_frame("2025-06-01", "2025-07-01", minutes=30, tz=LONDON, kwh=50.0, kvarh_lag=10.0)
    local = f.index.tz_convert(LONDON)
    hour = local.hour
    f.loc[(local.day_of_week < 5) & (hour >= 9) & (hour < 17), "kvarh_lag"] = 25.0
    night = hour < 6
    f.loc[night, ["kwh", "kvarh_lag", "kvarh_lead"]] = [20.0, 5.0, 20.0]
    t = tariff_from_dict(UK)
    assert_allclose(one(f, t, tz=LONDON, minutes=30).charges["excess_reactive_power"], 19.20)
    clause = dict(UK["reactive"][0])
    monthly = tariff_from_dict(dict(UK, reactive=[{k: v for k, v in clause.items() if k not in ("per", "block_minutes")}]))
    assert one(f, monthly, tz=LONDON, minutes=30).charges["excess_reactive_power"] == 0.0
    lag_only = tariff_from_dict(dict(UK, reactive=[dict(clause, kvarh="lag")]))
    assert_allclose(one(f, lag_only, tz=LONDON, minutes=30).charges["excess_reactive_power"], 7.14)
    line = next(s for s in describe_tariff(t) if s.startswith("excess_reactive_power:"))
    assert "the larger of lagging and leading kvarh above 0.33 x kWh" in line
    assert "each 30-minute block of local time" in line
