"""The key convention of rotor types (ISO 21940-32, from memory) and the compensation for a
key longer or shorter than its hub.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy.orm import Session

from shopapp.balancing import keys as keys_core
from shopapp.balancing.errors import BalancingInputError
from shopapp.core import audit, checks
from shopapp.core.display import plain
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import KEY_CONVENTIONS, RotorType, User

KEY_FIELDS = ("key_width_mm", "key_height_mm", "key_length_mm", "hub_length_mm",
              "key_radius_mm", "key_angle_deg")


def set_key_convention(
    session: Session, rotor_type: RotorType, *, by: User, convention: str, **dims: Any
) -> RotorType:
    """Set a rotor type's key convention and key size (``edit_registry``).

    ``dims``: any of key_width_mm, key_height_mm, key_length_mm, hub_length_mm,
    key_radius_mm (all mm, > 0) and key_angle_deg (0–360). With ``none`` the
    key size is cleared.
    """
    require(by, "edit_registry")
    unknown = sorted(set(dims) - set(KEY_FIELDS))
    if unknown:
        raise ValidationFailed(unknown[0], "is not a key field")
    e = checks.Errors()
    if convention not in KEY_CONVENTIONS:
        e.add("key_convention", f"choose one of {', '.join(KEY_CONVENTIONS)}")
    values: dict[str, float | None] = {}
    for f in KEY_FIELDS:
        if f == "key_angle_deg":
            v = checks.number(e, f, dims.get(f), required=False, minimum=0)
            if v is not None and v >= 360:
                e.add(f, f"must be below 360, got {plain(v)}")
        else:
            v = checks.number(e, f, dims.get(f), required=False, above=0)
        values[f] = v if convention != "none" else None
    e.raise_if_any()
    before = audit.snapshot(rotor_type, ("key_convention", *KEY_FIELDS))
    rotor_type.key_convention = convention
    for f, v in values.items():
        setattr(rotor_type, f, v)
    session.flush()
    audit.record(session, by=by, entity="rotor_type", entity_id=rotor_type.id,
                 action="set_key_convention", before=before,
                 after=audit.snapshot(rotor_type, ("key_convention", *KEY_FIELDS)))
    return rotor_type


@dataclass(frozen=True)
class KeyInfo:
    """What the job page and the certificate say about the key convention."""

    convention: str
    statement: str
    compensation: keys_core.KeyCompensation | None
    note: str


def key_info(rt: RotorType, correction_radius_mm: float | None = None) -> KeyInfo:
    """The rotor type's convention statement and, when its size is known, the compensation.

    The compensating mass is given at ``correction_radius_mm`` (plane 1's radius
    when omitted). Never raises: missing sizes become a note.
    """
    conv = rt.key_convention or "none"
    statement = keys_core.CONVENTION_STATEMENTS.get(conv, conv)
    if conv == "none":
        return KeyInfo(conv, statement, None, "")
    dims = [rt.key_width_mm, rt.key_height_mm, rt.key_length_mm, rt.hub_length_mm,
            rt.key_radius_mm]
    if any(d is None for d in dims):
        return KeyInfo(conv, statement, None,
                       "Key size, hub length or key radius not on record: the compensation for "
                       "a key longer or shorter than the hub is not computed.")
    try:
        comp = keys_core.key_compensation(
            conv, key_width_mm=rt.key_width_mm, key_height_mm=rt.key_height_mm,  # type: ignore[arg-type]
            key_length_mm=rt.key_length_mm, hub_length_mm=rt.hub_length_mm,  # type: ignore[arg-type]
            key_radius_mm=rt.key_radius_mm,  # type: ignore[arg-type]
            correction_radius_mm=correction_radius_mm or rt.radius_1_mm,
            key_angle_deg=rt.key_angle_deg or 0.0,
        )
    except BalancingInputError as exc:
        return KeyInfo(conv, statement, None, f"Key compensation not computed: {exc}")
    return KeyInfo(conv, statement, comp, "")
