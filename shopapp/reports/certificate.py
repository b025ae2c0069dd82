"""The balance certificate: the data it certifies and its PDF.

:class:`CertificateData` is everything printed on a certificate, as plain
values (numbers already in the shop's display units and angle convention, so
the document needs no database). Its canonical JSON (:func:`canonical_json`)
is what is stored and hashed; :func:`render` turns the data into PDF bytes,
the same bytes every time for the same data.

The layout is ours, made for a customer's incoming inspection: the first block
answers "is this rotor accepted, and against what?" (number, revision, rotor,
customer, verdict); then the rotor and its tolerance, how it was balanced,
the result per plane with a polar plot, what the certificate covers, who
signed, and how to check that the document is genuine.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
import hashlib
import json
import math
from dataclasses import dataclass
from typing import Any

from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.units import mm

from shopapp.charts import Figure
from shopapp.charts.polar import PolarVector, polar_figure
from shopapp.core import display
from shopapp.reports import traceability_section
from shopapp.reports.common import FONT_BOLD, SHADE, STYLES, DocumentMeta
from shopapp.reports.qr import draw_qr
from shopapp.reports.sheet import (
    CONTENT_WIDTH,
    Block,
    Boxed,
    Columns,
    Custom,
    Figures,
    Gap,
    Grid,
    Sheet,
    Text,
    wrap,
)
from shopapp.reports.traceability_section import ErrorLine, ResidualTestLine

SCHEMA_VERSION = 2
# Schema 2 (issue 15) added the verification code and the verify URL printed with a QR
# code. Data of schema 1 (certificates issued before) is stored, hashed and drawn without
# them, exactly as it was, so their stored JSON and content hash stay the same and they
# draw the same content. The stored PDF is the record (checked by its SHA-256): issue 13
# first made rendering faster with the same pixels, then drew the certificate straight onto
# the canvas in a layout of its own, so a re-rendering made since states what an older
# stored file states, in the same order, but not in the same place on the page.
SCHEMA_2_FIELDS = ("verification_code", "verify_url", "signed_by")
SIGNIFICANT_DIGITS = 6  # stored precision of every float in the certified data

COVERAGE_STATEMENT = (
    "This certificate covers the balance of the rotor as a rigid rotor, on the balancing "
    "machine named above, at the stated balancing speed, against the stated tolerance. It is "
    "not a vibration acceptance of the assembled machine: bearings, fits, alignment, the "
    "foundation, coupling and operating speed of the installation all affect vibration in "
    "service."
)
CAUTION = (
    "Caution: installation, running-in and service use are governed by the machine maker's "
    "instructions, the installation's own acceptance criteria and local codes. Do not run the "
    "rotor above its stated service speed, and keep correction masses, fasteners and guards "
    "as fitted here."
)


@dataclass(frozen=True)
class PlaneVector:
    """An unbalance in one correction plane, as printed."""

    plane: int
    unbalance_gmm: float
    unbalance_shop: float  # in CertificateData.unit
    angle_deg: float  # shop's display convention


@dataclass(frozen=True)
class CorrectionLine:
    """One correction applied (mass actually fitted or removed)."""

    plane: int
    action: str  # "add" | "remove"
    mass_g: float
    angle_deg: float  # shop's display convention
    radius_mm: float
    details: str  # split onto positions or drilling, in words; "" when a single mass


@dataclass(frozen=True)
class LimitLine:
    """A residual against its limit in one plane (bearing or correction plane)."""

    name: str  # "bearing A", "plane 1", ...
    limit_gmm: float
    limit_shop: float
    residual_gmm: float
    residual_shop: float
    percent_of_limit: float
    passed: bool
    deciding: bool  # this plane decides the verdict (the tolerance's reference planes)


@dataclass(frozen=True)
class CertificateData:
    """Everything a balance certificate states. Built by ``services.certificates``."""

    schema: int
    number: str
    revision: int
    revision_reason: str
    issued_at: str  # ISO 8601 UTC
    shop_name: str
    shop_address: str
    customer_name: str
    customer_order_ref: str
    job_number: str
    rotor_part_number: str
    rotor_description: str
    serial_number: str
    mass_kg: float
    service_speed_rpm: float
    balancing_speed_rpm: float
    planes: int
    radius_1_mm: float
    radius_2_mm: float | None
    bearing_a_mm: float
    bearing_b_mm: float
    centre_of_mass_mm: float
    plane_1_mm: float
    plane_2_mm: float | None
    tolerance_method: str  # the job's: "grade" (ISO 21940-11) | "4w/n" | "explicit"
    tolerance_basis: str  # in words, e.g. "ISO 21940-11 balance grade G 6.3"
    grade_mm_s: float | None
    u_per_gmm: float
    e_per_um: float | None
    journal_load_a_kg: float | None
    journal_load_b_kg: float | None
    reference_planes: str  # "bearing_planes" | "correction_planes"
    unit: str  # shop's unbalance unit
    angle_convention: str  # in words
    machine_name: str
    machine_kind: str  # "hard-bearing" | "soft-bearing"
    machine_verified_on: str | None  # ISO date of the last verification, None when none
    machine_verification: str  # "passed" | "failed" | "no verification on file"
    received_on: str
    balanced_on: str  # date of the run that was judged
    initial_run: int  # run numbers on the job
    final_run: int
    initial: tuple[PlaneVector, ...]
    corrections: tuple[CorrectionLine, ...]
    residual: tuple[PlaneVector, ...]
    limits: tuple[LimitLine, ...]
    plot_limits_shop: tuple[float, ...]  # limit circle per correction plane, shop's unit
    passed: bool
    operator_name: str
    issued_by_name: str
    notes: tuple[str, ...] = ()
    # How the tolerance method allotted the limits (allocation bounds, lever rule, ...).
    tolerance_notes: tuple[str, ...] = ()
    # Traceability (shopapp.reports.traceability_section); empty when not applicable.
    key_statement: str = ""
    key_compensation: str = ""
    arbor: str = ""
    residual_tests: tuple[ResidualTestLine, ...] = ()
    balance_errors: tuple[ErrorLine, ...] = ()
    error_rule: str = ""
    # Schema 2: the random code /verify asks for with the number, and the address printed
    # (and drawn as a QR code) to check this revision: "<base>/verify?n=<number>&c=<code>",
    # only the path when the shop has no BASE_URL.
    verification_code: str = ""
    verify_url: str = ""
    signed_by: str = ""  # subject of the shop's signer certificate; "" when not signed

    # --- serialisation -------------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """Plain dict (tuples as lists) with every float rounded to the stored precision.

        Schema 1 data has no schema-2 keys (its stored JSON stays byte for byte).
        """
        out = _rounded(self)
        if self.schema < 2:
            for key in SCHEMA_2_FIELDS:
                out.pop(key)
        return out

    @classmethod
    def from_dict(cls, raw: dict[str, Any]) -> CertificateData:
        """Inverse of :meth:`to_dict` (unknown keys refused, so a bad store shows)."""
        values = dict(raw)
        values["initial"] = tuple(PlaneVector(**v) for v in values["initial"])
        values["residual"] = tuple(PlaneVector(**v) for v in values["residual"])
        values["corrections"] = tuple(CorrectionLine(**v) for v in values["corrections"])
        values["limits"] = tuple(LimitLine(**v) for v in values["limits"])
        values["notes"] = tuple(values.get("notes", ()))
        values["tolerance_notes"] = tuple(values.get("tolerance_notes", ()))
        values = traceability_section.lines_from_dict(values)
        return cls(**values)

    @classmethod
    def from_json(cls, text: str) -> CertificateData:
        return cls.from_dict(json.loads(text))

    @property
    def issued_on(self) -> str:
        return self.issued_at[:10]


def _round(value: float) -> float:
    if not math.isfinite(value):
        raise ValueError(f"certificate data holds a non-finite number ({value!r})")
    out = float(f"{value:.{SIGNIFICANT_DIGITS}g}")
    return 0.0 if out == 0 else out  # no "-0.0" in the canonical text


@functools.cache
def _field_names(cls: type) -> tuple[str, ...]:
    return tuple(f.name for f in dataclasses.fields(cls))


def _rounded(obj: Any) -> Any:
    """``obj`` as plain JSON values: dataclasses as dicts (as ``dataclasses.asdict`` makes
    them, without its deep copy of every value), tuples as lists, floats rounded."""
    if isinstance(obj, bool):
        return obj
    if isinstance(obj, float):
        return _round(obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {k: _rounded(getattr(obj, k)) for k in _field_names(type(obj))}
    if isinstance(obj, dict):
        return {k: _rounded(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_rounded(v) for v in obj]
    return obj


def canonical_json(data: CertificateData) -> str:
    """The canonical JSON of ``data``: sorted keys, no spaces, UTF-8, floats to 6 digits.

    ``json.dumps(sort_keys=True, separators=(",", ":"), ensure_ascii=False)`` of
    :meth:`CertificateData.to_dict`. Rounding is idempotent, so
    ``canonical_json(from_json(canonical_json(d))) == canonical_json(d)``.
    """
    return json.dumps(data.to_dict(), sort_keys=True, separators=(",", ":"), ensure_ascii=False)


def data_sha256(data: CertificateData) -> str:
    """SHA-256 (hex) of the UTF-8 canonical JSON: the content hash printed on the certificate."""
    return hashlib.sha256(canonical_json(data).encode("utf-8")).hexdigest()


def normalized(data: CertificateData) -> CertificateData:
    """``data`` as it reads back from its canonical JSON (rounded), ready to render and store."""
    return CertificateData.from_json(canonical_json(data))


# --- layout -------------------------------------------------------------------------
# Drawn straight onto the canvas by shopapp.reports.sheet (issue 13): every block is made
# for its known width, so wrapping and heights are simple arithmetic.

W = CONTENT_WIDTH
QR_SIZE = 30 * mm
# The verdict's first line: bold and larger than the body (our layout, no source).
_VERDICT = ParagraphStyle("verdict", parent=STYLES.body, fontName=FONT_BOLD, fontSize=12,
                          leading=14)
_fixed_lines = functools.cache(wrap)  # wrapped lines of the texts every certificate prints


def _fixed(text: str, style: ParagraphStyle, width: float) -> Text:
    """A text that is the same on every certificate, wrapped once per process."""
    return Text(text, style, width, lines=_fixed_lines(text, style.fontName, style.fontSize,
                                                       width))


def _ang(value: float) -> str:
    return f"{value:.0f}°"


def _rpm(value: float) -> str:
    return f"{value:.0f} rpm"


def _widths(*fractions: float) -> list[float]:
    total = sum(fractions)
    return [W * f / total for f in fractions]


def _unit_heads(what: str, unit: str) -> list[str]:
    """Column heads in the shop's unit, plus g·mm when the shop works in another unit."""
    return [f"{what} ({unit})"] if unit == "g·mm" else [f"{what} ({unit})", f"{what} (g·mm)"]


