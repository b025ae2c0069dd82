"""The OpenAPI document and the docs page: generated from the same declarations, public,
and the page fetches nothing from elsewhere (the shop's network may be closed)."""

from __future__ import annotations

import re

from shopapp.models import JOB_STATES


def test_document_lists_every_route_of_the_api(app, client) -> None:
    doc = client.get("/api/v1/openapi.json").get_json()
    assert doc["openapi"].startswith("3.1")
    documented = {(m.upper(), p) for p, ops in doc["paths"].items() for m in ops}
    # Werkzeug's URL map is the reference for what the app really serves under /api/v1.
    served = set()
    for rule in app.url_map.iter_rules():
        if rule.rule.startswith("/api/v1/") and rule.endpoint.startswith("api.api_"):
            path = re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", rule.rule)
            served |= {(m, path) for m in rule.methods - {"HEAD", "OPTIONS"}}
    assert documented == served
    # The job list's state filter offers exactly the job states of the model.
    params = doc["paths"]["/api/v1/jobs"]["get"]["parameters"]
    state = next(p for p in params if p["name"] == "state")
    assert state["schema"]["enum"] == list(JOB_STATES)
    assert doc["components"]["securitySchemes"]["bearer"]["scheme"] == "bearer"


def test_docs_page_lists_the_operations_without_outside_assets(client) -> None:
    doc = client.get("/api/v1/openapi.json").get_json()
    page = client.get("/api/v1/docs")
    assert page.status_code == 200
    body = page.get_data(as_text=True)
    for path in doc["paths"]:
        assert path in body
    assert "<script" not in body
    assert not re.search(r'(src|href)="(https?:)?//', body)
