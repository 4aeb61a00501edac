"""Builders for the monitoring tests: the demo data as a long frame, and the planted case.

The planted case (used by the pure, service, CLI and dashboard tests alike) starts from the
committed demo data and changes copies of it, never the files themselves:

* KQ-MAIN: lagging kvarh raised by ``STEP_KVARH`` per quarter hour (``STEP_KVAR`` kvar) from
  local midnight of ``STEP_DAY`` — a failed 40 kvar capacitor step;
* KQ-DOCKS: no data from ``STOP_AT`` (local time) on — a meter that stops mid-month;
* every meter cut at ``AS_OF``, the moment the checks are run "as of".
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from auditor.services.demo import demo_dir

TZ = "Europe/Berlin"
METERS = ("KQ-MAIN", "KQ-DOCKS", "AR-01")
FILES = {"KQ-MAIN": "kestrel_quay_main_2025.csv", "KQ-DOCKS": "kestrel_quay_docks_2025.csv",
         "AR-01": "alder_row_2025.csv"}
STEP_DAY = pd.Timestamp("2025-09-15", tz=TZ)  # a Monday; the four weeks before hold no public holiday
STEP_KVARH = 10.0
STEP_KVAR = STEP_KVARH * 4  # 15-minute intervals
STOP_AT = pd.Timestamp("2025-09-24T14:00", tz=TZ)
AS_OF = pd.Timestamp("2025-09-29T06:00", tz=TZ)


def read_demo(meter: str) -> pd.DataFrame:
    """One demo file as written (columns as in the file, ``start`` parsed to UTC)."""
    df = pd.read_csv(demo_dir() / FILES[meter])
    df["start_utc"] = pd.to_datetime(df["start"], utc=True)
    return df


def planted_frames(as_of: pd.Timestamp = AS_OF) -> dict[str, pd.DataFrame]:
    """The planted case, one frame per meter in the demo files' own layout."""
    out = {}
    for meter in METERS:
        df = read_demo(meter)
        cut = STOP_AT if meter == "KQ-DOCKS" else as_of
        df = df[df["start_utc"] < cut].copy()
        if meter == "KQ-MAIN":
            sel = df["start_utc"] >= STEP_DAY
            df.loc[sel, "kvarh_lag"] = (df.loc[sel, "kvarh_lag"] + STEP_KVARH).round(3)
        out[meter] = df
    return out


def write_planted(folder: Path, as_of: pd.Timestamp = AS_OF) -> list[Path]:
    """The planted case as CSV files in ``folder`` (plain CSV, as the demo files)."""
    paths = []
    for meter, df in planted_frames(as_of).items():
        p = Path(folder) / f"planted_{FILES[meter]}"
        df.drop(columns="start_utc").to_csv(p, index=False)
        paths.append(p)
    return paths


def long_frame(frames: dict[str, pd.DataFrame], meters=METERS) -> pd.DataFrame:
    """Frames per meter as the long reading frame of :func:`auditor.monitoring.summarise_days`
    (meter codes = positions in ``meters``)."""
    parts = []
    for i, meter in enumerate(meters):
        df = frames[meter]
        est = df["flag"].eq("E") if "flag" in df else pd.Series(False, index=df.index)
        parts.append(pd.DataFrame({
            "meter": i, "start": df["start_utc"].dt.as_unit("s").astype("int64").to_numpy(),
            "kwh": df["kwh"].to_numpy(float), "kvarh_lag": df["kvarh_lag"].to_numpy(float),
            "kvarh_lead": df["kvarh_lead"].to_numpy(float), "estimated": est.to_numpy(bool)}))
    return pd.concat(parts, ignore_index=True)


def demo_frames() -> dict[str, pd.DataFrame]:
    return {m: read_demo(m) for m in METERS}


def weekdays_without_holidays(first: pd.Timestamp, days: int, country="DE", subdiv="BY") -> int:
    """Monday-to-Friday days that are not public holidays, counted with numpy and the holidays
    library (not with the tariff engine)."""
    import holidays

    start = np.datetime64(first.date())
    hol = [np.datetime64(d) for d in holidays.country_holidays(country, subdiv=subdiv, years=first.year)]
    return int(np.busday_count(start, start + np.timedelta64(days, "D"), holidays=hol))


def planted_store(folder: Path, tariff: str = "harrowgate_industrial_tou"):
    """A SQLite store holding the planted case (demo sites, each meter with ``tariff`` as its
    own), checked once as of :data:`AS_OF`."""
    from auditor.ingest.pipeline import ImportOptions
    from auditor.services.alerts import evaluate
    from auditor.services.ingest import import_files
    from auditor.services.meter_tariff import set_meter_tariff
    from auditor.services.meters import load_sites_file
    from auditor.store import open_store

    store = open_store(f"sqlite:///{Path(folder) / 'planted.sqlite3'}")
    load_sites_file(store, demo_dir() / "sites.toml")
    for p in write_planted(folder):
        site = "Alder Row Offices" if "alder" in p.name else "Kestrel Quay Cold Store"
        import_files(store, [p], ImportOptions(site=site, timezone=TZ))
    for m in METERS:
        set_meter_tariff(store, m, tariff)
    evaluate(store, AS_OF)
    return store
