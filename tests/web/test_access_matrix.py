"""Every route × every role: allowed, 403, or (anonymous) a redirect to the log-in page.

The expectations are written down here, from the shop's role table (README,
"Who may do what"), not read from the views: a view that checks the wrong
permission fails this test, and a new route without an entry fails
:func:`test_every_route_has_an_access_rule`. GET pages are fetched with real
ids; POST endpoints are only checked for their refusals (a wrong role gets
403, an anonymous visitor the log-in page), so nothing is changed.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest
from flask import Flask
from sqlalchemy.orm import Session

from shopapp.accounts import api_tokens
from shopapp.certificates import issue as certificates
from shopapp.core.permissions import PERMISSIONS
from shopapp.jobs.corrections import record_correction
from shopapp.jobs.runs import record_run
from shopapp.jobs.states import mark_in_tolerance
from shopapp.models import Arbor
from shopapp.resonance import samples as resonance_samples

ROLES = ("operator", "quality", "owner", "admin")

# Who may do what — the README's role table.
POLICY: dict[str, frozenset[str]] = {
    "read": frozenset(ROLES),
    "work_jobs": frozenset({"operator", "quality"}),
    "strike_runs": frozenset({"operator", "quality"}),
    "edit_registry": frozenset({"operator", "quality", "admin"}),
    "edit_machines": frozenset({"quality", "admin"}),
    "import_history": frozenset({"quality", "admin"}),
    "verify_machines": frozenset({"quality"}),
    "issue_certificates": frozenset({"quality"}),
    "view_signing_key": frozenset({"quality", "admin"}),
    "view_dashboard": frozenset({"owner", "quality", "admin"}),
    "manage_users": frozenset({"admin"}),
    "edit_settings": frozenset({"admin"}),
    "login": frozenset(ROLES),  # any logged-in user
}
PUBLIC = "public"

# endpoint → (rule for GET, rule for POST); None = method not offered.
ACCESS: dict[str, tuple[str | None, str | None]] = {
    "health.healthz": (PUBLIC, None),
    "auth.login": (PUBLIC, PUBLIC),
    "auth.logout": (None, "login"),
    "auth.home": ("login", None),
    "auth.own_password": ("login", "login"),
    "certificates.verify": (PUBLIC, PUBLIC),
    # registries
    "customers.index": ("read", None),
    "customers.detail": ("read", None),
    "customers.new": ("edit_registry", "edit_registry"),
    "customers.edit": ("edit_registry", "edit_registry"),
    "customers.archive": (None, "edit_registry"),
    "rotors.types": ("read", None),
    "rotors.type_detail": ("read", None),
    "rotors.type_new": ("edit_registry", "edit_registry"),
    "rotors.type_edit": ("edit_registry", "edit_registry"),
    "rotors.type_archive": (None, "edit_registry"),
    "rotors.index": ("read", None),
    "rotors.detail": ("read", None),
    "rotors.new": ("edit_registry", "edit_registry"),
    "rotors.new_one_off": ("edit_registry", "edit_registry"),
    "rotors.edit": ("edit_registry", "edit_registry"),
    "rotors.archive": (None, "edit_registry"),
    "machines.index": ("read", None),
    "machines.detail": ("read", None),
    "machines.new": ("edit_machines", "edit_machines"),
    "machines.edit": ("edit_machines", "edit_machines"),
    "machines.archive": (None, "edit_machines"),
    # intake (issue 14 part 2)
    "intake.mapping": ("edit_machines", "edit_machines"),
    "intake.upload": ("work_jobs", None),
    "intake.preview": (None, "work_jobs"),
    "intake.confirm": (None, "work_jobs"),
    # jobs
    "jobs.index": ("read", None),
    "jobs.detail": ("read", None),
    "jobs.new": ("work_jobs", "work_jobs"),
    "jobs.add_run": (None, "work_jobs"),
    "jobs.strike_run": (None, "strike_runs"),
    "jobs.add_correction": (None, "work_jobs"),
    "jobs.strike_correction": (None, "strike_runs"),
    "jobs.change_state": (None, "work_jobs"),
    "jobs.open_return": (None, "work_jobs"),
    # certificates and rotor history
    "certificates.index": ("read", None),
    "certificates.detail": ("read", None),
    "certificates.download": ("read", None),
    "certificates.zip": ("read", None),
    "certificates.issue": (None, "issue_certificates"),
    "certificates.reissue": ("issue_certificates", "issue_certificates"),
    "certificates.void": ("issue_certificates", "issue_certificates"),
    "certificates.rotor_history_pdf": ("read", None),
    "certificates.rotor_type_history_pdf": ("read", None),
    "certificates.signing_page": ("view_signing_key", None),
    "certificates.job_traveller": ("read", None),
    "certificates.rotor_tag": ("read", None),
    # owner's view
    "dashboard.index": ("view_dashboard", None),
    "dashboard.csv": ("view_dashboard", None),
    "dashboard.monthly_pdf": ("view_dashboard", None),
    # traceability
    "traceability.index": ("read", None),
    "traceability.machine": ("read", None),
    "traceability.proving_test": ("verify_machines", "verify_machines"),
    "traceability.add_proving_rotor": (None, "edit_machines"),
    "traceability.arbors": ("read", None),
    "traceability.add_arbor": (None, "edit_machines"),
    "traceability.arbor": ("read", None),
    "traceability.add_arbor_measurement": (None, "work_jobs"),
    "traceability.key": ("read", "edit_registry"),
    "evidence.residual_required": (None, "work_jobs"),
    "evidence.residual_test": ("work_jobs", "work_jobs"),
    "evidence.job_arbor": (None, "work_jobs"),
    "evidence.job_index_runs": (None, "work_jobs"),
    "evidence.job_subtraction": (None, "work_jobs"),
    "evidence.repeat_runs": ("work_jobs", "work_jobs"),
    # resonance
    "resonance.index": ("read", None),
    "resonance.detail": ("read", None),
    "resonance.new_for_job": ("work_jobs", "work_jobs"),
    "resonance.new_for_machine": ("work_jobs", "work_jobs"),
    "resonance.loose_mass": ("read", None),
    # imports from spreadsheets (templates for anyone; registry kinds and past jobs)
    "imports.index": ("read", None),
    "imports.template": ("read", None),
    "imports.registry": ("edit_registry", "edit_registry"),
    "imports.registry_apply": (None, "edit_registry"),
    "imports.jobs": ("import_history", "import_history"),
    "imports.jobs_apply": (None, "import_history"),
    # admin
    "admin.users": ("manage_users", "manage_users"),
    "admin.user_role": (None, "manage_users"),
    "admin.user_active": (None, "manage_users"),
    "admin.user_password": ("manage_users", "manage_users"),
    "admin.logins_page": ("manage_users", None),
    "admin.end_lock": (None, "manage_users"),
    "admin.settings": ("edit_settings", "edit_settings"),
    "admin.job_number_sample": ("edit_settings", None),
    # API tokens: everyone their own; an admin anyone's (the use-case refuses the rest)
    "api_tokens.mine": ("read", "read"),
    "api_tokens.of_user": ("manage_users", "manage_users"),
    "api_tokens.revoke": (None, "read"),
    # the JSON API's description is public; its operations are walked, role by role,
    # with bearer tokens in tests/api/test_access_matrix.py
    "api.openapi_json": (PUBLIC, None),
    "api.docs": (PUBLIC, None),
}

# GET answers other than 200 that are right for an allowed visitor (noted per endpoint).
ALSO_FINE: dict[str, set[int]] = {
    "health.healthz": {503},  # the test schema is built by create_all, not by the migrations
    "certificates.zip": {422},  # no date range given: the register page with the message
    "auth.login": {302},  # a logged-in user is sent to the start page
}


def _rules(app: Flask) -> list[Any]:
    # API operations (bearer token, no session) have their own matrix in tests/api.
    return [r for r in app.url_map.iter_rules()
            if r.endpoint != "static" and not r.endpoint.startswith("api.api_")]


def test_the_policy_written_here_is_the_apps() -> None:
    assert {k: v for k, v in POLICY.items() if k != "login"} == PERMISSIONS


def test_every_route_has_an_access_rule(app: Flask) -> None:
    missing = []
    for rule in _rules(app):
        entry = ACCESS.get(rule.endpoint)
        if entry is None:
            missing.append(f"route {rule.rule} ({rule.endpoint}) has no access rule")
            continue
        for method, given in (("GET", entry[0]), ("POST", entry[1])):
            if (method in rule.methods) != (given is not None):
                missing.append(f"route {rule.rule}: {method} is "
                               f"{'offered' if method in rule.methods else 'not offered'} "
                               f"but the table says {given!r}")
    stale = set(ACCESS) - {r.endpoint for r in _rules(app)}
    assert not missing, "\n".join(missing)
    assert not stale, f"entries for routes that no longer exist: {sorted(stale)}"


@pytest.fixture()
def ids(db: Session, shop: Any, make_user: Callable[..., Any]) -> dict[str, Any]:
    """Real rows for every URL parameter, including a job with an issued certificate."""
    operator = make_user("operator")
    quality = make_user("quality")
    machine = shop.machine()
    rt = shop.rotor_type()
    rotor = shop.rotor(rt)
    job = shop.job(rotor, machine=machine)
    initial = record_run(db, job, by=operator, purpose="initial", speed_rpm=600.0,
                         readings=[(1, 5000.0, 10.0, "g·mm"), (2, 4000.0, 200.0, "g·mm")])
    corr = record_correction(db, job, by=operator, run_id=initial.id, plane=1, action="add",
                             mass_g=10.0, angle_deg=190.0, radius_mm=200.0)
    record_run(db, job, by=operator, purpose="check", speed_rpm=600.0,
               readings=[(1, 50.0, 10.0, "g·mm"), (2, 40.0, 100.0, "g·mm")])
    mark_in_tolerance(db, job, by=operator)
    cert = certificates.issue(db, job, by=quality)
    arbor = Arbor(name="Arbor A-1 (test)")
    db.add(arbor)
    db.flush()
    run_up = resonance_samples.add_sample_run_up(db, job, by=operator)
    token = api_tokens.create_token(db, by=operator, user=operator, name="matrix").token
    db.commit()
    return {"job_id": job.id, "customer_id": rt.customer_id, "machine_id": machine.id,
            "rotor_type_id": rt.id, "rotor_id": rotor.id, "user_id": operator.id,
            "cert_id": cert.id, "arbor_id": arbor.id, "plane": 1, "run_up_id": run_up.id,
            "run_id": initial.id, "token_id": token.id, "correction_id": corr.id}


def _url(app: Flask, rule: Any, ids: dict[str, Any]) -> str:
    args = {name: ids[name] for name in rule.arguments}
    with app.test_request_context():
        from flask import url_for

        return url_for(rule.endpoint, **args)


def _walk(app: Flask, client: Any, ids: dict[str, Any], role: str | None) -> list[str]:
    """Every route for one role; returns the mismatches."""
    wrong = []
    for rule in sorted(_rules(app), key=lambda r: r.rule):
        get_rule, post_rule = ACCESS[rule.endpoint]
        url = _url(app, rule, ids)
        for method, given in (("GET", get_rule), ("POST", post_rule)):
            if given is None:
                continue
            allowed = given == PUBLIC or (role is not None and role in POLICY[given])
            if method == "POST" and allowed:
                continue  # only refusals are checked: an allowed POST would change data
            resp = client.get(url) if method == "GET" else client.post(url, data={})
            code = resp.status_code
            where = resp.headers.get("Location", "")
            if allowed:
                ok = code == 200 or code in ALSO_FINE.get(rule.endpoint, set())
                if ok and code in (301, 302, 303) and "/login" in where:
                    ok = False
                expect = "allowed"
            elif role is None:
                ok = code == 302 and "/login" in where
                expect = "redirect to log-in"
            else:
                ok = code == 403
                expect = "403"
            if not ok:
                wrong.append(f"{role or 'anonymous'} {method} {url} ({rule.endpoint}): "
                             f"expected {expect}, got {code} {where}")
    return wrong


@pytest.mark.parametrize("role", [*ROLES, None], ids=[*ROLES, "anonymous"])
def test_route_role_matrix(role: str | None, app: Flask, client: Any, login_as: Any,
                           ids: dict[str, Any]) -> None:
    if role is not None:
        login_as(role)
    else:
        client.refresh_csrf("/login")
    wrong = _walk(app, client, ids, role)
    assert not wrong, "\n".join(wrong)
