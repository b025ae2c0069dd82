"""Customer form."""

from __future__ import annotations

from flask_wtf import FlaskForm
from wtforms import BooleanField, StringField, TextAreaField
from wtforms.validators import InputRequired, Length


class CustomerForm(FlaskForm):
    name = StringField(
        "Name", validators=[InputRequired("Give the customer's name."), Length(max=200)]
    )
    contact = StringField("Contact person", validators=[Length(max=200)])
    email = StringField("E-mail", validators=[Length(max=200)])
    phone = StringField("Phone", validators=[Length(max=64)])
    address = TextAreaField("Address", validators=[Length(max=2000)])
    notes = TextAreaField("Notes", validators=[Length(max=5000)])
    requires_residual_test = BooleanField("Residual-unbalance test on every job by default")

    def values(self) -> dict[str, object]:
        return {
            "name": self.name.data or "",
            "contact": self.contact.data or "",
            "email": self.email.data or "",
            "phone": self.phone.data or "",
            "address": self.address.data or "",
            "notes": self.notes.data or "",
            "requires_residual_test": bool(self.requires_residual_test.data),
        }
