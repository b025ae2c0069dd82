"""Hostile input over every form and every page of the app: never a 500, never a half write.

The routes come from ``app.url_map`` and the forms from the pages themselves (every
``<form>`` a role's pages draw, with its fields and defaults), so a new page or form is
fuzzed without editing this file. Each example sends one request whose values are drawn
from what people and scripts really send by mistake or on purpose (huge and negative
whole numbers, 2^63, NaN and infinity spelled several ways, decimal commas, control
characters, very long text, odd dates, empty). What must hold:

- no answer of 500 or above (a person sees a message naming the field, not an error page);
- a refused request (any answer but a redirect after a save) leaves the row count of every
  table unchanged: nothing half-written;
- a GET never writes.

The draws are derandomized (the same examples every run, so CI is stable) and bounded
(``FUZZ_EXAMPLES``, about a minute or two per backend on a shared machine). The rule
"500 is never an answer to input" is common practice, no source (RFC 9110 section 15.6:
5xx means the server failed, not that the request was bad).
"""

from __future__ import annotations

import os
import random
import re
from collections.abc import Iterator
from html.parser import HTMLParser
from typing import Any

import pytest
from flask import Flask
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import Connection, func, select

from shopapp.core.forms import new_form_token
from shopapp.jobs import runs as job_runs
from shopapp.models import Base
from shopapp.traceability import arbors, verifications
from tests.conftest import PASSWORD, ShopClient

FUZZ_EXAMPLES = int(os.environ.get("SHOPAPP_FUZZ_EXAMPLES", "150"))
ROLES = ("operator", "quality", "owner", "admin")
# Logging out or in would change who the rest of the examples run as; the login form is
# fuzzed on its own client below.
SESSION_ENDPOINTS = {"auth.logout", "auth.login"}

HOSTILE = [
    "", " ", "0", "-1", "-0", "2147483647", "2147483648", "-2147483649", str(2**63),
    str(2**63 - 1), str(-(2**63)), str(2**64), "9" * 40, "9" * 400, "1e308", "1e309",
    "-1e309", "1e-320", "nan", "NaN", "-nan", "inf", "-inf", "Infinity", "-Infinity",
    "4,5", "1.234,5", "1,5e3", "12.5", "0x1F", "١٢", "½", "0001-01-01", "9999-12-31",
    "1900-01-01", "1989-12-31", "2026-02-30", "10000-01-01", "31/12/2026", "2026-13-01",
    "abc", "<script>alert(1)</script>", "' OR 1=1 --", "\u202eevil", "x" * 5000,
    "a\x00b", "a\x01b", "line\nbreak", "true", "None", "[]", "{}",
]
ODD_DATES = ["0001-01-01", "9999-12-31", "1900-01-01", "2026-02-30", "99999-01-01"]
# A field that takes a date (its name says so) mostly gets an odd date.
DATE_NAME = re.compile(r"(^|[_-])(on|date|start|end|from|to)$|date")
HOSTILE_IDS = ["0", "2147483648", str(2**63), "9" * 30]


class _Forms(HTMLParser):
    """Every ``<form>`` of a page: method, action and its fields with their drawn values."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.forms: list[dict[str, Any]] = []
        self._form: dict[str, Any] | None = None
        self._select: str | None = None
        self._textarea: str | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "form":
            self._form = {"method": a.get("method", "get").lower(),
                          "action": a.get("action", ""), "fields": {}}
            self.forms.append(self._form)
            return
        if self._form is None or not a.get("name"):
            return
        name, fields = a["name"], self._form["fields"]
        if tag == "input":
            kind = a.get("type", "text").lower()
            if kind in ("checkbox", "radio") and "checked" not in a:
                fields.setdefault(name, "")
            else:
                fields[name] = a.get("value", "")
        elif tag == "button":
            fields.setdefault(name, a.get("value", ""))
        elif tag == "select":
            self._select = name
            fields.setdefault(name, "")
        elif tag == "option" and self._select and (not self._form["fields"][self._select]
                                                   or "selected" in a):
            fields[self._select] = a.get("value", "")
        elif tag == "textarea":
            self._textarea = name
            fields[name] = ""

    def handle_endtag(self, tag: str) -> None:
        if tag == "form":
            self._form = None
        elif tag == "select":
            self._select = None
        elif tag == "textarea":
            self._textarea = None

    def handle_data(self, data: str) -> None:
        if self._form is not None and self._textarea:
            self._form["fields"][self._textarea] += data


class _Shop(dict[str, Any]):
    """The fuzz target; a short repr keeps hypothesis's failure reports readable."""

    def __repr__(self) -> str:
        return "<fuzz shop>"


def _row_counts(conn: Connection) -> dict[str, int]:
    return {t.name: int(conn.execute(select(func.count()).select_from(t)).scalar_one())
            for t in Base.metadata.sorted_tables}


