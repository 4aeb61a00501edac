"""PDF of a document: the same offline HTML, printed by headless Chromium.

Why Chromium: the case document's charts are drawn by plotly.js in the page, so a PDF library
that lays out HTML without running scripts (or one that needs the charts re-drawn as images)
would lose them or draw them twice. Chromium prints exactly the page a reader sees, with its
print stylesheet (``@page`` size and margins, one section a page), and the tests already drive
Debian's Chromium. It is found as ``AUDITOR_CHROMIUM``, else ``chromium``,
``chromium-browser``, ``google-chrome`` on the PATH; without it a one-line error says what to
install (exit 2).

The HTML is written to a private temporary folder and printed from there with a throw-away
profile, no network, and a time limit. The document carries its own Content-Security-Policy,
so nothing beyond its inline scripts runs.
"""
from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

from auditor.errors import AuditorError, UsageError

__all__ = ["find_chromium", "html_to_pdf", "RENDER_TIMEOUT_S", "INSTALL_HINT"]

RENDER_TIMEOUT_S = 120
INSTALL_HINT = ("a PDF needs Chromium: install it (Debian/Ubuntu: apt-get install chromium) or set "
                "AUDITOR_CHROMIUM to its path")
_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")


class RendererMissing(UsageError):
    """No Chromium to print with: a setting to fix (exit 2)."""


def find_chromium() -> str:
    """The Chromium executable, or :class:`RendererMissing` naming what to install."""
    env = os.environ.get("AUDITOR_CHROMIUM")
    if env:
        if Path(env).is_file() and os.access(env, os.X_OK):
            return env
        raise RendererMissing(f"AUDITOR_CHROMIUM is set to {env}, which is not an executable file; {INSTALL_HINT}")
    for name in _NAMES:
        found = shutil.which(name)
        if found:
            return found
    raise RendererMissing(INSTALL_HINT)


def _args(exe: str, profile: Path, out: Path, page: Path) -> list[str]:
    args = [exe, "--headless", "--disable-gpu", "--no-first-run", "--no-default-browser-check",
            "--disable-extensions", "--disable-background-networking", "--disable-component-update",
            "--disable-sync", "--disable-default-apps", "--mute-audio", "--hide-scrollbars",
            "--proxy-server=127.0.0.1:9", "--proxy-bypass-list=<-loopback>",  # no network at all
            f"--user-data-dir={profile}", "--run-all-compositor-stages-before-draw",
            "--virtual-time-budget=3000", "--no-pdf-header-footer", "--window-size=1280,2000",
            f"--print-to-pdf={out}", page.as_uri()]
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        args.insert(2, "--no-sandbox")  # Chromium refuses to run its sandbox as root
    return args


def html_to_pdf(html: str, paper: str = "a4") -> bytes:
    """Print ``html`` to PDF bytes. The page size comes from the document's ``@page`` rule
    (its stylesheet is written for ``paper``)."""
    exe = find_chromium()
    with tempfile.TemporaryDirectory(prefix="auditor-pdf-") as tmp:
        folder = Path(tmp)
        page = folder / "document.html"
        out = folder / "document.pdf"
        page.write_text(html, encoding="utf-8")
        try:
            done = subprocess.run(_args(exe, folder / "profile", out, page), capture_output=True,
                                  timeout=RENDER_TIMEOUT_S, stdin=subprocess.DEVNULL, check=False)
        except subprocess.TimeoutExpired:
            raise AuditorError(f"Chromium did not finish printing the PDF within {RENDER_TIMEOUT_S} s") from None
        except OSError as exc:
            raise RendererMissing(f"cannot start {exe} ({exc.strerror}); {INSTALL_HINT}") from None
        if not out.is_file() or out.stat().st_size == 0:
            tail = (done.stderr or b"").decode("utf-8", "replace").strip().splitlines()[-1:] or ["no message"]
            raise AuditorError(f"Chromium ({exe}) printed no PDF (exit {done.returncode}: {tail[0][:200]})")
        return out.read_bytes()
