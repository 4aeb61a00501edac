"""The demo: an invented cold store and office block, one year of 15-minute data."""
from __future__ import annotations

from importlib import resources
from pathlib import Path

import platformdirs

from auditor.ingest.pipeline import ImportOptions
from auditor.store.engine import APP_DIR_NAME

DEMO_TARIFF = "harrowgate_industrial_tou"
DEMO_TIMEZONE = "Europe/Berlin"
# (file, site) in import order: the revised export comes after the original it corrects
DEMO_FILES = (
    ("kestrel_quay_main_2025.csv", "Kestrel Quay Cold Store"),
    ("kestrel_quay_docks_2025.csv", "Kestrel Quay Cold Store"),
    ("alder_row_2025.csv", "Alder Row Offices"),
    ("kestrel_quay_main_2025-03_revised.csv", "Kestrel Quay Cold Store"),
)


def demo_dir() -> Path:
    return Path(str(resources.files("auditor.demo_data")))


def demo_db_url() -> str:
    return f"sqlite:///{Path(platformdirs.user_data_dir(APP_DIR_NAME)) / 'demo.sqlite3'}"


def open_demo_database(url: str | None = None):
    """The demo database: ``url`` when given, else ``demo.sqlite3`` in the user's data
    directory (never the everyday database)."""
    from auditor.services.database import open_database

    return open_database(url or demo_db_url())


def load_demo(store) -> dict:
    """Sites, then every demo file (idempotent: a second run reports them unchanged)."""
    from auditor.services.ingest import import_files
    from auditor.services.meters import list_meters, load_sites_file

    folder = demo_dir()
    sites = load_sites_file(store, folder / "sites.toml")
    outcomes = []
    for name, site in DEMO_FILES:
        outcomes += import_files(store, [folder / name], ImportOptions(site=site, timezone=DEMO_TIMEZONE))
    return {"sites": sites, "files": [o.as_dict() for o in outcomes], "meters": list_meters(store)}