def _unit_values(shop: float, gmm: float, unit: str) -> list[str]:
    return [display.number(shop)] if unit == "g·mm" else [display.number(shop), display.number(gmm)]


def _unit_widths(unit: str) -> list[float]:
    return [0.3] if unit == "g·mm" else [0.22, 0.22]


def _vector_table(vectors: tuple[PlaneVector, ...], what: str, unit: str) -> Grid:
    rows = [["Plane", *_unit_heads(what, unit), "Angle"]]
    for v in vectors:
        rows.append([f"plane {v.plane}", *_unit_values(v.unbalance_shop, v.unbalance_gmm, unit),
                     _ang(v.angle_deg)])
    return Grid(rows, _widths(0.25, *_unit_widths(unit), 0.25), align_right_from=1)


def _verdict_word(passed: bool) -> str:
    return "WITHIN TOLERANCE" if passed else "OUT OF TOLERANCE"


def judged_where(data: CertificateData) -> str:
    """Where the verdict was judged, in the words page one and the result table share."""
    if data.reference_planes == "bearing_planes":
        where = "in both bearing planes"
    elif data.planes == 1:
        where = "in the correction plane"
    else:
        where = "in both correction planes"
    if any(x.deciding and x.name.startswith("static") for x in data.limits):
        where += " and for static and couple unbalance"
    return where


