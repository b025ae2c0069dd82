"""The import page's forms: upload (kind and file) and confirm (the previewed file)."""

from __future__ import annotations

from flask_wtf.file import FileField, FileRequired
from wtforms import HiddenField
from wtforms.validators import DataRequired, Length, Regexp

from shopapp.core.forms import ChoiceField, OnceForm, ShopForm


class UploadForm(ShopForm):
    """Which kind of file, and the file: shows the preview, writes nothing."""

    kind = ChoiceField("Kind", validators=[DataRequired(message="choose what the file holds")])
    file = FileField("File (.csv or .xlsx)",
                     validators=[FileRequired(message="choose the file to import")])


class ApplyForm(OnceForm):
    """Apply the previewed file (its SHA-256 and kind, as the preview showed them)."""

    kind = HiddenField(validators=[DataRequired()])
    sha256 = HiddenField(validators=[DataRequired(), Regexp(r"^[0-9a-f]{64}$")])
    file_name = HiddenField(validators=[DataRequired(), Length(max=255)])
