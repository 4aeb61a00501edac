"""Forms (Flask-WTF: every POST carries a CSRF token)."""
from __future__ import annotations

from flask_wtf import FlaskForm
from flask_wtf.file import FileField, FileRequired
from wtforms import BooleanField, FloatField, IntegerField, RadioField, SelectField, StringField
from wtforms.validators import DataRequired, Length, NumberRange, Optional, ValidationError

from auditor.correction import CostInputs
from auditor.errors import UsageError
from auditor.finance import parse_rate

try:  # wtforms >= 3.3 wants choice objects; earlier versions take (value, label) pairs
    from wtforms.fields.choices import SelectChoice
except ImportError:  # pragma: no cover - older wtforms
    def SelectChoice(value, label):  # noqa: N802 - mirrors the class it stands in for
        return (value, label)


def choices(pairs) -> list:
    return [SelectChoice(v, lbl) for v, lbl in pairs]

COSTS = CostInputs()


def percent_rate(form, field) -> None:
    """A rate field in percent: "8" or "8 %" (the command line takes 0.08 or 8%)."""
    if field.data in (None, ""):
        return
    try:
        value = parse_rate(str(field.data), bare="percent", name=field.label.text)
    except UsageError as exc:
        raise ValidationError(exc.message) from None
    if not -0.5 < value < 1.0:
        raise ValidationError("Give a percent between -50 and 100, e.g. 8.")


class ScenarioForm(FlaskForm):
    meter = SelectField("Meter", validators=[DataRequired()])
    tariff = SelectField("Tariff", validators=[DataRequired()])
    target_pf = FloatField("Target PF", default=0.95, validators=[DataRequired(), NumberRange(0.5, 1.0)])
    design = RadioField("Bank", default="optimise", choices=choices([
        ("optimise", "Let the optimiser choose (best NPV that passes screening)"),
        ("fixed", "Fixed bank"),
        ("automatic", "Automatic bank (switched steps)")]))
    fixed_kvar = FloatField("Fixed bank (kvar)", validators=[Optional(), NumberRange(min=0.1, max=100000)])
    steps = StringField("Steps (kvar)", validators=[Optional(), Length(max=200)],
                        description='e.g. "6x50" or "25,50,50,100"')
    detuning = SelectField("Detuning reactor", default="0", choices=choices([
        ("0", "none"), ("5.67", "5.67 %"), ("7", "7 %"), ("14", "14 %")]))
    capex_fixed = FloatField("Fixed installed cost", validators=[Optional(), NumberRange(min=0)])
    capex_per_kvar = FloatField("Installed cost per kvar", validators=[Optional(), NumberRange(min=0)])
    life_years = IntegerField("Lifetime (years)", validators=[Optional(), NumberRange(1, 60)])
    discount_rate = StringField("Discount rate (percent a year)", validators=[Optional(), percent_rate],
                                description="8 means 8 %")
    escalation = StringField("Price escalation (percent a year)", validators=[Optional(), percent_rate])
    incentive = FloatField("Incentive or rebate (one-off)", validators=[Optional(), NumberRange(min=0)])
    incentive_year = IntegerField("Incentive received in year", validators=[Optional(), NumberRange(0, 60)],
                                  description="0 = with the purchase")
    replacement_cost = FloatField("Replacement of cells or contactors", validators=[Optional(), NumberRange(min=0)])
    replacement_year = IntegerField("Replacement in year", validators=[Optional(), NumberRange(1, 60)])
    tax_rate = StringField("Profit tax (percent)", validators=[Optional(), percent_rate],
                           description="empty = no tax")
    depreciation_years = IntegerField("Tax depreciation (years)", validators=[Optional(), NumberRange(1, 60)],
                                      description="straight line; empty = the life")
    count_loss_reduction = BooleanField("Count the line-loss reduction in the payback")
    name = StringField("Save as", validators=[Optional(), Length(max=200)],
                       description="Give a name to keep the scenario and export it.")

    def validate(self, extra_validators=None) -> bool:
        ok = super().validate(extra_validators)
        # the bank fields are optional one by one but required by the design chosen
        if self.design.data == "fixed" and self.fixed_kvar.data is None and not self.fixed_kvar.errors:
            self.fixed_kvar.errors = [*self.fixed_kvar.errors, "Give the size of the fixed bank in kvar."]
            ok = False
        if self.design.data == "automatic" and not (self.steps.data or "").strip():
            self.steps.errors = [*self.steps.errors, 'Give the steps of the automatic bank, e.g. "6x50".']
            ok = False
        return ok

    def costs(self) -> dict:
        out = {}
        if self.capex_fixed.data is not None:
            out["capex_fixed"] = float(self.capex_fixed.data)
        if self.capex_per_kvar.data is not None:
            out["capex_per_kvar"] = float(self.capex_per_kvar.data)
        if self.life_years.data is not None:
            out["life_years"] = int(self.life_years.data)
        for name in ("discount_rate", "escalation", "tax_rate"):
            value = getattr(self, name).data
            if value not in (None, ""):
                out[name] = parse_rate(str(value), bare="percent", name=name)
        for name in ("incentive", "replacement_cost"):
            if getattr(self, name).data is not None:
                out[name] = float(getattr(self, name).data)
        for name in ("incentive_year", "replacement_year", "depreciation_years"):
            if getattr(self, name).data is not None:
                out[name] = int(getattr(self, name).data)
        if self.count_loss_reduction.data:
            out["count_loss_reduction"] = True
        return out


class DeleteForm(FlaskForm):
    name = StringField(validators=[DataRequired(), Length(max=200)])


class UploadForm(FlaskForm):
    file = FileField("Meter data file", validators=[FileRequired()])
    site = StringField("Site", validators=[Optional(), Length(max=200)],
                       description="Site to put new meters on (default: as the file says, else 'default').")
    timezone = StringField("Time zone of local timestamps", validators=[Optional(), Length(max=64)],
                           description="IANA name, e.g. Europe/Berlin; needed when the file's times are local.")
    profile = SelectField("Layout", default="", choices=choices([("", "detect the layout")]))
    estimate_gaps = RadioField("Gaps", default="no", choices=choices([("no", "leave gaps empty"),
                                                                       ("yes", "estimate short gaps (flagged)")]))


class LoginForm(FlaskForm):
    token = StringField("Access token", validators=[DataRequired()])