def first_lines(data: CertificateData) -> list[tuple[str, str]]:
    """The identification block printed first on the certificate (also shown by /verify)."""
    return [
        ("Certificate", f"{data.number} revision {data.revision}"),
        ("Issued", display.date(data.issued_at)),
        ("Customer", data.customer_name),
        ("Rotor", f"{data.rotor_part_number} {data.rotor_description}".strip()),
        ("Serial number", data.serial_number),
        ("Result", f"{_verdict_word(data.passed).lower()} {judged_where(data)}"
         if data.passed else _verdict_word(False).lower()),
    ]


def _identity_block(sheet: Sheet, data: CertificateData) -> None:
    """Shop, title and tagline on the left; number, revision and issue date boxed right."""
    st = STYLES
    right = 72 * mm
    left_width = W - right - 4 * mm
    ident = Grid([[k, v] for k, v in first_lines(data)[:2]], [24 * mm, right - 24 * mm],
                 header_rows=0, label_column=True)
    sheet.place(Columns([
        (0, [Text(data.shop_name, st.subtitle, left_width),
             _fixed("Balance certificate", st.title, left_width),
             _fixed("Rigid-rotor balance, measured and certified by the shop named above",
                    st.small, left_width)]),
        (W - right, [ident]),
    ]))


def _acceptance_block(sheet: Sheet, data: CertificateData) -> None:
    """The incoming-inspection summary: what, whose, against what, verdict."""
    st = STYLES
    basis = f"{data.tolerance_basis}; judged in the {data.reference_planes.replace('_', ' ')}"
    rows = [[k, v] for k, v in first_lines(data)[2:5]] + [
        ["Customer order", data.customer_order_ref or "–"],
        ["Our job", data.job_number],
        ["Tolerance", basis],
    ]
    box = 46 * mm
    table = Grid(rows, [32 * mm, W - 32 * mm - box - 2 * mm], header_rows=0, label_column=True)
    worst = max((x.percent_of_limit for x in data.limits if x.deciding), default=0.0)
    inner = box - 12
    verdict = Boxed([
        _fixed(_verdict_word(data.passed), _VERDICT, inner),
        Text(judged_where(data) if data.passed else "see the result table", st.body, inner),
        Text(f"worst at {display.of_limit(worst)} of its limit", st.body, inner),
    ], box, pad=6, line_width=1.6)
    sheet.place(Gap(4 * mm), Columns([(0, [table]), (W - box, [verdict])]))


