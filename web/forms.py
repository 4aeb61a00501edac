"""Forms (Flask-WTF: every POST carries a CSRF token)."""
from __future__ import annotations

from flask_wtf import FlaskForm
from flask_wtf.file import FileField, FileRequired
from wtforms import FloatField, IntegerField, RadioField, SelectField, StringField
from wtforms.validators import DataRequired, Length, NumberRange, Optional

from auditor.correction import CostInputs

try:  # wtforms >= 3.3 wants choice objects; earlier versions take (value, label) pairs
    from wtforms.fields.choices import SelectChoice
except ImportError:  # pragma: no cover - older wtforms
    def SelectChoice(value, label):  # noqa: N802 - mirrors the class it stands in for
        return (value, label)


def choices(pairs) -> list:
    return [SelectChoice(v, lbl) for v, lbl in pairs]

COSTS = CostInputs()


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
    discount_rate = FloatField("Discount rate (% a year)", validators=[Optional(), NumberRange(-50, 100)])
    escalation = FloatField("Price escalation (% a year)", validators=[Optional(), NumberRange(-50, 100)])
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
        if self.discount_rate.data is not None:
            out["discount_rate"] = float(self.discount_rate.data) / 100.0
        if self.escalation.data is not None:
            out["escalation"] = float(self.escalation.data) / 100.0
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
