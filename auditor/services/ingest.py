"""Import files and list what is stored."""
from __future__ import annotations

from collections.abc import Callable, Iterable
from pathlib import Path

from auditor.ingest.pipeline import FileOutcome, ImportOptions, import_file
from auditor.store import Store
from auditor.store.queries import meter_summaries


def import_files(store: Store, paths: Iterable[str | Path], options: ImportOptions | None = None,
                 progress: Callable[[int], None] | None = None) -> list[FileOutcome]:
    options = options or ImportOptions()
    return [import_file(store, p, options, progress) for p in paths]


def list_meters(store: Store) -> list[dict]:
    with store.session() as s:
        return meter_summaries(s)
