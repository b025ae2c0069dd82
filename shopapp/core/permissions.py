"""Who may do what. Views check too, but the services are the authority."""

from __future__ import annotations

from shopapp.core.errors import PermissionDenied
from shopapp.models import User

# Action → roles allowed. Admin manages users and settings; it is not a superuser
# for shop-floor or quality work (separation of duties for certificates).
PERMISSIONS: dict[str, frozenset[str]] = {
    "read": frozenset({"operator", "quality", "owner", "admin"}),
    "work_jobs": frozenset({"operator", "quality"}),
    # Striking out a mistaken run or correction (never deleting it): the people who log
    # runs.
    "strike_runs": frozenset({"operator", "quality"}),
    "edit_registry": frozenset({"operator", "quality", "admin"}),
    "edit_machines": frozenset({"quality", "admin"}),
    # Past jobs from spreadsheets (shopapp.imports): the records quality keeps, copied
    # over once when the shop moves to shopapp; admin does the moving. Not operators:
    # an imported verdict is never judged again and no run backs it.
    "import_history": frozenset({"quality", "admin"}),
    "verify_machines": frozenset({"quality"}),
    "issue_certificates": frozenset({"quality"}),
    "view_signing_key": frozenset({"quality", "admin"}),
    "view_dashboard": frozenset({"owner", "quality", "admin"}),
    "manage_users": frozenset({"admin"}),
    "edit_settings": frozenset({"admin"}),
}


def can(user: User | None, action: str) -> bool:
    """True when ``user`` is active and its role may do ``action``."""
    if user is None or not user.active:
        return False
    return user.role in PERMISSIONS[action]


def require(user: User | None, action: str) -> None:
    """Raise :class:`PermissionDenied` unless ``user`` may do ``action``."""
    if not can(user, action):
        role = user.role if user is not None else "anonymous"
        allowed = ", ".join(sorted(PERMISSIONS[action]))
        raise PermissionDenied(f"a {role} may not {action.replace('_', ' ')} (allowed: {allowed})")
