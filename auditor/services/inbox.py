"""Unattended imports from an inbox folder (``auditor import --inbox DIR``).

Every regular file at the top of DIR is imported on its own (each wholly or not at all) and then
moved: to ``DIR/done/`` when it was imported, revised or already stored, to ``DIR/rejected/``
with ``NAME.error.txt`` beside it (every located error: file, line, column) when it was refused.
A file is never overwritten: a name already taken gets a numeric suffix (``a.csv`` → ``a.2.csv``).
Each run appends JSON lines to ``DIR/auditor-inbox.log``: one per file, one for the run.

Skipped, left for a later run:

* names starting with a dot, and the run's own files (log, lock);
* names ending ``.part``, ``.tmp``, ``.partial``, ``.crdownload``, ``~`` or ``.swp``: the usual
  marks of a file still being written (copy as ``x.csv.part`` and rename when complete);
* files whose size and modification time have not been stable for ``settle_seconds`` (default
  5 s): a transfer may still be appending to them. The size and time seen when the folder is
  listed are checked again just before the import and once more before it commits: a file that
  changed meanwhile is left for the next run, never imported in part;
* files that are not complete by their format: a text file (CSV) whose last line has no line
  break, or an XML file whose root element is not closed. Such a file waits; once it has been
  stable for ``incomplete_seconds`` (default 15 minutes) it is rejected as cut off;
* anything that is not a regular file (folders, symbolic links, sockets).

A file that fails for any reason — a bad file, an older export (``older``), or an unexpected
error in the program itself — goes to ``rejected/`` with its error report, and the run goes on
with the next file; the run then exits 1. Only a failure of the database itself (locked,
read-only, disk full) is not the file's fault: the file stays in DIR for the next run, the run
stops there, and the outcome counts as a failure (non-zero exit).

Delivery convention: write the file under a temporary name (``x.csv.part``, or a dotfile) in the
same folder and rename it when it is complete; a rename is atomic, so the inbox never sees a
half-written file.

Only one run works on a DIR at a time: an exclusive ``flock`` on ``DIR/.auditor-inbox.lock``.
A second run exits at once with a message (``wait_seconds`` lets it wait for the lock instead).
Re-running after a crash never imports twice: a file whose import committed but which was not
yet moved is recognised by its SHA-256 and reported ``unchanged``.
"""
from __future__ import annotations

import errno
import fcntl
import json
import os
import re
import stat
import time
import traceback
from datetime import UTC, datetime
from pathlib import Path

from auditor.errors import Problem, UsageError
from auditor.ingest.pipeline import FileOutcome, ImportOptions, import_file
from auditor.store import Store

LOG_NAME = "auditor-inbox.log"
LOCK_NAME = ".auditor-inbox.lock"
DONE_DIR = "done"
REJECTED_DIR = "rejected"
IN_PROGRESS_SUFFIXES = (".part", ".tmp", ".partial", ".crdownload", "~", ".swp")
SETTLE_SECONDS = 5.0
INCOMPLETE_SECONDS = 900.0
_PROBE_BYTES = 4096
# how import_file words a failure of the database rather than of the file (pipeline.import_file)
_DB_FAILURE_PREFIXES = ("database error", "cannot record the import")


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


def _lock(inbox: Path, wait_seconds: float):
    """The open lock file holding an exclusive flock, or None when another run holds it."""
    fh = open(inbox / LOCK_NAME, "a+")
    deadline = time.monotonic() + max(0.0, wait_seconds)
    while True:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return fh
        except BlockingIOError:
            if time.monotonic() >= deadline:
                fh.close()
                return None
            time.sleep(0.2)


