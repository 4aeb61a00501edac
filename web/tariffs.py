"""Tariffs: each tariff the dashboard can bill with, read back as clauses; upload a tariff file
or write and edit one in the page. A tariff is checked exactly as the command line checks a
tariff file (the same messages, naming the key path) and kept in the instance folder's
``tariffs/`` under its name; the page never shows a path on the server."""
from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, request, url_for
from flask_wtf import FlaskForm
from flask_wtf.file import FileField, FileRequired
from wtforms import StringField, TextAreaField
from wtforms.validators import DataRequired, Length, Optional

from auditor.errors import AuditorError, NotFoundError, TariffError
from auditor.services.portfolio import load_named_tariff, tariff_threshold_pf
from auditor.services.tariff_files import MAX_BYTES, check_name, delete_tariff, save_tariff
from auditor.tariffs import EXAMPLES_DIR, describe_tariff
from auditor.web.helpers import own_tariff_dir, tariff_choices, tariff_dirs

bp = Blueprint("tariffs", __name__)

NAME_HINT = "Letters, digits, '_' or '-'; the pages list the tariff under this name."
STARTER = '''name = "My utility, general service"
currency = "EUR"
description = "What this tariff is and where it comes from."

[energy]
price_per_kwh = 0.12

[demand]
basis = "kw"
price_per_kw = 9.50

[[reactive]]
kind = "kvarh_excess"
tan_phi_limit = 0.4
price_per_kvarh = 0.03
'''


class TariffUploadForm(FlaskForm):
    file = FileField("Tariff file (TOML)", validators=[FileRequired()])
    name = StringField("Name", validators=[Optional(), Length(max=64)],
                       description="Default: the file's name. " + NAME_HINT)


class TariffEditForm(FlaskForm):
    name = StringField("Name", validators=[DataRequired(), Length(max=64)], description=NAME_HINT)
    source = TextAreaField("Tariff (TOML)", validators=[DataRequired(), Length(max=MAX_BYTES)])


class TariffDeleteForm(FlaskForm):
    pass


def _origin(c) -> str:
    """Where a tariff comes from, in the page's words."""
    if c.path.parent == own_tariff_dir():
        return "own"
    if c.path.parent == EXAMPLES_DIR:
        return "example"
    return "server"


def _items() -> list[dict]:
    items = []
    for c in tariff_choices():
        base = {"name": c.name, "title": c.title, "origin": _origin(c), "file": c.path.name}
        if c.error:
            items.append({**base, "error": c.error, "clauses": [], "source": ""})
            continue
        t = load_named_tariff(c.name, tariff_dirs())
        items.append({**base, "title": t.name, "error": None, "clauses": describe_tariff(t), "currency": t.currency,
                      "thresholds": tariff_threshold_pf(t), "source": c.path.read_text(encoding="utf-8")})
    return items


def _index(upload: TariffUploadForm | None = None, error: str | None = None, status: int = 200):
    return render_template("tariffs.html", items=_items(), upload=upload or TariffUploadForm(prefix="upload"),
                           delete=TariffDeleteForm(prefix="delete"), error=error), status


def _server_names() -> set[str]:
    from pathlib import Path

    from flask import current_app

    return {Path(f).stem for f in current_app.config.get("TARIFF_FILES") or []}


def _keep(name: str, text: str | bytes) -> str:
    """Check and keep a tariff; the name it was kept under."""
    name = check_name(name)
    if name in _server_names():
        raise TariffError("(name)", f"{name!r} is the name of a tariff file given to the server, which takes "
                                    "precedence; keep this one under another name")
    save_tariff(own_tariff_dir(), name, text)
    return name


@bp.get("/tariffs")
def index():
    return _index()


@bp.post("/tariffs/upload")
def upload():
    form = TariffUploadForm(prefix="upload")
    if not form.validate():
        return _index(upload=form, status=400)
    filename = form.file.data.filename or "tariff.toml"
    name = (form.name.data or "").strip() or filename.rsplit("/", 1)[-1].rsplit("\\", 1)[-1]
    try:
        kept = _keep(name, form.file.data.read(MAX_BYTES + 1))
    except AuditorError as exc:
        return _index(upload=form, error=exc.message, status=422)
    flash(f"Tariff {kept!r} checked and kept; every page can now bill with it.", "ok")
    return redirect(url_for("tariffs.index", _anchor=kept))


def _editor(form: TariffEditForm, origin: str | None, error: str | None = None, status: int = 200):
    return render_template("tariff_edit.html", form=form, origin=origin, error=error), status


@bp.get("/tariffs/edit")
def edit():
    """The editor: a new tariff (a starter text), or a copy of an existing one to change."""
    form = TariffEditForm(prefix="tariff")
    wanted = request.args.get("name")
    origin = None
    if wanted:
        choice = next((c for c in tariff_choices() if c.name == wanted), None)
        if choice is None:
            raise NotFoundError(f"no tariff {wanted!r}")
        origin = _origin(choice)
        form.name.data = choice.name
        form.source.data = choice.path.read_text(encoding="utf-8")
    else:
        form.source.data = STARTER
    return _editor(form, origin)


def _origin_of(name: str | None) -> str | None:
    choice = next((c for c in tariff_choices() if c.name == (name or "").strip()), None)
    return _origin(choice) if choice else None


@bp.post("/tariffs/edit")
def save():
    form = TariffEditForm(prefix="tariff")
    if not form.validate():
        return _editor(form, _origin_of(form.name.data), status=400)
    try:
        kept = _keep(form.name.data, form.source.data.replace("\r\n", "\n"))
    except AuditorError as exc:
        return _editor(form, _origin_of(form.name.data), error=exc.message, status=422)
    flash(f"Tariff {kept!r} checked and kept; every page can now bill with it.", "ok")
    return redirect(url_for("tariffs.index", _anchor=kept))


@bp.post("/tariffs/<name>/delete")
def remove(name: str):
    form = TariffDeleteForm(prefix="delete")
    if not form.validate():
        return _index(error="The form's security token was missing; reload the page.", status=400)
    try:
        delete_tariff(own_tariff_dir(), name)
    except AuditorError as exc:
        return _index(error=exc.message, status=400)
    flash(f"Tariff {name!r} removed.", "ok")
    return redirect(url_for("tariffs.index"))
