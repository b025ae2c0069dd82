"""Rotor-type fields for fitting corrections: stock weights, material, drilling limits."""

from __future__ import annotations

import html
import re
from typing import Any

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.balancing.removal import DENSITIES
from shopapp.models import RotorType
from shopapp.registry import rotor_types
from tests.registry.test_rotor_pages import TYPE_FORM
from tests.registry.test_services import GOOD


def test_good_correction_fields_are_stored_sorted(db: Session, make_user, shop) -> None:
    op = make_user("operator")
    rt = rotor_types.create_rotor_type(
        db, by=op, customer=shop.customer(), **GOOD,
        stock_weights_g=[20, 5, 10, 5], material="steel", hole_direction="radial",
        max_hole_depth_mm=25.0, min_wall_mm=4.0, drill_section_mm=40.0)
    assert rt.stock_weights_g == [5.0, 10.0, 20.0]  # distinct sizes, ascending
    assert (rt.material, rt.hole_direction, rt.max_hole_depth_mm) == ("steel", "radial", 25.0)


@pytest.mark.parametrize(
    ("change", "field", "words"),
    [
        ({"stock_weights_g": [5, -1]}, "stock_weights_g", "greater than 0"),
        ({"stock_weights_g": [5, "x"]}, "stock_weights_g", "number"),
        ({"stock_weights_g": "5, 10"}, "stock_weights_g", "list of masses"),
        ({"stock_weights_g": list(range(1, 14))}, "stock_weights_g", "at most 12"),
        ({"material": "unobtainium"}, "material", "not allowed"),
        ({"hole_direction": "sideways"}, "hole_direction", "not allowed"),
        ({"max_hole_depth_mm": 0}, "max_hole_depth_mm", "greater than 0"),
        ({"min_wall_mm": -1}, "min_wall_mm", "not be below 0"),
        ({"min_wall_mm": 50, "drill_section_mm": 40}, "min_wall_mm", "less than the material"),
        ({"hole_direction": "radial", "max_hole_depth_mm": 300}, "max_hole_depth_mm",
         "reach the axis"),
    ],
)
def test_bad_correction_fields_name_the_field(change: dict[str, Any], field: str,
                                              words: str) -> None:
    errors = rotor_types.validate_geometry(GOOD | change)
    assert field in errors, errors
    assert words in errors[field]


def test_material_stands_in_for_the_density_when_removing() -> None:
    # Removal needs a density; a material with a handbook density is enough.
    assert "density_g_cm3" in rotor_types.validate_geometry(GOOD | {"method_1": "remove"})
    ok = rotor_types.validate_geometry(GOOD | {"method_1": "remove", "material": "aluminium"})
    assert ok == {}
    assert DENSITIES["aluminium"].g_cm3 == pytest.approx(2.70)  # handbook value, from memory


def test_rotor_type_form_takes_stock_weights_as_a_typed_list(client, login_as, db, shop) -> None:
    customer = shop.customer()
    db.commit()
    login_as("operator")
    bad = TYPE_FORM | {"customer": str(customer.id), "stock_weights_g": "5, ten"}
    resp = client.post("/rotor-types/new", data=bad)
    assert resp.status_code == 422
    assert "Not a number: 'ten'" in html.unescape(resp.get_data(as_text=True))
    good = TYPE_FORM | {"customer": str(customer.id), "stock_weights_g": "10, 2 5",
                        "material": "brass", "hole_direction": "axial",
                        "max_hole_depth_mm": "12"}
    resp = client.post("/rotor-types/new", data=good)
    assert resp.status_code == 302, resp.get_data(as_text=True)[:2000]
    rt = db.scalars(select(RotorType).where(RotorType.customer_id == customer.id)).one()
    assert rt.stock_weights_g == [2.0, 5.0, 10.0] and rt.material == "brass"
    assert rt.hole_direction == "axial" and rt.max_hole_depth_mm == 12.0


def test_edit_page_shows_the_stored_correction_fields(client, login_as, db, shop) -> None:
    rt = shop.rotor_type(stock_weights_g=[2.0, 5.0, 10.0], material="steel",
                         hole_direction="radial", max_hole_depth_mm=20.0)
    db.commit()
    login_as("operator")
    body = html.unescape(client.get(f"/rotor-types/{rt.id}/edit").get_data(as_text=True))
    assert 'value="2, 5, 10"' in body
    assert re.search(r'<option selected value="radial">|<option value="radial" selected', body)
    detail = html.unescape(client.get(f"/rotor-types/{rt.id}").get_data(as_text=True))
    assert "stock weights 2.00 g, 5.00 g, 10.00 g" in detail or "stock weights 2" in detail
