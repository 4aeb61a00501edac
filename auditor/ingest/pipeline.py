"""File → reader → canonical chunks → rows by meter → validation → one transaction.

``import_file`` is the only way readings enter the database. It streams the file: the reader
yields chunks, each chunk's rows are grouped by meter into a :class:`MeterPartition` (compact
numpy records in memory up to ``ImportOptions.memory_rows``, spilled to a temporary file past
that), and then, meter by meter, the rows are validated as a whole and written, all in one
transaction. Peak memory is therefore bounded by the partition's budget plus one meter's rows,
whatever the size of the file, and every validation rule (gaps, duplicates, the grid, spikes)
sees all of a meter's rows wherever the reader's chunks began and ended.

A file is imported whole or not at all: the write is one transaction, rolled back on any error,
an invalid meter included (a crash mid-write leaves the database as it was, which SQLite's
journal and PostgreSQL guarantee). A rejected file leaves only its import-batch record (status
``rejected`` with the errors), written in a transaction of its own.

Revisions are decided by content and age (``store/write.py``): a file whose rows were all
stored before is ``unchanged`` whatever its bytes; a file older than the file that wrote values
it would change is ``older`` and changes nothing unless ``force``.
"""
from __future__ import annotations

import hashlib
import json
import tempfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from sqlalchemy import delete, select
from sqlalchemy.exc import IntegrityError, SQLAlchemyError

from auditor.errors import AuditorError, InputError, Problem, StoreError, UsageError
from auditor.ingest import readers
from auditor.ingest.frame import ReadOptions, plausible_window
from auditor.ingest.validate import DEFAULT_MAX_KW, MeterRows, check_meter_ids, validate_meter
from auditor.store import Store
from auditor.store.meter_data import record_write
from auditor.store.models import QUANTITIES, Channel, ImportBatch, Meter, QualityFlag, Site
from auditor.store.queries import now_utc
from auditor.store.write import WriteCounts, import_session, write_meter

DEFAULT_SITE = "default"
STORE_ATTEMPTS = 3
# Rows of a file held in memory before the partition spills to a temporary file: 49 bytes a row,
# so about 75 MB (the 200 meter-year benchmark then peaks well under 400 MB).
MEMORY_ROWS = 1_500_000
# The largest --max-kw accepted: 100 GW is beyond any single metering point.
MAX_KW_CEILING = 1e8


@dataclass(frozen=True)
class ImportOptions:
    site: str | None = None
    timezone: str | None = None
    profile_path: str | None = None
    estimate_gaps: bool = False
    strict: bool = False
    dry_run: bool = False
    chunk_rows: int = 250_000
    force: bool = False  # apply superseded values and files older than the stored data
    move: bool = False  # move a known meter to ``site`` instead of warning
    max_kw: float | None = None  # the meters' plausible maximum average power, kept on the meter
    memory_rows: int = MEMORY_ROWS
    window: tuple[int, int] | None = None  # plausible interval starts; None: frame.plausible_window()


@dataclass
class FileOutcome:
    path: str
    status: str  # imported | unchanged | revised | older | rejected (changed: see import_file)
    rows: int = 0
    format: str | None = None
    batch_id: int | None = None
    meters: list[str] = field(default_factory=list)
    inserted: int = 0
    revised: int = 0
    unchanged_rows: int = 0
    superseded: int = 0  # intervals whose incoming values later imports had replaced: kept
    older: int = 0  # intervals an older file would have changed: nothing stored
    errors: list[Problem] = field(default_factory=list)
    warnings: list[Problem] = field(default_factory=list)
    message: str = ""
    cli_hint: str | None = None  # the option that would help, for the command line only (errors.cli_text)
    detail: str = ""  # for a bug report (an inbox run's error file); not in as_dict

    def as_dict(self) -> dict:
        return {
            "path": self.path, "status": self.status, "rows": self.rows, "format": self.format,
            "batch_id": self.batch_id, "meters": self.meters, "inserted": self.inserted,
            "revised": self.revised, "unchanged_rows": self.unchanged_rows,
            "superseded": self.superseded, "older": self.older,
            "errors": [p.as_dict() for p in self.errors],
            "warnings": [p.as_dict() for p in self.warnings], "message": self.message,
            **({"cli_hint": self.cli_hint} if self.cli_hint else {}),
        }


