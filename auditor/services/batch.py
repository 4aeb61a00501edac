"""Audits of many meters at once, in parallel across the machine's cores.

:func:`audit_meters` runs the single-meter audit (:func:`auditor.services.audit.audit_meter`,
unchanged) for every meter named, in a pool of worker processes. Each worker opens the store
itself from its URL: a database connection never crosses a process boundary. Workers come from
the ``forkserver`` start method — a clean server process (no threads, no open connections, the
audit modules already imported) forks them — so a pool can be started safely from the
dashboard's threads as well as from the command line. From a process with a single thread (the
command line) the workers are forked directly instead, after the store's pooled connections are
closed: they start at once with the audit already imported. A meter whose audit fails is reported
with its error and the rest go on.

The tariff of each meter comes from one function, ``tariff_for(meter) -> Tariff``; a single
tariff for every meter is :func:`same_tariff`. A per-meter tariff plugs in there.
"""
from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path

from auditor.errors import AuditorError, NotFoundError, UsageError
from auditor.store import Store
from auditor.tariffs import Tariff

__all__ = ["CSV_COLUMNS", "BatchAudit", "MeterOutcome", "TariffFor", "audit_meters", "default_workers", "meter_row",
           "own_tariffs", "same_tariff", "select_meters"]

#: The tariff of a meter, or (tariff, billing day) for a meter billed on a day of its own (raise
#: an :class:`~auditor.errors.AuditorError` when it has none).
TariffFor = Callable[[str], "Tariff | tuple[Tariff, int | None]"]

#: Below this many meters a pool costs more than it saves: audit in this process.
POOL_FROM = 4


def same_tariff(tariff: str | Path | Tariff) -> TariffFor:
    """``tariff_for`` giving every meter the same tariff (a path, a shipped example's name or a Tariff)."""
    from auditor.services.audit import resolve_tariff

    t = resolve_tariff(tariff)
    return lambda meter: t


def own_tariffs(store: Store, fallback: str | Path | Tariff | None = None) -> TariffFor:
    """``tariff_for`` giving each meter its own tariff and billing day (``auditor meters
    set-tariff``), and ``fallback`` to the others; without a fallback a meter with no tariff of
    its own fails, with the command that fixes it."""
    from auditor.services.meter_tariff import NO_TARIFF_HINT, meter_tariffs

    own = meter_tariffs(store)
    default = same_tariff(fallback) if fallback is not None else None

    def tariff_for(meter: str):
        if meter in own:
            return own[meter].tariff, own[meter].billing_day
        if default is not None:
            return default(meter)
        raise UsageError(f"meter {meter} has no tariff of its own: " + NO_TARIFF_HINT.format(meter=meter))

    return tariff_for


def default_workers() -> int:
    """The CPUs this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def select_meters(store: Store, *, all_meters: bool = False, site: str | None = None,
                  meters: Iterable[str] = ()) -> list[str]:
    """The meters to audit, by site then meter id: every meter, a site's, or those named (checked)."""
    from sqlalchemy import select

    from auditor.store.models import Meter, Site

    named = list(dict.fromkeys(meters))
    with store.session() as s:
        q = select(Meter.external_id, Site.name).join(Site).order_by(Site.name, Meter.external_id)
        rows = s.execute(q).all()
    if all_meters:
        return [m for m, _ in rows]
    if site is not None:
        sites = sorted({x for _, x in rows})
        if site not in sites:
            raise NotFoundError(f"no site {site!r}" + (f"; sites: {', '.join(sites)}" if sites else ""))
        return [m for m, x in rows if x == site]
    known = {m for m, _ in rows}
    missing = [m for m in named if m not in known]
    if missing:
        raise NotFoundError(f"no meter {missing[0]!r}" + (f" (and {len(missing) - 1} more)" if len(missing) > 1 else ""))
    order = {m: i for i, (m, _) in enumerate(rows)}
    return sorted(named, key=order.__getitem__)


@dataclass(frozen=True)
class MeterOutcome:
    """One meter's audit: its document (as ``auditor audit --meter M --json`` prints it) and its
    table row, or the error that stopped it (``internal`` when the error is a bug)."""

    meter: str
    document: dict | None = None
    row: dict | None = None
    error: str | None = None
    internal: bool = False


@dataclass(frozen=True)
class BatchAudit:
    outcomes: list[MeterOutcome] = field(default_factory=list)

    @property
    def audits(self) -> list[dict]:
        return [o.document for o in self.outcomes if o.document is not None]

    @property
    def failed(self) -> list[dict]:
        return [{"meter": o.meter, "error": o.error} for o in self.outcomes if o.error is not None]

    @property
    def rows(self) -> list[dict]:
        """One row per meter (failed ones with their error), in the order the meters were named."""
        return [o.row if o.row is not None else {**_EMPTY_ROW, "meter": o.meter, "error": o.error}
                for o in self.outcomes]

    @property
    def internal_error(self) -> bool:
        return any(o.internal for o in self.outcomes)

    def to_dict(self) -> dict:
        """``{"audits": [<single-meter audit document>, ...], "failed": [{"meter", "error"}]}``."""
        return {"audits": self.audits, "failed": self.failed}


