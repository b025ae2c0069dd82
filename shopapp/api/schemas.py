"""Request and response bodies of the API, declared once (pydantic v2).

The OpenAPI document is generated from these models (:mod:`shopapp.api.openapi`), and
the same models parse the requests, so the document cannot drift from what is
checked. Units are in the field names as everywhere in shopapp (docs/architecture.md,
"Conventions"): unbalance in g·mm, masses of corrections in g, of rotors in kg,
speeds in rpm. Angles are shopapp's stored convention — degrees in the direction of
rotation from the shaft's reference mark — whatever the shop's display settings, so
a script's numbers never depend on a setting.

Input models refuse unknown fields, NaN and infinities, and text with control
characters, each with a message naming the field. The use-cases still check every
rule of the trade; these models check only shapes.
"""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any, Generic, Literal, TypeVar

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, RootModel

from shopapp.core.checks import FORM_CONTROL
from shopapp.core.web import MAX_ID
from shopapp.models import JOB_KINDS, JOB_STATES, READING_UNITS, RUN_PURPOSES

T = TypeVar("T")


def _plain_text(value: str) -> str:
    if FORM_CONTROL.search(value):  # the forms' own rule (shopapp.core.checks)
        raise ValueError("contains a control character (such as NUL or a text-direction "
                         "override); send plain text")
    return value


_Plain = AfterValidator(_plain_text)
Name = Annotated[str, Field(max_length=200), _Plain]
ShortText = Annotated[str, Field(max_length=100), _Plain]
LongText = Annotated[str, Field(max_length=5000), _Plain]
Phone = Annotated[str, Field(max_length=64), _Plain]
Address = Annotated[str, Field(max_length=2000), _Plain]
Id = Annotated[int, Field(ge=1, le=MAX_ID)]
# Readings and masses: finite (NaN/inf refused by the model config), bounded so that
# no number can overflow a column; the use-cases apply the trade's own limits.
Number = Annotated[float, Field(ge=-1e12, le=1e12)]

JobState = Literal[JOB_STATES]  # type: ignore[valid-type]
JobKind = Literal[JOB_KINDS]  # type: ignore[valid-type]
RunPurpose = Literal[RUN_PURPOSES]  # type: ignore[valid-type]
ReadingUnit = Literal[READING_UNITS]  # type: ignore[valid-type]


class In(BaseModel):
    """Base of request bodies and query strings: strict about what is sent."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False, str_strip_whitespace=False)


class Out(BaseModel):
    model_config = ConfigDict(from_attributes=True)


# --------------------------------------------------------------------------- shared


class ErrorDetail(BaseModel):
    code: str = Field(description="bad_request, unauthorized, forbidden, not_found, "
                                  "conflict, invalid, …")
    message: str
    fields: dict[str, str] = Field(description="request field → what is wrong with it")


class ErrorBody(BaseModel):
    """Every refusal of the API has this shape."""

    error: ErrorDetail


class PageQuery(In):
    page: int = Field(1, ge=1, le=MAX_ID, description="page number, from 1")
    size: int = Field(25, ge=1, le=200, description="rows per page (1–200)")


class Page(BaseModel, Generic[T]):
    items: list[T]
    total: int = Field(description="rows matching the filters, all pages")
    page: int = Field(description="this page's number (a page past the last is empty)")
    size: int
    pages: int


class Ref(Out):
    id: int
    name: str


# --------------------------------------------------------------------------- customers


class CustomerListQuery(PageQuery):
    q: ShortText | None = Field(None, description="searches name and contact")
    include_archived: bool = False


class CustomerIn(In):
    name: Name
    contact: Name = ""
    email: Name = ""
    phone: Phone = ""
    address: Address = ""
    notes: LongText = ""
    requires_residual_test: bool = False


class CustomerPatch(In):
    name: Name | None = None
    contact: Name | None = None
    email: Name | None = None
    phone: Phone | None = None
    address: Address | None = None
    notes: LongText | None = None
    requires_residual_test: bool | None = None


class CustomerOut(Out):
    id: int
    name: str
    contact: str
    email: str
    phone: str
    address: str
    notes: str
    requires_residual_test: bool
    archived: bool
    created_at: dt.datetime


# --------------------------------------------------------------------------- jobs


class JobListQuery(PageQuery):
    """The job list page's filters (same names as its query string)."""

    operator_id: Id | None = None
    machine_id: Id | None = None
    rotor_type_id: Id | None = None
    customer_id: Id | None = None
    rotor_id: Id | None = None
    state: JobState | None = None
    kind: JobKind | None = None
    received_from: dt.date | None = None
    received_to: dt.date | None = None
    dispatched_from: dt.date | None = None
    dispatched_to: dt.date | None = None
    reached_from: dt.date | None = Field(None, description="first reached tolerance on or "
                                         "after this day (UTC)")
    reached_to: dt.date | None = Field(None, description="first reached tolerance on or "
                                       "before this day (UTC)")
    rejected_from: dt.date | None = Field(None, description="moved to rejected on or after "
                                          "this day (UTC)")
    rejected_to: dt.date | None = Field(None, description="moved to rejected on or before "
                                        "this day (UTC)")
    reworked: bool | Literal["window"] | None = Field(
        None, description="true: reopened at least once or a return job; false: neither; "
        "'window': reworked within 90 days of first reaching tolerance (the shop measures' "
        "rework)")
    q: ShortText | None = Field(None, description="job number, serial number or customer name")