class _Changed(Exception):
    """The file changed while it was being imported (a writer still at work): rolled back."""


class _Older(Exception):
    """Raised inside the write transaction to roll an older file back."""

    def __init__(self, counts: WriteCounts):
        super().__init__("older")
        self.counts = counts


def sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# --------------------------------------------------------------------------------------------
# Rows grouped by meter
# --------------------------------------------------------------------------------------------
COLUMNS = (("start", np.dtype("<i8")), ("kwh", np.dtype("<f8")), ("kvarh_lag", np.dtype("<f8")),
           ("kvarh_lead", np.dtype("<f8")), ("kwh_received", np.dtype("<f8")), ("estimated", np.dtype("?")),
           ("line", np.dtype("<i8")))
ROW_BYTES = sum(d.itemsize for _, d in COLUMNS)  # 49


class MeterPartition:
    """A file's canonical rows grouped by meter, in arrival order within each meter.

    Each meter's rows are kept as contiguous column arrays (49 bytes a row); when more than
    ``memory_rows`` are held, every meter's rows so far are appended to one temporary file, column
    after column, and memory is freed. :meth:`take` returns all of a meter's rows (from the file,
    then memory) and forgets them.
    """

    def __init__(self, memory_rows: int = MEMORY_ROWS):
        self.memory_rows = max(int(memory_rows), 1)
        self.names: dict[str, int] = {}
        self.first_line: list[int] = []
        self.rows: list[int] = []
        self._mem: list[list[dict[str, np.ndarray]]] = []
        self._held = 0
        self._spill = None
        self._spilled: list[list[tuple[int, int]]] = []  # per meter: (byte offset, rows)
        self._spill_at = 0
        self.total = 0

    def add(self, chunk: pd.DataFrame) -> None:
        if not len(chunk):
            return
        local, uniq = pd.factorize(chunk["meter"].to_numpy(dtype=object))
        lines = chunk["line"].to_numpy()
        new = [i for i, u in enumerate(uniq) if u not in self.names]
        first_rows = np.zeros(len(uniq), dtype=np.int64)
        if new:
            # the line where each new meter first appears, for located messages about its id
            order = np.argsort(local, kind="stable")
            first_rows = order[np.searchsorted(local[order], np.arange(len(uniq)))]
            check_meter_ids([uniq[i] for i in new], lines[first_rows[new]], "")
        codes = np.empty(len(uniq), dtype=np.int64)
        for i, u in enumerate(uniq):
            code = self.names.get(u)
            if code is None:
                code = self.names.setdefault(u, len(self.names))
                self._mem.append([])
                self._spilled.append([])
                self.first_line.append(int(lines[first_rows[i]]))
                self.rows.append(0)
            codes[i] = code
        code = codes[local]
        cols = {name: chunk[name].to_numpy(dtype=dtype) for name, dtype in COLUMNS}
        if len(uniq) > 1 and not (code[1:] >= code[:-1]).all():
            order = np.argsort(code, kind="stable")
            code = code[order]
            cols = {name: v[order] for name, v in cols.items()}
        edges = np.r_[0, np.flatnonzero(np.diff(code)) + 1, len(code)]
        for lo, hi in zip(edges[:-1].tolist(), edges[1:].tolist(), strict=True):
            c = int(code[lo])
            self._mem[c].append({name: v[lo:hi].copy() for name, v in cols.items()})
            self.rows[c] += hi - lo
        self._held += len(code)
        self.total += len(code)
        if self._held > self.memory_rows:
            self._spill_all()

    def _spill_all(self) -> None:
        if self._spill is None:
            self._spill = tempfile.TemporaryFile(prefix="auditor-import-")
        self._spill.seek(self._spill_at)
        for c, parts in enumerate(self._mem):
            if not parts:
                continue
            n = sum(len(p["start"]) for p in parts)
            for name, _ in COLUMNS:
                block = np.concatenate([p[name] for p in parts]) if len(parts) > 1 else parts[0][name]
                block.tofile(self._spill)
            self._spilled[c].append((self._spill_at, n))
            self._spill_at += n * ROW_BYTES
            self._mem[c] = []
        self._held = 0

    def meters(self) -> list[str]:
        return list(self.names)

    def take(self, meter: str) -> dict[str, np.ndarray]:
        c = self.names[meter]
        parts: list[dict[str, np.ndarray]] = []
        for at, n in self._spilled[c]:
            self._spill.seek(at)
            parts.append({name: np.fromfile(self._spill, dtype=dtype, count=n) for name, dtype in COLUMNS})
        parts += self._mem[c]
        self._held -= sum(len(p["start"]) for p in self._mem[c])
        self._mem[c] = []
        self._spilled[c] = []
        if len(parts) == 1:
            return parts[0]
        if not parts:
            return {name: np.empty(0, dtype=dtype) for name, dtype in COLUMNS}
        return {name: np.concatenate([p[name] for p in parts]) for name, _ in COLUMNS}

    def close(self) -> None:
        if self._spill is not None:
            self._spill.close()
            self._spill = None


