"""The API's operations: one declaration per route, from which come the Flask view,
the OpenAPI document and the role × route table the tests walk.

Every operation runs the same steps, so no route repeats them:

1. who: the ``Authorization: Bearer …`` token (:mod:`shopapp.api.auth`), never a
   session cookie; 401 without a working token;
2. may they: the role rule of the page that does the same thing, by its name in
   :data:`shopapp.core.permissions.PERMISSIONS`; 403 otherwise;
3. what: query and body parsed by their pydantic models; 422 naming each bad field;
4. do it: the handler calls the same use-case as the page; a write commits once, or
   rolls back on any refusal (the service's status and field messages);
5. retries: a write with an ``Idempotency-Key`` stores its reply in the same
   transaction (:mod:`shopapp.core.idempotency`) and a retry gets that reply again.
"""

from __future__ import annotations

import functools
import json
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from flask import Blueprint, Response, request
from pydantic import BaseModel, ValidationError
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from shopapp.api import auth
from shopapp.core import idempotency
from shopapp.core.errors import ServiceError, ValidationFailed, error_body
from shopapp.core.extensions import db_session
from shopapp.core.permissions import PERMISSIONS, can
from shopapp.models import User

API_PREFIX = "/api/v1"
WRITE_METHODS = frozenset({"POST", "PATCH"})
# Error statuses every operation may answer (the OpenAPI document lists them).
AUTH_ERRORS = (401, 403)


class ApiError(Exception):
    """A refusal of the API layer itself (bad JSON, bad header, missing row)."""

    def __init__(self, status: int, message: str, fields: Mapping[str, str] | None = None
                 ) -> None:
        super().__init__(message)
        self.status = status
        self.message = message
        self.fields = dict(fields or {})


def json_error(status: int, message: str, fields: Mapping[str, str] | None = None,
               headers: Mapping[str, str] | None = None) -> Response:
    """The one error shape, as a response."""
    response = Response(json.dumps(error_body(status, message, dict(fields or {}))),
                        status=status, mimetype="application/json")
    for name, value in (headers or {}).items():
        response.headers[name] = value
    return response


@dataclass(frozen=True)
class Call:
    """What a handler gets: the request's session, the acting user and the parsed input."""

    db: Session | None
    user: User | None
    query: Any = None
    body: Any = None

    @property
    def session(self) -> Session:
        """The request's session (operations declared ``uses_db=False`` have none)."""
        assert self.db is not None, "this operation is declared without the database"
        return self.db

    @property
    def by(self) -> User:
        """The acting user (operations without a token have none)."""
        assert self.user is not None, "this operation has no acting user"
        return self.user


@dataclass(frozen=True)
class Operation:
    method: str
    rule: str  # Flask rule below /api/v1, e.g. /jobs/<int:job_id>/runs
    endpoint: str
    summary: str
    tag: str
    action: str | None  # name in PERMISSIONS; None: no token needed
    query: type[BaseModel] | None
    body: type[BaseModel] | None
    response: type[BaseModel] | None
    status: int
    errors: tuple[int, ...]
    media_type: str = "application/json"
    description: str = ""
    field_names: Mapping[str, str] = field(default_factory=dict)
    uses_db: bool = True

    @property
    def path(self) -> str:
        """The OpenAPI path: ``/api/v1/jobs/{job_id}/runs``."""
        return API_PREFIX + re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", self.rule)

    @property
    def path_params(self) -> list[str]:
        return re.findall(r"<(?:\w+:)?(\w+)>", self.rule)

    @property
    def writes(self) -> bool:
        return self.method in WRITE_METHODS and self.uses_db


OPERATIONS: list[Operation] = []

Handler = Callable[..., Any]


def _pydantic_fields(exc: ValidationError, prefix: str) -> dict[str, str]:
    """Field → message; a body that is not an object at all is the field ``body``."""
    out: dict[str, str] = {}
    for err in exc.errors(include_url=False):
        loc = ".".join(str(part) for part in err["loc"]) or prefix
        out.setdefault(loc, err["msg"])
    return out


def _parse_query(model: type[BaseModel] | None) -> Any:
    if model is None:
        if request.args:
            name = next(iter(request.args))
            raise ApiError(422, "this operation takes no query parameters",
                           {name[:60]: "unknown query parameter"})
        return None
    try:
        return model.model_validate(request.args.to_dict(flat=True))
    except ValidationError as exc:
        raise ApiError(422, "bad query parameters", _pydantic_fields(exc, "query")) from None


def _parse_body(model: type[BaseModel] | None) -> Any:
    if model is None:
        return None
    if not request.is_json:
        raise ApiError(400, "send the request body as JSON (Content-Type: application/json)",
                       {"body": "must be JSON"})
    raw = request.get_data(cache=True)
    try:
        data = json.loads(raw, parse_constant=_no_constant)
    except (ValueError, UnicodeDecodeError) as exc:
        raise ApiError(400, f"the body is not valid JSON: {str(exc)[:120]}",
                       {"body": "is not valid JSON"}) from None
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        raise ApiError(422, "the body has bad fields", _pydantic_fields(exc, "body")) from None