def incomplete_reason(path: Path) -> str | None:
    """Why a file is not complete by its format, or None when it looks complete.

    A text file (CSV) must end with a line break: a last line without one may end mid-row. An
    XML file must close its root element. Binary content is left to the readers to reject.
    """
    with open(path, "rb") as fh:
        head = fh.read(_PROBE_BYTES)
        size = fh.seek(0, os.SEEK_END)
        fh.seek(max(0, size - _PROBE_BYTES))
        tail = fh.read(_PROBE_BYTES)
    if not head:
        return "the file is empty"
    if b"\x00" in head:
        return None  # not a text export (or UTF-16): the reader says what it is
    text = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    if text.startswith(b"<"):
        root = _xml_root(text)
        if root is None:
            return None
        closed = re.search(rb"</\s*" + re.escape(root) + rb"\s*>\s*\Z", tail)
        return None if closed else f"the XML root <{root.decode(errors='replace')}> is not closed"
    if tail[-1:] not in (b"\n", b"\r"):
        return "the last line has no line break (the file may end mid-row)"
    return None


def _xml_root(text: bytes) -> bytes | None:
    """The name of the root element: the first tag that is not a declaration, comment or DTD."""
    text = re.sub(rb"<!--.*?-->", b"", text, flags=re.S)
    m = re.search(rb"<(?![?!])([A-Za-z_][\w.\-]*(?::[A-Za-z_][\w.\-]*)?)", text)
    return m.group(1) if m else None


def candidates(inbox: Path, settle_seconds: float = SETTLE_SECONDS,
               incomplete_seconds: float = INCOMPLETE_SECONDS) -> tuple[list[Path], list[dict]]:
    """Files to take now (sorted by name) and the ones skipped, each with the reason. A file that
    stayed incomplete past ``incomplete_seconds`` is taken, to be rejected as cut off."""
    listing = _list(inbox, settle_seconds, incomplete_seconds)
    return listing.take, listing.skipped


class _Listing:
    """What one look at the inbox found."""

    def __init__(self):
        self.take: list[Path] = []
        self.skipped: list[dict] = []
        self.seen: dict[Path, tuple[int, int]] = {}  # size, mtime_ns when listed
        self.cut_off: dict[Path, str] = {}  # stayed incomplete past the limit: rejected


def _list(inbox: Path, settle_seconds: float, incomplete_seconds: float) -> _Listing:
    out = _Listing()
    now = time.time()
    for entry in sorted(os.scandir(inbox), key=lambda e: e.name):
        name = entry.name
        if name.startswith(".") or name == LOG_NAME:
            continue
        if name in (DONE_DIR, REJECTED_DIR) and entry.is_dir(follow_symlinks=False):
            continue
        try:
            st = entry.stat(follow_symlinks=False)
        except OSError:
            continue  # vanished while listing
        path = Path(entry.path)
        if not stat.S_ISREG(st.st_mode):
            out.skipped.append({"path": entry.path, "reason": "not a regular file"})
            continue
        if name.endswith(IN_PROGRESS_SUFFIXES):
            out.skipped.append({"path": entry.path, "reason": "name marks a file still being written"})
            continue
        age = now - st.st_mtime
        if age < settle_seconds:
            out.skipped.append({"path": entry.path,
                                "reason": f"modified less than {settle_seconds:g} s ago (may still be written)"})
            continue
        try:
            why = incomplete_reason(path)
        except OSError as exc:
            out.skipped.append({"path": entry.path, "reason": f"cannot be read now: {exc.strerror}"})
            continue
        if why is not None and age < incomplete_seconds:
            out.skipped.append({"path": entry.path, "reason": f"incomplete: {why}; waiting for the rest (up to "
                                                              f"{incomplete_seconds:g} s after its last change)"})
            continue
        if why is not None:
            out.cut_off[path] = why
        out.take.append(path)
        out.seen[path] = (st.st_size, st.st_mtime_ns)
    return out


def _stat_of(path: Path) -> tuple[int, int] | None:
    try:
        st = path.stat()
    except OSError:
        return None
    return st.st_size, st.st_mtime_ns


def _free_name(folder: Path, name: str) -> Path:
    target = folder / name
    if not target.exists():
        return target
    stem, dot, ext = name.rpartition(".")
    if not dot or not stem:
        stem, ext = name, ""
    n = 2
    while True:
        target = folder / (f"{stem}.{n}.{ext}" if ext else f"{name}.{n}")
        if not target.exists():
            return target
        n += 1