#: The columns of the one-row-per-meter table as CSV (``audit --csv``, the site report).
CSV_COLUMNS = ("site", "meter", "currency", "kwh", "pf", "reactive_total", "total", "coverage", "worst_period",
               "worst_pf", "error")

_EMPTY_ROW = {"site": None, "meter": None, "currency": None, "kwh": None, "pf": None, "reactive_total": None,
              "total": None, "coverage": None, "worst_period": None, "worst_pf": None, "error": None}


def meter_row(audit, document: dict) -> dict:
    """The batch table's row of one audit (a :class:`~auditor.services.audit.MeterAudit`): site,
    kWh, energy PF, reactive charges, total, coverage (intervals present / expected from the
    first interval read to the last, as ``auditor meters`` counts it) and the worst month (the
    period with the lowest energy PF, lagging kvarh)."""
    from auditor.quantities import ticks_per_second

    periods = audit.result.periods
    index = audit.data.frame.index
    present = len(index)
    expected = 0
    if present:  # seconds from the first interval read to the last, from the integer ticks
        seconds = (int(index.asi8[-1]) - int(index.asi8[0])) / ticks_per_second(index)
        expected = seconds // (audit.data.interval_minutes * 60) + 1
    with_pf = [p for p in periods if p.intervals and math.isfinite(p.pf)]
    worst = min(with_pf, key=lambda p: p.pf) if with_pf else None
    t = document["totals"]
    return {"site": document["site"], "meter": document["meter"], "currency": document["currency"],
            "kwh": t.get("kwh"), "pf": t.get("pf"), "reactive_total": t.get("reactive_total"),
            "total": t.get("total"), "coverage": present / expected if expected else None,
            "worst_period": worst.label if worst else None, "worst_pf": worst.pf if worst else None,
            "error": None}


# --------------------------------------------------------------------------------------------
# the work of a few meters (in a worker process, or here for small batches)
# --------------------------------------------------------------------------------------------
_worker_store: Store | None = None
_worker_tariffs: list = []


def _init_worker(url: str, tariffs: list) -> None:
    """Open the store once per worker process (never inherited: see the module docstring) and
    keep the batch's tariffs, which tasks then name by their position."""
    global _worker_store, _worker_tariffs
    from auditor.store import open_store

    _keep_freed_memory()
    _worker_store = open_store(url, upgrade=False)
    _worker_tariffs = tariffs


def _keep_freed_memory() -> None:
    """Let this worker's C allocator keep the memory it frees (glibc only). Each meter-year's
    arrays are a few hundred kB apiece; by default glibc serves such blocks with fresh pages and
    hands freed memory back to the system, so every meter page-faults its arrays in again — a
    fifth of the audit's CPU time at 500 meter-years. These are the settings the variables
    ``MALLOC_MMAP_THRESHOLD_`` and ``MALLOC_TRIM_THRESHOLD_`` make (glibc manual, "Memory
    Allocation Tunables"); a worker's memory then stays at its largest meter's working set."""
    try:
        if not os.confstr("CS_GNU_LIBC_VERSION").startswith("glibc"):
            return
    except (AttributeError, ValueError, OSError):  # not a GNU system
        return
    try:
        import ctypes

        mallopt = ctypes.CDLL(None).mallopt
    except (OSError, AttributeError):  # pragma: no cover - a glibc without the call
        return
    m_trim_threshold, m_mmap_threshold = -1, -3  # <malloc.h>
    mallopt(m_mmap_threshold, 64 << 20)
    mallopt(m_trim_threshold, 256 << 20)


def _audit_one(store: Store, meter: str, tariff, options: dict, data=None) -> MeterOutcome:
    """One meter's outcome; ``data`` is its loaded :class:`~auditor.services.meters.MeterData`
    (None: load it here, which also reports a meter that is not stored)."""
    from auditor.services.audit import audit_loaded, audit_meter, audit_span

    if isinstance(tariff, str):  # the tariff function's error for this meter
        return MeterOutcome(meter, error=tariff)
    if isinstance(tariff, tuple):  # the meter's own tariff, billed from its own day
        tariff, own_day = tariff
        if own_day is not None and options.get("billing_day") is None and options.get("periods") is None:
            options = {**options, "billing_day": own_day}
    try:
        if data is None:
            a = audit_meter(store, meter, tariff, **options)
        else:
            start, end = audit_span(options.get("start"), options.get("end"), options.get("periods"))
            a = audit_loaded(store, data, tariff, start=start, end=end, billing_day=options.get("billing_day"),
                             periods=options.get("periods"))
        doc = a.to_dict()
        return MeterOutcome(meter, document=doc, row=meter_row(a, doc))
    except AuditorError as exc:
        return MeterOutcome(meter, error=exc.message)
    except Exception as exc:  # a bug: reported with the meter, the batch goes on, exit 3 at the end
        return MeterOutcome(meter, error=f"internal error: {type(exc).__name__}: {exc}", internal=True)


