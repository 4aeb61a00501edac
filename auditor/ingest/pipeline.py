"""File → reader → canonical frame → validation → one transaction.

``import_file`` is the only way readings enter the database. A file is imported whole or not
at all: readers and validation run before anything is written; the write itself is one
transaction, rolled back on any error (a crash mid-write leaves the database as it was, which
SQLite's journal and PostgreSQL guarantee). A rejected file leaves only its import-batch record
(status ``rejected`` with the errors), written in a transaction of its own.
"""
from __future__ import annotations

import hashlib
import json
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from sqlalchemy import delete, select
from sqlalchemy.exc import IntegrityError, SQLAlchemyError

from auditor.errors import AuditorError, InputError, Problem, StoreError
from auditor.ingest import readers
from auditor.ingest.frame import ReadOptions
from auditor.ingest.validate import Validated, validate
from auditor.store import Store
from auditor.store.meter_data import record_write
from auditor.store.models import QUANTITIES, Channel, ImportBatch, Meter, QualityFlag, Site
from auditor.store.queries import now_utc
from auditor.store.write import WriteCounts, write_meter

DEFAULT_SITE = "default"
STORE_ATTEMPTS = 3


@dataclass(frozen=True)
class ImportOptions:
    site: str | None = None
    timezone: str | None = None
    profile_path: str | None = None
    estimate_gaps: bool = False
    strict: bool = False
    dry_run: bool = False
    chunk_rows: int = 250_000


@dataclass
class FileOutcome:
    path: str
    status: str  # imported | unchanged | revised | rejected
    rows: int = 0
    format: str | None = None
    batch_id: int | None = None
    meters: list[str] = field(default_factory=list)
    inserted: int = 0
    revised: int = 0
    unchanged_rows: int = 0
    errors: list[Problem] = field(default_factory=list)
    warnings: list[Problem] = field(default_factory=list)
    message: str = ""

    def as_dict(self) -> dict:
        return {
            "path": self.path, "status": self.status, "rows": self.rows, "format": self.format,
            "batch_id": self.batch_id, "meters": self.meters, "inserted": self.inserted,
            "revised": self.revised, "unchanged_rows": self.unchanged_rows,
            "errors": [p.as_dict() for p in self.errors],
            "warnings": [p.as_dict() for p in self.warnings], "message": self.message,
        }


def sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _read_all(path: Path, options: ImportOptions, progress: Callable[[int], None] | None):
    ropts = ReadOptions(timezone=options.timezone, chunk_rows=options.chunk_rows)
    if options.profile_path:
        from auditor.ingest.profile import load_profile
        from auditor.ingest.readers import profile_csv

        ropts = ReadOptions(timezone=options.timezone, chunk_rows=options.chunk_rows,
                            profile=load_profile(options.profile_path))
        reader = profile_csv
    else:
        reader = readers.detect(path)
    output = reader.read(path, ropts)
    # Meter ids become small integer codes at once, so a large file costs ~50 bytes a row.
    names: dict[str, int] = {}
    parts = []
    for chunk in output.chunks:
        inv, uniq = pd.factorize(chunk["meter"].to_numpy(dtype=object))
        local = np.array([names.setdefault(u, len(names)) for u in uniq], dtype=np.int32)
        chunk = chunk.drop(columns="meter")
        chunk["meter"] = local[inv]
        parts.append(chunk)
        if progress:
            progress(len(chunk))
    if not parts:
        raise InputError(str(path), Problem("no data rows after the header"))
    df = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
    cats = np.array(list(names), dtype=object)
    df["meter"] = pd.Categorical.from_codes(df["meter"].to_numpy(), categories=cats)
    return reader, output.info, df


