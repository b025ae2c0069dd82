"""Read-only selects for the registry's pages: lists with search, choices, detail rows."""

from __future__ import annotations

from typing import Any

from sqlalchemy import Select, func, or_, select
from sqlalchemy.orm import Session, joinedload, selectinload

from shopapp.models import Customer, InfluenceSet, Job, Machine, Rotor, RotorType, Run
from shopapp.registry.common import contains

# Runs the rotor page summarises per job: the first initial and the last check or final.
SUMMARY_PURPOSES = ("initial", "check", "final")


def customers_stmt(q: str | None = None, include_archived: bool = False) -> Select[Any]:
    """Customers by name; ``q`` searches name and contact (case-insensitive)."""
    stmt = select(Customer)
    if q and q.strip():
        pattern = contains(q)
        stmt = stmt.where(
            or_(
                Customer.name.ilike(pattern, escape="\\"),
                Customer.contact.ilike(pattern, escape="\\"),
            )
        )
    if not include_archived:
        stmt = stmt.where(Customer.archived.is_(False))
    return stmt.order_by(func.lower(Customer.name), Customer.id)


def rotor_types_stmt(
    q: str | None = None,
    customer_id: int | None = None,
    kind: str | None = None,
    include_archived: bool = False,
) -> Select[Any]:
    """Rotor types (with their customer loaded) by part number; ``q`` searches
    part number and description."""
    stmt = select(RotorType).options(joinedload(RotorType.customer))
    if q and q.strip():
        pattern = contains(q)
        stmt = stmt.where(
            or_(
                RotorType.part_number.ilike(pattern, escape="\\"),
                RotorType.description.ilike(pattern, escape="\\"),
            )
        )
    if customer_id is not None:
        stmt = stmt.where(RotorType.customer_id == customer_id)
    if kind:
        stmt = stmt.where(RotorType.kind == kind)
    if not include_archived:
        stmt = stmt.where(RotorType.archived.is_(False))
    return stmt.order_by(func.lower(RotorType.part_number), RotorType.id)


def rotors_stmt(
    q: str | None = None,
    customer_id: int | None = None,
    rotor_type_id: int | None = None,
    include_archived: bool = False,
) -> Select[Any]:
    """Rotors (customer and rotor type loaded) by serial; ``q`` searches the serial."""
    stmt = select(Rotor).options(joinedload(Rotor.customer), joinedload(Rotor.rotor_type))
    if q and q.strip():
        stmt = stmt.where(Rotor.serial_number.ilike(contains(q), escape="\\"))
    if customer_id is not None:
        stmt = stmt.where(Rotor.customer_id == customer_id)
    if rotor_type_id is not None:
        stmt = stmt.where(Rotor.rotor_type_id == rotor_type_id)
    if not include_archived:
        stmt = stmt.where(Rotor.archived.is_(False))
    return stmt.order_by(func.lower(Rotor.serial_number), Rotor.id)


def machines_stmt(include_archived: bool = False) -> Select[Any]:
    """The shop's machines by name."""
    stmt = select(Machine)
    if not include_archived:
        stmt = stmt.where(Machine.archived.is_(False))
    return stmt.order_by(func.lower(Machine.name), Machine.id)


def customer_jobs_stmt(customer_id: int) -> Select[Any]:
    """A customer's jobs (rotor loaded), newest received first."""
    return (
        select(Job)
        .options(joinedload(Job.rotor))
        .where(Job.customer_id == customer_id)
        .order_by(Job.received_on.desc(), Job.id.desc())
    )


def customer_or_none(session: Session, customer_id: int | None) -> Customer | None:
    """The customer with this id, or None (a form's choice that vanished meanwhile)."""
    return session.get(Customer, customer_id) if customer_id is not None else None


def rotor_type_or_none(session: Session, rotor_type_id: int | None) -> RotorType | None:
    """The rotor type with this id, or None."""
    return session.get(RotorType, rotor_type_id) if rotor_type_id is not None else None


def customer_choices(session: Session, selected: int | None = None) -> list[tuple[int, str]]:
    """Live customers as (id, name); an archived ``selected`` one is added first, marked."""
    rows = [(c.id, c.name) for c in session.scalars(customers_stmt())]
    if selected is not None and selected not in {cid for cid, _ in rows}:
        picked = session.get(Customer, selected)
        if picked is not None:
            rows.insert(0, (picked.id, f"{picked.name} (archived)"))
    return rows


def rotor_type_choices(
    session: Session, customer_id: int | None, current: RotorType | None = None
) -> list[tuple[int, str]]:
    """Live, non-one-off rotor types as (id, "customer · part number — description");
    ``current`` is added first when it is not among them."""
    stmt = rotor_types_stmt(customer_id=customer_id).where(RotorType.one_off.is_(False))
    rows = []
    for rt in session.scalars(stmt):
        label = f"{rt.customer.name} · {rt.part_number}"
        rows.append((rt.id, f"{label} — {rt.description}" if rt.description else label))
    if current is not None and current.id not in {i for i, _ in rows}:
        rows.insert(0, (current.id, f"{current.customer.name} · {current.part_number} (current)"))
    return rows


def rotor_type_with_customer(session: Session, rotor_type_id: int) -> RotorType | None:
    return session.scalars(
        select(RotorType)
        .options(joinedload(RotorType.customer))
        .where(RotorType.id == rotor_type_id)
    ).first()


def influence_sets(
    session: Session, rotor_type_id: int, limit: int
) -> tuple[list[InfluenceSet], dict[int, str]]:
    """The rotor type's stored influence sets, newest first, and machine id → name."""
    sets = list(
        session.scalars(
            select(InfluenceSet)
            .where(InfluenceSet.rotor_type_id == rotor_type_id)
            .order_by(InfluenceSet.learned_at.desc(), InfluenceSet.id.desc())
            .limit(limit)
        )
    )
    machine_ids = {s.machine_id for s in sets}
    names: dict[int, str] = {}
    if machine_ids:
        rows = session.execute(
            select(Machine.id, Machine.name).where(Machine.id.in_(machine_ids))
        )
        names = {mid: name for mid, name in rows}
    return sets, names


def rotor_with_type(session: Session, rotor_id: int) -> Rotor | None:
    return session.scalars(
        select(Rotor)
        .options(joinedload(Rotor.customer), joinedload(Rotor.rotor_type))
        .where(Rotor.id == rotor_id)
    ).first()


def rotor_jobs(session: Session, rotor_id: int) -> list[Job]:
    """The rotor's whole history, oldest first: it is what the owner reads as a trend."""
    return list(
        session.scalars(
            select(Job)
            .options(joinedload(Job.machine), joinedload(Job.operator))
            .where(Job.rotor_id == rotor_id)
            .order_by(Job.received_on, Job.id)
        ).unique()
    )


def run_summaries(session: Session, job_ids: list[int]) -> dict[int, dict[str, Run]]:
    """Per job: its first initial run and its last check or final run (two queries in all)."""
    out: dict[int, dict[str, Run]] = {}
    if not job_ids:
        return out
    runs = session.scalars(
        select(Run)
        .options(selectinload(Run.readings))
        .where(Run.job_id.in_(job_ids), Run.purpose.in_(SUMMARY_PURPOSES))
        .order_by(Run.job_id, Run.seq)
    )
    for run in runs:
        entry = out.setdefault(run.job_id, {})
        if run.purpose == "initial":
            entry.setdefault("initial", run)
        else:
            entry["last_check"] = run
    return out