class RotorRef(Out):
    id: int
    serial_number: str
    rotor_type_id: int


class JobOut(Out):
    id: int
    number: str
    state: JobState
    kind: JobKind
    customer: Ref
    rotor: RotorRef
    machine_id: int | None
    operator_id: int | None
    return_of_job_id: int | None
    customer_order_ref: str
    received_on: dt.date
    promised_on: dt.date | None
    dispatched_on: dt.date | None
    tolerance_method: str
    tolerance_grade: float | None
    balancing_speed_rpm: float
    service_speed_rpm: float
    reopen_count: int
    notes: str


class ReadingIn(In):
    plane: int = Field(ge=1, le=2)
    amplitude: Number = Field(description="in the run's unit")
    angle_deg: Number = Field(description="degrees in the direction of rotation from the "
                                          "reference mark")


class TrialIn(In):
    plane: int = Field(ge=1, le=2)
    mass_g: Number
    angle_deg: Number
    radius_mm: Number


class RunIn(In):
    purpose: RunPurpose
    speed_rpm: Number
    unit: ReadingUnit = "g·mm"
    readings: list[ReadingIn] = Field(max_length=4, description="one per correction plane")
    trial: TrialIn | None = Field(None, description="the trial mass, for trial runs only")
    earlier_trial_left_on: bool = False
    notes: LongText = ""


class ReadingOut(Out):
    plane: int
    amplitude: float
    angle_deg: float
    unit: str


class RunOut(Out):
    id: int
    job_id: int
    seq: int
    purpose: str
    speed_rpm: float
    readings: list[ReadingOut]
    trial_plane: int | None
    trial_mass_g: float | None
    trial_angle_deg: float | None
    trial_radius_mm: float | None
    earlier_trial_left_on: bool
    within_tolerance: bool | None
    notes: str
    by_id: int | None
    taken_at: dt.datetime


class SplitPart(Out):
    position: int
    mass_g: float


class CorrectionOut(Out):
    id: int
    job_id: int
    run_id: int | None
    plane: int
    action: str
    mass_g: float
    angle_deg: float
    radius_mm: float
    advised_mass_g: float | None
    advised_angle_deg: float | None
    split: list[SplitPart] | None
    drill_diameter_mm: float | None
    drill_depth_mm: float | None
    drill_holes: int | None
    applied_by_id: int | None
    applied_at: dt.datetime


class TransitionOut(Out):
    from_state: str | None
    to_state: str
    reason: str
    by_id: int | None
    at: dt.datetime


class JobDetail(JobOut):
    runs: list[RunOut]
    corrections: list[CorrectionOut]
    transitions: list[TransitionOut]
    allowed_actions: list[str] = Field(description="state changes open to the job now")


class ToleranceIn(In):
    method: Literal["grade", "4w/n", "explicit"]
    grade: Number | None = None
    journal_load_a_kg: Number | None = None
    journal_load_b_kg: Number | None = None
    plane_1_gmm: Number | None = None
    plane_2_gmm: Number | None = None


class NewCustomerIn(In):
    name: Name
    contact: Name = ""
    phone: Phone = ""


