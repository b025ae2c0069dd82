"""Fixtures of the API tests: a token per role, and a client that sends it."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest
from flask.testing import FlaskClient
from sqlalchemy.orm import Session

from shopapp.accounts import api_tokens


class Api:
    """JSON calls with a bearer token: ``api.get("/jobs")`` → the test client's response."""

    def __init__(self, client: FlaskClient, secret: str | None, user: Any) -> None:
        self.client = client
        self.secret = secret
        self.user = user

    def headers(self, extra: dict[str, str] | None = None) -> dict[str, str]:
        out = {"Authorization": f"Bearer {self.secret}"} if self.secret else {}
        out.update(extra or {})
        return out

    def get(self, path: str, **kw: Any) -> Any:
        return self.client.get("/api/v1" + path, headers=self.headers(kw.pop("headers", None)),
                               **kw)

    def post(self, path: str, json: Any = None, **kw: Any) -> Any:
        return self.client.open("/api/v1" + path, method="POST", json=json,
                                headers=self.headers(kw.pop("headers", None)), **kw)

    def patch(self, path: str, json: Any = None, **kw: Any) -> Any:
        return self.client.open("/api/v1" + path, method="PATCH", json=json,
                                headers=self.headers(kw.pop("headers", None)), **kw)


@pytest.fixture()
def make_token(db: Session) -> Callable[..., Any]:
    """``make_token(user)`` → the secret of a new token of ``user`` (made by the use-case)."""

    def make(user: Any, name: str = "test script") -> str:
        made = api_tokens.create_token(db, by=user, user=user, name=name)
        db.commit()
        return made.secret

    return make


@pytest.fixture()
def api_as(app: Any, make_user: Callable[..., Any], make_token: Callable[..., Any]
           ) -> Callable[..., Api]:
    """``api_as("operator")``: a new user of that role with a token, and a client using it."""

    def make(role: str = "operator", **kw: Any) -> Api:
        user = make_user(role, **kw)
        return Api(app.test_client(), make_token(user), user)

    return make
