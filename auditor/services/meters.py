"""Meters and sites: what is stored, a meter's data and site facts for the computations, site
management and the meter multiplier.

pandas is imported only where a meter's interval data are loaded, so listing meters or sites
starts quickly.
"""
from __future__ import annotations

import difflib
import tomllib
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from sqlalchemy import select

from auditor.errors import NotFoundError, ProfileError, UsageError
from auditor.store import Store
from auditor.store.models import Meter, Site
from auditor.store.queries import get_meter, meter_summaries, now_utc, read_intervals

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def list_meters(store: Store) -> list[dict]:
    """Every meter by site: ``meter``, ``site``, ``timezone``, ``interval_minutes``,
    ``multiplier``, ``first`` (start of the first interval), ``last`` (end of the last
    interval), ``intervals`` and ``coverage`` (intervals present / expected over that span)."""
    with store.session() as s:
        return meter_summaries(s)


@dataclass(frozen=True)
class MeterData:
    meter: str
    site: str
    timezone: str
    interval_minutes: int
    multiplier: float
    nominal_voltage_v: float | None
    transformer_kva: float | None
    transformer_impedance_percent: float | None
    frame: pd.DataFrame


def _local_midnight_utc(d: date | None, tz: str) -> int | None:
    if d is None:
        return None
    import pandas as pd

    return int(pd.Timestamp(d).tz_localize(tz).tz_convert("UTC").value // 10**9)


def load_meter(store: Store, meter: str, start: date | None = None, end: date | None = None) -> MeterData:
    """One meter's interval frame (local dates ``start`` ≤ day < ``end``) and its site facts."""
    if start and end and end <= start:
        raise UsageError(f"the end date {end} must be after the start date {start}")
    with store.session() as s:
        row = s.execute(select(Meter, Site).join(Site).where(Meter.external_id == meter)).first()
        if row is None:
            get_meter(s, meter)  # raises the error that names the known meters
        m, site = row  # one query for the meter and its site
        frame = read_intervals(s, m, _local_midnight_utc(start, site.timezone), _local_midnight_utc(end, site.timezone))
        return MeterData(m.external_id, site.name, site.timezone, m.interval_minutes or 15, m.multiplier,
                         site.nominal_voltage_v, site.transformer_kva, site.transformer_impedance_percent, frame)


def load_meters(store: Store, meters: list[str], start: date | None = None,
                end: date | None = None) -> dict[str, MeterData]:
    """The data of many meters (as :func:`load_meter` gives each) with one query for the meters
    and their sites and one for their readings. Meters not stored are left out."""
    from auditor.store.queries import MeterSpan, interval_frame_of, read_arrays

    if start and end and end <= start:
        raise UsageError(f"the end date {end} must be after the start date {start}")
    if not meters:
        return {}
    with store.session() as s:
        q = (select(Meter.id, Meter.external_id, Meter.interval_minutes, Meter.multiplier, Site.name, Site.timezone,
                     Site.nominal_voltage_v, Site.transformer_kva, Site.transformer_impedance_percent)
             .join(Site).where(Meter.external_id.in_(list(dict.fromkeys(meters)))))
        found = s.execute(q).all()
        spans = [MeterSpan(r.id, r.interval_minutes or 15, _local_midnight_utc(start, r.timezone),
                           _local_midnight_utc(end, r.timezone)) for r in found]
        arrays = read_arrays(s.connection(), spans)
    return {r.external_id: MeterData(r.external_id, r.name, r.timezone, r.interval_minutes or 15, r.multiplier,
                                     r.nominal_voltage_v, r.transformer_kva, r.transformer_impedance_percent,
                                     interval_frame_of(*a, r.multiplier))
            for r, a in zip(found, arrays, strict=True)}


def meters_of_site(store: Store, site: str) -> list[str]:
    with store.session() as s:
        row = s.scalar(select(Site).where(Site.name == site))
        if row is None:
            raise NotFoundError(f"no site {site!r}")
        return [m.external_id for m in row.meters]


SITE_FIELDS = ("timezone", "nominal_voltage_v", "transformer_kva", "transformer_impedance_percent")


def closest(key: str, known) -> str:
    """``" (did you mean 'x'?)"`` naming the known key most like ``key``, or ``""``."""
    match = difflib.get_close_matches(key, list(known), n=1, cutoff=0.6)
    return f" (did you mean {match[0]!r}?)" if match else ""


def _check_site_values(values: dict, where: str) -> None:
    tz = values.get("timezone")
    if tz is not None:
        try:
            ZoneInfo(tz)
        except (ZoneInfoNotFoundError, ValueError):
            raise UsageError(f"{where}: unknown time zone {tz!r} (use an IANA name such as Europe/Berlin)") from None
    for k in ("nominal_voltage_v", "transformer_kva", "transformer_impedance_percent"):
        v = values.get(k)
        if v is not None and (not isinstance(v, int | float) or isinstance(v, bool) or v <= 0):
            raise UsageError(f"{where}: {k} must be a positive number, not {v!r}")
    z = values.get("transformer_impedance_percent")
    if z is not None and z > 30:
        raise UsageError(f"{where}: transformer_impedance_percent {z} is not plausible (typical 4–8 %)")


def set_site(store: Store, name: str, meters: list[str] | None = None, **values) -> dict:
    """Create or update a site; optionally move meters onto it."""
    values = {k: v for k, v in values.items() if v is not None}
    unknown = sorted(set(values) - set(SITE_FIELDS))
    if unknown:
        raise UsageError(f"unknown site field {unknown[0]!r}{closest(unknown[0], SITE_FIELDS)}; "
                         f"allowed: {', '.join(SITE_FIELDS)}")
    _check_site_values(values, f"site {name!r}")
    with store.session() as s:
        site = s.scalar(select(Site).where(Site.name == name))
        if site is None:
            site = Site(name=name, timezone=values.get("timezone", "UTC"), created_at=now_utc())
            s.add(site)
        for k, v in values.items():
            setattr(site, k, v)
        s.flush()
        for ext in meters or []:
            m = s.scalar(select(Meter).where(Meter.external_id == ext))
            if m is None:
                m = Meter(site_id=site.id, external_id=ext, multiplier=1.0, created_at=now_utc())
                s.add(m)
            m.site_id = site.id
        return site_dict(site)


def site_dict(site: Site) -> dict:
    return {"site": site.name, **{k: getattr(site, k) for k in SITE_FIELDS},
            "meters": sorted(m.external_id for m in site.meters)}


def list_sites(store: Store) -> list[dict]:
    with store.session() as s:
        return [site_dict(x) for x in s.scalars(select(Site).order_by(Site.name))]


def load_sites_file(store: Store, path: str | Path) -> list[dict]:
    """Sites from a TOML file of ``[[site]]`` tables (name, timezone, nominal_voltage_v,
    transformer_kva, transformer_impedance_percent, meters; the meters' own ``tariff`` — a file
    relative to the sites file or a shipped example's name — with ``billing_day``; for the
    correction ``screening``, ``harmonics`` and ``drive_share``, and a top-level ``[screening]``
    table for every site)."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise UsageError(f"{path}: {exc.strerror}") from None
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError("site", f"not valid TOML: {exc}", str(path)) from None
    from auditor.services.correction import SITE_FILE_KEYS, site_file_settings, store_site_settings

    # correction settings ([screening], harmonics, drive_share) are all read before anything is stored
    settings = [site_file_settings(e, data.get("screening"), path, i) for i, e in enumerate(data.get("site", []))]
    out = []
    for i, entry in enumerate(data.get("site", [])):
        extra = set(entry) - {"name", "meters", "tariff", "billing_day", *SITE_FIELDS, *SITE_FILE_KEYS}
        if extra:  # before the required keys: a misspelt "name" is reported as misspelt
            key = sorted(extra)[0]
            allowed = ("name", "meters", "tariff", "billing_day", *SITE_FIELDS, *SITE_FILE_KEYS)
            raise ProfileError(f"site[{i}].{key}", f"unknown key{closest(key, allowed)}; allowed: {', '.join(allowed)}",
                               str(path))
        if "name" not in entry:
            raise ProfileError(f"site[{i}].name", "every site needs a name", str(path))
        fields = {k: entry[k] for k in SITE_FIELDS if k in entry}
        out.append(set_site(store, entry["name"], list(entry.get("meters", [])), **fields))
        store_site_settings(store, entry["name"], settings[i])
        if "tariff" in entry or "billing_day" in entry:
            from auditor.services.meter_tariff import set_site_tariff

            out[-1]["tariff"] = set_site_tariff(store, out[-1]["meters"], entry, path, f"site[{i}]")
    return out


def set_multiplier(store: Store, meter: str, multiplier: float) -> None:
    if not multiplier > 0:
        raise UsageError(f"the multiplier of meter {meter} must be a positive number, not {multiplier:g}")
    with store.session() as s:
        get_meter(s, meter).multiplier = float(multiplier)