# --------------------------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------------------------
def _reader_for(path: Path, options: ImportOptions, window: tuple[int, int], profile=None):
    ropts = ReadOptions(timezone=options.timezone, chunk_rows=options.chunk_rows, window=window, profile=profile)
    if profile is not None:
        from auditor.ingest.readers import profile_csv

        return profile_csv, ropts
    return readers.detect(path), ropts


def _read(path: Path, options: ImportOptions, window: tuple[int, int],
          progress: Callable[[int], None] | None, profile=None) -> tuple[object, object, MeterPartition]:
    reader, ropts = _reader_for(path, options, window, profile)
    output = reader.read(path, ropts)
    part = MeterPartition(options.memory_rows)
    try:
        for chunk in output.chunks:
            try:
                part.add(chunk)
            except InputError as exc:  # the meter-id check names no file
                raise InputError(str(path), exc.problems) from None
            if progress:
                progress(len(chunk))
    except BaseException:
        part.close()
        raise
    if not part.total:
        part.close()
        raise InputError(str(path), Problem("no data rows after the header"))
    return reader, output.info, part


def _validated(part: MeterPartition, meter: str, file: str, info, options: ImportOptions,
               window: tuple[int, int], stored_interval: int | None, max_kw: float | None
               ) -> tuple[MeterRows, list[Problem]]:
    rec = part.take(meter)
    values = {q: rec[q] for q in QUANTITIES}
    return validate_meter(meter, rec["start"], values, rec["estimated"], rec["line"], file,
                          interval_minutes=info.interval_minutes, label=info.label,
                          stored_interval=stored_interval, strict=options.strict,
                          estimate_gaps=options.estimate_gaps, window=window, max_kw=max_kw)