def _no_constant(name: str) -> Any:
    # Python's json reads NaN and Infinity, which are not JSON; refuse them by name.
    raise ValueError(f"{name} is not a JSON number")


def _service_error(exc: ServiceError, names: Mapping[str, str]) -> Response:
    if isinstance(exc, ValidationFailed):
        fields = {names.get(k, k): v for k, v in exc.errors.items()}
        first = next(iter(fields.items()))
        return json_error(422, f"{first[0]}: {first[1]}", fields)
    status = exc.status if exc.status in (400, 403, 404, 409, 422) else 400
    return json_error(status, exc.message)


def _reply(result: Any, op: Operation) -> Response:
    if isinstance(result, Response):
        return result
    headers: dict[str, str] = {}
    status = op.status
    if isinstance(result, tuple):
        result, status, headers = result
    body = result.model_dump_json() if isinstance(result, BaseModel) else json.dumps(result)
    response = Response(body, status=status, mimetype="application/json")
    for name, value in headers.items():
        response.headers[name] = value
    return response


def _idempotency_key() -> str | None:
    key = request.headers.get("Idempotency-Key")
    if key is None:
        return None
    why = idempotency.check_key(key)
    if why is not None:
        raise ApiError(400, f"the Idempotency-Key header {why}", {"Idempotency-Key": why})
    return key


def _run(op: Operation, handler: Handler, path_args: dict[str, Any]) -> Response:
    user: User | None = None
    if op.action is not None:
        user = auth.current_api_user()
        if not can(user, op.action):
            allowed = ", ".join(sorted(PERMISSIONS[op.action]))
            return json_error(403, f"a {user.role} may not {op.action.replace('_', ' ')} "
                                   f"(allowed: {allowed})")
    key = _idempotency_key() if op.writes and user is not None else None
    query = _parse_query(op.query)
    body = _parse_body(op.body)
    if not op.uses_db:
        # A stateless calculation: no session, so no write lock for a POST.
        try:
            return _reply(handler(Call(None, user, query, body), **path_args), op)
        except ServiceError as exc:
            return _service_error(exc, op.field_names)
    session = db_session()
    if user is not None:
        # The token's user, loaded by auth in its own session, joins this one unchanged.
        user = session.merge(user, load=False)
    fingerprint = ""
    if key is not None:
        assert user is not None
        fingerprint = idempotency.request_fingerprint(request.method, request.path,
                                                      request.get_data(cache=True))
        stored = idempotency.replay(session, user, key, fingerprint)
        if stored is not None:
            session.rollback()
            response = Response(stored.body, status=stored.status, mimetype=stored.content_type)
            if stored.location:
                response.headers["Location"] = stored.location
            response.headers["Idempotent-Replayed"] = "true"
            return response
    try:
        response = _reply(handler(Call(session, user, query, body), **path_args), op)
        if op.writes:
            if key is not None and user is not None and response.status_code < 400:
                idempotency.remember(session, user, key, fingerprint, idempotency.StoredReply(
                    response.status_code, response.mimetype or "application/json",
                    response.get_data(), response.headers.get("Location", "")))
            session.commit()
    except ServiceError as exc:
        session.rollback()
        return _service_error(exc, op.field_names)
    except IntegrityError:
        # Two requests with the same Idempotency-Key at once (PostgreSQL): the second
        # insert of the reply fails, and its whole write is rolled back with it.
        session.rollback()
        if key is None:
            raise
        return json_error(409, "a request with this Idempotency-Key was being saved at the "
                               "same time; send it again to get the first reply")
    return response


def operation(
    bp: Blueprint, method: str, rule: str, *, summary: str, tag: str, action: str | None,
    response: type[BaseModel] | None = None, query: type[BaseModel] | None = None,
    body: type[BaseModel] | None = None, status: int = 200, errors: tuple[int, ...] = (),
    media_type: str = "application/json", description: str = "",
    field_names: Mapping[str, str] | None = None, uses_db: bool = True,
    endpoint: str | None = None,
) -> Callable[[Handler], Handler]:
    """Declare an API operation on ``bp`` (see the module docstring for its steps)."""
    if action is not None and action not in PERMISSIONS:
        raise ValueError(f"unknown permission {action!r}")

    def decorator(handler: Handler) -> Handler:
        name = endpoint or handler.__name__
        # 400: the app-wide request guard refuses control characters in any query string.
        found = set(errors) | {400}
        if body is not None:
            found |= {400, 422}
        if query is not None:
            found.add(422)
        if method in WRITE_METHODS and uses_db:
            found |= {400, 409}
        if action is not None:
            found |= set(AUTH_ERRORS)
        op = Operation(method, rule, f"{bp.name}.{name}", summary, tag, action, query,
                       body, response, status, tuple(sorted(found)), media_type,
                       description or (handler.__doc__ or "").strip(),
                       dict(field_names or {}), uses_db)
        OPERATIONS.append(op)

        @functools.wraps(handler)
        def view(**path_args: Any) -> Response:
            return _run(op, handler, path_args)

        bp.add_url_rule(rule, name, view, methods=[method])
        return handler

    return decorator