def _seed(db: Any, shop: Any, make_user: Any) -> dict[str, list[int]]:
    """A small shop to aim at: one of each row the pages take an id of."""
    quality = make_user("quality")
    operator = make_user("operator")
    victim = make_user("operator")  # the admin pages' user rows point here, not at us
    machine = shop.machine(min_speed_rpm=100.0, reading_unit="um")
    job = shop.job(machine=machine, balancing_speed_rpm=600.0, state="on_machine")
    db.flush()
    job_runs.record_run(db, job, by=operator, purpose="initial", speed_rpm=600.0,
                        readings=[(1, 12.0, 30.0, "um"), (2, 4.0, 200.0, "um")])
    arbor = arbors.create_arbor(db, by=quality, name="Fuzz arbor")
    verifications.create_proving_rotor(db, by=quality, name="Fuzz PR", mass_kg=10.0,
                                       planes=1, radius_1_mm=100.0, positions=8)
    db.commit()
    rotor = job.rotor
    return {"job_id": [job.id], "machine_id": [machine.id], "rotor_id": [rotor.id],
            "rotor_type_id": [rotor.rotor_type_id], "customer_id": [rotor.customer_id],
            "arbor_id": [arbor.id], "user_id": [victim.id], "plane": [1, 2],
            "cert_id": [1], "run_up_id": [1]}


def _url(rule: Any, ids: dict[str, list[int]], pick: Any) -> str | None:
    """The rule's path with each argument filled by ``pick(name, choices)``."""
    path = rule.rule
    for arg in rule.arguments:
        value = pick(arg, [str(v) for v in ids.get(arg, [1])] + HOSTILE_IDS)
        path = re.sub(rf"<(?:[^:<>]+:)?{arg}>", value, path)
    return path


@pytest.fixture()
def fuzz_shop(app: Flask, db: Any, shop: Any, make_user: Any, connection: Connection
              ) -> Iterator[dict[str, Any]]:
    app.test_client_class = ShopClient
    ids = _seed(db, shop, make_user)
    clients: dict[str, ShopClient] = {}
    forms: dict[str, list[dict[str, Any]]] = {}
    # Per page (rule), the names its own GET forms send: filters, periods, searches.
    query_names: dict[str, set[str]] = {}
    # /healthz takes no input and answers 503 by design here (a test schema made without
    # Alembic has no revision); static files are Flask's.
    get_rules = [r for r in app.url_map.iter_rules() if "GET" in (r.methods or ())
                 and r.endpoint not in ("static", "health.healthz")]
    for role in ROLES:
        user = make_user(role)
        c: ShopClient = app.test_client()  # type: ignore[assignment]
        c.refresh_csrf("/login")
        assert c.post("/login", data={"username": user.username,
                                      "password": PASSWORD}).status_code == 302
        c.refresh_csrf("/")
        clients[role] = c
        found: dict[tuple[str, str], dict[str, Any]] = {}
        for rule in get_rules:
            if rule.rule.endswith((".pdf", ".csv", ".zip", ".json")):
                continue  # files, no forms (still fuzzed below)
            path = _url(rule, ids, lambda _n, choices: choices[0])
            resp = c.get(path)
            if resp.status_code != 200 or "html" not in (resp.content_type or ""):
                continue
            parser = _Forms()
            parser.feed(resp.get_data(as_text=True))
            for f in parser.forms:
                target = f["action"] or path
                if f["method"] == "get":
                    query_names.setdefault(rule.rule, set()).update(f["fields"])
                if f["method"] == "post" and "/logout" not in target:
                    found.setdefault((target, " ".join(sorted(f["fields"]))), f | {"url": target})
                elif f["method"] == "get":
                    found.setdefault((target, "GET " + " ".join(sorted(f["fields"]))),
                                     f | {"url": target})
        forms[role] = list(found.values())
    # A POST rule no page draws a form for is still fuzzed, with no fields of its own.
    drawn = {f["url"] for fs in forms.values() for f in fs if f["method"] == "post"}
    bare = [r for r in app.url_map.iter_rules() if "POST" in (r.methods or ())
            and r.endpoint not in SESSION_ENDPOINTS
            and _url(r, ids, lambda _n, choices: choices[0]) not in drawn]
    yield _Shop(ids=ids, clients=clients, forms=forms, get_rules=get_rules, bare_posts=bare,
                conn=connection, query_names=query_names)


FUZZ = settings(max_examples=FUZZ_EXAMPLES, deadline=None, derandomize=True,
                database=None, suppress_health_check=list(HealthCheck))

values = st.one_of(st.sampled_from(HOSTILE), st.integers(-(2**70), 2**70).map(str),
                   st.floats().map(repr), st.text(max_size=30))


def _check(resp: Any, before: dict[str, int], conn: Connection, what: str) -> None:
    assert resp.status_code < 500, f"{what} → {resp.status_code}"
    # A save answers with a redirect, or 201 where the page shows what was made once (a new
    # API token's secret); anything else must have written nothing. (A draw that happened
    # to be a valid token name, '0', was taken for a half-write.)
    if resp.status_code not in (201, 302, 303):
        after = _row_counts(conn)
        changed = {t: (before[t], after[t]) for t in before if before[t] != after[t]}
        assert not changed, f"{what} → {resp.status_code} but rows changed: {changed}"