# --------------------------------------------------------------------------------------------
# The import
# --------------------------------------------------------------------------------------------
def import_file(store: Store, path: str | Path, options: ImportOptions = ImportOptions(),
                progress: Callable[[int], None] | None = None, *,
                expect: tuple[int, int] | None = None) -> FileOutcome:
    """Import one file; never raises for a bad file (the outcome says ``rejected``).

    ``expect`` (size, mtime in ns), when given, is checked before anything is read and again
    before the transaction commits: a file that changed meanwhile is rolled back and the
    outcome says ``changed`` (the inbox leaves such a file for its next run).
    """
    path = Path(path)
    outcome = FileOutcome(str(path), "rejected")
    started = now_utc()
    window = options.window or plausible_window()
    _check_options(options)  # a bad option is the caller's error (exit 2), not the file's
    try:
        if not path.is_file():
            raise InputError(str(path), Problem("no such file" if not path.exists() else "not a regular file"))
        profile = None
        if options.profile_path:
            from auditor.ingest.profile import load_profile

            profile = load_profile(options.profile_path)  # a bad profile is reported even for a known file
        mtime = path.stat().st_mtime
        guard = _guard(path, expect)
        guard()
        digest = sha256_of(path)
        with store.session() as s:
            prior = s.scalar(select(ImportBatch).where(
                ImportBatch.sha256 == digest, ImportBatch.status.in_(("imported", "revised", "unchanged"))
            ).order_by(ImportBatch.id))
        if prior is not None and not options.force:
            outcome.status = "unchanged"
            outcome.format = prior.format
            outcome.rows = prior.rows_accepted
            outcome.message = (f"already imported as batch {prior.id} ({prior.file_name}); nothing changed")
            if not options.dry_run:
                _record(store, path, digest, prior.format, outcome, started)
            return outcome
        for attempt in range(STORE_ATTEMPTS):
            reader, info, part = _read(path, options, window, progress, profile)
            try:
                outcome.format = reader.FORMAT
                outcome.rows = part.total
                outcome.warnings = list(info.warnings)
                outcome.meters = part.meters()
                if options.dry_run:
                    _dry_run(store, path, info, part, options, window, outcome)
                    return outcome
                _store(store, path, digest, mtime, info, part, options, window, outcome, started, guard)
                return outcome
            except IntegrityError:
                # another import committed the same new site, meter or intervals while this one
                # ran (PostgreSQL lets imports run side by side); its transaction rolled back
                # whole, and the next attempt reads the file again and sees what the other stored
                if attempt == STORE_ATTEMPTS - 1:
                    raise
            finally:
                part.close()
        return outcome
    except _Changed:
        outcome.status = "changed"
        outcome.message = "the file changed while it was read (still being written?); nothing was stored"
        return outcome
    except _Older as older:
        _older_outcome(outcome, older.counts)
    except AuditorError as exc:
        outcome.status = "rejected"
        outcome.errors = (list(exc.problems) if isinstance(exc, InputError)
                          else [Problem(exc.message, cli_hint=exc.cli_hint)])
        outcome.message = exc.message
        outcome.cli_hint = exc.cli_hint
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


def _guard(path: Path, expect: tuple[int, int] | None) -> Callable[[], None]:
    def check() -> None:
        if expect is None:
            return
        try:
            st = path.stat()
        except OSError:
            raise _Changed() from None
        if (st.st_size, st.st_mtime_ns) != tuple(expect):
            raise _Changed()
    return check


def _check_options(options: ImportOptions) -> None:
    if options.max_kw is not None and not 0 < options.max_kw <= MAX_KW_CEILING:
        raise UsageError(f"a meter's plausible maximum must be above 0 and at most {MAX_KW_CEILING:,.0f} kW, "
                         f"not {options.max_kw:g}", cli_hint="--max-kw")
    if options.move and not options.site:
        raise UsageError("moving the file's meters needs the site to move them to", cli_hint="--move needs --site NAME")


def _older_outcome(outcome: FileOutcome, counts: WriteCounts) -> None:
    batches = ", ".join(str(b) for b in sorted(counts.newer_batches)[:5])
    outcome.status = "older"
    outcome.older = counts.older
    outcome.inserted = outcome.revised = 0
    outcome.message = (f"older than the stored data: the file was modified before the file(s) of import batch "
                       f"{batches}, whose values it would change in {counts.older} interval(s); nothing was "
                       "changed")
    outcome.cli_hint = "import it with --force to apply it anyway"
    outcome.errors = [Problem(outcome.message, cli_hint=outcome.cli_hint)]