def _rotor_section(sheet: Sheet, data: CertificateData) -> None:
    st = STYLES
    two = data.planes == 2
    rows = [
        ["Mass", f"{display.number(data.mass_kg)} kg",
         "Service speed", _rpm(data.service_speed_rpm)],
        ["Correction radius, plane 1", f"{display.number(data.radius_1_mm)} mm",
         "Correction radius, plane 2", f"{display.number(data.radius_2_mm)} mm" if two else "–"],
        ["Bearing A / bearing B at", f"{display.number(data.bearing_a_mm)} / "
         f"{display.number(data.bearing_b_mm)} mm", "Centre of mass at",
         f"{display.number(data.centre_of_mass_mm)} mm"],
        ["Plane 1 at", f"{display.number(data.plane_1_mm)} mm",
         "Plane 2 at", f"{display.number(data.plane_2_mm)} mm" if two else "single plane"],
    ]
    w = W / 4
    sheet.place(_fixed("1  Rotor", st.heading, W),
                Grid(rows, [w * 1.15, w * 0.85, w * 1.15, w * 0.85], header_rows=0),
                _fixed("Axial positions in mm from the drawing's datum.", st.small, W))


def _tolerance_section(sheet: Sheet, data: CertificateData) -> None:
    st = STYLES
    lines = [f"Basis: {data.tolerance_basis}."]
    if data.tolerance_method == "grade":
        lines.append(
            f"Permissible residual unbalance U_per = {display.number(data.u_per_gmm)} g·mm "
            f"(e_per = {display.number(data.e_per_um)} g·mm/kg) at the service speed "
            f"{_rpm(data.service_speed_rpm)}, allocated to the bearing planes."
        )
    elif data.tolerance_method == "4w/n":
        loads = f"{display.number(data.journal_load_a_kg)} kg"
        if data.journal_load_b_kg is not None:
            loads += f" and {display.number(data.journal_load_b_kg)} kg"
        lines.append(f"4W/N per correction plane with static journal loads of {loads} at "
                     f"{_rpm(data.service_speed_rpm)}.")
    else:
        lines.append("Limits per correction plane as specified by the customer.")
    lines += [f"Note: {n}." for n in data.tolerance_notes]
    rows: list[list[str]] = [["Judged", *_unit_heads("Limit", data.unit)]]
    for lim in data.limits:
        if lim.deciding:  # only what decides carries a limit (one basis)
            rows.append([lim.name, *_unit_values(lim.limit_shop, lim.limit_gmm, data.unit)])
    sheet.place(_fixed("2  Tolerance", st.heading, W),
                *[Text(t, st.body, W) for t in lines],
                Gap(2 * mm),
                Grid(rows, _widths(0.4, *_unit_widths(data.unit)), align_right_from=1))


