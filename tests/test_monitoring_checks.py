"""The pure monitoring layer: day summaries, pricing from them, and every check, on the demo
data (with planted faults) and on generated data whose answer is known in advance."""
from __future__ import annotations

import math
from datetime import date

import numpy as np
import pandas as pd
import pytest
from monitoring_helpers import (
    AS_OF,
    METERS,
    STEP_DAY,
    STEP_KVAR,
    STOP_AT,
    TZ,
    demo_frames,
    long_frame,
    planted_frames,
    weekdays_without_holidays,
)

from auditor.audit import audit
from auditor.monitoring import (
    Anchor,
    CheckSettings,
    TariffPlan,
    build_panel,
    correction_loss,
    data_quality,
    data_stopped,
    leading_at_light_load,
    multiplier_change,
    project_periods,
    projected_charge,
    run_checks,
    summarise_days,
)
from auditor.quantities import BillingPeriod
from auditor.services.alerts import WINDOW_DAYS, clause_facts
from auditor.tariffs import EXAMPLES_DIR, load_tariff

TARIFF = load_tariff(EXAMPLES_DIR / "harrowgate_industrial_tou.toml")


def plan_of(tariff=TARIFF, billing_day=None) -> TariffPlan:
    thresholds, leading = clause_facts(tariff)
    return TariffPlan(tariff, billing_day, thresholds, leading)


def panel_of(frames, as_of, meters=METERS, days=WINDOW_DAYS, minutes=None, tzs=None):
    long = long_frame(frames, meters)
    long = long[long["start"] < int(as_of.timestamp())]
    tzs = tzs or [TZ] * len(meters)
    minutes = minutes or [15] * len(meters)
    return build_panel(summarise_days(long, tzs, minutes), list(meters), tzs, minutes, as_of, days)


@pytest.fixture(scope="module")
def demo():
    return demo_frames()


@pytest.fixture(scope="module")
def clean_days(demo):
    """Day summaries of the whole clean demo year."""
    return summarise_days(long_frame(demo), [TZ] * 3, [15] * 3)


# --------------------------------------------------------------------------------------------
# day summaries
# --------------------------------------------------------------------------------------------
def _random_meter(start, end, tz, minutes, seed):
    idx = pd.date_range(pd.Timestamp(start, tz=tz), pd.Timestamp(end, tz=tz), freq=f"{minutes}min", inclusive="left")
    rng = np.random.default_rng(seed)
    n = len(idx)
    kwh = rng.uniform(1, 50, n)
    lag = kwh * rng.uniform(0.0, 0.9, n)
    lead = np.where(rng.uniform(size=n) < 0.2, rng.uniform(0, 20, n), 0.0)
    est = rng.uniform(size=n) < 0.05
    return pd.DataFrame({"start_utc": idx.tz_convert("UTC"), "kwh": kwh, "kvarh_lag": lag, "kvarh_lead": lead,
                         "flag": np.where(est, "E", "A")})


