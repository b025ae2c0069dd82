"""Forms of the certificates area."""

from __future__ import annotations

import datetime as dt

from flask_wtf.file import FileField, FileRequired
from wtforms import SelectField, StringField, TextAreaField
from wtforms.fields.choices import SelectChoice
from wtforms.validators import DataRequired, Length, Optional, ValidationError

from shopapp.certificates.issue import MAX_REASON_LENGTH, MIN_REASON_LENGTH
from shopapp.certificates.register import RegisterFilter
from shopapp.core.checks import QUERY_AHEAD_DAYS
from shopapp.core.forms import DayField, ShopForm


class IssueForm(ShopForm):
    """Only the CSRF token: issuing takes no input, the job is in the URL."""


class ReasonForm(ShopForm):
    """Why a certificate is reissued or voided (required)."""

    reason = TextAreaField(
        "Reason",
        validators=[DataRequired(message="Reason is required: say why."),
                    Length(min=MIN_REASON_LENGTH, max=MAX_REASON_LENGTH,
                           message=f"Reason must be {MIN_REASON_LENGTH}–{MAX_REASON_LENGTH} "
                                   "characters.")],
    )


class _GetForm(ShopForm):
    """A read-only search form sent by GET: no CSRF token (nothing is changed)."""

    class Meta:
        csrf = False


class RegisterSearchForm(_GetForm):
    number = StringField("Number", validators=[Optional(), Length(max=40)])
    customer = StringField("Customer", validators=[Optional(), Length(max=100)])
    serial = StringField("Serial", validators=[Optional(), Length(max=100)])
    rotor_type = StringField("Rotor type", validators=[Optional(), Length(max=100)])
    date_from = DayField("Issued from", validators=[Optional()],
                         ahead_days=QUERY_AHEAD_DAYS)
    date_to = DayField("to", validators=[Optional()], ahead_days=QUERY_AHEAD_DAYS)
    state = SelectField("State", choices=[SelectChoice("", "any"),
                                          SelectChoice("issued", "valid (issued)"),
                                          SelectChoice("void", "void")],
                        validators=[Optional()])

    def validate_date_to(self, field: DayField) -> None:
        if field.data and self.date_from.data and field.data < self.date_from.data:
            raise ValidationError("must not be before the from date")

    def filter(self) -> RegisterFilter:
        return RegisterFilter(
            number=(self.number.data or "").strip(),
            customer=(self.customer.data or "").strip(),
            serial=(self.serial.data or "").strip(),
            rotor_type=(self.rotor_type.data or "").strip(),
            date_from=self.date_from.data,
            date_to=self.date_to.data,
            state=self.state.data or "",
        )


class ZipForm(_GetForm):
    date_from = DayField("Issued from", validators=[DataRequired(
        message="Issued from is required: the first day of the export.")],
        ahead_days=QUERY_AHEAD_DAYS)
    date_to = DayField("to", validators=[DataRequired(
        message="Issued to is required: the last day of the export.")],
        ahead_days=QUERY_AHEAD_DAYS)

    def validate_date_to(self, field: DayField) -> None:
        if field.data and self.date_from.data and field.data < self.date_from.data:
            raise ValidationError("Issued to must not be before the from date.")

    def range(self) -> tuple[dt.date, dt.date]:
        assert self.date_from.data is not None and self.date_to.data is not None
        return self.date_from.data, self.date_to.data


class VerifyForm(_GetForm):
    """The public check: the number, and the verification code printed beside it."""

    n = StringField("Certificate number", validators=[Optional(), Length(max=40)])
    c = StringField("Verification code", validators=[Optional(), Length(max=100)])

    def validate_n(self, field: StringField) -> None:
        if not (field.data or "").strip():
            raise ValidationError("enter the certificate number (e.g. BC-2026-00017)")


class HashForm(_GetForm):
    """The older search box: a number or a SHA-256 hash (links printed before issue 15)."""

    q = StringField("Certificate number or SHA-256 hash",
                    validators=[DataRequired(message="enter a number or a hash"),
                                Length(max=100)])


class UploadForm(ShopForm):
    """A certificate PDF to check (POST, CSRF-protected)."""

    file = FileField("Certificate PDF", validators=[FileRequired(message="choose the PDF file")])