def _dry_run(store, path, info, part, options, window, outcome) -> None:
    known = _known_meters(store, part.meters())
    for meter in part.meters():
        m = known.get(meter)
        _, warnings = _validated(part, meter, str(path), info, options, window,
                                 m[0] if m else None, options.max_kw or (m[1] if m else None))
        outcome.warnings.extend(warnings)
        outcome.inserted += part.rows[part.names[meter]]
    outcome.warnings = outcome.warnings[:200]
    outcome.status = "imported"
    outcome.message = "dry run: the file is valid; nothing was written"


def _known_meters(store: Store, names: list[str]) -> dict[str, tuple[int | None, float | None]]:
    out = {}
    with store.session() as s:
        for lo in range(0, len(names), 500):
            out.update({e: (i, k) for e, i, k in s.execute(
                select(Meter.external_id, Meter.interval_minutes, Meter.max_kw).where(
                    Meter.external_id.in_(names[lo:lo + 500]))).all()})
    return out


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
                file_name=str(path)[:500], sha256=digest or "", format=fmt,
                rows_accepted=0 if outcome.status in ("rejected", "older") else outcome.rows,
                rows_rejected=outcome.rows if outcome.status in ("rejected", "older") else 0, started_at=started,
                finished_at=now_utc(), status=outcome.status,
                errors=json.dumps([p.as_dict() for p in outcome.errors[:50]]) if outcome.errors else None,
            )
            s.add(batch)
            s.flush()
            outcome.batch_id = batch.id
    except SQLAlchemyError as exc:
        raise StoreError(f"cannot record the import of {path}: {exc}") from exc


def _store(store: Store, path: Path, digest: str, mtime: float, info, part: MeterPartition,
           options: ImportOptions, window: tuple[int, int], outcome: FileOutcome, started,
           guard: Callable[[], None]) -> None:
    counts = WriteCounts()
    older: WriteCounts | None = None
    warnings: list[Problem] = []
    with import_session(store) as s:
        batch = ImportBatch(file_name=str(path)[:500], sha256=digest, format=info.format, started_at=started,
                            status="importing", rows_accepted=0, rows_rejected=0, source_mtime=mtime)
        s.add(batch)
        s.flush()
        sites = _Sites(s, options, warnings)
        conn = s.connection()
        for name in part.meters():
            meter = s.scalar(select(Meter).where(Meter.external_id == name))
            if meter is not None and options.max_kw is not None:
                meter.max_kw = options.max_kw
            max_kw = meter.max_kw if meter is not None else options.max_kw
            rows, found = _validated(part, name, str(path), info, options, window,
                                     meter.interval_minutes if meter is not None else None, max_kw)
            warnings.extend(found)
            meter = sites.meter(meter, name, rows.interval_minutes)
            if older is not None:
                # an older file is rolled back; the other meters are only counted
                older.add(write_meter(conn, meter.id, rows.start, rows.values, rows.flags, batch.id,
                                      interval_minutes=meter.interval_minutes, source_mtime=mtime, apply=False))
                continue
            _channels(s, meter, info, batch.id)
            c = write_meter(conn, meter.id, rows.start, rows.values, rows.flags, batch.id,
                            interval_minutes=meter.interval_minutes, source_mtime=mtime, force=options.force)
            if c.older:
                older = c
                continue
            # the meter's data version and span, in the same transaction (portfolio summaries)
            record_write(conn, meter.id, batch.id, inserted=c.inserted, revised=c.revised,
                         first_start=int(rows.start.min()), last_start=int(rows.start.max()))
            counts.add(c)
            _flags(s, meter, rows, c, batch.id)
        if older is not None:
            raise _Older(older)
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
        if counts.superseded:
            note = (f"{counts.superseded} interval(s) carry values that later imports replaced; the newer stored "
                    "values are kept")
            hint = "--force applies the file's"
            if status == "unchanged":
                outcome.message = ("every row of the file was imported before; " + note + "; nothing changed")
                outcome.cli_hint = hint
            else:
                warnings.append(Problem(note, cli_hint=hint))
        batch.status = status
        batch.rows_accepted = outcome.rows
        batch.rows_revised = counts.revised
        batch.finished_at = now_utc()
        outcome.batch_id = batch.id
        guard()  # the file as read is the file as it is now: else roll back
    outcome.status = status
    outcome.warnings = (outcome.warnings + warnings)[:200]
    outcome.inserted, outcome.revised, outcome.unchanged_rows = counts.inserted, counts.revised, counts.unchanged
    outcome.superseded = counts.superseded


