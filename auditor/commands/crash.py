"""The crash log: what ``auditor`` keeps when it meets a bug (exit 3).

A bug never shows a traceback on screen: :func:`write_crash_log` writes it, with the version,
the Python and platform, and the command line (passwords in database URLs hidden), to a file
of its own in the per-user log directory (``platformdirs.user_log_dir("pf-auditor")``, on
Linux ``~/.local/state/pf-auditor/log``), readable by the user only; the screen shows one
line naming that file. When the directory cannot be written the system's temporary directory
is tried. ``AUDITOR_DEBUG=1`` lets the exception through instead (the traceback on screen).

Only the standard library and platformdirs: this code runs when something else has failed.
"""
from __future__ import annotations

import os
import platform
import re
import sys
import tempfile
import time
import traceback
from pathlib import Path

from auditor import APP_DIR_NAME, __version__

# user:password@ in a URL (a --db option, AUDITOR_DB_URL echoed in a message)
_PASSWORD = re.compile(r"(://[^/:@\s]*:)[^@\s/]*@")


def hide_passwords(text: str) -> str:
    return _PASSWORD.sub(r"\1***@", text)


def crash_log_dirs() -> list[Path]:
    """Where a crash log is written, in order of preference."""
    dirs = []
    try:
        import platformdirs

        dirs.append(Path(platformdirs.user_log_dir(APP_DIR_NAME)))
    except Exception:  # noqa: BLE001 - the crash path must not fail on its own helpers
        pass
    dirs.append(Path(tempfile.gettempdir()) / APP_DIR_NAME)
    return dirs


def _report(exc: BaseException, argv: list[str]) -> str:
    lines = [
        f"pf-auditor {__version__} crash report",
        f"time: {time.strftime('%Y-%m-%dT%H:%M:%S%z')}",
        f"command: auditor {hide_passwords(' '.join(argv))}",
        f"python: {sys.version.split()[0]} ({sys.executable})",
        f"platform: {platform.platform()}",
        "",
        *traceback.format_exception(exc),
    ]
    return hide_passwords("\n".join(line.rstrip("\n") for line in lines)) + "\n"


def write_crash_log(exc: BaseException, argv: list[str]) -> tuple[Path | None, str | None]:
    """Write the report of ``exc``; returns ``(path, None)``, or ``(None, why)`` when no
    directory could take it."""
    text = _report(exc, argv)
    stamp = time.strftime("%Y%m%dT%H%M%S")
    why = None
    for folder in crash_log_dirs():
        try:
            folder.mkdir(parents=True, exist_ok=True)
            path = folder / f"crash-{stamp}-{os.getpid()}.log"
            flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
            fd = os.open(path, flags, 0o600)
            with os.fdopen(fd, "w", encoding="utf-8", errors="replace") as fh:
                fh.write(text)
            return path, None
        except OSError as err:
            why = f"{folder}: {err.strerror or err}"
    return None, why


def one_line(exc: BaseException, limit: int = 200) -> str:
    """``TypeName: first line of the message``, at most ``limit`` characters."""
    first = (str(exc).strip().splitlines() or [""])[0]
    text = f"{type(exc).__name__}: {first}" if first else type(exc).__name__
    text = hide_passwords(text)
    return text if len(text) <= limit else text[: limit - 1] + "…"
