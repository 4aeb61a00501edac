"""The case document of a saved scenario (HTML, PDF, XLSX, CSV), its cover, and saved scenarios
compared side by side (page and exports)."""
from __future__ import annotations

import re
import secrets

from flask import Blueprint, Response, abort, flash, redirect, render_template, request, url_for
from flask_wtf import FlaskForm
from wtforms import StringField
from wtforms.validators import DataRequired, Length, Optional

from auditor import charts
from auditor.errors import UsageError
from auditor.services import compare as cp
from auditor.services import report as rp
from auditor.services.correction import list_scenarios
from auditor.web.helpers import store, tariff_for_scenario

bp = Blueprint("report", __name__)

MIME = {"html": "text/html; charset=utf-8", "pdf": "application/pdf", "csv": "text/csv; charset=utf-8",
        "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"}
_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


class CoverForm(FlaskForm):
    name = StringField(validators=[DataRequired(), Length(max=200)])
    client = StringField("Client", validators=[Optional(), Length(max=200)])
    project = StringField("Project", validators=[Optional(), Length(max=200)])
    author = StringField("Author", validators=[Optional(), Length(max=200)])


def cover_form(name: str) -> CoverForm:
    """The cover form of a saved scenario, filled with what is stored (for the scenario page)."""
    form = CoverForm(formdata=None, data={"name": name, **{k: v or "" for k, v in rp.scenario_cover(store(), name).items()}})
    return form


def _paper() -> str:
    paper = (request.args.get("paper") or "a4").lower()
    if paper not in rp.PAPERS:
        raise UsageError(f"paper {paper!r}: use a4 or letter")
    return paper


#: Characters no file name may hold on common systems (and control characters).
_UNSAFE_IN_FILE_NAMES = re.compile(r'[\x00-\x1f\x7f/\\:*?"<>|]+')


def disposition(stem: str, fmt: str) -> str:
    """``attachment`` with an ASCII file name, and the name in UTF-8 (RFC 6266 ``filename*``)
    when it holds more than ASCII letters, digits, dots, dashes and underscores (a scenario
    named "Zählpunkt 7 %" downloads as ``Zählpunkt_7_%.pdf``, not ``Z_hlpunkt_7.pdf``)."""
    from urllib.parse import quote

    plain = _SAFE.sub("_", stem).strip("_") or "case"
    out = f'attachment; filename="{plain}.{fmt}"'
    full = _UNSAFE_IN_FILE_NAMES.sub("_", stem).strip(" ._") or plain
    full = re.sub(r"\s+", "_", full)
    if full != plain:
        out += f"; filename*=UTF-8''{quote(full + '.' + fmt, safe='')}"
    return out


def _download(body: bytes, fmt: str, stem: str, nonce: str | None = None) -> Response:
    resp = Response(body, mimetype=MIME[fmt].split(";")[0])
    resp.headers["Content-Type"] = MIME[fmt]
    resp.headers["Content-Disposition"] = disposition(stem, fmt)
    if fmt == "html":
        # the document carries its own scripts; allow exactly those (by nonce), nothing remote
        resp.headers["Content-Security-Policy"] = (
            f"default-src 'none'; script-src 'nonce-{nonce}'; style-src 'unsafe-inline'; "
            "img-src data: blob:; font-src data:; base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
    return resp


@bp.get("/case.<fmt>")
def case(fmt: str):
    """The case document of the saved scenario ``?scenario=NAME`` (``&paper=a4|letter``)."""
    if fmt not in rp.DOCUMENT_FORMATS:
        abort(404)
    name = request.args.get("scenario") or ""
    if not name:
        raise UsageError("say which saved scenario: ?scenario=NAME")
    from auditor.services.correction import get_scenario

    saved = get_scenario(store(), name)
    try:
        _, tariff = tariff_for_scenario(saved)
    except UsageError:
        raise
    except Exception:  # not among the dashboard's tariffs: the text stored with the scenario
        tariff = None
    report = rp.build_case(store(), name, tariff, with_profile=fmt in ("html", "pdf"), saved=saved)
    paper = _paper()
    table = request.args.get("table") or "periods"
    if table not in rp.CSV_TABLES:
        raise UsageError(f"unknown table {table!r}: choose one of {', '.join(rp.CSV_TABLES)}")
    nonce = secrets.token_urlsafe(16)
    body = rp.render_html(report, nonce=nonce, paper=paper).encode("utf-8") if fmt == "html" \
        else rp.render(report, fmt, paper, table if fmt == "csv" else "periods")
    suffix = f"_{table}" if fmt == "csv" and table != "periods" else ""
    return _download(body, fmt, f"{saved['meter']}_{name}{suffix}", nonce)


@bp.post("/case/cover")
def cover():
    form = CoverForm()
    if not form.validate():
        flash("Could not save the cover: " + "; ".join(f"{k}: {', '.join(v)}" for k, v in form.errors.items()), "error")
        return redirect(url_for("scenarios.index"))
    rp.set_scenario_cover(store(), form.name.data, client=form.client.data or "", project=form.project.data or "",
                          author=form.author.data or "")
    flash("Saved the cover of the case document.", "ok")
    return redirect(url_for("scenarios.show", name=form.name.data) + "#case-document")


def _chosen() -> list[str]:
    names = [n for n in request.args.getlist("scenario") if n]
    return list(dict.fromkeys(names))


@bp.get("/compare")
def compare():
    """Pick two to four saved scenarios and see them side by side."""
    saved = list_scenarios(store())
    names = _chosen()
    ctx = {"saved": saved, "chosen": names, "cmp": None, "figure": None, "error": None, "hint": None}
    if len(names) == 1:  # arriving from a scenario's "Compare with…": it is ticked, pick the others
        ctx["hint"] = f"“{names[0]}” is ticked: tick one to three more scenarios and press Compare."
    elif names:
        if not 2 <= len(names) <= 4:
            ctx["error"] = f"Choose two to four scenarios to compare (you chose {len(names)})."
        else:
            cmp = cp.compare_scenarios(store(), names)
            ctx.update(cmp=cmp, figure=charts.figure_json(charts.cumulative_cash_flows(cmp)))
    return render_template("compare.html", **ctx), (400 if ctx["error"] else 200)


@bp.get("/compare.<fmt>")
def compare_export(fmt: str):
    if fmt not in cp.COMPARE_FORMATS:
        abort(404)
    names = _chosen()
    cmp = cp.compare_scenarios(store(), names)
    nonce = secrets.token_urlsafe(16)
    paper = _paper()
    body = cp.render_html(cmp, paper, nonce=nonce).encode("utf-8") if fmt == "html" \
        else cp.render_comparison(cmp, fmt, paper)
    return _download(body, fmt, "compare_" + "_".join(names), nonce)
