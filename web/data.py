"""Imports and data quality: batches, rejected files, gaps and estimates; upload a file."""
from __future__ import annotations

import shutil
import tempfile
from importlib import resources
from pathlib import Path

from flask import Blueprint, flash, redirect, render_template, url_for
from werkzeug.utils import secure_filename

from auditor.services.import_views import import_overview, quality_overview
from auditor.services.ingest import ImportOptions, import_files
from auditor.web.forms import UploadForm, choices
from auditor.web.helpers import page_message, store

bp = Blueprint("data", __name__)
UPLOAD_PREFIX = "auditor-upload-"


def _profiles() -> dict[str, Path]:
    folder = Path(str(resources.files("auditor") / "profiles"))
    return {p.stem: p for p in sorted(folder.glob("*.toml"))}


def _form() -> UploadForm:
    form = UploadForm()
    form.profile.choices = choices([("", "detect the layout")] + [(k, f"profile: {k}") for k in _profiles()])
    return form


def _page(form: UploadForm, status: int = 200, outcome: dict | None = None):
    s = store()
    batches = import_overview(s)
    for b in batches:
        b["short_name"] = Path(b["file_name"]).name
        if UPLOAD_PREFIX in b["file_name"]:  # uploaded here: the server's temporary folder means nothing
            b["file_name"] = b["short_name"]
        for e in b["errors"]:
            e["message"] = page_message(str(e.get("message") or ""), cli_hint=e.get("cli_hint"))
    quality = quality_overview(s)
    zones = sorted({q["timezone"] for q in quality})
    # a batch belongs to no one site: its times are shown in the sites' zone when they share
    # one, else in UTC (named either way)
    return render_template("imports.html", form=form, batches=batches,
                           rejected=[b for b in batches if b["status"] == "rejected"],
                           quality=quality, outcome=outcome, batch_zone=zones[0] if len(zones) == 1 else "UTC",
                           several_zones=len(zones) > 1), status


@bp.get("/imports")
def index():
    return _page(_form())


@bp.post("/imports")
def upload():
    form = _form()
    if not form.validate():
        return _page(form, 400)
    upload = form.file.data
    name = secure_filename(upload.filename or "") or "upload.csv"
    folder = Path(tempfile.mkdtemp(prefix=UPLOAD_PREFIX))
    try:
        path = folder / name
        upload.save(path)
        profile = _profiles().get(form.profile.data) if form.profile.data else None
        options = ImportOptions(site=(form.site.data or "").strip() or None,
                                timezone=(form.timezone.data or "").strip() or None,
                                profile_path=str(profile) if profile else None,
                                estimate_gaps=form.estimate_gaps.data == "yes")
        outcome = import_files(store(), [path], options)[0].as_dict()
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    outcome["short_name"] = name
    outcome["path"] = name  # the page never shows the server's temporary folder
    outcome["message"] = page_message(outcome.get("message") or "", str(path), name, outcome.get("cli_hint"))
    for item in outcome.get("errors", []) + outcome.get("warnings", []):
        item["message"] = page_message(item["message"], str(path), name, item.get("cli_hint"))
    if outcome["status"] in ("rejected", "older"):  # an older export changed nothing: not a success
        return _page(_form(), 422, outcome=outcome)
    flash(f"{name}: {outcome['status']} — {outcome['message']}", "ok")
    return redirect(url_for("data.index"))