def test_fuzz_discovers_the_create_forms(fuzz_shop) -> None:
    """The discovery is real: the forms people create things with are among those fuzzed."""
    posted = {re.sub(r"/\d+", "/<id>", f["url"]) for fs in fuzz_shop["forms"].values()
              for f in fs if f["method"] == "post"}
    for expected in ("/jobs/new", "/jobs/<id>/runs", "/jobs/<id>/corrections/<id>",
                     "/customers/new", "/machines/new", "/traceability/arbors"):
        assert expected in posted, sorted(posted)


# Each example walks every form (or every page) once, as one role, with values drawn by
# hypothesis and the fields and ids chosen by a replayable random: uniform over whatever
# the pages drew at run time, and the same examples every run (derandomized).
PER_WALK = settings(FUZZ, max_examples=max(3, FUZZ_EXAMPLES // 15))
drawn_values = st.lists(values, min_size=4, max_size=4)
# A seed, not st.randoms(): a walk makes hundreds of choices, more than one example's
# buffer holds; random.Random(seed) replays them exactly.
seeds = st.integers(0, 2**32 - 1)


def _spoil(rnd: Any, names: list[str], vals: list[str], share: float) -> dict[str, str]:
    """Field → hostile value for about ``share`` of the fields, chosen by ``rnd``."""
    out = {}
    for name in names:
        if rnd.random() < share:
            odd_date = DATE_NAME.search(name) and rnd.random() < 0.75
            out[name] = rnd.choice(ODD_DATES) if odd_date else rnd.choice(vals)
    return out


@PER_WALK
@given(role=st.sampled_from(ROLES), seed=seeds, vals=drawn_values)
def test_hostile_posts_never_fail_and_never_half_write(fuzz_shop, role, seed, vals) -> None:
    rnd = random.Random(seed)
    client = fuzz_shop["clients"][role]
    targets = [f for f in fuzz_shop["forms"][role] if f["method"] == "post"]
    targets += [{"url": r.rule, "rule": r, "fields": {}} for r in fuzz_shop["bare_posts"]]
    for form in targets:
        url = (_url(form["rule"], fuzz_shop["ids"], lambda _n, c: rnd.choice(c))
               if "rule" in form else form["url"])
        fields = {k: v for k, v in form["fields"].items() if k != "csrf_token"}
        # A fresh one-time token (a newly drawn form), unless the token itself is spoiled.
        token = new_form_token()
        fields.update({k: token for k in fields if k.endswith("form_token")})
        names = sorted(fields)
        spoiled = _spoil(rnd, names, vals, share=0.25)
        fields.update(spoiled)
        before = _row_counts(fuzz_shop["conn"])
        resp = client.post(url, data=fields)
        _check(resp, before, fuzz_shop["conn"], f"{role} POST {url} {spoiled!r:.300}")


@PER_WALK
@given(role=st.sampled_from(ROLES), seed=seeds, vals=drawn_values)
def test_hostile_queries_and_ids_never_fail_and_never_write(fuzz_shop, role, seed, vals) -> None:
    rnd = random.Random(seed)
    client = fuzz_shop["clients"][role]
    before = _row_counts(fuzz_shop["conn"])
    for rule in fuzz_shop["get_rules"]:
        url = _url(rule, fuzz_shop["ids"], lambda _n, c: rnd.choice(c))
        # The names the page's own GET forms send, plus paging; a page without such a form
        # gets every name any page's GET forms use.
        names = sorted({"page", *fuzz_shop["query_names"].get(rule.rule, set())})
        if names == ["page"]:
            names = sorted({"page", *(k for f in fuzz_shop["forms"][role]
                                      if f["method"] == "get" for k in f["fields"])})
        query = _spoil(rnd, names, vals, share=0.5)
        resp = client.get(url, query_string=query)
        assert resp.status_code < 500, f"{role} GET {url} {query!r:.300} → {resp.status_code}"
    assert _row_counts(fuzz_shop["conn"]) == before, f"{role}: a GET wrote rows"


@FUZZ
@given(username=values, password=values)
def test_hostile_logins_never_fail(app, fuzz_shop, username, password) -> None:
    c: ShopClient = app.test_client()  # type: ignore[assignment]
    before = _row_counts(fuzz_shop["conn"])
    resp = c.post("/login", data={"username": username, "password": password})
    assert resp.status_code < 500
    if resp.status_code != 302:
        # A refused login may write its audit line and count the failure towards the
        # throttle (login_throttle); no other table changes.
        after = _row_counts(fuzz_shop["conn"])
        assert {t for t in before if before[t] != after[t]} <= {"audit_event", "login_throttle"}

