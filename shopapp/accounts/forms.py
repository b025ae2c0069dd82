"""Accounts forms: log-in, user administration and the shop's settings."""

from __future__ import annotations

from wtforms import PasswordField, StringField, TextAreaField
from wtforms.validators import DataRequired, EqualTo, InputRequired, Length

from shopapp.accounts.password_rules import MAX_PASSWORD_LENGTH, MIN_PASSWORD_LENGTH
from shopapp.core.forms import ChoiceField, NumberField, OnceForm, ShopForm, WholeNumberField
from shopapp.models import ANGLE_SENSES, ROLES, UNBALANCE_DISPLAY_UNITS

_PASSWORD = [
    InputRequired("Type a password."),
    Length(min=MIN_PASSWORD_LENGTH, max=MAX_PASSWORD_LENGTH,
           message=f"{MIN_PASSWORD_LENGTH} to {MAX_PASSWORD_LENGTH} characters."),
]
_SAME = EqualTo("password", message="The two passwords differ; type the same password twice.")
ROLE_CHOICES = [(r, r) for r in ROLES]
SENSE_LABELS = {
    "with_rotation": "in the direction of rotation",
    "against_rotation": "against the direction of rotation",
}


class LoginForm(ShopForm):
    username = StringField("Username", validators=[DataRequired(), Length(max=64)])
    password = PasswordField("Password", validators=[DataRequired(), Length(max=200)])


class AddUserForm(OnceForm):
    username = StringField(
        "Username", validators=[InputRequired("Give a username."), Length(max=64)]
    )
    full_name = StringField("Full name", validators=[Length(max=200)])
    role = ChoiceField("Role", choices=ROLE_CHOICES, default="operator")
    password = PasswordField("Password", validators=_PASSWORD)
    password_again = PasswordField(
        "Password again", validators=[InputRequired("Type it again."), _SAME]
    )


class RoleForm(ShopForm):
    role = ChoiceField("Role", choices=ROLE_CHOICES)


class PasswordForm(ShopForm):
    password = PasswordField("New password", validators=_PASSWORD)
    password_again = PasswordField(
        "New password again", validators=[InputRequired("Type it again."), _SAME]
    )


class OwnPasswordForm(ShopForm):
    current_password = PasswordField(
        "Current password", validators=[InputRequired("Type your current password."),
                                        Length(max=MAX_PASSWORD_LENGTH)]
    )
    password = PasswordField("New password", validators=_PASSWORD)
    password_again = PasswordField(
        "New password again", validators=[InputRequired("Type it again."), _SAME]
    )


class SettingsForm(ShopForm):
    shop_name = StringField(
        "Shop name", validators=[InputRequired("Give the shop's name."), Length(max=200)]
    )
    shop_address = TextAreaField("Shop address", validators=[Length(max=2000)])
    angle_sense = ChoiceField(
        "Angle direction", choices=[(s, SENSE_LABELS[s]) for s in ANGLE_SENSES]
    )
    angle_zero_deg = NumberField(
        "Zero reference (°)", validators=[InputRequired("Required: 0 to 359.9.")]
    )
    unbalance_unit = ChoiceField(
        "Unbalance unit", choices=[(u, u) for u in UNBALANCE_DISPLAY_UNITS]
    )
    job_number_pattern = StringField(
        "Job-number pattern", validators=[InputRequired("Required."), Length(max=64)]
    )
    due_soon_days = WholeNumberField(
        "'Due soon' warning (days)", validators=[InputRequired("Required: 0 or more days.")]
    )
