"""What each kind of import file holds: its columns, the key that matches a row to a
record, which columns a new record needs, and the template file to start from.

Column names carry their unit (``mass_kg``, ``service_speed_rpm``), as everywhere in
shopapp; a column the kind does not know (``mass_lb``) refuses the file, naming it. The
template rows are invented examples.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass

from shopapp.registry.customers import CUSTOMER_FIELDS
from shopapp.registry.rotor_types import GEOMETRY_FIELDS

# Rotor-type columns besides the geometry: the texts, choices and drilling limits of the
# rotor-type form. Stock weights and the keyway are left to the page (lists and rarely
# kept in old sheets).
_ROTOR_TYPE_EXTRA = ("description", "kind", "rotation", "key_convention", "notes", "material",
                     "hole_direction", "max_hole_depth_mm", "min_wall_mm", "drill_section_mm")
_JOB_COLUMNS = (
    "customer", "serial_number", "number", "received_on", "dispatched_on", "machine",
    "tolerance_grade", "tolerance_gmm_1", "tolerance_gmm_2", "balancing_speed_rpm",
    "residual_unit", "residual_1", "residual_2", "residual_1_angle_deg", "residual_2_angle_deg",
    "verdict", "customer_order_ref", "notes",
)


@dataclass(frozen=True)
class Kind:
    """One kind of import file."""

    name: str  # customers | rotor-types | rotors | jobs
    label: str
    columns: tuple[str, ...]  # every column the kind knows, in template order
    key: tuple[str, ...]  # the columns that find the existing record
    required: tuple[str, ...]  # columns the file must have
    numeric: tuple[str, ...]  # columns read as numbers (decimal comma allowed in ; files)
    permission: str
    example: tuple[dict[str, str], ...]
    # The key of a row whose ``key`` cells are empty (a past job without its old number).
    alt_key: tuple[str, ...] = ()


KINDS: dict[str, Kind] = {
    "customers": Kind(
        name="customers", label="customers", columns=CUSTOMER_FIELDS, key=("name",),
        required=("name",), numeric=(), permission="edit_registry",
        example=({"name": "Harrow Vale Fans Ltd (example)", "contact": "R. Example",
                  "email": "workshop@example.org", "phone": "+44 1234 567890",
                  "address": "Unit 4, Example Park", "notes": "",
                  "requires_residual_test": "no"},),
    ),
    "rotor-types": Kind(
        name="rotor-types", label="rotor types",
        columns=("customer", "part_number", *_ROTOR_TYPE_EXTRA, *GEOMETRY_FIELDS),
        key=("customer", "part_number"), required=("customer", "part_number"),
        numeric=(*(f for f in GEOMETRY_FIELDS if not f.startswith("method_")),
                 "max_hole_depth_mm", "min_wall_mm", "drill_section_mm"),
        permission="edit_registry",
        example=({"customer": "Harrow Vale Fans Ltd (example)", "part_number": "HV-IMP-710",
                  "description": "two-plane fan impeller", "kind": "fan", "rotation": "cw",
                  "mass_kg": "120", "service_speed_rpm": "1480", "bearing_a_mm": "0",
                  "bearing_b_mm": "800", "centre_of_mass_mm": "400", "plane_1_mm": "150",
                  "plane_2_mm": "650", "radius_1_mm": "300", "radius_2_mm": "300",
                  "method_1": "add", "method_2": "add", "tolerance_grade": "6.3"},),
    ),
    "rotors": Kind(
        name="rotors", label="rotors", columns=("customer", "serial_number", "part_number",
                                                "notes"),
        key=("customer", "serial_number"), required=("customer", "serial_number"),
        numeric=(), permission="edit_registry",
        example=({"customer": "Harrow Vale Fans Ltd (example)", "serial_number": "HV-0001",
                  "part_number": "HV-IMP-710", "notes": ""},),
    ),
    "jobs": Kind(
        name="jobs", label="past jobs", columns=_JOB_COLUMNS, key=("number",),
        required=("customer", "serial_number", "received_on", "dispatched_on", "residual_unit",
                  "residual_1", "verdict"),
        numeric=("tolerance_grade", "tolerance_gmm_1", "tolerance_gmm_2", "balancing_speed_rpm",
                 "residual_1", "residual_2", "residual_1_angle_deg", "residual_2_angle_deg"),
        permission="import_history",
        example=({"customer": "Harrow Vale Fans Ltd (example)", "serial_number": "HV-0001",
                  "number": "OLD-2019-117", "received_on": "2019-03-04",
                  "dispatched_on": "2019-03-08", "residual_unit": "g·mm", "residual_1": "95",
                  "residual_2": "80", "verdict": "pass"},),
        alt_key=("customer", "serial_number", "received_on", "dispatched_on"),
    ),
}
KIND_NAMES = tuple(KINDS)


def kind_of(name: str) -> Kind:
    """The :class:`Kind` called ``name``.

    Raises
    ------
    KeyError
        No such kind (callers offer only :data:`KIND_NAMES`).
    """
    return KINDS[name]


def template_csv(kind: Kind) -> str:
    """The kind's template: a header of every column and the invented example rows."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(kind.columns)
    for row in kind.example:
        writer.writerow([row.get(c, "") for c in kind.columns])
    return out.getvalue()
