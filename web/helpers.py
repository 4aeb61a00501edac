"""Shared helpers of the blueprints: the store, the tariff chosen, the cache warm-up."""
from __future__ import annotations

import logging
import re
import threading
from pathlib import Path

from flask import Flask, current_app, request

from auditor.errors import AuditorError
from auditor.services import portfolio
from auditor.tariffs import Tariff

log = logging.getLogger("auditor.web")


def store():
    return current_app.extensions["auditor_store"]


def tariff_dirs() -> list[str]:
    """Where the dashboard's tariffs come from, beside the shipped examples: its tariff folders,
    then the tariff files given to the server (a later entry wins over an earlier name)."""
    return [*(current_app.config["TARIFF_DIRS"] or []), *(current_app.config.get("TARIFF_FILES") or [])]


def own_tariff_dir() -> Path:
    """The folder the Tariffs page keeps uploaded and edited tariffs in (the instance folder's
    ``tariffs/``, or the first of ``TARIFF_DIRS``)."""
    dirs = current_app.config["TARIFF_DIRS"] or [str(Path(current_app.instance_path) / "tariffs")]
    return Path(dirs[0])


def tariff_choices() -> list[portfolio.TariffChoice]:
    return portfolio.tariff_choices(tariff_dirs())


def default_tariff_name() -> str:
    names = [c.name for c in tariff_choices() if not c.error]
    wanted = current_app.config.get("DEFAULT_TARIFF")
    if wanted in names:
        return wanted
    return names[0] if names else ""


def chosen_tariff(name: str | None = None) -> tuple[str, Tariff]:
    """The tariff named by ``name`` or the ``tariff`` query parameter (a file stem), else the
    default one."""
    name = name or request.args.get("tariff") or default_tariff_name()
    return name, portfolio.load_named_tariff(name, tariff_dirs())


def warm_cache(app: Flask) -> None:
    """Audit every meter under the default tariff in a background thread, so the first visit
    to the portfolio does not wait for all the audits."""

    def run():
        with app.app_context():
            try:
                name = default_tariff_name()
                if name:
                    portfolio.portfolio_summary(store(), portfolio.load_named_tariff(name, tariff_dirs()))
            except AuditorError as exc:  # the page itself will show the problem
                log.warning("cache warm-up: %s", exc.message)

    threading.Thread(target=run, name="auditor-warm-cache", daemon=True).start()


def tariff_for_scenario(saved: dict) -> tuple[str, Tariff]:
    """The dashboard's tariff a saved scenario was computed under: by the name its request
    gave (a file stem or path), else by the tariff's title."""
    from auditor.errors import NotFoundError

    asked = str(saved.get("request", {}).get("tariff") or "")
    stem = Path(asked).stem if asked else ""
    choices = [c for c in tariff_choices() if not c.error]
    for c in choices:
        if c.name == stem:
            return c.name, portfolio.load_named_tariff(c.name, tariff_dirs())
    for c in choices:
        if c.title == saved.get("tariff"):
            return c.name, portfolio.load_named_tariff(c.name, tariff_dirs())
    raise NotFoundError(f"scenario {saved.get('name')!r} was computed under tariff {saved.get('tariff')!r}, "
                        "which the dashboard does not have; put its TOML file in the instance folder's tariffs/")


#: Command-line wording that messages stored by earlier versions may still hold (a rejected
#: import's errors), and what the page calls the same thing. Messages now speak of the data and
#: carry the option as ``cli_hint`` (see :func:`page_message`).
_PAGE_WORDS = (
    (re.compile(r"(?:give|use) --profile"), "choose a mapping profile"),
    (re.compile(r"give --timezone"), "fill in the time zone"),
    (re.compile(r"\(--estimate-gaps\)"), "(estimate gaps)"),
    (re.compile(r"auditor import FILE"), "upload a meter export on the Imports page"),
)


#: The command line's hint (an option) that the upload form answers with a field of its own, and
#: what the page says instead; a hint with no field here is the command line's only.
_PAGE_HINTS = (
    (re.compile(r"--timezone\b"), "fill in the time zone on the form"),
    (re.compile(r"--profile\b"), "choose a mapping profile on the form"),
)


def page_hint(cli_hint: str | None) -> str | None:
    """What the page says for a command-line hint, or None when the page has no such field."""
    for pattern, words in _PAGE_HINTS:
        if cli_hint and pattern.search(cli_hint):
            return words
    return None


def page_message(text: str, temp_path: str | None = None, shown_name: str | None = None,
                 cli_hint: str | None = None) -> str:
    """A message as the page should say it: the upload's own name instead of the server's
    temporary path, and, for a hint the form answers, the form's words (never a command-line
    option)."""
    if temp_path and shown_name:
        text = text.replace(str(temp_path), shown_name)
    for pattern, words in _PAGE_WORDS:
        text = pattern.sub(words, text)
    hint = page_hint(cli_hint)
    return f"{text} — {hint}" if hint and hint not in text else text
