"""Bills: the stored bills of a meter checked against its data, findings highlighted; manual
entry and upload of a bills file; the billing-query summary as text or HTML."""
from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

from flask import Blueprint, Response, flash, redirect, render_template, request, url_for
from flask_wtf import FlaskForm
from flask_wtf.file import FileField, FileRequired
from werkzeug.utils import secure_filename
from wtforms import DateField, FloatField, SelectField, StringField
from wtforms.validators import DataRequired, Length, NumberRange, Optional

from auditor.bills import FIELD_DIGITS, NUMBER_MAX
from auditor.errors import AuditorError
from auditor.services.bills import (
    FIELD_NAMES,
    add_bill,
    check_bills,
    dispute_summary,
    import_bills,
    list_bills,
)
from auditor.services.meters import list_meters
from auditor.web.helpers import chosen_tariff, page_message, store, tariff_choices

bp = Blueprint("bills", __name__)

FIELD_LABELS = (("kwh", "kWh"), ("kvarh", "kvarh"), ("peak_kw", "Peak (kW)"), ("peak_kva", "Peak (kVA)"),
                ("pf", "PF (0–1)"), ("reactive_charge", "Reactive charge"), ("total", "Total"))
#: Columns of the bills table that wait behind "All columns".
DETAIL_FIELDS = ("kvarh", "peak_kva")


class BillForm(FlaskForm):
    meter = SelectField("Meter", validators=[DataRequired()])
    period_start = DateField("Period start", validators=[DataRequired()])
    period_end = DateField("Period end (exclusive)", validators=[DataRequired()])
    account = StringField("Account number", validators=[Optional(), Length(max=NUMBER_MAX)],
                          description="As printed on the bill.")
    invoice = StringField("Invoice number", validators=[Optional(), Length(max=NUMBER_MAX)])
    kwh = FloatField("Energy (kWh)", validators=[Optional(), NumberRange(min=0)])
    kvarh = FloatField("Reactive energy (kvarh)", validators=[Optional(), NumberRange(min=0)])
    peak_kw = FloatField("Peak demand (kW)", validators=[Optional(), NumberRange(min=0)])
    peak_kva = FloatField("Peak demand (kVA)", validators=[Optional(), NumberRange(min=0)])
    pf = FloatField("Power factor (fraction, 0–1)", validators=[Optional(), NumberRange(min=0.0001, max=1)],
                    description="e.g. 0.92, not 92")
    reactive_charge = FloatField("Reactive charge", validators=[Optional()])
    total = FloatField("Total", validators=[Optional()])


class BillUploadForm(FlaskForm):
    file = FileField("Bills CSV", validators=[FileRequired()])


def _meters() -> list[str]:
    return [m["meter"] for m in list_meters(store())]


def _forms(meter: str | None):
    form = BillForm(prefix="bill")
    form.meter.choices = [(m, m) for m in _meters()]
    if meter and not form.meter.data:
        form.meter.data = meter
    return form, BillUploadForm(prefix="upload")


def _page(meter: str | None, form=None, upload=None, status: int = 200, error: str | None = None):
    meters = _meters()
    meter = meter or (meters[0] if meters else None)
    tariff_name, tariff = chosen_tariff(request.values.get("tariff"))
    f, u = _forms(meter)
    check = None
    if meter and any(b["meter"] == meter for b in list_bills(store(), meter)):
        try:
            check = check_bills(store(), meter, tariff)
        except AuditorError as exc:
            error = error or exc.message
    return render_template("bills/index.html", title="Bills", meters=meters, meter=meter, check=check,
                           tariff_name=tariff_name, tariffs=tariff_choices(), form=form or f, upload=upload or u,
                           error=error, field_labels=FIELD_LABELS, detail_fields=DETAIL_FIELDS, digits=FIELD_DIGITS,
                           field_names=FIELD_NAMES), status


@bp.get("/bills")
def index():
    return _page(request.args.get("meter"))


@bp.post("/bills/add")
def add():
    form, upload = _forms(None)
    if not form.validate():
        return _page(form.meter.data, form=form, status=400)
    fields = {k: getattr(form, k).data for k, _ in FIELD_LABELS}
    fields.update(account=(form.account.data or "").strip() or None, invoice=(form.invoice.data or "").strip() or None)
    try:
        res = add_bill(store(), form.meter.data, form.period_start.data, form.period_end.data, **fields)
    except AuditorError as exc:
        return _page(form.meter.data, form=form, status=400, error=exc.message)
    flash(f"Bill {form.period_start.data}..{form.period_end.data} of {form.meter.data}: {res['status']}.", "ok")
    return redirect(url_for("bills.index", meter=form.meter.data, tariff=request.values.get("tariff")))


@bp.post("/bills/upload")
def upload():
    form, up = _forms(None)
    meter = request.values.get("meter")
    if not up.validate():
        return _page(meter, upload=up, status=400)
    name = secure_filename(up.file.data.filename or "") or "bills.csv"
    folder = Path(tempfile.mkdtemp(prefix="auditor-bills-"))
    try:
        path = folder / name
        up.file.data.save(path)
        res = import_bills(store(), path)
    except AuditorError as exc:
        return _page(meter, upload=up, status=400, error=page_message(exc.message, str(path), name))
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    flash(f"{name}: {res['message']}", "ok")
    return redirect(url_for("bills.index", meter=meter, tariff=request.values.get("tariff")))


@bp.get("/bills/dispute.<fmt>")
def dispute(fmt: str):
    if fmt not in ("txt", "html"):
        return render_template("error.html", title="Not found", message="Use dispute.txt or dispute.html."), 404
    meter = request.args.get("meter") or ""
    _, tariff = chosen_tariff(request.args.get("tariff"))
    d = check_bills(store(), meter, tariff)
    body = dispute_summary(d, "text" if fmt == "txt" else "html")
    mime = "text/plain" if fmt == "txt" else "text/html"
    safe = secure_filename(meter) or "meter"
    return Response(body, mimetype=mime, headers={
        "Content-Disposition": f'attachment; filename="billing-query-{safe}.{fmt}"'})
