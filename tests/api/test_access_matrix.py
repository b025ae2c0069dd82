"""Every API route × every role, compared with the role table of shopapp.core.permissions.

The expected permission of each route is written here, independently of the API's own
declarations, as the pages' rule for the same work (README, "Who may do what"): a route
added to the API without a line here fails the test.
"""

from __future__ import annotations

import pytest

from shopapp.api.operations import OPERATIONS
from shopapp.core.calc.kinds import KINDS
from shopapp.core.permissions import PERMISSIONS
from shopapp.models import ROLES

# (method, OpenAPI path) → the permission of the page that does the same; None = public.
EXPECTED: dict[tuple[str, str], str | None] = {
    ("GET", "/api/v1/customers"): "read",
    ("GET", "/api/v1/customers/{customer_id}"): "read",
    ("POST", "/api/v1/customers"): "edit_registry",
    ("PATCH", "/api/v1/customers/{customer_id}"): "edit_registry",
    ("GET", "/api/v1/rotor-types"): "read",
    ("GET", "/api/v1/rotor-types/{rotor_type_id}"): "read",
    ("POST", "/api/v1/rotor-types"): "edit_registry",
    ("PATCH", "/api/v1/rotor-types/{rotor_type_id}"): "edit_registry",
    ("GET", "/api/v1/rotors"): "read",
    ("GET", "/api/v1/rotors/{rotor_id}"): "read",
    ("POST", "/api/v1/rotors"): "edit_registry",
    ("PATCH", "/api/v1/rotors/{rotor_id}"): "edit_registry",
    ("GET", "/api/v1/jobs"): "read",
    ("GET", "/api/v1/jobs/{job_id}"): "read",
    ("POST", "/api/v1/jobs"): "work_jobs",
    ("POST", "/api/v1/jobs/{job_id}/state"): "work_jobs",
    ("POST", "/api/v1/jobs/{job_id}/return"): "work_jobs",
    ("POST", "/api/v1/jobs/{job_id}/runs"): "work_jobs",
    ("GET", "/api/v1/jobs/{job_id}/advice"): "read",
    ("POST", "/api/v1/jobs/{job_id}/corrections"): "work_jobs",
    ("GET", "/api/v1/certificates"): "read",
    ("GET", "/api/v1/certificates/{cert_id}"): "read",
    ("GET", "/api/v1/certificates/{cert_id}/pdf"): "read",
    ("GET", "/api/v1/certificates/verify"): None,  # as the public /verify page
    ("GET", "/api/v1/measures/shop"): "view_dashboard",
    **{("POST", f"/api/v1/calc/{kind}"): "read" for kind in KINDS},
}


def test_every_api_route_has_an_expected_permission() -> None:
    declared = {(op.method, op.path) for op in OPERATIONS}
    assert declared == set(EXPECTED)


def _url(path: str) -> str:
    # Ids that do not exist: an allowed role gets past the role check to a 404 or 422.
    return path.replace("{", "").replace("}", "").replace("customer_id", "2147483000") \
        .replace("rotor_type_id", "2147483000").replace("rotor_id", "2147483000") \
        .replace("job_id", "2147483000").replace("cert_id", "2147483000")


@pytest.mark.parametrize("role", ROLES)
def test_role_by_route_matches_the_permission_table(api_as, role) -> None:
    api = api_as(role)
    outcomes = {}
    for (method, path), action in EXPECTED.items():
        resp = api.client.open(_url(path), method=method, json={} if method != "GET" else None,
                               headers=api.headers())
        assert resp.is_json, (method, path, resp.status_code)
        allowed = action is None or role in PERMISSIONS[action]
        outcomes[(method, path)] = resp.status_code
        if allowed:
            assert resp.status_code not in (401, 403), (method, path, resp.get_json())
        else:
            assert resp.status_code == 403, (method, path, resp.status_code)
            assert resp.get_json()["error"]["code"] == "forbidden"
    assert all(status < 500 for status in outcomes.values()), outcomes


def test_every_route_but_verify_refuses_a_missing_token(client) -> None:
    for (method, path), action in EXPECTED.items():
        resp = client.open(_url(path), method=method, json={} if method != "GET" else None)
        if action is None:
            assert resp.status_code != 401
        else:
            assert resp.status_code == 401, (method, path)
            assert resp.get_json()["error"]["code"] == "unauthorized"