def _balancing_section(sheet: Sheet, data: CertificateData) -> None:
    st = STYLES
    if data.machine_verified_on is None:
        verification = "no verification on file"
    else:
        verification = f"last verified {data.machine_verified_on}: {data.machine_verification}"
    sheet.place(_fixed("3  How it was balanced", st.heading, W), Grid([
        ["Balancing machine", f"{data.machine_name} ({data.machine_kind})"],
        ["Machine verification", verification],
        ["Balancing speed", _rpm(data.balancing_speed_rpm)],
        ["Angles", data.angle_convention],
        ["Received / balanced", f"{data.received_on} / {data.balanced_on}"],
    ], [45 * mm, W - 45 * mm], header_rows=0, label_column=True))
    sheet.place(Gap(2 * mm),
                Text(f"Initial unbalance (run {data.initial_run})", st.cell_bold, W),
                _vector_table(data.initial, "Unbalance", data.unit))
    title = _fixed("Corrections applied", st.cell_bold, W)
    if data.corrections:
        crow = [["Plane", "Action", "Mass", "Angle", "Radius", "How"]]
        for c in data.corrections:
            crow.append([f"plane {c.plane}", "added" if c.action == "add" else "removed",
                         f"{display.number(c.mass_g)} g", _ang(c.angle_deg),
                         f"{display.number(c.radius_mm)} mm",
                         c.details or "single mass"])
        sheet.place(Gap(2 * mm), title,
                    Grid(crow, [W * 0.1, W * 0.11, W * 0.12, W * 0.1, W * 0.12, W * 0.45]))
    else:
        sheet.place(Gap(2 * mm), title,
                    _fixed("none: the rotor was within tolerance as received", st.body, W))