def _flags(s, meter: Meter, rows: MeterRows, c: WriteCounts, batch_id: int) -> None:
    step = rows.interval_minutes * 60
    if c.revised or c.unchanged or c.superseded:
        # findings about intervals this file now covers are superseded by its own
        s.execute(delete(QualityFlag).where(
            QualityFlag.meter_id == meter.id, QualityFlag.start >= int(rows.start[0]),
            QualityFlag.end <= int(rows.start[-1]) + step))
    if rows.findings:
        s.execute(QualityFlag.__table__.insert(), [
            {"meter_id": meter.id, "batch_id": batch_id, "kind": f.kind, "start": f.start,
             "end": f.end, "intervals": f.intervals, "detail": f.detail[:500]}
            for f in rows.findings])


class _Sites:
    """Sites and meters of one import: new meters go to ``--site`` (or the default site); a known
    meter named with another ``--site`` is warned about, or moved with ``--move``."""

    def __init__(self, s, options: ImportOptions, warnings: list[Problem]):
        self.s = s
        self.options = options
        self.warnings = warnings
        self.cache: dict[str, Site] = {}

    def site(self, name: str) -> Site:
        site = self.cache.get(name) or self.s.scalar(select(Site).where(Site.name == name))
        if site is None:
            tz = self.options.timezone or "UTC"
            site = Site(name=name, timezone=tz, created_at=now_utc())
            self.s.add(site)
            self.s.flush()
            if self.options.timezone is None:
                self.warnings.append(Problem(
                    f"new site {name!r} is billed in UTC, assumed because no time zone was given: billing "
                    "periods then begin at midnight UTC. Set the site's time zone (e.g. Europe/Berlin)",
                    cli_hint=f": auditor sites set {_quoted(name)} --timezone ZONE, or import with --timezone ZONE"))
        self.cache[name] = site
        return site

    def meter(self, meter: Meter | None, name: str, interval_minutes: int) -> Meter:
        s, options = self.s, self.options
        if meter is None:
            site = self.site(options.site or DEFAULT_SITE)
            meter = Meter(site_id=site.id, external_id=name, multiplier=1.0, interval_minutes=interval_minutes,
                          created_at=now_utc(), max_kw=options.max_kw)
            s.add(meter)
            s.flush()
            return meter
        if meter.interval_minutes is None:
            meter.interval_minutes = interval_minutes
        if options.site and meter.site.name != options.site:
            if options.move:
                old = meter.site.name
                meter.site_id = self.site(options.site).id
                s.flush()
                s.refresh(meter)
                self.warnings.append(Problem(f"meter {name} moved from site {old!r} to {options.site!r}"))
            else:
                self.warnings.append(Problem(
                    f"meter {name} is on site {meter.site.name!r}, not {options.site!r}: its readings were stored "
                    "there", cli_hint=f"add --move to move it to {options.site!r}"))
        return meter


def _quoted(name: str) -> str:
    return name if name.replace("-", "").replace("_", "").isalnum() else json.dumps(name)


def _channels(s, meter: Meter, info, batch_id: int) -> None:
    have = set(s.scalars(select(Channel.quantity).where(Channel.meter_id == meter.id)))
    for q in info.quantities:
        if q in QUANTITIES and q not in have:
            s.add(Channel(meter_id=meter.id, quantity=q, source_unit=info.source_units.get(q, "kWh"),
                          first_batch_id=batch_id))


__all__ = ["DEFAULT_MAX_KW", "DEFAULT_SITE", "FileOutcome", "ImportOptions", "MeterPartition", "import_file",
           "sha256_of"]
