"""Import files and list what is stored."""
from __future__ import annotations

from collections.abc import Callable, Iterable
from pathlib import Path

from auditor.ingest.pipeline import FileOutcome, ImportOptions, import_file
from auditor.services.meters import list_meters  # noqa: F401  (its home is services.meters)
from auditor.store import Store


def import_files(store: Store, paths: Iterable[str | Path], options: ImportOptions | None = None,
                 progress: Callable[[int], None] | None = None) -> list[FileOutcome]:
    options = options or ImportOptions()
    return [import_file(store, p, options, progress) for p in paths]
