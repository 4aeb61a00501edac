"""Each meter's own tariff: set from a file (or a shipped example's name), kept as its validated
TOML text, used by audits, the portfolio and the checks whenever no tariff is named.

The text is stored rather than the path so that a moved or edited file never changes what a
meter is billed under behind the user's back; ``auditor meters set-tariff`` again takes a new
version.
"""
from __future__ import annotations

import hashlib
import threading
import tomllib
from dataclasses import dataclass
from pathlib import Path

from sqlalchemy import delete, select

from auditor.errors import TariffError, UsageError
from auditor.store import Store
from auditor.store.models import Meter, MeterTariff
from auditor.store.queries import get_meter, now_utc
from auditor.tariffs import Tariff, tariff_from_dict

__all__ = ["OwnTariff", "from_row", "set_meter_tariff", "clear_meter_tariff", "meter_tariff", "meter_tariffs",
           "tariff_for_meter", "set_site_tariff", "NO_TARIFF_HINT"]

#: What the command line adds when a meter has no tariff of its own (the dashboard offers its list).
NO_TARIFF_HINT = "give --tariff FILE, or set the meter's own with: auditor meters set-tariff {meter} FILE"


@dataclass(frozen=True)
class OwnTariff:
    """A meter's tariff as stored: the validated tariff, where it came from, its billing day."""

    meter: str
    tariff: Tariff
    source_name: str
    source_path: str | None
    sha256: str
    billing_day: int | None
    set_at: str

    def to_dict(self) -> dict:
        return {"meter": self.meter, "tariff": self.tariff.name, "currency": self.tariff.currency,
                "source_name": self.source_name, "source_path": self.source_path, "sha256": self.sha256,
                "billing_day": self.billing_day, "set_at": self.set_at}


_parsed: dict[str, Tariff] = {}
_lock = threading.Lock()


def _parse(text: str, digest: str, label: str) -> Tariff:
    with _lock:
        if digest in _parsed:
            return _parsed[digest]
    t = tariff_from_dict(tomllib.loads(text), source=label)
    with _lock:
        _parsed[digest] = t
    return t


def from_row(meter: str, row: MeterTariff) -> OwnTariff:
    """The :class:`OwnTariff` of a stored ``meter_tariff`` row."""
    t = _parse(row.toml, row.sha256, f"{row.source_name} (as set for meter {meter})")
    return OwnTariff(meter, t, row.source_name, row.source_path, row.sha256, row.billing_day,
                     row.set_at.isoformat(timespec="seconds") if row.set_at else "")


def set_meter_tariff(store: Store, meter: str, source: str | Path, billing_day: int | None = None) -> OwnTariff:
    """Give ``meter`` the tariff in file ``source`` (or the shipped example of that name).

    The file is validated first (a bad one raises :class:`TariffError` naming the key) and kept
    as text. ``billing_day`` (1-28) starts each billing period; None means calendar months.
    """
    from auditor.services.audit import resolve_tariff

    if billing_day is not None and not (isinstance(billing_day, int) and 1 <= billing_day <= 28):
        raise UsageError(f"billing day must be a whole number from 1 to 28, not {billing_day!r}")
    t = resolve_tariff(source)
    path = Path(t.source)
    try:
        text = path.read_bytes().decode("utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise TariffError("(file)", f"cannot be read: {exc}", str(path)) from None
    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
    with store.session() as s:
        m = get_meter(s, meter)
        row = s.get(MeterTariff, m.id)
        if row is None:
            row = MeterTariff(meter_id=m.id)
            s.add(row)
        row.name = t.name
        row.source_name = path.stem
        row.source_path = str(path.resolve())
        row.toml = text
        row.sha256 = digest
        row.billing_day = billing_day
        row.set_at = now_utc()
        s.flush()
        return from_row(m.external_id, row)


def clear_meter_tariff(store: Store, meter: str) -> bool:
    """Remove ``meter``'s own tariff; True when it had one."""
    with store.session() as s:
        m = get_meter(s, meter)
        return s.execute(delete(MeterTariff).where(MeterTariff.meter_id == m.id)).rowcount > 0


def meter_tariff(store: Store, meter: str) -> OwnTariff | None:
    with store.session() as s:
        m = get_meter(s, meter)
        row = s.get(MeterTariff, m.id)
        return from_row(m.external_id, row) if row is not None else None


def meter_tariffs(store: Store) -> dict[str, OwnTariff]:
    """Every meter's own tariff, by meter id."""
    with store.session() as s:
        rows = s.execute(select(Meter.external_id, MeterTariff).join(MeterTariff, MeterTariff.meter_id == Meter.id))
        return {ext: from_row(ext, row) for ext, row in rows}


def tariff_for_meter(store: Store, meter: str, given: str | Path | Tariff | None) -> Tariff:
    """The tariff named (a Tariff, file or example name), else the meter's own; a usage error
    saying how to fix it when there is neither."""
    if given is not None:
        from auditor.services.audit import resolve_tariff

        return resolve_tariff(given)
    own = meter_tariff(store, meter)
    if own is None:
        raise UsageError(f"meter {meter} has no tariff of its own",
                         cli_hint=": " + NO_TARIFF_HINT.format(meter=meter))
    return own.tariff


def set_site_tariff(store: Store, meters: list[str], entry: dict, sites_file: str | Path, where: str) -> str | None:
    """The ``tariff`` (and ``billing_day``) of a ``[[site]]`` table of a sites file, given to
    each of the site's meters. A relative file is read beside the sites file; a name that is no
    file there is a shipped example's. Returns the tariff's name."""
    from auditor.errors import ProfileError

    raw = entry.get("tariff")
    day = entry.get("billing_day")
    if raw is None:
        raise ProfileError(f"{where}.billing_day", "only applies with tariff", str(sites_file))
    if not isinstance(raw, str) or not raw.strip():
        raise ProfileError(f"{where}.tariff", "must be a tariff file or a shipped example's name", str(sites_file))
    if day is not None and (isinstance(day, bool) or not isinstance(day, int) or not 1 <= day <= 28):
        raise ProfileError(f"{where}.billing_day", f"must be a whole number from 1 to 28, not {day!r}", str(sites_file))
    candidate = Path(raw)
    if not candidate.is_absolute():
        beside = Path(sites_file).parent / candidate
        if beside.exists():
            candidate = beside
    if not meters:
        raise ProfileError(f"{where}.tariff", "the site has no meters to give it to", str(sites_file))
    name = None
    for m in meters:
        name = set_meter_tariff(store, m, candidate if candidate.exists() else raw, day).tariff.name
    return name