def _result_section(sheet: Sheet, data: CertificateData) -> None:
    st = STYLES
    rows = [["Judged", f"Residual ({data.unit})", f"Limit ({data.unit})", "% of limit",
             "Verdict"]]
    for lim in data.limits:
        if not lim.deciding:
            continue  # a residual outside the basis is stated above, without a limit
        rows.append([lim.name, display.number(lim.residual_shop), display.number(lim.limit_shop),
                     display.of_limit(lim.percent_of_limit), "within" if lim.passed else "OUT"])
    sheet.place(
        Text(f"4  Result (run {data.final_run})", st.heading, W),
        _vector_table(data.residual, "Residual", data.unit),
        Text(f"Residual per correction plane as measured; the verdict below is "
             f"judged {judged_where(data)}.", st.small, W),
        Gap(2 * mm),
        Grid(rows, [W * 0.2, W * 0.2, W * 0.2, W * 0.15, W * 0.25], align_right_from=1),
    )
    for note in data.notes:
        sheet.place(Text(note, st.small, W))
    figures = polar_figures(data)
    if figures:
        circle = ("the limit circle (heavy dashed circle)"
                  if data.reference_planes == "correction_planes" else
                  "the plane's share of the bearing-plane limits (heavy dashed circle: inside "
                  "it a residual keeps both bearing planes within at any angle; the verdict is "
                  "the bearing planes' above)")
        sheet.place(Gap(3 * mm), Figures(figures, W), _fixed((
            "Polar plot per correction plane: initial unbalance (thin dashed arrow), residual "
            f"(heavy solid arrow) and {circle}; 0° at the top, "
            "angles growing clockwise in the shop's angle convention."
        ), st.small, W))


def polar_figures(data: CertificateData, size: float = 200.0) -> list[Figure]:
    """One polar plot per correction plane: initial and residual with the limit circle.

    Built with :func:`shopapp.charts.polar.polar_figure`, the job page's chart code.
    The stored angles are already in the shop's display convention, so they are
    passed with the identity convention (with rotation, zero at 0°).
    """
    figures = []
    for k in range(data.planes):
        vectors = []
        if k < len(data.initial):
            v = data.initial[k]
            vectors.append(PolarVector(f"initial (run {data.initial_run})", v.unbalance_shop,
                                       v.angle_deg, "initial"))
        if k < len(data.residual):
            v = data.residual[k]
            vectors.append(PolarVector(f"residual (run {data.final_run})", v.unbalance_shop,
                                       v.angle_deg, "residual"))
        limit = data.plot_limits_shop[k] if k < len(data.plot_limits_shop) else None
        figures.append(polar_figure(vectors, limit=limit, title=f"Plane {k + 1}",
                                    unit_label=data.unit, size=size))
    return figures


def _closing_section(sheet: Sheet, data: CertificateData, content_hash: str) -> None:
    st = STYLES
    sign = Grid(
        [["", "Name", "Date"],
         ["Balanced by (operator)", data.operator_name or "–", data.balanced_on],
         ["Issued by (quality)", data.issued_by_name, display.date(data.issued_at)]],
        [50 * mm, 70 * mm, W - 120 * mm], label_column=True,
    )
    sheet.place(_fixed("5  What this certificate covers", st.heading, W),
                _fixed(COVERAGE_STATEMENT, st.body, W),
                Boxed([_fixed(CAUTION, st.caution, W - 2 * 5)], W, pad=5, line_width=0.8,
                      fill=SHADE, style=st.caution))
    sheet.place(_fixed("6  Signed", st.heading, W), sign)
    if data.revision > 1 or data.revision_reason:
        sheet.place(Gap(2 * mm), Text((
            f"Revision {data.revision} replaces the earlier revisions of {data.number}, which "
            f"are void. Reason: {data.revision_reason or 'not stated'}."
        ), st.body, W))
    if data.schema < 2:
        sheet.place(
            _fixed("7  Check that this document is genuine", st.heading, W),
            _fixed("Content hash (SHA-256 of the certified data):", st.body, W),
            Text(content_hash, st.mono, W),
            Text((
                f"Enter the certificate number {data.number} or this hash on the shop's "
                "verification page (/verify on the shop's shopapp server, no login needed), or "
                "run 'shopapp report verify FILE.pdf' on the PDF file. The page states whether "
                "this revision is valid, void or superseded. The hash changes if any certified "
                "value changes."
            ), st.body, W),
        )
    else:
        _check_section(sheet, data, content_hash)