def test_day_summaries_match_a_plain_groupby():
    """Every column against a per-group pandas computation, in two zones across their spring
    DST days (Berlin 30 March: 23 local hours = 92 quarter hours; New York 9 March: 46 half
    hours — the DST rules of the IANA time zone database)."""
    frames = {"A": _random_meter("2025-03-27", "2025-04-02", "Europe/Berlin", 15, 1),
              "B": _random_meter("2025-03-07", "2025-03-12", "America/New_York", 30, 2)}
    frames["A"] = frames["A"].drop(index=frames["A"].index[100:130])  # a gap
    tzs, minutes = ["Europe/Berlin", "America/New_York"], [15, 30]
    ds = summarise_days(long_frame(frames, ("A", "B")), tzs, minutes)
    got = pd.DataFrame({"meter": ds.meter, "day": ds.day.astype(str), **ds.columns}).set_index(["meter", "day"])
    for code, key in enumerate(("A", "B")):
        f = frames[key].copy()
        local = f["start_utc"].dt.tz_convert(tzs[code])
        f["day"] = local.dt.strftime("%Y-%m-%d")
        f["hour"] = local.dt.hour
        h = minutes[code] / 60
        f["kw"], f["kvar"], f["net"] = f["kwh"] / h, f["kvarh_lag"] / h, (f["kvarh_lag"] - f["kvarh_lead"]) / h
        for day, g in f.groupby("day"):
            row = got.loc[(code, day)]
            assert row["intervals"] == len(g)
            assert row["estimated"] == int((g["flag"] == "E").sum())
            for col, ref in (("kwh", g["kwh"].sum()), ("kvarh_lag", g["kvarh_lag"].sum()),
                             ("kvarh_lead", g["kvarh_lead"].sum()), ("kw_kvar_sum", (g["kw"] * g["kvar"]).sum()),
                             ("peak_kw", g["kw"].max()), ("peak_kvar", g["kvar"].max()),
                             ("peak_kva", np.hypot(g["kw"], g["net"]).max())):
                assert row[col] == pytest.approx(ref, rel=1e-12), (key, day, col)
            at = g["kw"].idxmax()
            assert row["peak_kw_kvar_net"] == pytest.approx(g.loc[at, "net"])
            light = g.nsmallest(max(1, len(g) // 4), "kw")
            assert row["light_intervals"] == len(light)
            assert row["light_leading"] == int((light["net"] < 0).sum())
            assert row["light_kvar_net_sum"] == pytest.approx(light["net"].sum())
        hourly = pd.DataFrame(ds.hourly[ds.meter == code][:, 0, :])
        assert hourly.sum(axis=1).to_numpy() == pytest.approx(got.loc[code]["kwh"].to_numpy())
    assert got.loc[(0, "2025-03-30"), "expected"] == 92
    assert got.loc[(0, "2025-03-29"), "expected"] == 96
    assert got.loc[(1, "2025-03-09"), "expected"] == 46
    assert got.loc[(1, "2025-03-10"), "expected"] == 48


# --------------------------------------------------------------------------------------------
# the open billing period: so far and projected, against the audit of the interval data
# --------------------------------------------------------------------------------------------
def _weekly_periodic(start: str, end: str, seed=7, scale_from=None, scale=1.0):
    """Quarter hours that repeat exactly every week (a random week, PF about 0.8), optionally
    with lagging kvarh scaled from a moment on."""
    idx = pd.date_range(pd.Timestamp(start, tz=TZ), pd.Timestamp(end, tz=TZ), freq="15min", inclusive="left")
    rng = np.random.default_rng(seed)
    week_kwh = rng.uniform(40, 120, 7 * 96)
    week_lag = week_kwh * rng.uniform(0.6, 0.9, 7 * 96)
    slot = (idx.day_of_week * 96 + idx.hour * 4 + idx.minute // 15).to_numpy()
    lag = week_lag[slot].copy()
    if scale_from is not None:
        lag[idx >= pd.Timestamp(scale_from, tz=TZ)] *= scale
    return pd.DataFrame({"start_utc": idx.tz_convert("UTC"), "kwh": week_kwh[slot], "kvarh_lag": lag,
                         "kvarh_lead": 0.0})


def _interval_frame(df):
    f = df.set_index(pd.DatetimeIndex(df["start_utc"], name="start"))[["kwh", "kvarh_lag", "kvarh_lead"]]
    f["estimated"] = False
    return f


def test_projection_of_repeating_weeks_is_the_audit_of_the_whole_period():
    """With weeks that repeat exactly, the weekday-and-hour profile is the future, so the
    projection must equal the audit of the whole month computed from its intervals by the audit
    engine; the part so far must equal the audit of the month to date."""
    full = _weekly_periodic("2025-04-07", "2025-07-01")  # June 2025 has two Bavarian holidays
    as_of = pd.Timestamp("2025-06-18T00:00", tz=TZ)
    panel = panel_of({"M": full}, as_of, meters=("M",))
    (p,) = project_periods(panel, [plan_of()])
    june = [BillingPeriod(date(2025, 6, 1), date(2025, 7, 1))]
    whole = audit(_interval_frame(full), TARIFF, tz=TZ, interval_minutes=15, periods=june).periods[0]
    part = audit(_interval_frame(full[full["start_utc"] < as_of]), TARIFF, tz=TZ, interval_minutes=15,
                 periods=june).periods[0]
    assert p.period == june[0]
    for key, value in whole.charges.items():
        assert p.projected[key] == pytest.approx(value, abs=0.011), key
    for key, value in part.charges.items():
        assert p.so_far[key] == pytest.approx(value, abs=0.011), key
    assert p.projected["total"] == pytest.approx(whole.total, abs=0.02)
    assert p.projected["billing_pf"] == pytest.approx(whole.billing_pf, abs=1e-4)
    # the period before is May, as it happened
    may = audit(_interval_frame(full), TARIFF, tz=TZ, interval_minutes=15,
                periods=[BillingPeriod(date(2025, 5, 1), date(2025, 6, 1))]).periods[0]
    assert p.before["reactive_total"] == pytest.approx(may.reactive_total, abs=0.011)
    assert p.previous_coverage == 1.0


def test_projected_charge_alert_when_the_month_runs_into_more_reactive_charge():
    """Lagging kvarh half as much again from 9 June: the projection raises the reactive charge,
    the alert names the period and its money is the increase per month."""
    full = _weekly_periodic("2025-04-07", "2025-07-01", scale_from="2025-06-09", scale=1.5)
    as_of = pd.Timestamp("2025-06-18T00:00", tz=TZ)
    panel = panel_of({"M": full}, as_of, meters=("M",))
    ev = projected_charge(panel, [plan_of()])
    assert ev.evaluated.tolist() == [True]
    (f,) = ev.findings
    assert f.kind == "projected_charge" and f.cause == "2025-06"
    assert f.since == pd.Timestamp("2025-06-01", tz=TZ)
    fig = f.figures
    increase = fig["projected"]["reactive_total"] - fig["reactive_at_previous_rate"]
    assert increase > 0.1 * fig["reactive_at_previous_rate"]
    assert f.money_per_month == pytest.approx(increase * (365.25 / 12) / 30, abs=0.02)
    assert {t["key"] for t in fig["thresholds"]} == {"reactive_daytime"}
    # a month with no change raises nothing
    quiet = panel_of({"M": _weekly_periodic("2025-04-07", "2025-07-01")}, as_of, meters=("M",))
    assert projected_charge(quiet, [plan_of()]).findings == []


# --------------------------------------------------------------------------------------------
# the planted case
# --------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def planted_panel():
    return panel_of(planted_frames(), AS_OF)


def test_failed_step_is_dated_and_priced(planted_panel):
    """A 40 kvar step from 15 September: found on KQ-MAIN only, dated that day, sized within
    5 %, priced within 5 % of the clause's own formula worked by hand.

    Harrowgate's ``reactive_daytime`` clause charges price x max(0, kvarh - 0.4 kWh) over the
    weekday 06-22 window (excess-kvarh mechanism, common practice). KQ-MAIN runs at PF about 0.8
    (tan phi about 0.75, always above 0.4), so every extra kvarh in the window is charged:
    money a month = price x 40 kvar x 16 h x weekdays of a month, the weekdays being those of
    the four weeks before the step (no public holiday among them) stretched to 365.25 / 12 days.
    """
    ev = correction_loss(planted_panel, CheckSettings(), [plan_of()] * 3)
    assert [f.meter for f in ev.findings] == ["KQ-MAIN"]
    f = ev.findings[0]
    assert f.since == STEP_DAY
    assert f.figures["first_day"] == "2025-09-15"
    assert f.figures["step_kvar"] == pytest.approx(STEP_KVAR, rel=0.05)
    clause = next(m for m in TARIFF.reactive if m.label == "reactive_daytime")
    weekdays = weekdays_without_holidays(STEP_DAY - pd.Timedelta(days=28), 28)
    assert weekdays == 20
    by_hand = clause.price_per_kvarh * STEP_KVAR * 16 * weekdays * (365.25 / 12) / 28
    assert f.money_per_month == pytest.approx(by_hand, rel=0.05)
    assert f.currency == "EUR" and f.severity == "warning"
    assert "40 kvar" in f.message or "39 kvar" in f.message or "38 kvar" in f.message


def test_stopped_meter_is_dated_to_its_last_interval(planted_panel):
    ev = data_stopped(planted_panel)
    assert [f.meter for f in ev.findings] == ["KQ-DOCKS"]
    f = ev.findings[0]
    assert f.since == STOP_AT
    assert f.figures["hours_without_data"] == pytest.approx((AS_OF - STOP_AT) / pd.Timedelta(hours=1))
    assert f.severity == "critical" and f.money_per_month is None
    # 36 h is the default; a longer limit keeps quiet
    assert data_stopped(planted_panel, CheckSettings(stale_hours=200)).findings == []


def test_an_archive_is_not_a_stopped_meter():
    """Data that ended more than ``watch_days`` before the check is an archive being imported
    (a consultant's year of exports), not a meter that stopped: not judged, so neither raised
    nor resolved; within the window the same silence is an alert."""
    later = AS_OF + pd.Timedelta(days=45)
    panel = panel_of(planted_frames(), later)
    ev = data_stopped(panel)
    assert ev.findings == [] and not ev.evaluated.any()
    ev = data_stopped(panel, CheckSettings(watch_days=60))
    assert sorted(f.meter for f in ev.findings) == ["AR-01", "KQ-DOCKS", "KQ-MAIN"]


def test_every_check_on_the_planted_case(planted_panel):
    found = {(f.meter, f.kind) for e in run_checks(planted_panel, [plan_of()] * 3) for f in e.findings}
    assert ("KQ-MAIN", "correction_loss") in found and ("KQ-DOCKS", "data_stopped") in found
    # the stopped meter's missing days are its data_stopped alert, not a data-quality one
    assert ("KQ-DOCKS", "data_quality") not in found
    assert not {k for _, k in found} & {"multiplier_change", "leading_at_light_load"}


def test_an_open_alert_keeps_its_cause_past_the_baseline_window():
    """Fifty days on, the step is inside any four-week baseline: found afresh it is not, but the
    open alert, judged against the weeks before its own first day, is still confirmed."""
    as_of = STEP_DAY + pd.Timedelta(days=50)
    panel = panel_of(planted_frames(as_of), as_of, days=50 + 28 + 2)  # the service widens the window so
    assert correction_loss(panel, CheckSettings(), [plan_of()] * 3).findings == []
    anchor = Anchor(0, "correction_loss", np.datetime64("2025-09-15"))
    (f,) = correction_loss(panel, CheckSettings(), [plan_of()] * 3, [anchor]).findings
    assert f.since == STEP_DAY and f.figures["step_kvar"] == pytest.approx(STEP_KVAR, rel=0.08)


def test_clean_demo_year_raises_no_fault(clean_days):
    """Every third day from March to December on the unplanted demo data: no failed step, no
    bank stuck on, no multiplier change (the office block is leading at light load all year,
    which is not new)."""
    tzs, minutes = [TZ] * 3, [15] * 3
    plans = [plan_of()] * 3
    for as_of in pd.date_range("2025-03-01T03:00", "2025-12-31T03:00", freq="3D", tz=TZ):
        panel = build_panel(clean_days, list(METERS), tzs, minutes, as_of, WINDOW_DAYS)
        for check in (correction_loss, leading_at_light_load, multiplier_change):
            found = check(panel, CheckSettings(), plans).findings
            assert found == [], (as_of, [f.message for f in found])


# --------------------------------------------------------------------------------------------
# other planted faults
# --------------------------------------------------------------------------------------------
def test_multiplier_change_found_dated_and_its_money_is_the_scaled_bill(demo):
    frames = {m: df.copy() for m, df in demo.items()}
    docks = frames["KQ-DOCKS"]
    sel = docks["start_utc"] >= pd.Timestamp("2025-06-10", tz=TZ)
    docks.loc[sel, ["kwh", "kvarh_lag", "kvarh_lead"]] *= 1.5
    for as_of in ("2025-06-13T03:00", "2025-06-20T03:00"):
        panel = panel_of(frames, pd.Timestamp(as_of, tz=TZ))
        ev = multiplier_change(panel, CheckSettings(), [plan_of()] * 3)
        assert [f.meter for f in ev.findings] == ["KQ-DOCKS"], as_of
        f = ev.findings[0]
        assert f.since == pd.Timestamp("2025-06-10", tz=TZ)
        assert f.figures["ratio"] == pytest.approx(1.5, rel=0.01)
        # every clause of this tariff is proportional to the quantities (energy, peak demand,
        # excess and leading kvarh), so the bill moves by (r - 1) x (total - fixed charge)
        r = f.figures["ratio"]
        before, after = f.figures["month_total_before"], f.figures["month_total_after"]
        assert after - before == pytest.approx((r - 1) * (before - TARIFF.fixed_per_period), rel=1e-3)
        assert f.money_per_month == pytest.approx(after - before, abs=0.02)
    # two months on, the open alert is still confirmed from its own first day
    panel = panel_of(frames, pd.Timestamp("2025-08-10T03:00", tz=TZ), days=61 + 28 + 2)
    assert multiplier_change(panel, CheckSettings(), [plan_of()] * 3).findings == []
    anchor = Anchor(1, "multiplier_change", np.datetime64("2025-06-10"))
    (f,) = multiplier_change(panel, CheckSettings(), [plan_of()] * 3, [anchor]).findings
    assert f.figures["ratio"] == pytest.approx(1.5, rel=0.02)


def test_bank_stuck_on_at_light_load(demo):
    """A 300 kvar bank left on from 12 May on the cold store's incomer: its light load turns
    leading; the kvar left on is estimated within 10 %; the leading clause charges for it."""
    frames = {m: df.copy() for m, df in demo.items()}
    main = frames["KQ-MAIN"]
    sel = main["start_utc"] >= pd.Timestamp("2025-05-12", tz=TZ)
    net = main.loc[sel, "kvarh_lag"] - main.loc[sel, "kvarh_lead"] - 300 * 0.25
    main.loc[sel, "kvarh_lag"] = net.clip(lower=0)
    main.loc[sel, "kvarh_lead"] = (-net).clip(lower=0)
    panel = panel_of(frames, pd.Timestamp("2025-05-20T03:00", tz=TZ))
    ev = leading_at_light_load(panel, CheckSettings(), [plan_of()] * 3)
    assert [f.meter for f in ev.findings] == ["KQ-MAIN"]
    f = ev.findings[0]
    assert f.since == pd.Timestamp("2025-05-12", tz=TZ)
    assert f.figures["kvar_left_on"] == pytest.approx(300, rel=0.1)
    assert f.figures["leading_share"] >= 0.5 and f.figures["leading_share_before"] <= 0.2
    assert f.money_per_month > 0 and f.figures["leading_clauses"] == ["leading_kvarh"]
    # without a leading clause there is nothing to pay, and the message says so
    tidewater = load_tariff(EXAMPLES_DIR / "tidewater_banded_kva.toml")
    g = leading_at_light_load(panel, CheckSettings(), [plan_of(tidewater)] * 3).findings[0]
    assert g.money_per_month == 0 and "does not charge leading energy" in g.message


def test_rising_missing_and_estimated_data(demo):
    """The demo's March communication fault (two days of flat estimates in the unrevised file)
    and its lost day in October are found; a quiet week is not."""
    tzs, minutes = [TZ] * 3, [15] * 3
    ds = summarise_days(long_frame(demo), tzs, minutes)
    found = data_quality(build_panel(ds, list(METERS), tzs, minutes, pd.Timestamp("2025-03-14T03:00", tz=TZ), WINDOW_DAYS))
    (f,) = found.findings
    assert f.meter == "KQ-MAIN" and f.since == pd.Timestamp("2025-03-11", tz=TZ)
    assert f.figures["estimated_intervals"] == 192 and f.figures["missing_intervals"] == 0
    found = data_quality(build_panel(ds, list(METERS), tzs, minutes, pd.Timestamp("2025-10-10T03:00", tz=TZ), WINDOW_DAYS))
    (f,) = found.findings
    assert f.since == pd.Timestamp("2025-10-08", tz=TZ) and f.figures["missing_intervals"] == 96
    quiet = build_panel(ds, list(METERS), tzs, minutes, pd.Timestamp("2025-09-10T03:00", tz=TZ), WINDOW_DAYS)
    assert data_quality(quiet).findings == []


def test_meters_without_enough_history_are_not_judged():
    frames = {"M": _weekly_periodic("2025-06-01", "2025-06-10")}
    panel = panel_of(frames, pd.Timestamp("2025-06-10T03:00", tz=TZ), meters=("M",))
    for e in run_checks(panel, [plan_of()]):
        if e.kind != "data_stopped":
            assert not e.evaluated.any(), e.kind
        assert e.findings == []


def test_settings_are_plain_numbers():
    s = CheckSettings()
    assert all(isinstance(v, int | float) and math.isfinite(v) for v in s.to_dict().values())