class OneOffIn(In):
    """Geometry of a one-off rotor (no part number); the registry checks it."""

    description: Name = ""
    kind: ShortText = "other"
    mass_kg: Number | None = None
    first_critical_rpm: Number | None = None
    bearing_a_mm: Number | None = None
    bearing_b_mm: Number | None = None
    centre_of_mass_mm: Number | None = None
    plane_1_mm: Number | None = None
    radius_1_mm: Number | None = None
    method_1: ShortText = "add"
    positions_1: int | None = Field(None, ge=0, le=10_000)
    plane_2_mm: Number | None = None
    radius_2_mm: Number | None = None
    method_2: ShortText | None = None
    positions_2: int | None = Field(None, ge=0, le=10_000)
    density_g_cm3: Number | None = None


class BookInIn(In):
    customer_id: Id | None = Field(None, description="an existing customer, or give "
                                                     "new_customer")
    new_customer: NewCustomerIn | None = None
    serial_number: ShortText
    rotor_type_id: Id | None = None
    one_off: OneOffIn | None = None
    tolerance: ToleranceIn | None = Field(None, description="default: the rotor type's")
    service_speed_rpm: Number | None = None
    balancing_speed_rpm: Number
    machine_id: Id
    received_on: dt.date | None = None
    promised_on: dt.date | None = None
    customer_order_ref: ShortText = ""
    notes: LongText = ""


StateAction = Literal["start", "in_tolerance", "dispatch", "reject", "reopen"]


class StateIn(In):
    action: StateAction
    reason: LongText = Field("", description="required to reject or reopen")
    dispatched_on: dt.date | None = Field(None, description="dispatch only; default today")


# --------------------------------------------------------------------------- corrections


class AdviceQuery(In):
    drill_diameter_mm: float | None = Field(None, ge=0.5, le=100.0,
                                            description="drill for removal advice (mm)")


class PositionOut(Out):
    position: int
    angle_deg: float
    mass_g: float


class HoleOut(Out):
    mass_g: float
    drill_diameter_mm: float
    point_angle_deg: float
    depth_full_diameter_mm: float
    depth_to_tip_mm: float
    point_length_mm: float
    surface_diameter_mm: float
    warnings: list[str]
    cautions: list[str]


class PlaneAdviceOut(Out):
    plane: int
    method: str
    action: str
    mass_g: float
    angle_deg: float = Field(description="where to act: add there, or remove there")
    add_angle_deg: float = Field(description="the equivalent addition (remove = add + 180°)")
    radius_mm: float
    unbalance_gmm: float
    split: list[PositionOut]
    drill: list[HoleOut]
    drill_diameter_mm: float | None
    warnings: list[str]


class TrialAdviceOut(Out):
    mass_g: float
    radius_mm: float
    speed_rpm: float
    force_n: float
    static_load_n: float
    force_fraction: float
    rule: str
    cautions: list[str]
    warnings: list[str]


class AdviceOut(BaseModel):
    """What the job page's correction panel shows, from the job's runs and corrections."""

    job_id: int
    run_id: int | None = Field(description="the run the advice answers (null: none yet)")
    run_seq: int | None
    source: str | None
    planes: list[PlaneAdviceOut]
    predicted_residual_gmm: list[float]
    predicted_pct_of_limit: list[float] | None
    note: str = Field(description="why there is no advice, when there is none")
    trial_advice: list[TrialAdviceOut]
    warnings: list[str]
    cautions: list[str] = Field(description="safety cautions for speeds, trial masses and "
                                            "drilling; show them to the operator")


class SplitIn(In):
    position: int = Field(ge=1, le=10_000)
    mass_g: Number


class CorrectionIn(In):
    run_id: Id | None = Field(None, description="the run the correction answers")
    plane: int = Field(ge=1, le=2)
    action: Literal["add", "remove"]
    mass_g: Number
    angle_deg: Number = Field(description="where mass was added, or removed")
    radius_mm: Number
    advised_mass_g: Number | None = None
    advised_angle_deg: Number | None = None
    split: list[SplitIn] | None = Field(None, max_length=64)
    drill_diameter_mm: Number | None = None
    drill_depth_mm: Number | None = None
    drill_holes: int | None = Field(None, ge=1, le=1000)


# --------------------------------------------------------------------------- rotor types, rotors


class RegistryListQuery(PageQuery):
    q: ShortText | None = Field(None, description="searches part number / serial, description")
    customer_id: Id | None = None
    include_archived: bool = False


class RotorListQuery(RegistryListQuery):
    rotor_type_id: Id | None = None