def import_file(store: Store, path: str | Path, options: ImportOptions = ImportOptions(),
                progress: Callable[[int], None] | None = None) -> FileOutcome:
    """Import one file; never raises for a bad file (the outcome says ``rejected``)."""
    path = Path(path)
    outcome = FileOutcome(str(path), "rejected")
    started = now_utc()
    try:
        if not path.is_file():
            raise InputError(str(path), Problem("no such file" if not path.exists() else "not a regular file"))
        digest = sha256_of(path)
        with store.session() as s:
            prior = s.scalar(select(ImportBatch).where(
                ImportBatch.sha256 == digest, ImportBatch.status.in_(("imported", "revised", "unchanged"))
            ).order_by(ImportBatch.id))
        if prior is not None:
            outcome.status = "unchanged"
            outcome.format = prior.format
            outcome.rows = prior.rows_accepted
            outcome.message = (f"already imported as batch {prior.id} ({prior.file_name}); nothing changed")
            if not options.dry_run:
                _record(store, path, digest, prior.format, outcome, started)
            return outcome
        reader, info, df = _read_all(path, options, progress)
        outcome.format = reader.FORMAT
        outcome.rows = len(df)
        outcome.warnings.extend(info.warnings)
        with store.session() as s:
            known = dict(s.execute(select(Meter.external_id, Meter.interval_minutes).where(
                Meter.external_id.in_(list(map(str, df["meter"].cat.categories))))).all())
        checked = validate(df, str(path), interval_minutes=info.interval_minutes, label=info.label,
                           stored_intervals=known, strict=options.strict, estimate_gaps=options.estimate_gaps)
        del df
        outcome.warnings.extend(checked.warnings)
        outcome.meters = [m.meter for m in checked.meters]
        if options.dry_run:
            outcome.status = "imported"
            outcome.message = "dry run: the file is valid; nothing was written"
            outcome.inserted = sum(len(m.start) for m in checked.meters)
            return outcome
        for attempt in range(STORE_ATTEMPTS):
            try:
                _store(store, path, digest, reader.FORMAT, info, checked, options, outcome, started)
                break
            except IntegrityError:
                # another import committed the same new site, meter or intervals while this one
                # ran (PostgreSQL lets imports run side by side); its transaction rolled back
                # whole, and the next attempt sees what the other one stored
                if attempt == STORE_ATTEMPTS - 1:
                    raise
        return outcome
    except AuditorError as exc:
        outcome.status = "rejected"
        outcome.errors = list(exc.problems) if isinstance(exc, InputError) else [Problem(exc.message)]
        outcome.message = exc.message
    except MemoryError:
        outcome.status = "rejected"
        outcome.errors = [Problem("the file is too large to import in one piece; split it by meter")]
        outcome.message = f"{path}: " + outcome.errors[0].message
    except SQLAlchemyError as exc:
        outcome.status = "rejected"
        outcome.errors = [Problem(f"database error: {_db_message(exc)}")]
        outcome.message = f"{path}: {outcome.errors[0].message}"
    if not options.dry_run:
        try:
            _record(store, path, None, outcome.format or "unknown", outcome, started)
        except StoreError:
            pass  # the database itself is the problem; the outcome already says so
    return outcome


def _db_message(exc: SQLAlchemyError) -> str:
    text = str(exc.orig) if getattr(exc, "orig", None) is not None else str(exc)
    low = text.lower()
    if "readonly" in low or "read-only" in low:
        return "the database is read-only (check the file's permissions): " + text
    if "full" in low or "no space" in low:
        return "the disk is full: " + text
    if "locked" in low:
        return "the database stayed locked by another process: " + text
    return text


def _record(store: Store, path: Path, digest: str | None, fmt: str, outcome: FileOutcome, started) -> None:
    try:
        with store.session() as s:
            batch = ImportBatch(
                file_name=str(path), sha256=digest or "", format=fmt, rows_accepted=0 if outcome.status == "rejected" else outcome.rows,
                rows_rejected=outcome.rows if outcome.status == "rejected" else 0, started_at=started,
                finished_at=now_utc(), status=outcome.status,
                errors=json.dumps([p.as_dict() for p in outcome.errors]) if outcome.errors else None,
            )
            s.add(batch)
            s.flush()
            outcome.batch_id = batch.id
    except SQLAlchemyError as exc:
        raise StoreError(f"cannot record the import of {path}: {exc}") from exc


