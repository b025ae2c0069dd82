"""Property-based test of the whole API from its own OpenAPI document (schemathesis).

In-process against the WSGI app, with a real token: for every operation, requests
generated from the document (valid ones and invalid ones) must never get a 500, every
response must match the document (status code, content type, body schema), and a
refused request (4xx) must leave every table as it was. The real rows of a small shop
are put in the path half of the time, so that the handlers run, not only the 404s.

Bounded: ``SHOPAPP_API_FUZZ_EXAMPLES`` examples per operation and mode (default 4),
about a minute per backend on two cores.
"""

from __future__ import annotations

import os
import time
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from schemathesis import GenerationMode
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_schema_conformance,
    status_code_conformance,
)
from sqlalchemy import func, literal, select, union_all

from shopapp.certificates import issue as certificates
from shopapp.models import Base
from tests.reports.samples import job_ready_for_certificate

EXAMPLES = int(os.environ.get("SHOPAPP_API_FUZZ_EXAMPLES", "4"))
CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance,
          response_schema_conformance]


def _row_counts(db: Any) -> dict[str, int]:
    """Rows of every table, in one query."""
    parts = [select(literal(t.name).label("t"), func.count().label("n")).select_from(t)
             for t in Base.metadata.sorted_tables]
    db.expire_all()
    return {t: n for t, n in db.execute(union_all(*parts))}


@pytest.fixture()
def real_ids(db, shop, make_user) -> dict[str, int]:
    job = job_ready_for_certificate(db, shop, make_user("operator"))
    cert = certificates.issue(db, job, by=make_user("quality"))
    db.commit()
    return {"job_id": job.id, "customer_id": job.customer_id, "rotor_id": job.rotor_id,
            "rotor_type_id": job.rotor.rotor_type_id, "cert_id": cert.id}


@pytest.mark.parametrize("role", ["operator", "owner"])
def test_api_conforms_to_its_document_and_refusals_write_nothing(app, db, api_as, real_ids,
                                                                 role) -> None:
    api = api_as(role)
    schema = schemathesis.openapi.from_wsgi("/api/v1/openapi.json", app)
    operations = [result.ok() for result in schema.get_all_operations()]
    assert len(operations) >= 29
    if role == "owner":
        # The owner may write nothing but reads everything: its writes must all be refused.
        operations = [op for op in operations if op.method.upper() in ("POST", "PATCH")]
    seen: dict[str, int] = {}

    timing = []
    for operation in operations:
        t0 = time.perf_counter()
        for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
            @settings(max_examples=EXAMPLES, deadline=None, database=None,
                      suppress_health_check=list(HealthCheck))
            @given(case=operation.as_strategy(generation_mode=mode), real=st.booleans())
            def check(case: Any, real: bool) -> None:
                if real and case.path_parameters:
                    case.path_parameters = {k: real_ids.get(k, v)
                                            for k, v in case.path_parameters.items()}
                before = _row_counts(db)
                response = case.call(headers=api.headers())
                key = f"{case.method} {response.status_code}"
                seen[key] = seen.get(key, 0) + 1
                case.validate_response(response, checks=CHECKS)
                if response.status_code >= 400:
                    assert _row_counts(db) == before, (case.method, case.path,
                                                       response.status_code)
                if role == "owner" and case.method.upper() in ("POST", "PATCH") \
                        and "/calc/" not in case.path:
                    assert response.status_code >= 400, (case.path, response.status_code)

            check()
        timing.append((round(time.perf_counter() - t0, 1), operation.label))
    print(sorted(timing)[-8:])
    assert not any(k.endswith(" 500") for k in seen), seen
    print(f"\n{role}: {sum(seen.values())} requests by status {sorted(seen.items())}")
