"""Read-only selects for traceability's pages and panels."""

from __future__ import annotations

from sqlalchemy import Select, select

from shopapp.models import MachineVerification, User


def machine_verifications_stmt(machine_id: int) -> Select:
    """A machine's proving tests with the tester's name, newest first (rows, not scalars)."""
    return (
        select(MachineVerification, User.full_name)
        .outerjoin(User, User.id == MachineVerification.performed_by_id)
        .where(MachineVerification.machine_id == machine_id)
        .order_by(MachineVerification.performed_on.desc(), MachineVerification.id.desc())
    )
