"""Test data builders. Invented shop data only; values are plausible, not real."""

from __future__ import annotations

import datetime as dt
import itertools
from typing import Any

from sqlalchemy.orm import Session

from shopapp.accounts import users
from shopapp.models import Customer, Job, Machine, Rotor, RotorType, User

_seq = itertools.count(1)


def user(db: Session, *, username: str, role: str, password: str, **kw: Any) -> User:
    return users.create_user(
        db, username=username, full_name=kw.pop("full_name", username.title()), role=role,
        password=password,
    )


class ShopFactory:
    """Builders: ``customer()``, ``rotor_type()``, ``rotor()``, ``machine()``, ``job()``."""

    def __init__(self, db: Session) -> None:
        self.db = db

    def _add(self, obj: Any) -> Any:
        self.db.add(obj)
        self.db.flush()
        return obj

    def customer(self, **kw: Any) -> Customer:
        n = next(_seq)
        return self._add(Customer(name=kw.pop("name", f"Test Customer {n}"), **kw))

    def rotor_type(self, customer: Customer | None = None, **kw: Any) -> RotorType:
        n = next(_seq)
        values: dict[str, Any] = {
            "part_number": f"PT-{n:04d}",
            "description": "two-plane fan impeller",
            "kind": "fan",
            "mass_kg": 120.0,
            "service_speed_rpm": 1480.0,
            "bearing_a_mm": 0.0,
            "bearing_b_mm": 800.0,
            "centre_of_mass_mm": 400.0,
            "plane_1_mm": 150.0,
            "plane_2_mm": 650.0,
            "radius_1_mm": 300.0,
            "radius_2_mm": 300.0,
            "method_1": "add",
            "method_2": "add",
            "tolerance_grade": 6.3,
        }
        values.update(kw)
        return self._add(RotorType(customer=customer or self.customer(), **values))

    def rotor(self, rotor_type: RotorType | None = None, **kw: Any) -> Rotor:
        n = next(_seq)
        rt = rotor_type or self.rotor_type()
        return self._add(
            Rotor(
                customer_id=rt.customer_id,
                rotor_type=rt,
                serial_number=kw.pop("serial_number", f"SN-{n:05d}"),
                **kw,
            )
        )

    def machine(self, **kw: Any) -> Machine:
        n = next(_seq)
        values: dict[str, Any] = {
            "name": f"Machine {n}",
            "bearing_kind": "hard",
            "max_mass_kg": 2000.0,
            "max_speed_rpm": 3000.0,
            "claimed_emar_gmm_per_kg": 0.5,
            "verification_interval_days": 365,
            "reading_unit": "g·mm",
        }
        values.update(kw)
        return self._add(Machine(**values))

    def job(self, rotor: Rotor | None = None, **kw: Any) -> Job:
        n = next(_seq)
        r = rotor or self.rotor()
        values: dict[str, Any] = {
            "number": f"T-{n:06d}",
            "customer_id": r.customer_id,
            "rotor": r,
            "received_on": dt.date(2026, 11, 2),
            "tolerance_method": "grade",
            "tolerance_grade": 6.3,
            "service_speed_rpm": 1480.0,
            "balancing_speed_rpm": 600.0,
        }
        values.update(kw)
        return self._add(Job(**values))
