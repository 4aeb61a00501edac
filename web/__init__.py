"""The dashboard: a Flask application over the service layer.

``create_app(config=None, store=None)`` builds it; ``auditor serve`` runs it on waitress.
One blueprint per area: portfolio (``/``), meters (meter page and exports), scenarios, data
(imports and quality), tariffs, bills, and auth (``security.py``: headers, token, login).
Chart figures come from :mod:`auditor.charts` and number filters from
:mod:`auditor.presentation` (both shared with the exported reports); exports from
:mod:`auditor.services.report`.
"""
from __future__ import annotations

import os
import secrets
from pathlib import Path

import platformdirs
from flask import Flask, render_template
from flask_wtf.csrf import CSRFError, CSRFProtect

from auditor.errors import AuditorError, NotFoundError, UsageError
from auditor.services.database import APP_DIR_NAME

csrf = CSRFProtect()

DEFAULTS = {
    "DATABASE_URL": None,  # used when no store is passed
    "AUTH_TOKEN": None,  # when set, every request needs it (cookie after ?token= or the login form)
    "SERVED_BEYOND_LOOPBACK": False,  # set by the server when it listens beyond loopback (login wording)
    "DEFAULT_TARIFF": "harrowgate_industrial_tou",
    "TARIFF_DIRS": None,  # default: <instance>/tariffs (the first is where the Tariffs page keeps tariffs)
    "TARIFF_FILES": [],  # tariff files given to the server (auditor serve --tariff FILE), by path
    "MAX_CONTENT_LENGTH": 50 * 1024 * 1024,  # upload limit, bytes
    "WTF_CSRF_TIME_LIMIT": None,  # tokens live as long as the session
    "SESSION_COOKIE_HTTPONLY": True,
    "SESSION_COOKIE_SAMESITE": "Lax",
    "WARM_CACHE": False,  # compute every meter's audit in the background at start
}


def _secret_key(instance: Path) -> str:
    """A random key kept in the instance folder (created on first start, never committed)."""
    path = instance / "secret_key"
    try:
        return path.read_text(encoding="ascii").strip()
    except FileNotFoundError:
        pass
    key = secrets.token_hex(32)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "w", encoding="ascii") as fh:
        fh.write(key)
    return key


def instance_folder(config: dict | None = None) -> Path:
    """The instance folder: ``config["INSTANCE_PATH"]`` or ``<user data dir>/pf-auditor/web``.
    It holds the secret key and the dashboard's own tariffs (``tariffs/*.toml``)."""
    given = (config or {}).get("INSTANCE_PATH")
    return Path(given or Path(platformdirs.user_data_dir(APP_DIR_NAME)) / "web").resolve()


def create_app(config: dict | None = None, store=None) -> Flask:
    """Build the dashboard.

    Parameters
    ----------
    config : dict, optional
        Overrides of :data:`DEFAULTS` and Flask settings; ``INSTANCE_PATH`` chooses the
        instance folder (default: ``<user data dir>/pf-auditor/web``) that holds the secret key
        and extra tariffs (``tariffs/*.toml``); ``TARIFF_FILES`` adds tariff files by path (a
        file's name is its stem; it wins over a tariff of the same name).
    store : auditor.store.Store, optional
        The database; default ``open_store(config["DATABASE_URL"])``.
    """
    config = dict(config or {})
    instance = instance_folder(config)
    config.pop("INSTANCE_PATH", None)
    instance.mkdir(parents=True, exist_ok=True)
    app = Flask(__name__, instance_path=str(instance), instance_relative_config=True)
    app.config.update(DEFAULTS)
    app.config.update(config)
    if not app.config.get("SECRET_KEY"):
        app.config["SECRET_KEY"] = _secret_key(instance)
    if app.config["TARIFF_DIRS"] is None:
        app.config["TARIFF_DIRS"] = [str(instance / "tariffs")]
    app.jinja_env.autoescape = True  # every template, whatever its extension

    if store is None:
        from auditor.services.database import open_database

        store = open_database(app.config["DATABASE_URL"])
    app.extensions["auditor_store"] = store

    csrf.init_app(app)

    from auditor.presentation import register_filters
    from auditor.web import security
    from auditor.web.helpers import page_message

    register_filters(app.jinja_env.filters)
    security.init_app(app)

    from auditor.web import alerts, bills, data, meters, portfolio, report, scenarios, tariffs
    from auditor.web.urls import FormatConverter, MeterIdConverter, ScenarioNameConverter

    # any meter id, any scenario name
    app.url_map.converters.update(meter=MeterIdConverter, scenario=ScenarioNameConverter, ext=FormatConverter)
    for bp in (portfolio.bp, meters.bp, scenarios.bp, report.bp, data.bp, tariffs.bp, bills.bp, alerts.bp,
               security.bp):
        app.register_blueprint(bp)
    app.context_processor(lambda: {"new_alerts": alerts.new_alert_count()})

    @app.errorhandler(CSRFError)
    def _csrf_error(exc):
        return render_template("error.html", title="Form expired or forged",
                               message="The form's security token was missing or did not match. "
                                       "Reload the page and submit it again."), 400

    @app.errorhandler(NotFoundError)
    def _not_found(exc):
        return render_template("error.html", title="Not found", message=page_message(exc.message)), 404

    @app.errorhandler(UsageError)
    def _usage(exc):
        return render_template("error.html", title="Cannot do that", message=page_message(exc.message)), 400

    @app.errorhandler(AuditorError)
    def _auditor(exc):
        return render_template("error.html", title="Problem with the input",
                               message=page_message(exc.message)), 422

    @app.errorhandler(404)
    def _404(exc):
        return render_template("error.html", title="Not found",
                               message="There is no page at this address."), 404

    @app.errorhandler(413)
    def _413(exc):
        mb = app.config["MAX_CONTENT_LENGTH"] / 1024 / 1024
        return render_template("error.html", title="File too large",
                               message=f"Uploads are limited to {mb:g} MB. Larger files can be imported on "
                                       "the server itself, from the command line."), 413

    @app.errorhandler(500)
    def _500(exc):
        return render_template("error.html", title="Internal error",
                               message="Something went wrong on the server; the log has the details."), 500

    if app.config["WARM_CACHE"]:
        from auditor.web.helpers import warm_cache

        warm_cache(app)
    return app