def _audit_some(store: Store, work: list[tuple[str, object]], options: dict) -> list[MeterOutcome]:
    """A few meters: their meters, sites and readings read with one query each
    (:func:`~auditor.services.meters.load_meters`), then audited one by one. A meter the
    shared read cannot give (not stored, or a read that failed) is loaded alone, which reports
    its own error."""
    from auditor.services.audit import audit_span
    from auditor.services.meters import load_meters

    wanted = [m for m, t in work if not isinstance(t, str)]
    start, end = audit_span(options.get("start"), options.get("end"), options.get("periods"))
    try:
        loaded = load_meters(store, wanted, start, end) if wanted else {}
    except AuditorError:
        loaded = {}
    return [_audit_one(store, meter, tariff, options, loaded.get(meter)) for meter, tariff in work]


def _audit_in_worker(work: list[tuple[str, int]], options: dict) -> list[MeterOutcome]:
    """A few meters per task: one message each way for all of them; each meter's tariff is
    named by its position in the table the worker received when it started."""
    assert _worker_store is not None
    return _audit_some(_worker_store, [(m, _worker_tariffs[k]) for m, k in work], options)


def _chunks(meters: list[str], workers: int) -> list[list[str]]:
    size = max(1, min(16, len(meters) // (workers * 4)))
    return [meters[i:i + size] for i in range(0, len(meters), size)]


def _pool_context(store: Store):
    """``fork`` from a process with one thread (the command line), after closing the store's
    pooled connections, so workers start at once with everything imported and inherit no
    connection; ``forkserver`` otherwise (the dashboard's threads make forking unsafe), its
    server importing the audit once for all the workers it forks."""
    import multiprocessing
    import threading

    methods = multiprocessing.get_all_start_methods()
    if "fork" in methods and threading.active_count() == 1:
        store.engine.dispose()  # the pool reopens connections on the next use, here only
        return multiprocessing.get_context("fork")
    if "forkserver" in methods:
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["auditor.services.batch", "auditor.services.audit"])
        return ctx
    return multiprocessing.get_context("spawn")


def audit_meters(store: Store, meters: list[str], tariff_for: TariffFor, *, workers: int | None = None,
                 start: date | None = None, end: date | None = None, billing_day: int | None = None,
                 periods=None, progress: Callable[[int, int], None] | None = None) -> BatchAudit:
    """Audit every meter of ``meters`` under ``tariff_for(meter)``, in ``workers`` processes
    (default: the CPU count). ``progress(done, total)`` is called after each meter."""
    if workers is not None and workers < 1:
        raise UsageError(f"the number of workers must be at least 1, not {workers}")
    options = {"start": start, "end": end, "billing_day": billing_day, "periods": periods}
    tariffs: dict[str, Tariff | str] = {}
    for m in meters:
        try:
            tariffs[m] = tariff_for(m)
        except AuditorError as exc:
            tariffs[m] = exc.message
    n = len(meters)
    workers = min(workers or default_workers(), max(n, 1))
    results: dict[str, MeterOutcome] = {}
    done = 0

    def finish(m: str, outcome: MeterOutcome) -> None:
        nonlocal done
        results[m] = outcome
        done += 1
        if progress:
            progress(done, n)

    import multiprocessing

    nested = multiprocessing.parent_process() is not None  # never a pool inside a worker
    if workers > 1 and n >= POOL_FROM and not nested and not store.url.endswith(":memory:"):
        from concurrent.futures import ProcessPoolExecutor, as_completed
        from concurrent.futures.process import BrokenProcessPool

        table: list = []  # each distinct tariff (or error) once: workers get it when they start
        position: dict[int, int] = {}
        for t in tariffs.values():
            if id(t) not in position:
                position[id(t)] = len(table)
                table.append(t)
        try:
            with ProcessPoolExecutor(max_workers=workers, mp_context=_pool_context(store), initializer=_init_worker,
                                     initargs=(store.url, table)) as pool:
                futures = {pool.submit(_audit_in_worker, [(m, position[id(tariffs[m])]) for m in chunk], options): chunk
                           for chunk in _chunks(meters, workers)}
                for f in as_completed(futures):
                    try:
                        outcomes = f.result()
                    except BrokenProcessPool:
                        raise
                    except Exception as exc:  # the task itself failed to travel: its meters fail
                        outcomes = [MeterOutcome(m, error=f"internal error: {type(exc).__name__}: {exc}", internal=True)
                                    for m in futures[f]]
                    for o in outcomes:
                        finish(o.meter, o)
        except BrokenProcessPool:
            # a worker died (killed, out of memory, or could not start): the meters left are
            # audited here, one after the other
            pass
    left = [m for m in meters if m not in results]
    for chunk in _chunks(left, 1):
        for o in _audit_some(store, [(m, tariffs[m]) for m in chunk], options):
            finish(o.meter, o)
    return BatchAudit([results[m] for m in meters])