class RotorTypePatch(In):
    """Fields of a rotor type; the registry checks the geometry as a whole."""

    part_number: ShortText | None = None
    description: Name | None = None
    kind: ShortText | None = None
    rotation: ShortText | None = None
    key_convention: ShortText | None = None
    notes: LongText | None = None
    mass_kg: Number | None = None
    service_speed_rpm: Number | None = None
    first_critical_rpm: Number | None = None
    bearing_a_mm: Number | None = None
    bearing_b_mm: Number | None = None
    centre_of_mass_mm: Number | None = None
    plane_1_mm: Number | None = None
    plane_2_mm: Number | None = None
    radius_1_mm: Number | None = None
    radius_2_mm: Number | None = None
    method_1: ShortText | None = None
    method_2: ShortText | None = None
    positions_1: int | None = Field(None, ge=0, le=10_000)
    positions_2: int | None = Field(None, ge=0, le=10_000)
    first_position_1_deg: Number | None = None
    first_position_2_deg: Number | None = None
    density_g_cm3: Number | None = None
    tolerance_grade: Number | None = None
    tolerance_gmm: Number | None = None
    key_width_mm: Number | None = None
    key_height_mm: Number | None = None
    key_length_mm: Number | None = None
    hub_length_mm: Number | None = None
    key_radius_mm: Number | None = None
    key_angle_deg: Number | None = None


class RotorTypeIn(RotorTypePatch):
    customer_id: Id
    part_number: ShortText


class RotorTypeOut(Out):
    id: int
    customer_id: int
    one_off: bool
    archived: bool
    part_number: str
    description: str
    kind: str
    rotation: str
    key_convention: str
    notes: str
    mass_kg: float
    service_speed_rpm: float
    first_critical_rpm: float | None
    bearing_a_mm: float
    bearing_b_mm: float
    centre_of_mass_mm: float
    plane_1_mm: float
    plane_2_mm: float | None
    radius_1_mm: float
    radius_2_mm: float | None
    method_1: str
    method_2: str | None
    positions_1: int | None
    positions_2: int | None
    first_position_1_deg: float
    first_position_2_deg: float
    density_g_cm3: float | None
    tolerance_grade: float | None
    tolerance_gmm: float | None
    key_width_mm: float | None
    key_height_mm: float | None
    key_length_mm: float | None
    hub_length_mm: float | None
    key_radius_mm: float | None
    key_angle_deg: float | None
    planes: int


class RotorIn(In):
    rotor_type_id: Id
    serial_number: ShortText
    notes: LongText = ""


class RotorPatch(In):
    rotor_type_id: Id | None = None
    serial_number: ShortText | None = None
    notes: LongText | None = None


class RotorOut(Out):
    id: int
    customer_id: int
    rotor_type_id: int
    serial_number: str
    notes: str
    archived: bool
    created_at: dt.datetime


# --------------------------------------------------------------------------- free-form objects


class JsonObject(RootModel[dict[str, Any]]):
    """A JSON object whose keys are documented elsewhere (a calculation's request or
    answer: see ``shopapp calc --help``; the shop measures: README, "Shop measures")."""


# --------------------------------------------------------------------------- certificates


class CertificateListQuery(PageQuery):
    """The certificate register's search (same names as its page)."""

    number: ShortText = ""
    customer: ShortText = ""
    serial: ShortText = ""
    rotor_type: ShortText = ""
    date_from: dt.date | None = None
    date_to: dt.date | None = None
    state: Literal["", "issued", "void"] = ""


class CertificateOut(Out):
    id: int
    number: str
    revision: int
    job_id: int
    state: str
    issued_by_id: int
    issued_at: dt.datetime
    reason: str
    voided_at: dt.datetime | None
    void_reason: str
    pdf_sha256: str
    data_sha256: str


class VerifyQuery(In):
    q: ShortText = Field(description="a certificate number, or the SHA-256 of its PDF or data")


class PrintedLine(BaseModel):
    label: str
    value: str


class VerificationOut(Out):
    query: str
    status: Literal["valid", "void", "superseded", "unknown"]
    message: str
    matched_by: str
    number: str
    revision: int | None
    latest_revision: int | None
    voided_on: str | None
    void_reason: str
    lines: list[PrintedLine] = Field(description="the certificate's first printed lines")


# --------------------------------------------------------------------------- measures


class ShopMeasuresQuery(In):
    month: Annotated[str, Field(pattern=r"^\d{4}-\d{2}$", description="YYYY-MM")]
    as_of: dt.date | None = Field(None, description="count work in progress and machine "
                                                    "verification as of this day (default "
                                                    "today)")


class ReturnIn(In):
    received_on: dt.date | None = Field(None, description="default today")
    notes: LongText = Field("", description="what the customer reports")
