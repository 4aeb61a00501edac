"""Readers: one module per file format, each turning a file into canonical frames.

A reader module has ``FORMAT`` (a short name stored on the import batch), ``sniff(path, head)``
(True when the first few KiB of text look like its format) and ``read(path, options)`` returning
a :class:`~auditor.ingest.frame.ReadOutput`. To add a format, write the module and add it to
``READERS`` below, most specific first: detection is by content, never by file name alone.
A mapping profile (``--profile``) bypasses detection.
"""
from __future__ import annotations

from pathlib import Path
from types import ModuleType

from auditor.errors import InputError, Problem

# Most specific first: detection is by content.
READER_MODULES = ("espi_xml", "obis_csv", "plain_csv", "wide_csv")
READERS: list[ModuleType] = []


def _register() -> None:
    import importlib

    for name in READER_MODULES:
        try:
            READERS.append(importlib.import_module(f"auditor.ingest.readers.{name}"))
        except ModuleNotFoundError as exc:
            if exc.name != f"auditor.ingest.readers.{name}":
                raise


HEAD_BYTES = 16_384
# A first line longer than the head is read whole (up to this) so that detection sees the whole
# header: a header of millions of columns is then rejected by its reader naming the first unknown
# column, instead of passing as an unrecognised layout.
MAX_FIRST_LINE = 64 << 20


def read_head(path: Path) -> str:
    try:
        with open(path, "rb") as fh:
            raw = fh.read(HEAD_BYTES)
            if len(raw) == HEAD_BYTES and b"\n" not in raw and b"\r" not in raw:
                raw += fh.readline(MAX_FIRST_LINE)
    except OSError as exc:
        raise InputError(str(path), Problem(f"cannot read the file: {exc.strerror}")) from None
    if not raw.strip():
        raise InputError(str(path), Problem("the file is empty"))
    if b"\x00" in raw:
        raise InputError(str(path), Problem("binary content (NUL bytes): not a text export; "
                                            "UTF-16 files must be saved as UTF-8"))
    return raw.decode("utf-8-sig", errors="replace")


def detect(path: Path) -> ModuleType:
    if not READERS:
        _register()
    head = read_head(path)
    for reader in READERS:
        if reader.sniff(path, head):
            return reader
    first = head.splitlines()[0][:120] if head.splitlines() else ""
    raise InputError(str(path), Problem(
        f"unrecognised layout (first line {first!r}); expected the plain CSV header "
        "meter,start,kwh,kvarh_lag,kvarh_lead or a day-per-row export; another layout needs a mapping profile",
        1, cli_hint="give --profile FILE"))
