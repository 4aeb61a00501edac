"""Alerts in the store: raised once per cause, updated, seen, resolved, re-opened; day summaries
kept in step with imports, revisions and multipliers; each meter's own tariff. On SQLite and
PostgreSQL."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from monitoring_helpers import AS_OF, STEP_DAY, STEP_KVAR, STOP_AT, TZ, read_demo, write_planted
from sqlalchemy import select

from auditor.errors import NotFoundError, ProfileError, TariffError, UsageError
from auditor.ingest.pipeline import ImportOptions
from auditor.monitoring import DaySummaries
from auditor.services.alerts import (
    alert_counts,
    evaluate,
    list_alerts,
    mark_seen,
    rebuild_day_summaries,
)
from auditor.services.audit import audit_meter
from auditor.services.demo import demo_dir
from auditor.services.ingest import import_files
from auditor.services.meter_tariff import (
    clear_meter_tariff,
    meter_tariff,
    meter_tariffs,
    set_meter_tariff,
)
from auditor.services.meters import load_sites_file, set_multiplier
from auditor.store.models import MonitorDay, MonitorRun

KQ = "Kestrel Quay Cold Store"


def _load(store, tmp_path, as_of=AS_OF):
    load_sites_file(store, demo_dir() / "sites.toml")
    for p in write_planted(tmp_path, as_of):
        site = "Alder Row Offices" if "alder" in p.name else KQ
        (o,) = import_files(store, [p], ImportOptions(site=site, timezone=TZ))
        assert o.status == "imported", o.message
    for m in ("KQ-MAIN", "KQ-DOCKS", "AR-01"):
        set_meter_tariff(store, m, "harrowgate_industrial_tou")


@pytest.fixture
def planted(store, tmp_path):
    _load(store, tmp_path)
    return store


def _by(alerts, meter, kind):
    found = [a for a in alerts if a["meter"] == meter and a["kind"] == kind]
    assert len(found) == 1, (meter, kind, [(a["meter"], a["kind"]) for a in alerts])
    return found[0]


def test_alert_lifecycle(planted, tmp_path):
    store = planted
    first = evaluate(store, AS_OF)
    kinds = {(a["meter"], a["kind"]) for a in first.raised}
    assert kinds == {("KQ-MAIN", "correction_loss"), ("KQ-DOCKS", "data_stopped")}
    step = _by(first.raised, "KQ-MAIN", "correction_loss")
    assert step["since"] == "2025-09-15T00:00:00+02:00" and step["state"] == "new"
    assert step["money_per_month"] > 0 and step["currency"] == "EUR"
    assert step["figures"]["step_kvar"] == pytest.approx(STEP_KVAR, rel=0.05)
    stop = _by(first.raised, "KQ-DOCKS", "data_stopped")
    assert stop["since"] == STOP_AT.isoformat() and stop["money_per_month"] is None
    # the JSON shape every consumer relies on
    assert list(step)[:7] == ["meter", "kind", "since", "severity", "money_per_month", "message", "state"]

    again = evaluate(store, AS_OF)
    assert again.raised == [] and again.resolved == [] and again.updated == 2
    assert len(list_alerts(store)) == 2

    assert mark_seen(store, [step["id"]]) == 1
    evaluate(store, AS_OF)
    assert _by(list_alerts(store), "KQ-MAIN", "correction_loss")["state"] == "seen"
    assert alert_counts(store)["new"] == 1 and alert_counts(store)["seen"] == 1

    # the docks meter sends its missing days: its cause ended, the alert resolves
    docks = read_demo("KQ-DOCKS")
    rest = docks[(docks["start_utc"] >= STOP_AT) & (docks["start_utc"] < AS_OF)]
    p = tmp_path / "docks_rest.csv"
    rest.drop(columns="start_utc").to_csv(p, index=False)
    import_files(store, [p], ImportOptions(site=KQ, timezone=TZ))
    later = evaluate(store, AS_OF)
    assert [(a["meter"], a["kind"], a["state"]) for a in later.resolved] == [("KQ-DOCKS", "data_stopped", "resolved")]
    assert later.resolved[0]["resolved_at"] == AS_OF.isoformat()
    assert [a["kind"] for a in list_alerts(store)] == ["correction_loss"]
    everything = list_alerts(store, states=None)
    assert {a["state"] for a in everything} == {"seen", "resolved"}
    assert [a["kind"] for a in list_alerts(store, states=None, since=pd.Timestamp("2025-09-20").date())] == \
        ["data_stopped"]
    with store.session() as s:
        runs = list(s.scalars(select(MonitorRun).order_by(MonitorRun.id)))
    assert [r.raised for r in runs] == [2, 0, 0, 0] and runs[-1].resolved == 1


def test_a_cause_that_flickers_is_reopened_not_raised_again(planted):
    store = planted
    assert len(evaluate(store, AS_OF, ["KQ-DOCKS"]).raised) == 1
    early = evaluate(store, STOP_AT + pd.Timedelta(hours=10), ["KQ-DOCKS"])  # silent for only 10 h
    assert [a["kind"] for a in early.resolved] == ["data_stopped"]
    back = evaluate(store, AS_OF, ["KQ-DOCKS"])
    assert back.raised == [] and back.updated == 1
    assert _by(list_alerts(store), "KQ-DOCKS", "data_stopped")["state"] == "new"


def test_checks_without_a_tariff_skip_the_money(store, tmp_path):
    _load(store, tmp_path)
    clear_meter_tariff(store, "KQ-MAIN")
    run = evaluate(store, AS_OF, ["KQ-MAIN"])
    (a,) = run.raised
    assert a["kind"] == "correction_loss" and a["money_per_month"] is None and a["currency"] is None


def test_unknown_meter_and_bad_moments(planted):
    with pytest.raises(NotFoundError):
        evaluate(planted, AS_OF, ["NOPE"])
    with pytest.raises(UsageError, match="not an ISO date"):
        evaluate(planted, "yesterday-ish")
    with pytest.raises(UsageError, match="unknown alert kind"):
        list_alerts(planted, kind="fire")
    with pytest.raises(UsageError, match="no alert 999"):
        mark_seen(planted, [999])
    with pytest.raises(UsageError):
        mark_seen(planted)


# --------------------------------------------------------------------------------------------
# day summaries
# --------------------------------------------------------------------------------------------
def _days_csv(path, meter, first, days, kwh=10.0, lag=6.0, day_override=None):
    idx = pd.date_range(pd.Timestamp(first, tz="UTC"), periods=96 * days, freq="15min")
    k = np.full(len(idx), kwh)
    if day_override:
        sel = (idx >= pd.Timestamp(day_override[0], tz="UTC")) & (idx < pd.Timestamp(day_override[0], tz="UTC") + pd.Timedelta(days=1))
        k[sel] = day_override[1]
    df = pd.DataFrame({"meter": meter, "start": idx.strftime("%Y-%m-%dT%H:%M:%S+00:00"), "kwh": k,
                       "kvarh_lag": lag, "kvarh_lead": 0.0})
    df.to_csv(path, index=False)
    return path


def _stored_day(store, day):
    with store.session() as s:
        row = s.scalars(select(MonitorDay).where(MonitorDay.day == pd.Timestamp(day).date())).one()
        summary = DaySummaries.unpack([0], row.summary)
        assert str(summary.day[0]) == str(row.day)
        return float(summary.columns["kwh"][0]), row.intervals, row.multiplier


def test_day_summaries_follow_revisions_and_the_multiplier(store, tmp_path):
    as_of = pd.Timestamp("2025-03-12T03:00", tz="UTC")
    import_files(store, [_days_csv(tmp_path / "a.csv", "M1", "2025-01-15", 56)], ImportOptions())
    evaluate(store, as_of)
    assert _stored_day(store, "2025-03-01") == (960.0, 96, 1.0)
    with store.session() as s:
        n = len(list(s.scalars(select(MonitorDay))))
    assert n == 56  # every day of the data: 15 January to 11 March; 12 March (the day of as_of) is never stored
    # a revised export of 1 March
    revised = _days_csv(tmp_path / "b.csv", "M1", "2025-03-01", 1, kwh=12.5)
    (o,) = import_files(store, [revised], ImportOptions())
    assert o.status == "revised"
    evaluate(store, as_of)
    assert _stored_day(store, "2025-03-01") == (1200.0, 96, 1.0)
    assert _stored_day(store, "2025-03-02")[0] == 960.0
    # a corrected multiplier applies to every summary
    set_multiplier(store, "M1", 2.0)
    evaluate(store, as_of)
    assert _stored_day(store, "2025-03-02") == (1920.0, 96, 2.0)
    assert rebuild_day_summaries(store) == 56
    evaluate(store, as_of)
    assert _stored_day(store, "2025-03-01") == (2400.0, 96, 2.0)


def test_a_gap_filled_later_is_summarised_again(store, tmp_path):
    as_of = pd.Timestamp("2025-03-12T03:00", tz="UTC")
    csv = _days_csv(tmp_path / "a.csv", "M1", "2025-01-15", 56)
    df = pd.read_csv(csv)
    gap = df["start"].str.startswith("2025-03-05T1")  # 10:00-19:45 missing
    df[~gap].to_csv(csv, index=False)
    import_files(store, [csv], ImportOptions())
    evaluate(store, as_of)
    assert _stored_day(store, "2025-03-05")[1] == 96 - 40
    df[gap].to_csv(tmp_path / "late.csv", index=False)
    import_files(store, [tmp_path / "late.csv"], ImportOptions())
    evaluate(store, as_of)
    assert _stored_day(store, "2025-03-05")[1] == 96


# --------------------------------------------------------------------------------------------
# each meter's own tariff
# --------------------------------------------------------------------------------------------
def test_meter_tariff_in_audits(store, tmp_path):
    import_files(store, [_days_csv(tmp_path / "a.csv", "M1", "2025-01-01", 70)], ImportOptions())
    with pytest.raises(UsageError, match="^meter M1 has no tariff of its own$") as err:
        audit_meter(store, "M1", None)  # the message speaks of the data (the dashboard shows it) ...
    assert "auditor meters set-tariff M1 FILE" in err.value.cli_hint  # ... the command line adds the command

    own = set_meter_tariff(store, "M1", "millbrook_commercial_pf", billing_day=10)
    assert own.tariff.name == "Millbrook General Service PF" and own.billing_day == 10
    a = audit_meter(store, "M1", None)
    assert a.tariff.name == own.tariff.name
    assert [p.label for p in a.result.periods][0] == "2024-12-10..2025-01-10"
    assert {p.start.day for p in a.result.periods} == {10}
    assert audit_meter(store, "M1", "tidewater_banded_kva").tariff.name == "Tidewater kVA Banded"
    # the text is kept: the file may go away afterwards
    mine = tmp_path / "mine.toml"
    mine.write_text(_tariff_text("tidewater_banded_kva"), encoding="utf-8")
    set_meter_tariff(store, "M1", mine)
    mine.unlink()
    assert meter_tariff(store, "M1").tariff.name == "Tidewater kVA Banded"
    assert meter_tariff(store, "M1").billing_day is None
    assert set(meter_tariffs(store)) == {"M1"}
    bad = tmp_path / "bad.toml"
    bad.write_text('name = "x"\ncurrency = "eur"\n[energy]\nprice_per_kwh = 0.1\n', encoding="utf-8")
    with pytest.raises(TariffError, match="currency"):
        set_meter_tariff(store, "M1", bad)
    assert meter_tariff(store, "M1").tariff.name == "Tidewater kVA Banded"  # unchanged
    with pytest.raises(NotFoundError):
        set_meter_tariff(store, "NOPE", "millbrook_commercial_pf")
    assert clear_meter_tariff(store, "M1") is True and clear_meter_tariff(store, "M1") is False


def _tariff_text(name):
    from auditor.tariffs import EXAMPLES_DIR

    return (EXAMPLES_DIR / f"{name}.toml").read_text(encoding="utf-8")


def test_sites_file_gives_meters_their_tariff(store, tmp_path):
    (tmp_path / "t").mkdir()
    (tmp_path / "t" / "plant.toml").write_text(_tariff_text("millbrook_commercial_pf"), encoding="utf-8")
    f = tmp_path / "sites.toml"
    f.write_text('[[site]]\nname = "Plant"\ntimezone = "Europe/Berlin"\nmeters = ["P1", "P2"]\n'
                 'tariff = "t/plant.toml"\nbilling_day = 5\n\n'
                 '[[site]]\nname = "Shop"\nmeters = ["S1"]\ntariff = "harrowgate_industrial_tou"\n', encoding="utf-8")
    out = load_sites_file(store, f)
    assert [s["tariff"] for s in out] == ["Millbrook General Service PF", "Harrowgate Industrial TOU"]
    own = meter_tariffs(store)
    assert own["P1"].billing_day == 5 and own["P2"].source_name == "plant" and own["S1"].billing_day is None
    for body, key in (('tariff = 3', "site[0].tariff"), ('tariff = "harrowgate_industrial_tou"\nbilling_day = 31',
                                                          "site[0].billing_day"), ('billing_day = 3', "site[0].billing_day")):
        f.write_text(f'[[site]]\nname = "Plant"\nmeters = ["P1"]\n{body}\n', encoding="utf-8")
        with pytest.raises(ProfileError, match=key.replace("[", r"\[").replace("]", r"\]")):
            load_sites_file(store, f)
    f.write_text('[[site]]\nname = "Plant"\nmeters = ["P1"]\ntariff = "no_such_tariff"\n', encoding="utf-8")
    with pytest.raises(NotFoundError, match="no_such_tariff"):
        load_sites_file(store, f)


def test_step_in_the_store_matches_the_pure_check(planted):
    """The service reads the same figures from stored day summaries as the pure check does from
    the interval frame (no drift through storage)."""
    run = evaluate(planted, AS_OF, ["KQ-MAIN"])
    (a,) = run.raised
    assert a["since"] == STEP_DAY.isoformat()
    from monitoring_helpers import long_frame, planted_frames

    from auditor.monitoring import CheckSettings, build_panel, correction_loss, summarise_days
    from auditor.services.alerts import _plan
    from auditor.services.meter_tariff import meter_tariff as own_of

    own = own_of(planted, "KQ-MAIN")
    frames = planted_frames()
    long = long_frame(frames, ("KQ-MAIN",))
    long = long[long["start"] < int(AS_OF.timestamp())]
    panel = build_panel(summarise_days(long, [TZ], [15]), ["KQ-MAIN"], [TZ], [15], AS_OF, 70)
    (f,) = correction_loss(panel, CheckSettings(), [_plan(own.tariff, own.sha256, None)]).findings
    assert a["money_per_month"] == pytest.approx(f.money_per_month, abs=0.01)
    assert a["figures"]["step_kvar"] == pytest.approx(f.figures["step_kvar"], abs=0.01)