def _move(src: Path, folder: Path) -> Path:
    """Move without ever overwriting: hard-link to a free name, then unlink the original."""
    folder.mkdir(exist_ok=True)
    while True:
        target = _free_name(folder, src.name)
        try:
            os.link(src, target)  # fails with EEXIST instead of replacing
        except FileExistsError:
            continue
        except OSError as exc:
            if exc.errno not in (errno.EPERM, errno.EXDEV, errno.ENOTSUP):
                raise
            if target.exists():
                continue
            os.rename(src, target)
            return target
        os.unlink(src)
        return target


def error_report(outcome: FileOutcome, original: Path) -> str:
    lines = [f"file: {original}", f"rejected at: {_now()}", f"reason: {outcome.message}", "",
             "errors (file, line, column: message):"]
    for p in outcome.errors or [Problem(outcome.message)]:
        lines.append("  " + p.describe(str(original)))
    if outcome.warnings:
        lines += ["", "warnings:"] + ["  " + w.describe(str(original)) for w in outcome.warnings[:200]]
    if outcome.detail:
        lines += ["", "details for a bug report:", outcome.detail.rstrip()]
    return "\n".join(lines) + "\n"


def _write_error_file(rejected_path: Path, text: str) -> Path:
    target = rejected_path.with_name(rejected_path.name + ".error.txt")
    n = 2
    while True:
        try:
            fd = os.open(target, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
            break
        except FileExistsError:
            target = rejected_path.with_name(f"{rejected_path.name}.{n}.error.txt")
            n += 1
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        fh.write(text)
    return target


def _log(inbox: Path, record: dict) -> None:
    # one write per line in append mode: lines of concurrent writers never interleave
    with open(inbox / LOG_NAME, "a", encoding="utf-8") as fh:
        fh.write(json.dumps(record, ensure_ascii=False) + "\n")


def _is_db_failure(outcome: FileOutcome) -> bool:
    return outcome.status == "rejected" and any(p.message.startswith(_DB_FAILURE_PREFIXES)
                                                for p in outcome.errors)


def run_inbox(store: Store, inbox_dir: Path, options: ImportOptions, *,
              settle_seconds: float = SETTLE_SECONDS, wait_seconds: float = 0.0,
              incomplete_seconds: float = INCOMPLETE_SECONDS) -> dict:
    """Import every ready file in ``inbox_dir`` and move it (see the module docstring).

    Returns ``{"files": [...], "skipped": [...], "message": str, "locked": bool, "log": str,
    "dry_run": bool}``; each file is ``FileOutcome.as_dict()`` plus ``moved_to``. With
    ``options.dry_run`` files are read and validated only: nothing is written, moved or logged.
    """
    inbox = Path(inbox_dir)
    if not inbox.is_dir():
        raise UsageError(f"inbox {inbox} is not a folder" if inbox.exists() else f"inbox {inbox} does not exist")
    result = {"files": [], "skipped": [], "message": "", "locked": False, "log": str(inbox / LOG_NAME),
              "dry_run": options.dry_run}
    try:
        lock = _lock(inbox, wait_seconds)
    except OSError as exc:
        raise UsageError(f"cannot create the lock file in {inbox}: {exc.strerror}") from None
    if lock is None:
        result["locked"] = True
        result["message"] = (f"another inbox run is working on {inbox} (lock {inbox / LOCK_NAME}); "
                             "nothing done")
        return result
    try:
        return _run(store, inbox, options, settle_seconds, incomplete_seconds, result)
    finally:
        fcntl.flock(lock, fcntl.LOCK_UN)
        lock.close()


def _import_one(store: Store, path: Path, options: ImportOptions, listing: _Listing) -> tuple[FileOutcome, str]:
    """Import one listed file; never raises. Returns the outcome and what to do with the file:
    ``move`` (done or rejected), ``leave`` (changed since listed, or the database failed)."""
    if path in listing.cut_off:
        out = FileOutcome(str(path), "rejected")
        out.message = (f"{path}: cut off: {listing.cut_off[path]}, and unchanged for a long time; deliver the "
                       "whole file (write it under a temporary name, then rename it)")
        out.errors = [Problem(out.message.split(": ", 1)[1])]
        return out, "move"
    if _stat_of(path) != listing.seen.get(path):
        out = FileOutcome(str(path), "skipped")
        out.message = "changed since the folder was listed; left for the next run"
        return out, "leave"
    try:
        out = import_file(store, path, options, expect=listing.seen.get(path))
    except Exception as exc:  # a bug in the program: this file fails, the run goes on
        out = FileOutcome(str(path), "rejected")
        out.message = f"{path}: internal error: {type(exc).__name__}: {exc}"
        out.errors = [Problem(f"internal error (a bug in the program, please report it): "
                              f"{type(exc).__name__}: {exc}")]
        out.detail = traceback.format_exc()
        return out, "move"
    if out.status == "changed":
        return out, "leave"
    if _is_db_failure(out):
        return out, "leave"
    return out, "move"


def _run(store: Store, inbox: Path, options: ImportOptions, settle_seconds: float, incomplete_seconds: float,
         result: dict) -> dict:
    listing = _list(inbox, settle_seconds, incomplete_seconds)
    skipped = listing.skipped
    result["skipped"] = skipped
    started = time.monotonic()
    counts = {"imported": 0, "revised": 0, "unchanged": 0, "rejected": 0, "older": 0, "left": 0}
    stopped = None
    for path in listing.take:
        outcome, action = _import_one(store, path, options, listing)
        row = outcome.as_dict()
        row["moved_to"] = None
        if action == "leave" and not _is_db_failure(outcome):
            skipped.append({"path": str(path), "reason": outcome.message})
            continue
        if options.dry_run:
            counts["rejected" if outcome.status in ("rejected", "older") else outcome.status] += 1
            result["files"].append(row)
            continue
        try:
            if action == "leave":
                counts["left"] += 1
                row["message"] = outcome.message + " (file left in the inbox for the next run)"
                stopped = outcome.message
            elif outcome.status in ("rejected", "older"):
                counts[outcome.status] += 1
                target = _move(path, inbox / REJECTED_DIR)
                report = _write_error_file(target, error_report(outcome, path))
                row["moved_to"] = str(target)
                row["error_file"] = str(report)
            else:
                counts[outcome.status] += 1
                row["moved_to"] = str(_move(path, inbox / DONE_DIR))
        except OSError as exc:
            # the file cannot be moved (permissions, a vanished folder): say so, go on
            row["message"] = f"{outcome.message} (could not be moved: {exc.strerror or exc})"
            row["status"] = "rejected"
            counts["rejected"] += 1
        _log(inbox, {"time": _now(), "file": str(path), "status": row["status"], "moved_to": row["moved_to"],
                     "rows": outcome.rows, "format": outcome.format, "batch_id": outcome.batch_id,
                     "inserted": outcome.inserted, "revised": outcome.revised,
                     "errors": [p.as_dict() for p in outcome.errors[:50]], "message": row["message"]})
        result["files"].append(row)
        if stopped:
            break
    done = sum(counts[k] for k in ("imported", "revised", "unchanged"))
    refused = counts["rejected"] + counts["older"]
    parts = [f"{len(result['files'])} file(s): {done} done, {refused} rejected"]
    if counts["older"]:
        parts[0] += f" ({counts['older']} older than the stored data)"
    if counts["left"]:
        parts.append(f"stopped on a database failure ({stopped}); the file stays in the inbox")
    if skipped:
        parts.append(f"{len(skipped)} skipped for now")
    if options.dry_run:
        parts.insert(0, "dry run, nothing written or moved")
    result["message"] = "; ".join(parts)
    if not options.dry_run:
        _log(inbox, {"time": _now(), "run": "finished", "files": len(result["files"]), **counts,
                     "skipped": len(skipped), "seconds": round(time.monotonic() - started, 3)})
    return result