def has_qr(data: CertificateData) -> bool:
    """A QR code is printed when the verify address is a whole URL (the shop set BASE_URL)."""
    return data.schema >= 2 and data.verify_url.startswith(("https://", "http://"))


def _signature_words(data: CertificateData) -> str:
    attached = ("carries the certified data as the attached file certificate-data.json, whose "
                "SHA-256 is the content hash above")
    if not data.signed_by:
        return (f"This PDF {attached}. It is not digitally signed: check it on the address "
                "above.")
    return (f"This PDF is digitally signed by the shop ({data.signed_by}) and {attached}. "
            "'shopapp report verify FILE.pdf' checks the signature and the attached data "
            "without a connection to the shop; any change to the file breaks the signature.")


def _check_section(sheet: Sheet, data: CertificateData, content_hash: str) -> None:
    """Section 7 of schema 2: the verify address (and its QR code), number and code, the
    content hash, and what the digital signature and the attached data are."""
    st = STYLES
    qr = has_qr(data)
    where = "Scan the code or open this address" if qr else (
        "Open this address on the shop's shopapp server")
    indent = QR_SIZE + 4 * mm if qr else 0.0  # the text beside the code
    width = W - indent
    text: list[Block] = [
        Text(f"{where} (no login needed):", st.body, width),
        Text(data.verify_url, st.mono, width),
        Text(f"Certificate number {data.number}, verification code "
             f"{data.verification_code}. The page states whether this revision is "
             "valid, void or superseded; it shows the certified details only with "
             "the number and this code.", st.body, width),
        Gap(1.5 * mm),
        _fixed("Content hash (SHA-256 of the certified data):", st.small, width),
        Text(content_hash, st.mono, width),
        Text(_signature_words(data), st.small, width),
    ]
    heading = _fixed("7  Check that this document is genuine", st.heading, W)
    if not qr:
        sheet.place(heading, *text)
        return
    url = data.verify_url
    code = Custom(QR_SIZE, lambda canvas, x, top: draw_qr(canvas, url, x, top - QR_SIZE,
                                                          QR_SIZE))
    sheet.place(heading, Columns([(0, [code]), (indent, text)]))


def meta(data: CertificateData, content_hash: str | None = None) -> DocumentMeta:
    """PDF info, header and footer of a certificate (creation date = issue time)."""
    content_hash = content_hash or data_sha256(data)
    return DocumentMeta(
        title=f"Balance certificate {data.number} revision {data.revision}",
        created=dt.datetime.fromisoformat(data.issued_at),
        id_seed=content_hash,
        author=data.shop_name,
        subject=f"{data.number} rev {data.revision}; serial {data.serial_number}",
        keywords=f"shopapp-certificate {data.number} rev {data.revision} data-sha256 "
                 f"{content_hash}",
        header_left=f"{data.shop_name} · balance certificate",
        header_right=f"{data.number} revision {data.revision} · serial {data.serial_number}",
        footer_left=(f"content hash {content_hash[:16]}… · verify at /verify"
                     if data.schema < 2 else
                     f"verification code {data.verification_code} · content hash "
                     f"{content_hash[:16]}… · see section 7"),
    )


def render(data: CertificateData) -> bytes:
    """The certificate as PDF bytes (A4, reproducible: same data, same bytes).

    The content hash printed on it is :func:`data_sha256` of ``data``.
    """
    content_hash = data_sha256(data)
    sheet = Sheet(meta(data, content_hash))
    _identity_block(sheet, data)
    _acceptance_block(sheet, data)
    _rotor_section(sheet, data)
    _tolerance_section(sheet, data)
    _balancing_section(sheet, data)
    _result_section(sheet, data)
    traceability_section.place(sheet, data)
    _closing_section(sheet, data, content_hash)
    return sheet.pdf()