def _store(store: Store, path: Path, digest: str, fmt: str, info, checked: Validated, options: ImportOptions,
           outcome: FileOutcome, started) -> None:
    counts = WriteCounts()
    with store.session() as s:
        batch = ImportBatch(file_name=str(path), sha256=digest, format=fmt, started_at=started,
                            status="importing", rows_accepted=0, rows_rejected=0)
        s.add(batch)
        s.flush()
        site_cache: dict[str, Site] = {}
        conn = s.connection()
        for rows in checked.meters:
            meter = _meter_for(s, rows.meter, rows.interval_minutes, options, site_cache)
            _channels(s, meter, info, batch.id)
            c = write_meter(conn, meter.id, rows.start, rows.values, rows.flags, batch.id)
            record_write(conn, meter.id, batch.id, inserted=c.inserted, revised=c.revised,
                         first_start=int(rows.start[0]), last_start=int(rows.start[-1]))
            counts.inserted += c.inserted
            counts.revised += c.revised
            counts.unchanged += c.unchanged
            step = rows.interval_minutes * 60
            if c.revised or c.unchanged:
                # findings about intervals this file now covers are superseded by its own
                s.execute(delete(QualityFlag).where(
                    QualityFlag.meter_id == meter.id, QualityFlag.start >= int(rows.start[0]),
                    QualityFlag.end <= int(rows.start[-1]) + step))
            if rows.findings:
                s.execute(QualityFlag.__table__.insert(), [
                    {"meter_id": meter.id, "batch_id": batch.id, "kind": f.kind, "start": f.start,
                     "end": f.end, "intervals": f.intervals, "detail": f.detail[:500]}
                    for f in rows.findings])
        if counts.inserted == 0 and counts.revised == 0:
            status = "unchanged"
            outcome.message = "every interval was already stored with the same values; nothing changed"
        elif counts.revised:
            status = "revised"
            outcome.message = (f"{counts.revised} stored interval(s) replaced by newer values (old values kept "
                               f"as revisions), {counts.inserted} new")
        else:
            status = "imported"
            outcome.message = f"{counts.inserted} interval(s) stored"
        batch.status = status
        batch.rows_accepted = outcome.rows
        batch.rows_revised = counts.revised
        batch.finished_at = now_utc()
        outcome.batch_id = batch.id
    outcome.status = status
    outcome.inserted, outcome.revised, outcome.unchanged_rows = counts.inserted, counts.revised, counts.unchanged


def _meter_for(s, external_id: str, interval_minutes: int, options: ImportOptions, cache) -> Meter:
    meter = s.scalar(select(Meter).where(Meter.external_id == external_id))
    if meter is None:
        site_name = options.site or DEFAULT_SITE
        site = cache.get(site_name) or s.scalar(select(Site).where(Site.name == site_name))
        if site is None:
            site = Site(name=site_name, timezone=options.timezone or "UTC", created_at=now_utc())
            s.add(site)
            s.flush()
        cache[site_name] = site
        meter = Meter(site_id=site.id, external_id=external_id, multiplier=1.0,
                      interval_minutes=interval_minutes, created_at=now_utc())
        s.add(meter)
        s.flush()
    elif meter.interval_minutes is None:
        meter.interval_minutes = interval_minutes
    return meter


def _channels(s, meter: Meter, info, batch_id: int) -> None:
    have = set(s.scalars(select(Channel.quantity).where(Channel.meter_id == meter.id)))
    for q in info.quantities:
        if q in QUANTITIES and q not in have:
            s.add(Channel(meter_id=meter.id, quantity=q, source_unit=info.source_units.get(q, "kWh"),
                          first_batch_id=batch_id))
