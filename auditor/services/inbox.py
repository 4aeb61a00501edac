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
* files modified less than ``settle_seconds`` (default 5 s) ago: a transfer may still be
  appending to them;
* anything that is not a regular file (folders, symbolic links, sockets).

A database failure (locked, read-only, disk full) is not the file's fault: the file stays in DIR
for the next run, the run stops there, and the outcome counts as a failure (non-zero exit).

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
import stat
import time
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


def candidates(inbox: Path, settle_seconds: float = SETTLE_SECONDS) -> tuple[list[Path], list[dict]]:
    """Files to import now (sorted by name) and the ones skipped, each with the reason."""
    take: list[Path] = []
    skipped: list[dict] = []
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
        if not stat.S_ISREG(st.st_mode):
            skipped.append({"path": entry.path, "reason": "not a regular file"})
        elif name.endswith(IN_PROGRESS_SUFFIXES):
            skipped.append({"path": entry.path, "reason": "name marks a file still being written"})
        elif now - st.st_mtime < settle_seconds:
            skipped.append({"path": entry.path,
                            "reason": f"modified less than {settle_seconds:g} s ago (may still be written)"})
        else:
            take.append(Path(entry.path))
    return take, skipped


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
              settle_seconds: float = SETTLE_SECONDS, wait_seconds: float = 0.0) -> dict:
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
        return _run(store, inbox, options, settle_seconds, result)
    finally:
        fcntl.flock(lock, fcntl.LOCK_UN)
        lock.close()


def _run(store: Store, inbox: Path, options: ImportOptions, settle_seconds: float, result: dict) -> dict:
    files, skipped = candidates(inbox, settle_seconds)
    result["skipped"] = skipped
    started = time.monotonic()
    counts = {"imported": 0, "revised": 0, "unchanged": 0, "rejected": 0, "left": 0}
    stopped = None
    for path in files:
        outcome = import_file(store, path, options)
        row = outcome.as_dict()
        row["moved_to"] = None
        if options.dry_run:
            counts["rejected" if outcome.status == "rejected" else outcome.status] += 1
            result["files"].append(row)
            continue
        if _is_db_failure(outcome):
            counts["left"] += 1
            row["message"] = outcome.message + " (file left in the inbox for the next run)"
            stopped = outcome.message
        elif outcome.status == "rejected":
            counts["rejected"] += 1
            target = _move(path, inbox / REJECTED_DIR)
            report = _write_error_file(target, error_report(outcome, path))
            row["moved_to"] = str(target)
            row["error_file"] = str(report)
        else:
            counts[outcome.status] += 1
            row["moved_to"] = str(_move(path, inbox / DONE_DIR))
        _log(inbox, {"time": _now(), "file": str(path), "status": outcome.status, "moved_to": row["moved_to"],
                     "rows": outcome.rows, "format": outcome.format, "batch_id": outcome.batch_id,
                     "inserted": outcome.inserted, "revised": outcome.revised,
                     "errors": [p.as_dict() for p in outcome.errors[:50]], "message": row["message"]})
        result["files"].append(row)
        if stopped:
            break
    done = sum(counts[k] for k in ("imported", "revised", "unchanged"))
    parts = [f"{len(result['files'])} file(s): {done} done, {counts['rejected']} rejected"]
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
